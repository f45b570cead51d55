"""Discretisation error: observed order, Richardson extrapolation and the Grid Convergence Index.

Celik, Ghia, Roache et al., "Procedure for Estimation and Reporting of Uncertainty Due to
Discretization in CFD Applications", J. Fluids Eng. 130(7) 078001 (2008); Roache, J. Fluids
Eng. 116 (1994) 405-413; ASME V&V 20-2009.

Grid 1 is the finest, h a representative element size, r21 = h2/h1, r32 = h3/h2.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np

__all__ = ["GciResult", "gci", "gci_two", "fitted_slope", "FS_THREE_GRIDS", "FS_TWO_GRIDS", "ASSUMED_ORDER", "gci_band"]

FS_THREE_GRIDS = 1.25  #: safety factor with three or more grids (Celik et al. 2008)
FS_TWO_GRIDS = 3.0  #: with two grids
ASYMPTOTIC_BAND = 0.1  #: |GCI32 / (r21^p GCI21) − 1| within this: in the asymptotic range (common practice)


#: where no order can be observed (increments not shrinking, or two grids only) the GCI uses an
#: assumed order 1 — the slowest any element converges, so the band is conservative — with
#: Fs = 3 (Roache, Verification and Validation in Computational Science and Engineering, 1998)
ASSUMED_ORDER = 1.0


@dataclass
class GciResult:
    f: tuple[float, ...]  #: values on grids 1 (fine), 2, 3
    h: tuple[float, ...]
    p: float  #: observed order (nan when it cannot be observed)
    extrapolated: float  #: Richardson-extrapolated value (nan when it cannot be formed)
    e21: float  #: |(f1 − f2)/f1|
    gci_fine: float  #: GCI21, a fraction (not %); always a number
    gci_coarse: float  #: GCI32 (nan when not formed)
    asymptotic_ratio: float  #: GCI32 / (r21^p GCI21); ≈ 1 in the asymptotic range
    monotone: bool
    verdict: str  #: converged | not converged | diverging
    from_above: bool  #: the sequence decreases with refinement
    trend: str = "monotone"  #: monotone | oscillatory | diverging
    order_assumed: bool = False  #: the GCI used ASSUMED_ORDER and Fs = 3 (no observed order)
    note: str = ""

    def as_dict(self) -> dict:
        return asdict(self)


def _order(e21: float, e32: float, r21: float, r32: float) -> float:
    """Fixed-point iteration p = |ln|e32/e21| + q(p)| / ln r21 (Celik et al. 2008, eq. 3)."""
    s = math.copysign(1.0, e32 / e21)
    p = abs(math.log(abs(e32 / e21))) / math.log(r21)
    for _ in range(200):
        q = math.log((r21**p - s) / (r32**p - s)) if abs(r21 - r32) > 1e-12 else 0.0
        p_new = abs(math.log(abs(e32 / e21)) + q) / math.log(r21)
        if abs(p_new - p) < 1e-12:
            return p_new
        p = p_new
    return p


def _assumed_gci(ea21: float, r21: float) -> float:
    return FS_TWO_GRIDS * ea21 / (r21**ASSUMED_ORDER - 1)


def gci_two(h, f, tolerance: float = 0.01) -> GciResult:
    """Two grids only: the GCI with the assumed order and Fs = 3; the behaviour cannot be told,
    so the verdict is never "converged"."""
    order = np.argsort(np.asarray(h, float))[:2]
    h1, h2 = (float(np.asarray(h)[i]) for i in order)
    f1, f2 = (float(np.asarray(f)[i]) for i in order)
    ea21 = abs((f1 - f2) / f1)
    g = _assumed_gci(ea21, h2 / h1)
    return GciResult((f1, f2), (h1, h2), float("nan"), float("nan"), ea21, g, float("nan"), float("nan"),
                     True, "not converged", f1 < f2, "monotone", True,
                     "followed on two levels only: its behaviour cannot be told")


def gci(h, f, tolerance: float = 0.01, fs: float = FS_THREE_GRIDS) -> GciResult:
    """GCI of the three finest of a sequence; ``h`` and ``f`` in any order (sorted by h here).

    Trend and verdict (R = e21/e32 with e21 = f2 − f1, e32 = f3 − f2; Stern et al., J. Fluids
    Eng. 123 (2001) 793, for the classification):

    * 0 < R < 1, monotone convergence: observed order p, Richardson extrapolation and GCI21
      (Celik et al. 2008). Outside the asymptotic range the larger of that and the assumed-order
      GCI is reported.
    * R < 0, oscillatory: the GCI is Fs × half the spread of the three values over f1.
    * R ≥ 1, the increments do not shrink: no order can be observed. When the finest change is
      itself within the tolerance, the sequence is monotone and settling (e.g. 1358.50 →
      1358.07 → 1356.87 Hz, changes of 0.03 % and 0.09 %) and the GCI uses the assumed order;
      when it is above the tolerance, the trend is "diverging".
    * An oscillation whose amplitude grows beyond the tolerance is "diverging" too.

    The verdict is "converged" when GCI21 ≤ tolerance, "diverging" for a diverging trend, else
    "not converged".
    """
    order = np.argsort(np.asarray(h, float))[:3]
    h1, h2, h3 = (float(np.asarray(h)[i]) for i in order)
    f1, f2, f3 = (float(np.asarray(f)[i]) for i in order)
    r21, r32 = h2 / h1, h3 / h2
    e21, e32 = f2 - f1, f3 - f2
    from_above = f1 < f2 < f3
    nan = float("nan")
    if e21 == 0.0 and e32 == 0.0:
        return GciResult((f1, f2, f3), (h1, h2, h3), nan, f1, 0.0, 0.0, 0.0, 1.0, True, "converged", False)
    ea21 = abs(e21 / f1)
    if e21 == 0.0 or e32 == 0.0 or e32 / e21 < 0:
        # oscillatory: no order; the spread is the uncertainty (Celik et al. 2008, remark)
        spread = (max(f1, f2, f3) - min(f1, f2, f3)) / abs(f1) / 2
        g = fs * spread
        growing = abs(e21) > abs(e32) and ea21 > tolerance
        trend = "diverging" if growing else "oscillatory"
        verdict = "diverging" if growing else ("converged" if g <= tolerance else "not converged")
        return GciResult((f1, f2, f3), (h1, h2, h3), nan, nan, ea21, g, nan, nan,
                         False, verdict, False, trend, False, "oscillatory: GCI from the spread of the three values")
    ratio = e21 / e32  # > 0: same sign
    if ratio >= 1:  # the change does not shrink with refinement: no order can be observed
        g = _assumed_gci(ea21, r21)
        if ea21 > tolerance:
            return GciResult((f1, f2, f3), (h1, h2, h3), nan, nan, ea21, g, nan, nan, True, "diverging",
                             from_above, "diverging", True,
                             f"the change grows with refinement ({100 * ea21:.3g} % on the finest step)")
        return GciResult((f1, f2, f3), (h1, h2, h3), nan, nan, ea21, g, nan, nan, True,
                         "converged" if g <= tolerance else "not converged", from_above, "monotone", True,
                         f"increments not yet shrinking, the finest change {100 * ea21:.3g} % is within the "
                         f"tolerance: GCI with assumed order {ASSUMED_ORDER:g} and Fs = {FS_TWO_GRIDS:g}")
    p = _order(e21, e32, r21, r32)
    f_ext = (r21**p * f1 - f2) / (r21**p - 1)
    ea32 = abs((f2 - f3) / f2)
    g21 = fs * ea21 / (r21**p - 1)
    g32 = fs * ea32 / (r32**p - 1)
    asym = g32 / (r21**p * g21) if g21 > 0 else nan
    note = ""
    assumed = False
    if not abs(asym - 1) <= ASYMPTOTIC_BAND:
        ga = _assumed_gci(ea21, r21)
        if ga > g21:
            g21, assumed = ga, True
        note = (f"not yet in the asymptotic range (ratio {asym:.3f}): the larger of the Celik GCI and the "
                f"assumed-order one (p = {ASSUMED_ORDER:g}, Fs = {FS_TWO_GRIDS:g})")
    verdict = "converged" if g21 <= tolerance else "not converged"
    return GciResult((f1, f2, f3), (h1, h2, h3), p, f_ext, ea21, g21, g32, asym, True, verdict, from_above,
                     "monotone", assumed, note)


def gci_band(g: GciResult) -> tuple[float, float]:
    """The uncertainty band the GCI puts on the fine-grid value: f1 ± GCI21·|f1| (Celik et al.
    2008: the GCI is an error band on the fine-grid solution, not on the extrapolated one)."""
    f1 = g.f[0]
    half = g.gci_fine * abs(f1)
    return f1 - half, f1 + half


def fitted_slope(h, f, f_ref: float) -> float:
    """Slope of log|f − f_ref| against log h over all levels (np.polyfit): the observed rate."""
    h = np.asarray(h, float)
    err = np.abs(np.asarray(f, float) - f_ref)
    ok = err > 0
    if ok.sum() < 2:
        return float("nan")
    return float(np.polyfit(np.log(h[ok]), np.log(err[ok]), 1)[0])
