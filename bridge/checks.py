"""Checks reported with every run: rigid-body modes, mass, the 90 % rule, excitation bands."""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

from .model import Model
from .results import ModalResult

__all__ = ["Check", "rigid_body_count", "run_checks", "MASS_RULE"]

#: Cumulative effective mass per direction a response-spectrum analysis needs:
#: EN 1998-1 §4.3.3.3.1(3) and ASCE 7-16 §12.9.1.1 (90 % of the mass).
MASS_RULE = 0.90
#: A free body's effective-mass sum must equal its mass within this (common practice, no source).
MASS_TOLERANCE = 0.005
#: Mode normalisation against modebridge's own mass matrix (common practice, no source).
NORMALISATION_TOLERANCE = 0.10
_GAP = 1e3  #: a rigid-body mode lies at least this factor below the first elastic one
_ABS_EIG = 1e-2  #: (rad/s)^2: |λ| below this is rigid whatever the gap (f < 0.016 Hz)


@dataclass
class Check:
    name: str
    status: str  #: "ok", "warn" or "fail"
    message: str

    def as_dict(self) -> dict:
        return asdict(self)


def rigid_body_count(frequencies: np.ndarray, eigenvalues: np.ndarray) -> int:
    """Number of leading near-zero modes.

    A mode is rigid when |λ| < 1e-2 (rad/s)², or when it lies below the last
    gap of more than 1000× in the ascending frequency list (solvers return
    rigid modes as tiny, even negative, eigenvalues, far below the first
    elastic mode). Common practice, no source.
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


def run_checks(model: Model, result: ModalResult) -> list[Check]:
    out: list[Check] = []
    rigid = rigid_body_count(result.frequencies, result.eigenvalues)
    expected = 0 if model.grounded else 6  # supports or springs to the ground hold it
    if rigid == expected:
        msg = ("6 rigid-body modes, as a free body has" if expected else "no rigid-body mode: the supports hold the part")
        out.append(Check("rigid_body_modes", "ok", msg))
    elif expected == 0:
        out.append(Check("rigid_body_modes", "fail",
                         f"{rigid} near-zero mode(s) although the model has supports: a mechanism, "
                         "or a support that does not hold what it should"))
    else:
        out.append(Check("rigid_body_modes", "fail" if rigid < min(6, result.n_modes) else "warn",
                         f"{rigid} near-zero mode(s) where a free body has 6"
                         + ("" if result.n_modes > 6 else f" (only {result.n_modes} modes computed)")))

    frac = result.effective_mass_fraction()
    if frac is None:
        out.append(Check("effective_mass", "warn", "the solver reports no effective masses"))
    else:
        tot = result.total_effective_mass
        if tot is not None and np.isfinite(result.total_mass):
            ratio = tot[:3] / result.total_mass
            if not model.grounded:
                bad = np.abs(ratio - 1) > MASS_TOLERANCE
                status = "fail" if bad.any() else "ok"
                out.append(Check("mass_sum", status,
                                 "solver mass / model mass " + ", ".join(f"{d} {r:.4f}" for d, r in zip("xyz", ratio))
                                 + f" (free body: must be 1 within {MASS_TOLERANCE:.1%})"))
            else:
                status = "fail" if (ratio > 1 + MASS_TOLERANCE).any() else "ok"
                out.append(Check("mass_sum", status,
                                 "mass on free DOF / model mass " + ", ".join(f"{d} {r:.3f}" for d, r in zip("xyz", ratio))
                                 + " (the rest sits on supported nodes)"))
        cum = np.cumsum(frac, axis=0)
        parts = []
        worst = "ok"
        for j, d in enumerate("xyz"):
            if d not in model.analysis.mass_directions:
                continue
            hit = np.flatnonzero(cum[:, j] >= MASS_RULE)
            if hit.size:
                parts.append(f"{d}: {MASS_RULE:.0%} reached at mode {hit[0] + 1}")
            else:
                parts.append(f"{d}: {cum[-1, j]:.1%} after {result.n_modes} modes — more modes are needed "
                             f"(at least {MASS_RULE - cum[-1, j]:.1%} of the mass is still missing)")
                worst = "warn"
        out.append(Check("mass_rule_90", worst,
                         "; ".join(parts) + " (EN 1998-1 §4.3.3.3.1, ASCE 7-16 §12.9.1.1)"))

    mm = result.metadata.get("modal_mass")
    if mm:
        dev = float(np.max(np.abs(np.asarray(mm) - 1.0)))
        if dev > NORMALISATION_TOLERANCE:
            out.append(Check("mass_normalisation", "warn",
                             f"the solver's mode normalisation and modebridge's consistent mass differ by up to "
                             f"{dev:.1%} (φᵀMφ from {min(mm):.3f} to {max(mm):.3f}); effective masses use "
                             "m_eff = L²/φᵀMφ with modebridge's mass, so they stay valid"))
        else:
            out.append(Check("mass_normalisation", "ok",
                             f"φᵀMφ = 1 within {dev:.2%} with modebridge's consistent mass matrix"))

    elastic = result.frequencies[rigid:]
    for band in model.excitation:
        lo = band.low * (1 - band.margin)
        hi = band.high * (1 + band.margin)
        inside = [i + rigid + 1 for i, f in enumerate(elastic) if lo <= f <= hi]
        if inside:
            out.append(Check(f"excitation:{band.name}", "fail",
                             f"mode(s) {', '.join(map(str, inside))} inside {band.low:g}–{band.high:g} Hz "
                             f"widened by {band.margin:.0%} ({lo:.1f}–{hi:.1f} Hz)"))
        else:
            below = elastic[elastic < lo]
            above = elastic[elastic > hi]
            near = []
            if below.size:
                near.append(f"nearest below {below.max():.1f} Hz")
            if above.size:
                near.append(f"nearest above {above.min():.1f} Hz")
            top = result.frequencies[-1] if result.n_modes else 0.0
            status = "ok"
            note = ""
            total = result.metadata.get("system_modes")
            if top < hi and not (total is not None and result.n_modes >= total):
                status = "warn"
                note = f"; the highest computed mode ({top:.1f} Hz) is below the band's top: compute more modes"
            out.append(Check(f"excitation:{band.name}", status,
                             f"clear of {band.low:g}–{band.high:g} Hz ± {band.margin:.0%} ({', '.join(near)}){note}"))
    return out
