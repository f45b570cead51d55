"""Beams, springs, couplings and support equations of a job, laid out for a Kratos case.

Everything that ties DOFs together becomes a master-slave relation (one per slave DOF, its masters
with their coefficients), handed to ``run_case.py``. Kratos 10.4.4's eigen strategy honours a
simple ``LinearMasterSlaveConstraint`` with its block builder (a point mass tied to a cantilever's
tip gives the same eigenvalues as the mass on the tip node; the elimination builder crashed), but
failed on a box on four mounts (Spectra's factorisation failed; measured), so a case with
constraints is solved by ``run_case.py`` itself: K and M summed from Kratos's element matrices, u = T u_red from the same
constraint table, T^T K T and T^T M T solved with scipy (exact: no penalty stiffness). Every
eigenpair is then checked against its Rayleigh quotient from the element matrices, slaves included:
a wrong constraint shows there.

* rigid coupling: a tied node's translations are u_ref + θ_ref × (x − x_ref); its rotations, where it
  has live ones (a shell or beam node, another coupling's reference), are θ_ref.
* distributing coupling: the reference's translations are Σ w_i u_i (no stiffness is added).
* spring: an auxiliary node q whose DOFs are the mount's relative displacement (and rotation) in
  the mount's own axes, q = R (u_a − u_b), on a ``SpringDamperElement3D`` to a fixed ground node
  with the diagonal stiffness (Kratos's spring stiffness is diagonal in global axes).
* support equation Σ c u = 0 (a skew support): its first DOF is the slave, −Σ c_k u_k / c_0.
* beam off its nodes (``SolverJob.beam_offset``, a stiffener): the beam runs between auxiliary nodes
  at node + r (its mass sits where its section is); an auxiliary node's translations are
  u_s + θ_s × r. At a shell node its rotations follow θ_s except about r, where it keeps a rotation of
  its own (θ_b = θ_s + α r/|r|): tying that one too would tie the rib's rotation about the shell's
  normal to the shell's drilling rotation, as with OpenSees's stiff link, which it leaves out for the
  same reason (a twisting mode 11 % too stiff there); the rotation about r moves no point of the
  offset, so this is exact. Elsewhere (a frame node, a reference point) all three rotations are θ_s.

Slaves whose masters are slaves are resolved here (Kratos does not chain constraints); a fixed
master drops out. Rotation DOFs that nothing stiffens or weighs (a reference point that is no
rigid coupling's reference, an inertia-carrying node, a solid node when the case has rotations)
are fixed.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from bridge.errors import DeckWriteError
from bridge.solver import SolverJob

__all__ = ["Layout", "layout", "BEAM_ELEMENT", "SPRING_ELEMENT", "BEAM_LAW"]

#: Kratos's linear co-rotational beam (Euler–Bernoulli, with shear deformation from
#: AREA_EFFECTIVE_Y/Z; consistent mass with rotary and torsional inertia ρ(I22 + I33))
BEAM_ELEMENT = "CrLinearBeamElement3D2N"
BEAM_LAW = "BeamConstitutiveLaw"
#: two-node spring with a diagonal translational and rotational stiffness in global axes
SPRING_ELEMENT = "SpringDamperElement3D"

_TOL = 1e-14


@dataclass
class Layout:
    """Nodes, fixed DOFs and constraints of the Kratos case; ids are the case's."""

    rotations: bool  #: the case has rotation DOFs (shells, beams, reference points alone)
    node_ids: np.ndarray  #: (n,) the job's nodes then the auxiliary ones
    points: np.ndarray  #: (n, 3)
    fixed: np.ndarray  #: (n, 6) bool
    #: slave (node id, dof 0..5) -> [(master node id, dof 0..5, coefficient)]
    constraints: dict[tuple[int, int], list[tuple[int, int, float]]] = field(default_factory=dict)
    #: spring elements: (aux node id, ground node id, k (6,))
    springs: list[tuple[int, int, np.ndarray]] = field(default_factory=list)
    last_job_node: int = 0  #: the largest id of the job's own nodes
    #: (nb, 2) the case's node ids at each beam element's ends: the job's nodes, or for a beam off its
    #: nodes (a stiffener) the auxiliary nodes at its section's centroid
    beam_ends: np.ndarray = field(default_factory=lambda: np.empty((0, 2), np.int64))

    def constraint_rows(self) -> list[list]:
        """[slave node, slave dof, [[master node, master dof, coefficient], …]] for run_case.py."""
        return [[int(s[0]), int(s[1]), [[int(n), int(d), float(c)] for n, d, c in m]]
                for s, m in sorted(self.constraints.items())]


def _skew_rows(d) -> np.ndarray:
    """(3, 3) C with (θ × d) = C θ."""
    return np.array([[0.0, d[2], -d[1]], [-d[2], 0.0, d[0]], [d[1], -d[0], 0.0]])


def layout(job: SolverJob) -> Layout:
    ids = np.asarray(job.node_ids, np.int64)
    pts = np.asarray(job.points, float).reshape(-1, 3)
    index = {int(n): i for i, n in enumerate(ids)}
    extra = set(int(n) for n in job.extra_node_ids)
    beam_nodes = set(int(n) for n in ids[np.asarray(job.beams, np.int64).ravel()]) if len(job.beams) else set()
    rigid_refs = {c.reference for c in job.couplings if c.kind == "rigid"}
    rot_spring_ends = {n for s in job.springs if any(k > 0 for k in s.stiffness[3:])
                       for n in (s.node_a, s.node_b) if n is not None}
    rotations = bool(job.is_shell or len(job.beams) or not job.cells.size or rigid_refs or rot_spring_ends)
    live = set()  # nodes whose rotations carry stiffness or are tied to a live rotation
    for n in ids:
        n = int(n)
        if (job.is_shell and n not in extra) or n in beam_nodes or n in rigid_refs or n in rot_spring_ends:
            live.add(n)
    fixed = np.zeros((len(ids), 6), bool)
    fixed[:, :] = np.asarray(job.fixed, bool)[:, :6]
    if rotations:
        for i, n in enumerate(ids):
            if int(n) not in live:
                fixed[i, 3:] = True
    raw: dict[tuple[int, int], list[tuple[int, int, float]]] = {}

    def put(slave, masters, what):
        if slave in raw:
            raise DeckWriteError(f"node {slave[0]} DOF {slave[1] + 1} is tied twice ({what}); "
                                 "a node may belong to one coupling")
        if fixed[index[slave[0]], slave[1]]:
            raise DeckWriteError(f"node {slave[0]} DOF {slave[1] + 1} is both held and tied ({what})")
        raw[slave] = masters

    for c in job.couplings:
        r = int(c.reference)
        xr = pts[index[r]]
        if c.kind == "rigid":
            for n in c.nodes:
                n = int(n)
                C = _skew_rows(pts[index[n]] - xr)
                for i in range(3):
                    put((n, i), [(r, i, 1.0)] + [(r, 3 + j, C[i, j]) for j in range(3) if abs(C[i, j]) > 0],
                        f"rigid coupling '{c.name}'")
                if n in live:
                    for i in range(3):
                        put((n, 3 + i), [(r, 3 + i, 1.0)], f"rigid coupling '{c.name}'")
        elif c.kind == "distributing":
            w = np.asarray(c.weights if c.weights is not None else np.full(len(c.nodes), 1.0 / len(c.nodes)))
            for i in range(3):
                put((r, i), [(int(n), i, float(wk)) for n, wk in zip(c.nodes, w)],
                    f"distributing coupling '{c.name}'")
        else:
            raise DeckWriteError(f"the Kratos plugin has no {c.kind} coupling (coupling '{c.name}')")
    for k, eq in enumerate(job.equations):
        (n0, d0, c0), rest = eq[0], eq[1:]
        put((int(n0), int(d0) - 1), [(int(n), int(d) - 1, -float(c) / float(c0)) for n, d, c in rest],
            f"support equation {k + 1}")

    next_id = int(ids.max()) + 1 if ids.size else 1
    new_ids, new_pts, new_fixed = [], [], []
    beams = np.asarray(job.beams, np.int64).reshape(-1, 2)
    beam_ends = ids[beams] if len(beams) else np.empty((0, 2), np.int64)
    offsets = np.asarray(job.beam_offset, float).reshape(-1, 3)
    if len(beams) and len(offsets) == len(beams) and np.any(offsets != 0.0):
        beam_ends = beam_ends.copy()
        shell_nodes = (set(int(n) for n in ids[np.unique(np.asarray(job.cells, np.int64))]) - extra
                       if job.is_shell and np.asarray(job.cells).size else set())
        seated: dict[tuple, int] = {}
        for k, r in enumerate(offsets):
            if not np.any(r != 0.0):
                continue
            for e in range(2):
                s = int(beam_ends[k, e])
                key = (s, tuple(float(x) for x in r))
                if key not in seated:
                    b = seated[key] = next_id
                    next_id += 1
                    new_ids.append(b)
                    new_pts.append(pts[index[s]] + r)
                    new_fixed.append([False] * 6)
                    C = _skew_rows(r)
                    for i in range(3):
                        raw[(b, i)] = [(s, i, 1.0)] + [(s, 3 + j, C[i, j]) for j in range(3) if abs(C[i, j]) > 0]
                    if s in shell_nodes:
                        # θ_b = θ_s + α e: the component of e furthest from zero keeps its own DOF
                        e_ = r / np.linalg.norm(r)
                        f = int(np.argmax(np.abs(e_)))
                        for i in range(3):
                            if i != f:
                                c = float(e_[i] / e_[f])
                                masters = [(s, 3 + i, 1.0)]
                                if abs(c) > _TOL:
                                    masters += [(b, 3 + f, c), (s, 3 + f, -c)]
                                raw[(b, 3 + i)] = masters
                    else:
                        for i in range(3):
                            raw[(b, 3 + i)] = [(s, 3 + i, 1.0)]
                beam_ends[k, e] = seated[key]
    springs = []
    ground = None
    for s in job.springs:
        if ground is None:
            ground = next_id
            next_id += 1
            new_ids.append(ground)
            new_pts.append(pts[index[int(s.node_a)]])
            new_fixed.append([True] * 6)
        q = next_id
        next_id += 1
        a, b = int(s.node_a), None if s.node_b is None else int(s.node_b)
        new_ids.append(q)
        new_pts.append(pts[index[a]])
        R = np.asarray(s.axes, float).reshape(3, 3)
        k = np.asarray(s.stiffness, float)
        has_rot = bool(np.any(k[3:] > 0))
        new_fixed.append([False] * 3 + [not has_rot] * 3)
        for off in ((0, 3) if has_rot else (0,)):
            for i in range(3):
                masters = [(a, off + j, R[i, j]) for j in range(3) if abs(R[i, j]) > _TOL]
                if b is not None:
                    masters += [(b, off + j, -R[i, j]) for j in range(3) if abs(R[i, j]) > _TOL]
                raw[(q, off + i)] = masters
        springs.append((q, ground, k))
    if new_ids:
        ids = np.concatenate([ids, np.array(new_ids, np.int64)])
        pts = np.vstack([pts, np.array(new_pts, float)])
        fixed = np.vstack([fixed, np.array(new_fixed, bool)])
        index = {int(n): i for i, n in enumerate(ids)}
    out = Layout(rotations=rotations, node_ids=ids, points=pts, fixed=fixed, springs=springs,
                 beam_ends=np.asarray(beam_ends, np.int64).reshape(-1, 2),
                 last_job_node=int(np.asarray(job.node_ids).max()) if len(job.node_ids) else 0)
    if not rotations and any(d >= 3 for (_, d) in raw):
        raise DeckWriteError("a constraint on rotations in a case without rotation DOFs")
    # resolve: masters that are slaves are replaced by their own masters; fixed masters drop out
    resolved: dict[tuple[int, int], dict[tuple[int, int], float]] = {}

    def resolve(key, stack):
        if key in resolved:
            return resolved[key]
        if key in stack:
            raise DeckWriteError(f"node {key[0]} DOF {key[1] + 1} is tied to itself through a chain of couplings")
        terms: dict[tuple[int, int], float] = {}
        for n, d, c in raw[key]:
            m = (n, d)
            if m in raw:
                for mm, cc in resolve(m, stack | {key}).items():
                    terms[mm] = terms.get(mm, 0.0) + c * cc
            elif not fixed[index[n], d]:
                terms[m] = terms.get(m, 0.0) + c
        resolved[key] = {m: c for m, c in terms.items() if abs(c) > _TOL}
        return resolved[key]

    for key in raw:
        terms = resolve(key, frozenset())
        if terms:
            out.constraints[key] = [(n, d, c) for (n, d), c in sorted(terms.items())]
        else:  # every master is held: so is the slave
            out.fixed[index[key[0]], key[1]] = True
    return out
