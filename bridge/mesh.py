"""The neutral mesh: what meshing produces and every solver plugin consumes.

Coordinates are in metres. Connectivity is 0-based into ``points`` and in
gmsh's node order for the family; each plugin maps it to its solver's order.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .elements import FamilyView, get_family

__all__ = ["Mesh", "RegionPart", "FAMILY_INFO", "NO_CONTINUUM", "VTK_CELL_TYPES", "gmsh_order_from_vtk"]

#: the "family" of a model without continuum (geometry "points"): no cells, reference points only
#: (not a registered element family)
NO_CONTINUUM = "vertex"

#: family -> (dimension, nodes per element, order); derived from :mod:`bridge.elements`
FAMILY_INFO = FamilyView(lambda f: (f.dim, f.n_nodes, f.order))

#: family -> VTK cell type (derived from the registry; gmsh node order equals VTK order except
#: where a family's record carries ``vtk_perm``, e.g. tet10 nodes 8/9 and hex20 edges)
VTK_CELL_TYPES = FamilyView(lambda f: f.vtk_type)


def _vtk_perm(family: str):
    return get_family(family).vtk_perm


def gmsh_order_from_vtk(family: str, conn: np.ndarray) -> np.ndarray:
    """Connectivity in VTK node order (as stored in results) back to gmsh order."""
    perm = _vtk_perm(family)
    return conn if perm is None else conn[:, np.argsort(perm)]


@dataclass(frozen=True)
class RegionPart:
    """One geometric entity of a named region."""

    dim: int  #: 0 point, 1 edge, 2 face, 3 volume
    nodes: np.ndarray  #: point indices on the entity (with its boundary)
    axis: str | None  #: for a straight axis-aligned edge, its direction ("x", "y" or "z")
    weights: np.ndarray  #: tributary length/area/volume share of each node (same order as nodes), m^dim
    direction: np.ndarray | None = None  #: for a straight edge (any direction), its unit vector


@dataclass
class Mesh:
    """A mesh of one body with its named regions."""

    points: np.ndarray  #: (n, 3) float64, m
    family: str  #: element family, e.g. "quad8"
    cells: np.ndarray  #: (ne, k) int64, 0-based, gmsh node order
    regions: dict[str, list[RegionPart]] = field(default_factory=dict)
    quality: np.ndarray | None = None  #: per element, gmsh minSICN (1 ideal, <= 0 inverted)
    element_size: float = 0.0  #: representative size h, m (cube root or square root of mean element measure)
    level: int = 0  #: refinement level this mesh was made at
    structured: bool = False
    #: nodes outside the continuum (reference points, members' nodes and the nodes that carry a
    #: mass's inertia), appended after the continuum's nodes: name -> point index
    extra_nodes: dict[str, int] = field(default_factory=dict)
    #: beam elements (2 nodes, point indices), their beam-section names and local z directions
    beams: np.ndarray = field(default_factory=lambda: np.empty((0, 2), np.int64))
    beam_sections: list[str] = field(default_factory=list)
    beam_z: np.ndarray = field(default_factory=lambda: np.empty((0, 3)))
    #: per beam element, the section centroid's offset from its nodes (global, m): stiffeners
    #: seated on a shell's face; zeros for members on their axis
    beam_offset: np.ndarray = field(default_factory=lambda: np.empty((0, 3)))
    cell_entity: np.ndarray | None = None  #: (ne,) gmsh tag of the face/volume each cell lies on
    surfaces: list[dict] = field(default_factory=list)  #: shells: per face its groups, elements and normal
    #: per element, the index into ``section_names`` of its section (None: all in the first)
    cell_section: np.ndarray | None = None
    section_names: list[str] = field(default_factory=lambda: ["section"])

    def node_normals(self) -> np.ndarray:
        """Shells: unit normal at each node, the average of its elements' normals (orientation made
        consistent at meshing), (n, 3); zero rows for nodes where the normals cancel."""
        nc = 4 if self.family.startswith("quad") else 3
        p = self.points[self.cells[:, :nc]]
        if nc == 4:
            n = np.cross(p[:, 2] - p[:, 0], p[:, 3] - p[:, 1])
        else:
            n = np.cross(p[:, 1] - p[:, 0], p[:, 2] - p[:, 0])
        n /= np.linalg.norm(n, axis=1, keepdims=True)
        acc = np.zeros((self.n_nodes, 3))
        for j in range(self.cells.shape[1]):
            np.add.at(acc, self.cells[:, j], n)
        norm = np.linalg.norm(acc, axis=1, keepdims=True)
        return np.divide(acc, norm, out=np.zeros_like(acc), where=norm > 1e-12)

    def cell_sections(self) -> np.ndarray:
        """(ne,) int64 section index of every element (zeros for a one-section mesh)."""
        if self.cell_section is None:
            return np.zeros(self.n_elements, dtype=np.int64)
        return np.asarray(self.cell_section, dtype=np.int64)

    @property
    def dim(self) -> int:
        return 0 if self.family == NO_CONTINUUM else get_family(self.family).dim

    @property
    def is_shell(self) -> bool:
        return self.dim == 2

    @property
    def dofs_per_node(self) -> int:
        return 3 if self.dim == 3 else 6  # shells, and reference points alone, carry rotations

    @property
    def n_nodes(self) -> int:
        return int(self.points.shape[0])

    @property
    def n_elements(self) -> int:
        return int(self.cells.shape[0])

    def region_nodes(self, name: str) -> np.ndarray:
        parts = self.regions[name]
        return np.unique(np.concatenate([p.nodes for p in parts])) if parts else np.empty(0, np.int64)

    def region_weights(self, name: str) -> tuple[np.ndarray, np.ndarray]:
        """Nodes of a region and their tributary share, summing to 1."""
        nodes = np.concatenate([p.nodes for p in self.regions[name]])
        w = np.concatenate([p.weights for p in self.regions[name]])
        uniq, inv = np.unique(nodes, return_inverse=True)
        acc = np.zeros(uniq.size)
        np.add.at(acc, inv, w)
        total = acc.sum()
        if total <= 0:
            acc[:] = 1.0
            total = acc.sum()
        return uniq, acc / total

    def vtk_cells(self) -> tuple[int, np.ndarray]:
        """VTK cell type and connectivity in VTK node order."""
        if self.family == NO_CONTINUUM:  # VTK_VERTEX: every node (all reference points) a vertex
            return 1, np.arange(self.n_nodes, dtype=np.int64).reshape(-1, 1)
        perm = _vtk_perm(self.family)
        conn = self.cells if perm is None else self.cells[:, list(perm)]
        return get_family(self.family).vtk_type, conn

    def stats(self) -> dict:
        q = self.quality
        out = {
            "family": self.family,
            "nodes": self.n_nodes,
            "elements": self.n_elements,
            "beam_elements": int(len(self.beams)),
            "element_size_m": self.element_size,
            "level": self.level,
            "structured": self.structured,
        }
        if q is not None and q.size:
            out["quality_min"] = float(q.min())
            out["quality_mean"] = float(q.mean())
        return out
