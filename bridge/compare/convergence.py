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

__all__ = ["GciResult", "gci", "fitted_slope", "FS_THREE_GRIDS", "FS_TWO_GRIDS"]

FS_THREE_GRIDS = 1.25  #: safety factor with three or more grids (Celik et al. 2008)
FS_TWO_GRIDS = 3.0  #: with two grids
ASYMPTOTIC_BAND = 0.1  #: |GCI32 / (r21^p GCI21) − 1| within this: in the asymptotic range (common practice)


@dataclass
class GciResult:
    f: tuple[float, float, float]  #: values on grids 1 (fine), 2, 3
    h: tuple[float, float, float]
    p: float  #: observed order (nan when oscillatory)
    extrapolated: float  #: Richardson-extrapolated value (nan when it cannot be formed)
    e21: float  #: |(f1 − f2)/f1|
    gci_fine: float  #: GCI21, a fraction (not %)
    gci_coarse: float  #: GCI32
    asymptotic_ratio: float  #: GCI32 / (r21^p GCI21); ≈ 1 in the asymptotic range
    monotone: bool
    verdict: str  #: converged | not converged | not yet asymptotic | oscillatory | diverging
    from_above: bool  #: the sequence decreases with refinement

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


def gci(h, f, tolerance: float = 0.01, fs: float = FS_THREE_GRIDS) -> GciResult:
    """GCI of the three finest of a sequence; ``h`` and ``f`` in any order (sorted by h here)."""
    order = np.argsort(np.asarray(h, float))[:3]
    h1, h2, h3 = (float(np.asarray(h)[i]) for i in order)
    f1, f2, f3 = (float(np.asarray(f)[i]) for i in order)
    r21, r32 = h2 / h1, h3 / h2
    e21, e32 = f2 - f1, f3 - f2
    from_above = f1 < f2 < f3
    nan = float("nan")
    if e21 == 0.0 and e32 == 0.0:
        return GciResult((f1, f2, f3), (h1, h2, h3), nan, f1, 0.0, 0.0, 0.0, 1.0, True, "converged", False)
    if e21 == 0.0 or e32 == 0.0 or e32 / e21 < 0:
        # oscillatory: no order; report the spread as the uncertainty (Celik et al. 2008, remark)
        spread = (max(f1, f2, f3) - min(f1, f2, f3)) / abs(f1) / 2
        return GciResult((f1, f2, f3), (h1, h2, h3), nan, nan, abs(e21 / f1), fs * spread, nan, nan,
                         False, "oscillatory", False)
    ratio = e21 / e32  # 0 < ratio: same sign
    if abs(ratio) >= 1:  # the change does not shrink with refinement: no order can be formed
        return GciResult((f1, f2, f3), (h1, h2, h3), nan, nan, abs(e21 / f1), nan, nan, nan,
                         True, "diverging", from_above)
    p = _order(e21, e32, r21, r32)
    f_ext = (r21**p * f1 - f2) / (r21**p - 1)
    ea21 = abs((f1 - f2) / f1)
    ea32 = abs((f2 - f3) / f2)
    g21 = fs * ea21 / (r21**p - 1)
    g32 = fs * ea32 / (r32**p - 1)
    asym = g32 / (r21**p * g21) if g21 > 0 else nan
    if abs(asym - 1) > ASYMPTOTIC_BAND:
        verdict = "not yet asymptotic"
    elif g21 <= tolerance:
        verdict = "converged"
    else:
        verdict = "not converged"
    return GciResult((f1, f2, f3), (h1, h2, h3), p, f_ext, ea21, g21, g32, asym, True, verdict, from_above)


def fitted_slope(h, f, f_ref: float) -> float:
    """Slope of log|f − f_ref| against log h over all levels (np.polyfit): the observed rate."""
    h = np.asarray(h, float)
    err = np.abs(np.asarray(f, float) - f_ref)
    ok = err > 0
    if ok.sum() < 2:
        return float("nan")
    return float(np.polyfit(np.log(h[ok]), np.log(err[ok]), 1)[0])
