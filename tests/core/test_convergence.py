"""GCI and Richardson extrapolation against the NASA NPARC test vector."""

from __future__ import annotations

import numpy as np
import pytest

from bridge.compare.convergence import fitted_slope, gci


def test_nparc_verification_vector():
    # NASA Glenn NPARC Alliance, "Examining Spatial (Grid) Convergence", program verify
    # (NASA Glenn NPARC Alliance, Examining Spatial (Grid) Convergence): p = 1.786, f_ext = 0.971300, GCI12 = 0.1031 %, GCI23 = 0.3562 %,
    # asymptotic check 1.002 (the page prints its reciprocal 0.998)
    g = gci([1, 2, 4], [0.97050, 0.96854, 0.96178])
    assert g.p == pytest.approx(1.786, abs=5e-4)
    assert g.extrapolated == pytest.approx(0.971300, abs=5e-7)
    assert 100 * g.gci_fine == pytest.approx(0.1031, abs=5e-5)
    assert 100 * g.gci_coarse == pytest.approx(0.3562, abs=5e-5)
    assert g.asymptotic_ratio == pytest.approx(1.0 / 0.998, abs=2e-3)
    assert g.monotone and not g.from_above  # this sequence rises with refinement


def test_exact_power_law_is_recovered_with_non_constant_ratio():
    # f = f* + C h^p with p = 2 and r21 = 1.5, r32 = 1.8: the fixed point of Celik et al. (2008)
    # eq. 3 must return p exactly (constructed, exact)
    h = np.array([1.0, 1.5, 2.7])
    f = 100.0 + 3.0 * h**2
    g = gci(h, f, tolerance=0.2)
    assert g.p == pytest.approx(2.0, abs=1e-9)
    assert g.extrapolated == pytest.approx(100.0, abs=1e-9)
    assert g.from_above and g.verdict == "converged"  # asymptotic ratio 1 for an exact power law
    # for an exact power law GCI32 / (r21^p GCI21) = f1/f2 (the relative errors divide by f1 and f2)
    assert g.asymptotic_ratio == pytest.approx(f[0] / f[1], rel=1e-9)
    assert fitted_slope(h, f, 100.0) == pytest.approx(2.0, abs=1e-9)


@pytest.mark.parametrize("f, verdict", [
    ([100.0, 101.0, 99.0], "oscillatory"),   # differences change sign
    ([100.0, 103.0, 104.0], "diverging"),    # the fine-grid change exceeds the coarse one
])
def test_verdicts(f, verdict):
    g = gci([1, 2, 4], f)
    assert g.trend == verdict and g.verdict != "converged"


def test_monotone_sequence_with_growing_small_increments_is_converging():
    # 1358.50 → 1358.07 → 1356.87 Hz (coarse → fine, ratio 2): monotone, changes 0.03 % and
    # 0.09 %, well within a 1 % tolerance — not "diverging". The increments do not shrink, so no
    # order is observed: GCI with the assumed order 1 and Fs = 3 (Roache 1998) = 3·0.088 %/(2 − 1)
    from bridge.compare.convergence import gci_band

    g = gci([1.0, 2.0, 4.0], [1356.87, 1358.07, 1358.50], tolerance=0.01)
    assert g.trend == "monotone" and g.verdict == "converged"
    assert g.order_assumed and np.isfinite(g.gci_fine)
    assert g.gci_fine == pytest.approx(3 * (1358.07 - 1356.87) / 1356.87, rel=1e-9)
    # the band is centred on the fine-grid value (Celik et al. 2008), not on an extrapolation
    lo, hi = gci_band(g)
    assert 0.5 * (lo + hi) == pytest.approx(1356.87, abs=1e-9)
    # and on a case with an extrapolated value (NPARC vector above): still on f1, not f_ext
    g2 = gci([1, 2, 4], [0.97050, 0.96854, 0.96178])
    lo2, hi2 = gci_band(g2)
    assert 0.5 * (lo2 + hi2) == pytest.approx(0.97050, abs=1e-12)
    assert 0.5 * (lo2 + hi2) != pytest.approx(g2.extrapolated, abs=1e-6)


def test_gci_is_a_number_for_every_trend():
    # oscillatory and diverging sequences still print a GCI (never "-%"); constructed values
    for f in ([100.0, 101.0, 99.0], [100.0, 103.0, 104.0], [100.0, 100.0, 100.5]):
        assert np.isfinite(gci([1, 2, 4], f).gci_fine)
