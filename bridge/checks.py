"""Checks reported with every run: rigid-body modes, mass, the 90 % rule, excitation bands.

Each check is one function taking a :class:`CheckContext` and returning its structured
verdicts (:class:`Check`: name, status, message and the figures behind it); :func:`run_checks`
runs the list :data:`CHECKS`. The terminal, the JSON summary and the HTML report show these
verdicts as stored: nothing downstream recomputes a verdict.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field

import numpy as np

from .model import Model
from .results import ModalResult

__all__ = ["Check", "CheckContext", "CHECKS", "rigid_body_count", "run_checks", "MASS_RULE",
           "rigid_body_vectors", "free_rigid_motions", "RigidMotions", "worst_status", "element_notes",
           "FAMILY_NOTES"]

#: Cumulative effective mass per direction a response-spectrum analysis needs:
#: EN 1998-1 §4.3.3.3.1(3) and ASCE 7-16 §12.9.1.1 (90 % of the mass).
MASS_RULE = 0.90
#: A free body's effective-mass sum must equal its mass within this (common practice, no source).
MASS_TOLERANCE = 0.005
#: The effective masses of the computed modes may exceed the mass on free DOF (rᵀMr, which they
#: can only approach: Bessel's inequality for M-orthonormal modes) by at most this. Above 0 to
#: allow for a solver whose mass matrix differs from modebridge's consistent one (lumped mass,
#: shell rotary inertia) — common practice, no source.
MASS_EXCESS_TOLERANCE = 0.02
#: Mode normalisation against modebridge's own mass matrix (common practice, no source).
NORMALISATION_TOLERANCE = 0.10
_GAP = 1e3  #: a rigid-body mode lies at least this factor below the first elastic one
_ABS_EIG = 1e-2  #: (rad/s)^2: |λ| below this is rigid whatever the gap (f < 0.016 Hz)
_RANK_TOL = 1e-9  #: relative singular value below which a rigid motion counts as unrestrained

MOTION_NAMES = ("translation along x", "translation along y", "translation along z",
                "rotation about x", "rotation about y", "rotation about z")


@dataclass
class Check:
    name: str
    status: str  #: "ok", "warn" or "fail"
    message: str
    figures: dict = field(default_factory=dict)  #: the numbers behind the verdict (JSON-able)

    def as_dict(self) -> dict:
        return asdict(self)


def worst_status(checks) -> str:
    """"fail" if any check failed, else "warn" if any warned, else "ok" (dicts or Checks)."""
    st = {c.get("status") if isinstance(c, dict) else c.status for c in checks}
    return "fail" if "fail" in st else "warn" if "warn" in st else "ok"


@dataclass
class CheckContext:
    """What the checks look at."""

    model: Model
    result: ModalResult
    fixed: np.ndarray | None = None  #: (n, 6) bool fixed DOF per node (mesh order = result order)
    constraint_rows: np.ndarray | None = None  #: (k, 6) further constraints on the rigid motions
    model_mass: float | None = None  #: kg, from element measures × density + added masses
    mesh: dict = field(default_factory=dict)  #: mesh statistics (quality, size)
    warnings: list[str] = field(default_factory=list)  #: solver warnings and plugin notes
    element_notes: list[str] = field(default_factory=list)  #: known misbehaviour of the element used


def rigid_body_count(frequencies: np.ndarray, eigenvalues: np.ndarray) -> int:
    """Number of leading near-zero modes.

    A mode is rigid when |λ| < 1e-2 (rad/s)², or when it lies below the last
    gap of more than 1000× in the ascending frequency list (solvers return
    rigid modes as tiny, even negative, eigenvalues, far below the first
    elastic mode). Common practice, no source. Every command (run, compare,
    converge, vary, verify, report) sets rigid-body modes apart with this rule.
    """
    f = np.abs(np.asarray(frequencies, float))
    lam = np.asarray(eigenvalues, float)
    n = f.size
    k = 0  # the leading block of tiny eigenvalues
    while k < n and abs(lam[k]) < _ABS_EIG:
        k += 1
    count = k
    for i in range(n - 1):
        lo = max(f[i], np.sqrt(max(lam[i], 0.0)) / (2 * np.pi), 1e-300)
        if f[i + 1] > _GAP * lo and f[i] < 1.0:
            count = max(count, i + 1)
    return count


# --- rigid-body motions the constraints leave free --------------------------------------------

def rigid_body_vectors(points: np.ndarray, dofs_per_node: int = 6, centre=None) -> tuple[np.ndarray, np.ndarray]:
    """The six rigid-body motions as columns of an (n·dofs_per_node, 6) matrix.

    Columns: translations along x, y, z, then rotations about x, y, z through ``centre``
    (default: the centroid), the rotations scaled by the model's size so that all six
    columns are of the same magnitude. Row ``node·dofs_per_node + dof`` (dof order ux uy uz
    rx ry rz). A constraint matrix C (rows over the same DOF) restricts the rigid motions
    through ``C @ R``: pass those rows to :func:`free_rigid_motions`. Returns (R, centre).
    """
    x = np.asarray(points, float)
    c = x.mean(axis=0) if centre is None else np.asarray(centre, float)
    d = x - c
    scale = float(np.max(np.linalg.norm(d, axis=1))) if x.size else 1.0
    scale = scale if scale > 0 else 1.0
    n = x.shape[0]
    R = np.zeros((n, dofs_per_node, 6))
    for a in range(3):
        R[:, a, a] = 1.0
        e = np.zeros(3)
        e[a] = 1.0
        R[:, :3, 3 + a] = np.cross(e, d) / scale  # a rotation of 1/scale rad: exact rigid motion
        if dofs_per_node == 6:
            R[:, 3 + a, 3 + a] = 1.0 / scale
    return R.reshape(n * dofs_per_node, 6), c


@dataclass
class RigidMotions:
    count: int  #: rigid-body motions the constraints leave free (0 to 6)
    names: list[str]  #: readable names of a basis of those motions


def _direction_name(v: np.ndarray) -> str:
    v = v / np.linalg.norm(v)
    k = int(np.argmax(np.abs(v)))
    if abs(abs(v[k]) - 1.0) < 1e-6:
        return "xyz"[k]
    return "(" + ", ".join(f"{x:.2f}" for x in v * np.sign(v[k])) + ")"


def free_rigid_motions(points: np.ndarray, fixed: np.ndarray, dofs_per_node: int | None = None,
                       constraint_rows: np.ndarray | None = None) -> RigidMotions:
    """The rigid-body motions that the fixed DOF (and any further constraint rows) do not stop.

    The six rigid-body vectors restricted to the fixed DOF form a matrix A; its null space
    holds the free motions (dimension 6 − rank A). ``constraint_rows`` (k, 6) are further rows
    on the rigid motions (``C @ R`` of a spring or coupling constraint matrix C, see
    :func:`rigid_body_vectors`). The names are a basis: first the free translations, then the
    directions of the free rotations.
    """
    fixed = np.asarray(fixed, bool)
    dpn = dofs_per_node or (6 if fixed.shape[1] == 6 and fixed[:, 3:].any() else fixed.shape[1])
    dpn = 6 if dpn == 6 else 3
    R, _ = rigid_body_vectors(points, dpn)
    rows = R[np.flatnonzero(fixed[:, :dpn].reshape(-1))]
    if constraint_rows is not None and np.size(constraint_rows):
        rows = np.vstack([rows, np.asarray(constraint_rows, float).reshape(-1, 6)])
    if rows.shape[0] == 0:
        return RigidMotions(6, list(MOTION_NAMES))
    if rows.shape[0] > 6:  # the same singular values and right vectors from a 6 x 6 triangle: a full
        # SVD of the (fixed DOF x 6) rows builds an m x m U (1M-DOF plate: 1.8 GB, 68 s)
        rows = np.linalg.qr(rows, mode="r")
    _, s, vt = np.linalg.svd(rows, full_matrices=True)
    rank = int((s > _RANK_TOL * max(s[0], 1e-300)).sum())
    N = vt[rank:].T  # (6, k)
    k = N.shape[1]
    if k == 0:
        return RigidMotions(0, [])
    names = []
    # free translations: null vectors with no rotation part; then the free rotation directions
    _, sr, vr = np.linalg.svd(N[3:], full_matrices=True)
    rr = int((sr > 1e-8).sum())
    trans = N @ vr[rr:].T  # (6, k - rr)
    if trans.size:
        for v in _axis_basis(trans[:3].T):
            names.append(f"translation along {_direction_name(v)}")
    if rr:
        rot = N[3:] @ vr[:rr].T
        for v in _axis_basis(rot.T):
            names.append(f"rotation about {_direction_name(v)}")
    return RigidMotions(k, names)


def _axis_basis(vectors: np.ndarray) -> list[np.ndarray]:
    """An orthonormal basis of the span of the rows of ``vectors``, made of coordinate axes
    where the span holds them."""
    vectors = np.atleast_2d(vectors)
    _, s, vt = np.linalg.svd(vectors)
    r = int((s > 1e-8 * max(s[0] if s.size else 0, 1e-300)).sum())
    span = vt[:r]
    out = []
    for a in range(3):
        e = np.zeros(3)
        e[a] = 1.0
        if np.linalg.norm(span.T @ (span @ e)) > 1 - 1e-8:
            out.append(e)
    if len(out) < r:  # complete with the part orthogonal to the axes found
        P = span.T @ span
        for e in out:
            P = P - np.outer(e, e)
        w, v = np.linalg.eigh(P)
        out += [v[:, i] for i in np.argsort(w)[::-1][: r - len(out)]]
    return out


# --- the checks -------------------------------------------------------------------------------

def check_rigid_body_modes(ctx: CheckContext) -> list[Check]:
    r = ctx.result
    rigid = rigid_body_count(r.frequencies, r.eigenvalues)
    if ctx.fixed is None:
        if ctx.model.grounded:  # supports, or springs to the ground
            return [Check("rigid_body_modes", "warn",
                          f"{rigid} near-zero mode(s); the constraints were not given, so the expected "
                          "number is unknown", {"found": rigid, "expected": None})]
        motions = RigidMotions(6, list(MOTION_NAMES))
    else:
        fx = np.asarray(ctx.fixed, bool)
        # reference points carry rotations even beside solid nodes (whose rotation columns stay False)
        dpn = 6 if ctx.model.is_shell or (fx.shape[1] == 6 and fx[:, 3:].any()) else 3
        motions = free_rigid_motions(r.points, fx, dpn, ctx.constraint_rows)
    exp = motions.count
    figs = {"found": rigid, "expected": exp, "free_motions": motions.names, "computed_modes": r.n_modes}
    free_txt = ", ".join(motions.names)
    if rigid == exp:
        if exp == 0:
            msg = "no rigid-body mode: the supports hold every rigid-body motion"
        elif exp == 6:
            msg = "6 rigid-body modes, as a free body has"
        else:
            msg = f"{exp} rigid-body mode(s), as the supports leave free: {free_txt}"
        return [Check("rigid_body_modes", "ok", msg, figs)]
    if rigid < exp:
        if r.n_modes <= rigid:
            return [Check("rigid_body_modes", "warn",
                          f"only {r.n_modes} modes computed, all near zero; the supports leave {exp} motion(s) "
                          f"free ({free_txt}): compute more modes", figs)]
        notheld = "; ".join(f"{n} is not held" for n in motions.names)
        return [Check("rigid_body_modes", "fail",
                      f"{rigid} near-zero mode(s) where the supports leave {exp} rigid-body motion(s) free: "
                      f"{notheld}; the solver held what the model does not (or lost modes)", figs)]
    extra = rigid - exp
    held = ("the supports hold every rigid-body motion" if exp == 0 else
            f"the supports leave only {exp} free ({free_txt})")
    return [Check("rigid_body_modes", "fail",
                  f"{rigid} near-zero mode(s) but {held}: {extra} more — a mechanism, or a support that does "
                  "not hold what it should", figs)]


def check_mass(ctx: CheckContext) -> list[Check]:
    r = ctx.result
    model = ctx.model
    out: list[Check] = []
    frac = r.effective_mass_fraction()
    if frac is None:
        return [Check("effective_mass", "warn", "the solver reports no effective masses")]
    tot = r.total_effective_mass
    if tot is not None and np.isfinite(r.total_mass):
        free_mass = np.asarray(tot[:3], float)  # rᵀ M_ff r by the core, per direction
        summed = r.effective_mass[:, :3].sum(axis=0)
        share = summed / np.where(free_mass > 0, free_mass, np.nan)
        mref = ctx.model_mass if ctx.model_mass else r.total_mass
        figs = {"effective_mass_sum_kg": summed.tolist(), "free_dof_mass_kg": free_mass.tolist(),
                "model_mass_kg": mref, "share_of_free_dof_mass": share.tolist(),
                "free_dof_mass_over_model_mass": (free_mass / mref).tolist(), "tolerance": MASS_TOLERANCE}
        rigid = rigid_body_count(r.frequencies, r.eigenvalues)
        if ctx.fixed is not None:
            free_body = not np.asarray(ctx.fixed).any() and ctx.constraint_rows is None
        else:
            free_body = not model.grounded
        if free_body:
            # the rigid-body modes of a free body span r: their effective masses sum to the mass
            # (and rᵀMr of a free body is the model's mass: the core's mass matrix against the
            # element measures)
            bad_sum = np.abs(share - 1) > MASS_TOLERANCE
            bad_mass = np.abs(free_mass / mref - 1) > MASS_TOLERANCE
            if r.n_modes < 6 or rigid < 6:
                status = "warn"
                note = f" ({rigid} rigid-body modes among {r.n_modes} computed: a free body needs all 6 for this check)"
            else:
                status = "fail" if (bad_sum.any() or bad_mass.any()) else "ok"
                note = ""
            out.append(Check("mass_sum", status,
                             "Σ effective mass / model mass " + ", ".join(f"{d} {x:.4f}" for d, x in zip("xyz", summed / mref))
                             + f" (free body: must be 1 within {MASS_TOLERANCE:.1%})" + note, figs))
        else:
            over = share > 1 + MASS_EXCESS_TOLERANCE
            status = "fail" if over.any() else "ok"
            ratio = free_mass / mref
            msg = ("Σ effective mass of the computed modes / mass on free DOF (rᵀMr) "
                   + ", ".join(f"{d} {x:.3f}" for d, x in zip("xyz", share))
                   + f" (at most 1 for M-orthonormal modes, {MASS_EXCESS_TOLERANCE:.0%} allowed)")
            if over.any():
                msg += ": the modes carry more mass than the model has on its free DOF — shapes not orthogonal in the mass"
            if (ratio > 1 + MASS_TOLERANCE).any():
                msg += (f"; mass on free DOF is {ratio.max():.3f} × the model's mass: corner nodes of "
                        "serendipity elements carry negative consistent-mass row sums, so removing the supported "
                        "nodes can raise the share")
            out.append(Check("mass_sum", status, msg, figs))
    if out and not np.isfinite(np.asarray(out[-1].figures.get("effective_mass_sum_kg", [0.0]), float)).all():
        # a mode without translational mass in modebridge's matrix (e.g. a beam's torsion, whose
        # rotary mass it does not hold) has no effective mass: no verdict can be drawn from NaN
        out[-1] = Check("mass_sum", "warn", out[-1].message + "; some effective masses are not finite (a mode "
                        "with no translational mass in modebridge's mass matrix): not checked", out[-1].figures)
    cum = np.cumsum(frac, axis=0)
    parts = []
    worst = "ok"
    per = {}
    for j, d in enumerate("xyz"):
        if d not in model.analysis.mass_directions:
            continue
        hit = np.flatnonzero(cum[:, j] >= MASS_RULE)
        reached = float(cum[-1, j]) if cum.size else 0.0
        per[d] = {"mode": int(hit[0]) + 1 if hit.size else None, "reached": reached}
        if hit.size:
            parts.append(f"{d}: {MASS_RULE:.0%} reached at mode {hit[0] + 1}")
        else:
            parts.append(f"{d}: {reached:.1%} after {r.n_modes} modes — more modes are needed "
                         f"(at least {MASS_RULE - reached:.1%} of the mass is still missing)")
            worst = "warn"
    out.append(Check("mass_rule_90", worst, "; ".join(parts) + " (EN 1998-1 §4.3.3.3.1, ASCE 7-16 §12.9.1.1)",
                     {"rule": MASS_RULE, "directions": per,
                      "cumulative": {d: cum[:, j].tolist() for j, d in enumerate("xyz")}}))
    return out


def check_normalisation(ctx: CheckContext) -> list[Check]:
    mm = ctx.result.metadata.get("modal_mass")
    if not mm:
        return []
    dev = float(np.max(np.abs(np.asarray(mm) - 1.0)))
    figs = {"max_deviation": dev, "min": float(min(mm)), "max": float(max(mm)), "tolerance": NORMALISATION_TOLERANCE}
    if dev > NORMALISATION_TOLERANCE:
        return [Check("mass_normalisation", "warn",
                      f"the solver's mode normalisation and modebridge's consistent mass differ by up to "
                      f"{dev:.1%} (φᵀMφ from {min(mm):.3f} to {max(mm):.3f}); effective masses use "
                      "m_eff = L²/φᵀMφ with modebridge's mass, so they stay valid", figs)]
    return [Check("mass_normalisation", "ok",
                  f"φᵀMφ = 1 within {dev:.2%} with modebridge's consistent mass matrix", figs)]


def check_excitation(ctx: CheckContext) -> list[Check]:
    r = ctx.result
    rigid = rigid_body_count(r.frequencies, r.eigenvalues)
    elastic = r.frequencies[rigid:]
    out = []
    for band in ctx.model.excitation:
        lo = band.low * (1 - band.margin)
        hi = band.high * (1 + band.margin)
        inside = [i + rigid + 1 for i, f in enumerate(elastic) if lo <= f <= hi]
        below = elastic[elastic < lo]
        above = elastic[elastic > hi]
        figs = {"low_hz": band.low, "high_hz": band.high, "margin": band.margin, "widened_hz": [lo, hi],
                "modes_inside": inside, "nearest_below_hz": float(below.max()) if below.size else None,
                "nearest_above_hz": float(above.min()) if above.size else None, "rigid_body_modes": rigid}
        if inside:
            out.append(Check(f"excitation:{band.name}", "fail",
                             f"mode(s) {', '.join(map(str, inside))} inside {band.low:g}–{band.high:g} Hz "
                             f"widened by {band.margin:.0%} ({lo:.1f}–{hi:.1f} Hz)", figs))
            continue
        near = []
        if below.size:
            near.append(f"nearest below {below.max():.1f} Hz")
        if above.size:
            near.append(f"nearest above {above.min():.1f} Hz")
        top = r.frequencies[-1] if r.n_modes else 0.0
        status = "ok"
        note = ""
        total = r.metadata.get("system_modes")  # a model without continuum: every mode it has
        if top < hi and not (total is not None and r.n_modes >= total):
            status = "warn"
            note = f"; the highest computed mode ({top:.1f} Hz) is below the band's top: compute more modes"
        out.append(Check(f"excitation:{band.name}", status,
                         f"clear of {band.low:g}–{band.high:g} Hz ± {band.margin:.0%} ({', '.join(near)}){note}", figs))
    return out


def check_mesh_quality(ctx: CheckContext) -> list[Check]:
    from .meshing.quality import POOR_QUALITY

    q = ctx.mesh.get("quality_min")
    if q is None:
        return []
    figs = {"min_sicn": q, "poor_below": POOR_QUALITY, "poor_elements": ctx.mesh.get("quality_poor", 0)}
    if q < POOR_QUALITY:
        return [Check("mesh_quality", "warn",
                      f"{ctx.mesh.get('quality_poor', 0)} element(s) of poor shape, minSICN down to {q:.3f} "
                      f"(below {POOR_QUALITY}): results near them are less accurate; refine or reshape there", figs)]
    return [Check("mesh_quality", "ok", f"minSICN ≥ {q:.3f} on every element (poor below {POOR_QUALITY})", figs)]


#: Element families that misbehave on every solver, with the figure measured by
#: ``modebridge verify --matrix`` (bridge/verify/cases, solid_cantilever: Blevins 1979 targets).
#: A solver plugin declares its own element notes in ``element_notes`` (family → text).
FAMILY_NOTES = {
    "tet4": ("linear tetrahedra (tet4) are stiff in bending: +8.7 % on the first bending pair of a solid "
             "cantilever at 2.5 mm (h/4), the same on CalculiX, Kratos and OpenSees (verify --matrix); "
             "use tet10"),
}


def element_notes(family: str, adapter=None) -> list[str]:
    """What is known to be wrong with ``family`` (on ``adapter``'s solver): warned at ``check`` and
    in every run."""
    out = [FAMILY_NOTES[family]] if family in FAMILY_NOTES else []
    note = (getattr(adapter, "element_notes", None) or {}).get(family) if adapter is not None else None
    if note:
        out.append(f"{getattr(adapter, 'name', 'solver')}: {note}")
    return out


def check_element_notes(ctx: CheckContext) -> list[Check]:
    if not ctx.element_notes:
        return []
    return [Check("element", "warn", " | ".join(ctx.element_notes), {"notes": list(ctx.element_notes)})]


def check_solver_warnings(ctx: CheckContext) -> list[Check]:
    if not ctx.warnings:
        return []
    uniq = list(dict.fromkeys(ctx.warnings))
    return [Check("solver_warnings", "warn", f"{len(uniq)} solver warning(s) or plugin note(s): " + " | ".join(uniq),
                  {"warnings": uniq})]


#: the checks every run gets, in order
CHECKS = [check_rigid_body_modes, check_mass, check_normalisation, check_mesh_quality, check_element_notes,
          check_excitation, check_solver_warnings]


def run_checks(model: Model, result: ModalResult, fixed: np.ndarray | None = None, *,
               constraint_rows: np.ndarray | None = None, model_mass: float | None = None,
               mesh: dict | None = None, warnings: list[str] | None = None,
               notes: list[str] | None = None) -> list[Check]:
    """Run :data:`CHECKS` on a result. ``fixed`` (n, 6) is the fixed-DOF array the result was
    computed with (without it a supported model's expected rigid-body count is unknown)."""
    if model_mass is None:
        model_mass = result.metadata.get("model_mass_kg")
    if mesh is None:
        mesh = result.metadata.get("mesh") or {}
    if warnings is None:
        warnings = (result.metadata.get("provenance") or {}).get("solver_warnings") or []
    if notes is None:
        notes = element_notes(model.mesh.family) if model.mesh is not None else []
    ctx = CheckContext(model, result, fixed, constraint_rows, model_mass, mesh, list(warnings), list(notes))
    out: list[Check] = []
    for fn in CHECKS:
        out.extend(fn(ctx))
    return out
