"""GCI and Richardson extrapolation against the NASA NPARC test vector."""

from __future__ import annotations

import numpy as np
import pytest

from bridge.compare.convergence import fitted_slope, gci


def test_nparc_verification_vector():
    # NASA Glenn NPARC Alliance, "Examining Spatial (Grid) Convergence", program verify
    # (shared/references.md): p = 1.786, f_ext = 0.971300, GCI12 = 0.1031 %, GCI23 = 0.3562 %,
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
    assert gci([1, 2, 4], f).verdict == verdict
