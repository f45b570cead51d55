"""Turn a model's supports and masses into per-node data on a mesh."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .errors import MeshingError, ModelError
from .mesh import Mesh
from .model import DOF_NAMES, Model

__all__ = ["Constraints", "NodalMass", "resolve_constraints", "resolve_masses"]

_AXIS = {"x": 0, "y": 1, "z": 2}


@dataclass
class Constraints:
    """Fixed degrees of freedom per node: ``fixed[i, j]`` for node i, DOF j (ux uy uz rx ry rz)."""

    fixed: np.ndarray  #: (n, 6) bool; rotations always False for solids
    described: list[dict]  #: per support: region, kind, dofs fixed, node count
    #: linear constraints Σ c·u = 0 on translations not along an axis (a support on a skew edge):
    #: each a list of (node index, dof 0..2, coefficient), the first term the dependent one (c = 1)
    equations: list[list[tuple[int, int, float]]] = field(default_factory=list)

    @property
    def constrained_nodes(self) -> int:
        held = self.fixed.any(axis=1)
        for eq in self.equations:
            held[eq[0][0]] = True
        return int(held.sum())

    def free_dof(self, dofs_per_node: int) -> int:
        return int(self.fixed.shape[0] * dofs_per_node - self.fixed[:, :dofs_per_node].sum()
                   - len(self.equations))


def _kind_dofs(kind: str, shell: bool, normal: str | None, dofs) -> list[int]:
    if kind == "clamped":
        return [0, 1, 2, 3, 4, 5] if shell else [0, 1, 2]
    if kind == "pinned":
        return [0, 1, 2]
    if kind == "symmetry":
        a = _AXIS[normal]
        return [a] + ([3 + b for b in range(3) if b != a] if shell else [])
    if kind == "fixed_dofs":
        return sorted(DOF_NAMES.index(d) for d in dofs)
    raise AssertionError(kind)


def resolve_constraints(model: Model, mesh: Mesh) -> Constraints:
    fixed = np.zeros((mesh.n_nodes, 6), dtype=bool)
    described = []
    shell = mesh.is_shell
    normals = None
    held_dirs: dict[int, list[np.ndarray]] = {}
    for i, s in enumerate(model.supports):
        if s.point is not None:  # a reference point: six DOF (rotations where a rigid coupling gives them)
            js = _kind_dofs(s.kind, True, s.normal, s.dofs)
            fixed[mesh.extra_nodes[s.point], js] = True
            described.append({"region": f"point {s.point}", "point": s.point, "kind": s.kind, "fixes": " ".join(DOF_NAMES[j] for j in js),
                              "nodes": 1})
            continue
        nodes = mesh.region_nodes(s.region)
        if s.kind == "simply_supported":
            # w (the translation along the surface normal) and the translation along each straight
            # edge are held; the edge rotates freely and may move in the surface across itself.
            # On a flat plate w is the plate's normal; on a curved or folded shell it is the node's
            # normal averaged over the elements that meet there. Directions along an axis are held
            # by fixing that DOF, other directions by a linear equation.
            normals = normals if normals is not None else mesh.node_normals()
            for part in mesh.regions[s.region]:
                if part.dim != 1 or part.direction is None:
                    raise ModelError("'simply_supported' needs straight shell edges (any direction); "
                                     f"region '{s.region}' holds another kind of entity",
                                     field=f"supports[{i}].region")
                for n in part.nodes:
                    held_dirs.setdefault(int(n), []).extend([normals[n], part.direction])
            dofs = "w (normal) + along-edge u"
        else:
            js = _kind_dofs(s.kind, shell, s.normal, s.dofs)
            fixed[np.ix_(nodes, js)] = True
            dofs = " ".join(DOF_NAMES[j] for j in js)
        described.append({"region": s.region, "kind": s.kind, "fixes": dofs, "nodes": int(nodes.size)})
    equations = _direction_constraints(held_dirs, fixed)
    if mesh.dim == 3:  # solid nodes have no rotations (reference points, after them, do)
        fixed[:mesh.n_nodes - len(mesh.extra_nodes), 3:] = False
    return Constraints(fixed=fixed, described=described, equations=equations)


def _direction_constraints(held: dict[int, list[np.ndarray]], fixed: np.ndarray,
                           tol: float = 1e-9) -> list[list[tuple[int, int, float]]]:
    """Per node, hold the translation along each given direction (u·d = 0): reduce the directions
    together with the node's already fixed translations to row echelon form; rows along an axis
    fix that DOF, the others become equations with distinct dependent DOFs."""
    equations = []
    for node, dirs in held.items():
        rows = [np.asarray(d, float) / np.linalg.norm(d) for d in dirs if np.linalg.norm(d) > 1e-12]
        rows += [np.eye(3)[j] for j in range(3) if fixed[node, j]]
        a = np.array(rows)
        # reduced row echelon form with partial pivoting
        r, pivots = 0, []
        for col in range(3):
            if r >= a.shape[0]:
                break
            k = r + int(np.argmax(np.abs(a[r:, col])))
            if abs(a[k, col]) <= 1e-6:
                continue
            a[[r, k]] = a[[k, r]]
            a[r] /= a[r, col]
            for j in range(a.shape[0]):
                if j != r:
                    a[j] -= a[j, col] * a[r]
            pivots.append(col)
            r += 1
        for row, col in zip(a[:r], pivots):
            others = [j for j in range(3) if j != col and abs(row[j]) > tol]
            if not others:
                fixed[node, col] = True
            else:
                equations.append([(node, col, 1.0)] + [(node, j, float(row[j])) for j in others])
    return equations


@dataclass
class NodalMass:
    """A lumped mass on one node, SI."""

    node: int  #: point index
    mass: float  #: kg
    inertia: tuple[float, float, float] | None  #: kg m^2 about the node's axes
    source: str  #: the model's mass name
    offset: float = 0.0  #: distance from the requested point to the node, m


def resolve_masses(model: Model, mesh: Mesh, fixed: np.ndarray | None = None) -> list[NodalMass]:
    """Place each added mass on nodes. Masses never sit on supported nodes: a point mass
    there is an error; a spread mass is shared among the region's unsupported nodes."""
    out: list[NodalMass] = []
    held = fixed.any(axis=1) if fixed is not None else np.zeros(mesh.n_nodes, bool)
    for i, m in enumerate(model.masses):
        if m.point is not None:
            ref = mesh.extra_nodes[m.point]
            if m.inertia is None:
                out.append(NodalMass(ref, m.mass, None, m.name))
            else:  # six masses m/6 carry the inertia tensor (bridge.connections)
                for k in range(6):
                    out.append(NodalMass(mesh.extra_nodes[f"{m.name}~{k + 1}"], m.mass / 6, None, m.name))
            continue
        if m.at is not None:
            d = np.linalg.norm(mesh.points - np.asarray(m.at), axis=1)
            k = int(np.argmin(d))
            if d[k] > 2.0 * mesh.element_size + 1e-12:
                raise MeshingError(f"masses[{i}].at: the nearest mesh node is {d[k] * 1e3:.3g} mm away, "
                                   "more than two element sizes: is the point on the part?")
            if held[k]:
                raise ModelError("the nearest mesh node is a supported node: a mass there adds nothing "
                                 "in the held directions; place it off the support", field=f"masses[{i}].at")
            out.append(NodalMass(k, m.mass, tuple(m.inertia) if m.inertia else None, m.name, float(d[k])))
        else:
            nodes, w = mesh.region_weights(m.region)
            keep = ~held[nodes]
            if not keep.any():
                raise ModelError(f"every node of region '{m.region}' is supported: the mass would sit "
                                 "on the supports", field=f"masses[{i}].region")
            nodes, w = nodes[keep], w[keep] / w[keep].sum()
            for n, wi in zip(nodes, w):
                out.append(NodalMass(int(n), m.mass * float(wi), None, m.name))
    return out
