"""Reference points, couplings, springs and masses with inertia, resolved onto mesh nodes.

Reference points become extra nodes appended after the continuum's nodes (``Mesh.extra_nodes``).
A mass with an inertia tensor at a reference point is represented exactly by six point masses
of m/6 on extra nodes at ±a_k along the principal axes e_k of its second-moment tensor
S = tr(J)/2 · I − J (S = ∫ r rᵀ dm about the centre of gravity), a_k = √(3 s_k / m), rigidly tied
to the reference point: the six reproduce the mass, the centre of gravity and the whole inertia
tensor (Σ m/6 · 2 a_k² e_k e_kᵀ = S). Every solver then needs only translational point masses
and rigid couplings, and modebridge's own translational mass matrix holds the inertia, so the
effective masses and the model's mass include it.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .errors import ModelError
from .mesh import Mesh
from .model import GROUND, Model, inertia_tensor, spring_axes

__all__ = ["Tie", "NodeSpring", "Connections", "add_extra_nodes", "resolve_connections",
           "satellite_offsets", "SATELLITE_NOTE"]

SATELLITE_NOTE = ("mass '{name}': its inertia tensor is carried by six point masses of m/6 on extra nodes "
                  "rigidly tied to reference point '{point}' at ±a along the principal axes (a = {a} mm): "
                  "exact mass, centre of gravity and inertia tensor (no rotary-inertia card needed)")


SPRING_GAP_NOTE = ("spring '{name}': its ends are {gap} mm apart; it acts on their relative translations (and "
                   "rotations) along its own axes, with no moment from that length (a zero-length mount)")


@dataclass
class Tie:
    """A coupling on point indices."""

    name: str  #: the reference point's name
    kind: str  #: "rigid" or "distributing"
    reference: int  #: point index of the reference node
    nodes: np.ndarray  #: point indices of the tied nodes
    weights: np.ndarray | None = None  #: distributing: share of each node, summing to 1


@dataclass
class NodeSpring:
    """A spring between a node and the ground (``b`` None) or another node."""

    name: str
    a: int  #: point index
    b: int | None  #: point index, or None for the ground
    stiffness: np.ndarray  #: (6,) along/about the mount's axes: N/m, N·m/rad
    axes: np.ndarray  #: (3, 3) rows: the mount's x, y, z in global coordinates


@dataclass
class Connections:
    ties: list[Tie] = field(default_factory=list)
    springs: list[NodeSpring] = field(default_factory=list)
    #: mass name -> (reference index, satellite indices)
    satellites: dict[str, tuple[int, np.ndarray]] = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)

    @property
    def rigid_references(self) -> set[int]:
        return {t.reference for t in self.ties if t.kind == "rigid"}

    def kinds(self) -> set[str]:
        return {t.kind for t in self.ties}


def satellite_offsets(mass: float, inertia) -> np.ndarray:
    """(6, 3) offsets from the centre of gravity of six masses m/6 with the given inertia tensor."""
    J = inertia_tensor(inertia)
    S = np.trace(J) / 2 * np.eye(3) - J
    s, e = np.linalg.eigh(S)
    s = np.clip(s, 0.0, None)
    a = np.sqrt(3.0 * s / mass)
    out = []
    for k in range(3):
        out += [a[k] * e[:, k], -a[k] * e[:, k]]
    return np.array(out)


def member_z(start, end, orientation) -> np.ndarray:
    """Unit local z of a member's section: ``orientation`` made normal to the member's axis
    (default global z, or global y for a member along z)."""
    x = np.asarray(end, float) - np.asarray(start, float)
    x /= np.linalg.norm(x)
    z = np.asarray(orientation if orientation is not None else (0.0, 0.0, 1.0), float)
    if orientation is None and abs(x[2]) > 0.999:
        z = np.array([0.0, 1.0, 0.0])
    z = z - x * (x @ z)
    if np.linalg.norm(z) < 1e-9:
        raise ValueError("the orientation is parallel to the member")
    return z / np.linalg.norm(z)


def add_extra_nodes(model: Model, mesh: Mesh) -> None:
    """Append the reference points, the members' interior nodes and the inertia-carrying nodes to
    ``mesh.points`` (in place), and the members' beam elements to ``mesh.beams``."""
    new = []
    start = mesh.n_nodes
    for name, p in model.reference_points.items():
        mesh.extra_nodes[name] = start + len(new)
        new.append(np.asarray(p, float))
    beams, secs, zs, offs = [], [], [], []
    for i, mb in enumerate(model.members):
        if mb.along is not None:
            for p, q, z, off in _stiffener_elements(model, mesh, i, start):
                beams.append((p, q))
                secs.append(mb.section)
                zs.append(z)
                offs.append(off)
            continue
        a = np.asarray(model.reference_points[mb.start], float)
        b = np.asarray(model.reference_points[mb.end], float)
        try:
            z = member_z(a, b, mb.orientation)
        except ValueError as exc:
            raise ModelError(str(exc), field=f"members[{i}].orientation") from None
        chain = [mesh.extra_nodes[mb.start]]
        for k in range(1, mb.divisions):
            mesh.extra_nodes[f"{mb.name}~{k}"] = start + len(new)
            chain.append(start + len(new))
            new.append(a + (b - a) * k / mb.divisions)
        chain.append(mesh.extra_nodes[mb.end])
        off = z * (mb.offset or 0.0)
        for p, q in zip(chain[:-1], chain[1:]):
            beams.append((p, q))
            secs.append(mb.section)
            zs.append(z)
            offs.append(off)
    if beams:
        mesh.beams = np.array(beams, np.int64)
        mesh.beam_sections = secs
        mesh.beam_z = np.array(zs)
        mesh.beam_offset = np.array(offs, float)
    for m in model.masses:
        if m.point is None or m.inertia is None:
            continue
        c = np.asarray(model.reference_points[m.point], float)
        for k, off in enumerate(satellite_offsets(m.mass, m.inertia)):
            mesh.extra_nodes[f"{m.name}~{k + 1}"] = start + len(new)
            new.append(c + off)
    if new:
        mesh.points = np.vstack([mesh.points.reshape(-1, 3), np.array(new)])


def _stiffener_elements(model: Model, mesh: Mesh, i: int, n_body: int):
    """Beam elements of member ``i`` along its region's edges: consecutive mesh nodes on each
    straight edge; per element (node, node, local z, centroid offset). The local z is the member's
    orientation or the shell's normal there (reversed on the bottom side); the offset seats the
    section on the shell's face (``side``) or is the given distance along z."""
    from .sections import base_to_centroid

    mb = model.members[i]
    field = f"members[{i}].along"
    parts = [p for p in mesh.regions.get(mb.along, []) if p.dim == 1]
    if not parts:
        raise ModelError(f"region '{mb.along}' holds no edge of the shell: a stiffener runs along edges",
                         field=field)
    normals = mesh.node_normals()
    thick = _node_thickness(model, mesh)
    sec = model.beam_sections[mb.section]
    out, seen = [], set()
    for part in parts:
        if part.direction is None:
            raise ModelError(f"region '{mb.along}' holds a curved edge: stiffeners run along straight edges "
                             "(split the curve into straight edges)", field=field)
        nodes = part.nodes[part.nodes < n_body]
        order = np.argsort(mesh.points[nodes] @ part.direction)
        chain = nodes[order]
        for p, q in zip(chain[:-1], chain[1:]):
            key = (min(p, q), max(p, q))
            if key in seen:
                continue
            seen.add(key)
            a, b = mesh.points[p], mesh.points[q]
            if mb.orientation is not None:
                hint = np.asarray(mb.orientation, float)
            else:
                hint = normals[p] + normals[q]
                if np.linalg.norm(hint) < 1e-9:
                    raise ModelError("the shell's normal is not defined along the stiffener (faces of opposite "
                                     "normals meet there): give 'orientation'", field=f"members[{i}].orientation")
                if mb.side == "bottom":
                    hint = -hint
            try:
                z = member_z(a, b, hint)
            except ValueError as exc:
                raise ModelError(str(exc), field=f"members[{i}].orientation") from None
            if mb.offset is not None:
                e = mb.offset
            elif mb.side is not None:
                e = max(thick[p], thick[q]) / 2 + base_to_centroid(sec.shape, sec.dims())
            else:
                e = 0.0
            out.append((int(p), int(q), z, z * e))
    return out


def _node_thickness(model: Model, mesh: Mesh) -> np.ndarray:
    """Shells: the largest thickness of the elements at each node, m."""
    secs = [s for _, s in model.section_list()]
    t_cell = np.array([getattr(s, "thickness", 0.0) or 0.0 for s in secs], float)[mesh.cell_sections()]
    out = np.zeros(mesh.n_nodes)
    for j in range(mesh.cells.shape[1]):
        np.maximum.at(out, mesh.cells[:, j], t_cell)
    return out


def resolve_connections(model: Model, mesh: Mesh, fixed: np.ndarray) -> Connections:
    """Couplings, springs and inertia satellites on point indices; ``fixed`` (n, 6) from the supports."""
    out = Connections()
    idx = mesh.extra_nodes
    held = fixed.any(axis=1)
    for i, c in enumerate(model.couplings):
        ref = idx[c.reference]
        nodes, weights = [], []
        if c.region is not None:
            rn, rw = mesh.region_weights(c.region) if mesh.regions.get(c.region) else (np.empty(0, np.int64), np.empty(0))
            if rn.size == 0:
                raise ModelError(f"region '{c.region}' holds no mesh node: the coupling would tie nothing",
                                 field=f"couplings[{i}].region")
            nodes.append(rn)
            weights.append(rw * rn.size)
        if c.points:
            pts = np.array([idx[p] for p in c.points], np.int64)
            nodes.append(pts)
            weights.append(np.ones(pts.size))
        n = np.concatenate(nodes)
        w = np.concatenate(weights)
        n, first = np.unique(n, return_index=True)
        w = w[first]
        n_keep = n != ref
        n, w = n[n_keep], w[n_keep]
        if n.size == 0:
            raise ModelError("the coupling ties no node besides its reference point", field=f"couplings[{i}]")
        if held[n].any():
            raise ModelError(f"{int(held[n].sum())} of the coupled nodes are supported: a node cannot be both held "
                             "and tied; support the reference point instead", field=f"couplings[{i}]")
        out.ties.append(Tie(c.reference, c.kind, ref, n, w / w.sum() if c.kind == "distributing" else None))
    # inertia satellites: join the reference point's rigid coupling, or make one
    for m in model.masses:
        if m.point is None or m.inertia is None:
            continue
        ref = idx[m.point]
        sats = np.array([idx[f"{m.name}~{k + 1}"] for k in range(6)], np.int64)
        out.satellites[m.name] = (ref, sats)
        a = np.linalg.norm(mesh.points[sats] - mesh.points[ref], axis=1)[::2]
        out.notes.append(SATELLITE_NOTE.format(name=m.name, point=m.point,
                                               a=", ".join(f"{x * 1e3:.4g}" for x in a)))
        for t in out.ties:
            if t.reference == ref and t.kind == "rigid":
                t.nodes = np.concatenate([t.nodes, sats])
                break
        else:
            out.ties.append(Tie(m.point, "rigid", ref, sats))
    for i, s in enumerate(model.springs):
        try:
            axes = spring_axes(s.axes)
        except ValueError as exc:
            raise ModelError(str(exc), field=f"springs[{i}].axes") from None
        k = np.array(list(s.stiffness) + list(s.rotational_stiffness or [0.0, 0.0, 0.0]), float)
        b = None if s.to == GROUND else idx[s.to]
        if s.points:
            for p in s.points:
                out.springs.append(NodeSpring(s.name, idx[p], b, k, axes))
                gap = 0.0 if b is None else float(np.linalg.norm(mesh.points[idx[p]] - mesh.points[b]))
                if gap > 1e-9:
                    out.notes.append(SPRING_GAP_NOTE.format(name=s.name, gap=f"{gap * 1e3:.4g}"))
        else:
            rn, rw = mesh.region_weights(s.region) if mesh.regions.get(s.region) else (np.empty(0, np.int64), np.empty(0))
            keep = ~held[rn]
            if not keep.any():
                raise ModelError(f"region '{s.region}' has no unsupported node: the spring would act on nothing",
                                 field=f"springs[{i}].region")
            rn, rw = rn[keep], rw[keep] / rw[keep].sum()
            for node, share in zip(rn, rw):
                out.springs.append(NodeSpring(s.name, int(node), b, k * share, axes))
    return out


def rigid_motion_rows(mesh: Mesh, connections: Connections, equations=()) -> np.ndarray | None:
    """Rows (k, 6) on the six rigid-body motions (:func:`bridge.checks.rigid_body_vectors` of
    ``mesh.points``, six DOF per node) that springs to the ground and support equations stop:
    pass them as ``constraint_rows`` beside the fixed DOF. Couplings and springs between two nodes
    let every rigid motion through, so they add no row. None when nothing besides fixed DOF holds."""
    from .checks import rigid_body_vectors

    rows = []
    R = None
    n_body = mesh.n_nodes - len(mesh.extra_nodes)
    for s in connections.springs:
        if s.b is not None:
            continue
        R = rigid_body_vectors(mesh.points, 6)[0] if R is None else R
        block = R[s.a * 6:(s.a + 1) * 6]
        has_rot = mesh.dim != 3 or s.a >= n_body  # solid nodes carry no rotations
        for j in range(6):
            if s.stiffness[j] > 0 and (j < 3 or has_rot):
                off = 0 if j < 3 else 3
                rows.append(s.axes[j % 3] @ block[off:off + 3])
    for eq in equations:  # sum c * u(node, dof) = 0
        R = rigid_body_vectors(mesh.points, 6)[0] if R is None else R
        rows.append(sum(c * R[n * 6 + d] for n, d, c in eq))
    return np.array(rows) if rows else None
