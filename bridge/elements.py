"""The element-family registry: one record per family, from which everything else derives.

A family is a cell shape with its nodes (``quad8``: an 8-node serendipity quadrilateral). Its
record holds what each part of modebridge needs to know about it:

* meshing (:mod:`bridge.meshing.gmsh`): the gmsh element type, whether it is meshed
  structured (recombined quads/hexes), whether it is the incomplete (serendipity) second order;
* the mass matrix (:mod:`bridge.fem`): reference nodes, shape functions, a quadrature rule and
  the points per direction that integrate N Nᵀ exactly;
* mapping between meshes (:mod:`bridge.compare.mapping`): the same, plus the first-order
  family with the same geometry and the corner count;
* results, export and reports (:mod:`bridge.mesh`, :mod:`bridge.export`, :mod:`bridge.report`):
  the VTK cell type, the gmsh → VTK node permutation, meshio's cell name, a readable label;
* the model schema (:mod:`bridge.model`): the family names and the section kind each serves
  (``dim`` 2 → shell, 3 → solid; a 1-D ``line`` family would serve a beam section);
* solver plugins: each may register its gmsh → solver node order (:func:`register_node_order`).

Node orders are gmsh's. Natural coordinates: lines on [-1, 1], simplices on the unit simplex,
quadrilaterals and hexahedra on [-1, 1]^d. Adding a family is one :func:`register_family` call
(plus the plugins that offer it); ``tests/core/test_elements.py`` adds one inside a test.
"""

from __future__ import annotations

import functools
from collections.abc import Callable, Iterator, Mapping
from contextlib import contextmanager
from dataclasses import dataclass, field
from typing import Any

import numpy as np

__all__ = ["ElementFamily", "register_family", "unregister_family", "registered", "get_family", "families",
           "family_names", "family_of_vtk", "families_for_section", "section_kind_of", "register_node_order",
           "node_order", "SECTION_OF_DIM", "FamilyView", "builtin_shape_functions", "builtin_quadrature",
           "cell_measure"]

#: section kind a family of each topological dimension serves
SECTION_OF_DIM = {1: "beam", 2: "shell", 3: "solid"}

ShapeFunctions = Callable[[np.ndarray], tuple[np.ndarray, np.ndarray]]
Quadrature = Callable[[int], tuple[np.ndarray, np.ndarray]]


@dataclass(frozen=True, eq=False)
class ElementFamily:
    """Everything modebridge knows about one element family."""

    name: str  #: e.g. "quad8"
    shape: str  #: reference cell: "line", "tri", "quad", "tet" or "hex"
    dim: int  #: topological dimension (1 line, 2 surface, 3 volume)
    order: int  #: polynomial order of the geometry and of the field
    corners: int  #: corner (first-order) nodes, which come first
    reference_nodes: np.ndarray  #: (k, dim) natural coordinates of the nodes, gmsh order
    shape_functions: ShapeFunctions  #: xi (q, dim) -> N (q, k), dN/dxi (q, k, dim)
    quadrature: Quadrature  #: n points per direction -> points (q, dim), weights (q,)
    mass_points: int  #: points per direction that integrate N Nᵀ exactly on an affine element
    gmsh_type: int  #: gmsh element type number
    vtk_type: int  #: VTK cell type number
    meshio_type: str  #: meshio's cell type name
    label: str  #: readable name, e.g. "quadratic quadrilateral (quad8)"
    edges: tuple[tuple[int, int], ...] = ()  #: corner pairs of the mid-edge nodes, in gmsh order
    vtk_perm: tuple[int, ...] | None = None  #: vtk[i] = gmsh[vtk_perm[i]]; None: the same order
    linear: str | None = None  #: the first-order family of the same shape (its geometry, when straight-sided)
    structured: bool = False  #: meshed structured (transfinite, recombined) on plates and blocks
    incomplete: bool = False  #: second order without interior nodes (gmsh Mesh.SecondOrderIncomplete)
    node_orders: dict[str, tuple[int, ...]] = field(default_factory=dict)  #: solver -> gmsh→solver order

    @property
    def n_nodes(self) -> int:
        return int(self.reference_nodes.shape[0])

    @property
    def simplex(self) -> bool:
        return self.shape in ("tri", "tet")

    @property
    def section_kind(self) -> str:
        return SECTION_OF_DIM[self.dim]

    def vtk_edges(self) -> list[tuple[int, int, int]]:
        """(corner, corner, mid-edge node) of each edge, in VTK node numbers (quadratic families)."""
        if self.order < 2 or not self.edges:
            return []
        inv = np.argsort(self.vtk_perm) if self.vtk_perm is not None else np.arange(self.n_nodes)
        out = [(int(inv[a]), int(inv[b]), int(inv[self.corners + k])) for k, (a, b) in enumerate(self.edges)]
        return sorted(out, key=lambda t: t[2])


_REGISTRY: dict[str, ElementFamily] = {}


def register_family(family: ElementFamily) -> ElementFamily:
    """Add a family (its name, gmsh type and VTK type must be new)."""
    if family.name in _REGISTRY:
        raise ValueError(f"element family '{family.name}' is registered already")
    for other in _REGISTRY.values():
        if other.vtk_type == family.vtk_type or other.gmsh_type == family.gmsh_type:
            raise ValueError(f"element family '{family.name}' shares its gmsh or VTK type with '{other.name}'")
    if family.dim not in SECTION_OF_DIM:
        raise ValueError(f"element family '{family.name}': dimension {family.dim} is not 1, 2 or 3")
    if family.vtk_perm is not None and sorted(family.vtk_perm) != list(range(family.n_nodes)):
        raise ValueError(f"element family '{family.name}': vtk_perm is not a permutation of its nodes")
    _REGISTRY[family.name] = family
    return family


def unregister_family(name: str) -> None:
    _REGISTRY.pop(name, None)


@contextmanager
def registered(family: ElementFamily) -> Iterator[ElementFamily]:
    """Register ``family`` for the duration of a ``with`` block (tests)."""
    register_family(family)
    try:
        yield family
    finally:
        unregister_family(family.name)


def get_family(name: str) -> ElementFamily:
    try:
        return _REGISTRY[name]
    except KeyError:
        raise KeyError(f"unknown element family '{name}'; known: {', '.join(_REGISTRY)}") from None


def families() -> list[ElementFamily]:
    return list(_REGISTRY.values())


def family_names() -> tuple[str, ...]:
    return tuple(_REGISTRY)


def family_of_vtk(vtk_type: int) -> ElementFamily | None:
    for f in _REGISTRY.values():
        if f.vtk_type == int(vtk_type):
            return f
    return None


def families_for_section(kind: str) -> tuple[str, ...]:
    """Family names that serve a section kind ("shell", "solid", later "beam")."""
    return tuple(f.name for f in _REGISTRY.values() if f.section_kind == kind)


def section_kind_of(name: str) -> str:
    return get_family(name).section_kind


def register_node_order(family: str, solver: str, order) -> None:
    """A plugin's gmsh → solver node order for a family: ``solver_node[i] = gmsh_node[order[i]]``."""
    rec = get_family(family)
    order = tuple(int(i) for i in order)
    if sorted(order) != list(range(rec.n_nodes)):
        raise ValueError(f"node order of '{solver}' for '{family}' is not a permutation of {rec.n_nodes} nodes")
    rec.node_orders[solver] = order


def node_order(family: str, solver: str) -> tuple[int, ...]:
    """A solver's registered node order for a family (identity when it registered none)."""
    rec = get_family(family)
    return rec.node_orders.get(solver, tuple(range(rec.n_nodes)))


class FamilyView(Mapping):
    """A read-only mapping derived from the registry, always current (for the old module names)."""

    def __init__(self, value: Callable[[ElementFamily], Any], key: Callable[[ElementFamily], Any] = None,
                 where: Callable[[ElementFamily], bool] = None):
        self._value = value
        self._key = key or (lambda f: f.name)
        self._where = where or (lambda f: True)

    def _items(self) -> dict:
        return {self._key(f): self._value(f) for f in _REGISTRY.values() if self._where(f)}

    def __getitem__(self, k):
        return self._items()[k]

    def __iter__(self):
        return iter(self._items())

    def __len__(self):
        return len(self._items())

    def __repr__(self):
        return repr(self._items())


# --- the built-in shape functions and quadrature ---------------------------------------------

def _barycentric(xi: np.ndarray) -> np.ndarray:
    return np.column_stack([1.0 - xi.sum(axis=1), xi])


def builtin_shape_functions(corners: np.ndarray, edges, quadratic: bool, simplex: bool,
                            xi: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Lagrange P1/P2 on simplices; bilinear/trilinear or serendipity on [-1, 1]^d (lines too)."""
    xi = np.atleast_2d(np.asarray(xi, float))
    q, d = xi.shape
    if simplex:
        L = _barycentric(xi)  # (q, d+1)
        dL = np.vstack([-np.ones(d), np.eye(d)])  # (d+1, d)
        if not quadratic:
            return L, np.broadcast_to(dL, (q,) + dL.shape).copy()
        N = [L[:, i] * (2 * L[:, i] - 1) for i in range(d + 1)]
        dN = [np.outer(4 * L[:, i] - 1, dL[i]) for i in range(d + 1)]
        for a, b in edges:
            N.append(4 * L[:, a] * L[:, b])
            dN.append(4 * (np.outer(L[:, b], dL[a]) + np.outer(L[:, a], dL[b])))
        return np.column_stack(N), np.stack(dN, axis=1)
    nat = corners if not quadratic else np.vstack([corners, [(corners[a] + corners[b]) / 2 for a, b in edges]])
    N = np.empty((q, nat.shape[0]))
    dN = np.empty((q, nat.shape[0], d))
    for k, c in enumerate(nat):
        lin = 1 + xi * c  # (q, d); for a mid-node the zero coordinate gives 1
        if not quadratic:
            N[:, k] = np.prod(lin, axis=1) / 2**d
            for j in range(d):
                others = np.prod(np.delete(lin, j, axis=1), axis=1)
                dN[:, k, j] = c[j] * others / 2**d
        elif np.all(c != 0):  # serendipity corner
            s = (xi * c).sum(axis=1) - (d - 1)
            p = np.prod(lin, axis=1)
            N[:, k] = p * s / 2**d
            for j in range(d):
                others = np.prod(np.delete(lin, j, axis=1), axis=1)
                dN[:, k, j] = (c[j] * others * s + p * c[j]) / 2**d
        else:  # serendipity mid-edge node: one natural coordinate is 0
            z = int(np.flatnonzero(c == 0)[0])
            bub = 1 - xi[:, z] ** 2
            rest = np.prod(np.delete(lin, z, axis=1), axis=1)
            N[:, k] = bub * rest / 2 ** (d - 1)
            for j in range(d):
                if j == z:
                    dN[:, k, j] = -2 * xi[:, z] * rest / 2 ** (d - 1)
                else:
                    oth = np.prod(np.delete(lin, [j, z], axis=1), axis=1)
                    dN[:, k, j] = bub * c[j] * oth / 2 ** (d - 1)
    return N, dN


@functools.lru_cache(maxsize=None)
def builtin_quadrature(shape: str, n: int = 3) -> tuple[np.ndarray, np.ndarray]:
    """Gauss points (q, d) and weights (q,): ``n`` points per direction.

    Simplices use the collapsed (Duffy) product rule; the collapse adds a factor
    (1 - u)^(d-1), so it is exact for degree 2n - d.
    """
    g, w = np.polynomial.legendre.leggauss(n)
    u = (g + 1) / 2
    wu = w / 2
    if shape == "line":
        return g[:, None].copy(), w.copy()
    if shape == "quad":
        X, Y = np.meshgrid(g, g, indexing="ij")
        return np.column_stack([X.ravel(), Y.ravel()]), np.outer(w, w).ravel()
    if shape == "hex":
        X, Y, Z = np.meshgrid(g, g, g, indexing="ij")
        W = np.einsum("i,j,k->ijk", w, w, w)
        return np.column_stack([X.ravel(), Y.ravel(), Z.ravel()]), W.ravel()
    if shape == "tri":
        A, B = np.meshgrid(u, u, indexing="ij")
        WA, WB = np.meshgrid(wu, wu, indexing="ij")
        return np.column_stack([A.ravel(), (B * (1 - A)).ravel()]), (WA * WB * (1 - A)).ravel()
    if shape == "tet":
        A, B, C = np.meshgrid(u, u, u, indexing="ij")
        WA, WB, WC = np.meshgrid(wu, wu, wu, indexing="ij")
        xi, eta, zeta = A, B * (1 - A), C * (1 - A) * (1 - B)
        wt = WA * WB * WC * (1 - A) ** 2 * (1 - B)
        return np.column_stack([xi.ravel(), eta.ravel(), zeta.ravel()]), wt.ravel()
    raise ValueError(f"no built-in quadrature for shape '{shape}'")


def cell_measure(points: np.ndarray, cells: np.ndarray, family: str) -> np.ndarray:
    """Length, area or volume of each cell from its corners (straight-sided cells: exact)."""
    rec = get_family(family)
    p = points[cells]
    if rec.shape == "line":
        return np.linalg.norm(p[:, 1] - p[:, 0], axis=1)
    if rec.shape == "tri":
        return np.linalg.norm(np.cross(p[:, 1] - p[:, 0], p[:, 2] - p[:, 0]), axis=1) / 2
    if rec.shape == "quad":
        a = np.linalg.norm(np.cross(p[:, 1] - p[:, 0], p[:, 2] - p[:, 0]), axis=1) / 2
        return a + np.linalg.norm(np.cross(p[:, 2] - p[:, 0], p[:, 3] - p[:, 0]), axis=1) / 2
    if rec.shape == "tet":
        return np.abs(np.einsum("ij,ij->i", p[:, 1] - p[:, 0], np.cross(p[:, 2] - p[:, 0], p[:, 3] - p[:, 0]))) / 6
    if rec.shape == "hex":  # five tetrahedra
        vol = np.zeros(len(cells))
        for a, b, c, d in ((0, 1, 3, 4), (1, 2, 3, 6), (1, 4, 5, 6), (3, 4, 6, 7), (1, 3, 4, 6)):
            vol += np.abs(np.einsum("ij,ij->i", p[:, b] - p[:, a],
                                    np.cross(p[:, c] - p[:, a], p[:, d] - p[:, a]))) / 6
        return vol
    raise ValueError(f"no cell measure for shape '{rec.shape}'")


# --- the built-in families ---------------------------------------------------------------

_LINE = np.array([[-1], [1]], float)
_TRI = np.array([[0, 0], [1, 0], [0, 1]], float)
_QUAD = np.array([[-1, -1], [1, -1], [1, 1], [-1, 1]], float)
_TET = np.array([[0, 0, 0], [1, 0, 0], [0, 1, 0], [0, 0, 1]], float)
_HEX = np.array([[-1, -1, -1], [1, -1, -1], [1, 1, -1], [-1, 1, -1],
                 [-1, -1, 1], [1, -1, 1], [1, 1, 1], [-1, 1, 1]], float)
_EDGES = {
    "line": [(0, 1)],
    "tri": [(0, 1), (1, 2), (2, 0)],
    "quad": [(0, 1), (1, 2), (2, 3), (3, 0)],
    "tet": [(0, 1), (1, 2), (2, 0), (3, 0), (3, 2), (3, 1)],  # gmsh's order of the tet10 mid-edge nodes
    "hex": [(0, 1), (0, 3), (0, 4), (1, 2), (1, 5), (2, 3), (2, 6), (3, 7), (4, 5), (4, 7), (5, 6), (6, 7)],
}
_CORNERS = {"line": _LINE, "tri": _TRI, "quad": _QUAD, "tet": _TET, "hex": _HEX}
_DIM = {"line": 1, "tri": 2, "quad": 2, "tet": 3, "hex": 3}


def _builtin(name, shape, order, gmsh_type, vtk_type, meshio_type, label, mass_points, vtk_perm=None,
             linear=None, structured=False, incomplete=False) -> ElementFamily:
    corners = _CORNERS[shape]
    quadratic = order == 2
    edges = tuple(_EDGES[shape]) if quadratic else ()
    nodes = corners if not quadratic else np.vstack([corners, [(corners[a] + corners[b]) / 2 for a, b in edges]])
    return ElementFamily(
        name=name, shape=shape, dim=_DIM[shape], order=order, corners=corners.shape[0], reference_nodes=nodes,
        shape_functions=functools.partial(builtin_shape_functions, corners, edges, quadratic, shape in ("tri", "tet")),
        quadrature=functools.partial(builtin_quadrature, shape), mass_points=mass_points,
        gmsh_type=gmsh_type, vtk_type=vtk_type, meshio_type=meshio_type, label=label, edges=edges,
        vtk_perm=tuple(vtk_perm) if vtk_perm is not None else None, linear=linear, structured=structured,
        incomplete=incomplete)


# Mass points: N Nᵀ of a quadratic family is of degree 4 (8 on hexahedra per direction: 2 × 2);
# 3 Gauss points per direction integrate degree 5 on quads and hexes, the collapsed rule with
# n = 3 degree 4 on triangles and n = 4 degree 5 on tetrahedra (tests/core/test_fem.py).
for _rec in (
    _builtin("tri3", "tri", 1, 2, 5, "triangle", "triangle (tri3)", 3),
    _builtin("tri6", "tri", 2, 9, 22, "triangle6", "quadratic triangle (tri6)", 3, linear="tri3"),
    _builtin("quad4", "quad", 1, 3, 9, "quad", "quadrilateral (quad4)", 3, structured=True),
    _builtin("quad8", "quad", 2, 16, 23, "quad8", "quadratic quadrilateral (quad8)", 3, linear="quad4",
             structured=True, incomplete=True),
    _builtin("tet4", "tet", 1, 4, 10, "tetra", "tetrahedron (tet4)", 4),
    # gmsh puts edge (2,3) in slot 8 and edge (1,3) in slot 9; VTK the other way round
    _builtin("tet10", "tet", 2, 11, 24, "tetra10", "quadratic tetrahedron (tet10)", 4,
             vtk_perm=[0, 1, 2, 3, 4, 5, 6, 7, 9, 8], linear="tet4"),
    _builtin("hex8", "hex", 1, 5, 12, "hexahedron", "hexahedron (hex8)", 3, structured=True),
    # VTK: bottom ring, top ring, then the vertical edges; gmsh numbers edges by their corners
    _builtin("hex20", "hex", 2, 17, 25, "hexahedron20", "quadratic hexahedron (hex20)", 3,
             vtk_perm=[0, 1, 2, 3, 4, 5, 6, 7, 8, 11, 13, 9, 16, 18, 19, 17, 10, 12, 14, 15], linear="hex8",
             structured=True, incomplete=True),
):
    register_family(_rec)
del _rec
