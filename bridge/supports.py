"""Turn a model's supports and masses into per-node data on a mesh."""

from __future__ import annotations

from dataclasses import dataclass

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

    @property
    def constrained_nodes(self) -> int:
        return int(self.fixed.any(axis=1).sum())

    def free_dof(self, dofs_per_node: int) -> int:
        return int(self.fixed.shape[0] * dofs_per_node - self.fixed[:, :dofs_per_node].sum())


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
    for i, s in enumerate(model.supports):
        if s.point is not None:  # a reference point: six DOF (rotations where a rigid coupling gives them)
            js = _kind_dofs(s.kind, True, s.normal, s.dofs)
            fixed[mesh.extra_nodes[s.point], js] = True
            described.append({"region": f"point {s.point}", "point": s.point, "kind": s.kind, "fixes": " ".join(DOF_NAMES[j] for j in js),
                              "nodes": 1})
            continue
        nodes = mesh.region_nodes(s.region)
        if s.kind == "simply_supported":
            # out-of-plane translation everywhere on the edge, and the translation along
            # each straight edge: holds the plate without an in-plane stiffening across the edge
            fixed[nodes, 2] = True
            for part in mesh.regions[s.region]:
                if part.dim != 1 or part.axis not in ("x", "y"):
                    raise ModelError("'simply_supported' needs straight plate edges along x or y; "
                                     f"region '{s.region}' holds another kind of entity",
                                     field=f"supports[{i}].region")
                fixed[part.nodes, _AXIS[part.axis]] = True
            dofs = "uz + along-edge u"
        else:
            js = _kind_dofs(s.kind, shell, s.normal, s.dofs)
            fixed[np.ix_(nodes, js)] = True
            dofs = " ".join(DOF_NAMES[j] for j in js)
        described.append({"region": s.region, "kind": s.kind, "fixes": dofs, "nodes": int(nodes.size)})
    if mesh.dim == 3:  # solid nodes have no rotations (reference points, after them, do)
        fixed[:mesh.n_nodes - len(mesh.extra_nodes), 3:] = False
    return Constraints(fixed=fixed, described=described)


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
