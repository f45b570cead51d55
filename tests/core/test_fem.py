"""Shape functions, quadrature and the consistent mass matrix."""

from __future__ import annotations

import numpy as np
import pytest

from bridge.fem import element_nodes_natural, quadrature, scalar_mass_matrix, shape_functions

FAMILIES = ["tri3", "tri6", "quad4", "quad8", "tet4", "tet10", "hex8", "hex20"]


def _random_points(family, n=7, seed=0):
    rng = np.random.default_rng(seed)
    d = 2 if family[:3] in ("tri", "qua") else 3
    if family[:3] in ("tri", "tet"):
        x = rng.random((n, d))
        x = x / (1 + x.sum(axis=1, keepdims=True))  # inside the simplex
        return x
    return rng.uniform(-1, 1, (n, d))


@pytest.mark.parametrize("family", FAMILIES)
def test_kronecker_and_partition_of_unity(family):
    nat = element_nodes_natural(family)
    N, _ = shape_functions(family, nat)
    np.testing.assert_allclose(N, np.eye(len(nat)), atol=1e-14)  # interpolation property (definition)
    N, dN = shape_functions(family, _random_points(family))
    np.testing.assert_allclose(N.sum(axis=1), 1.0, atol=1e-14)  # partition of unity (definition)
    np.testing.assert_allclose(dN.sum(axis=1), 0.0, atol=1e-13)


@pytest.mark.parametrize("family", FAMILIES)
def test_derivatives_match_finite_differences(family):
    x = _random_points(family, 4, seed=1)
    _, dN = shape_functions(family, x)
    h = 1e-6
    for j in range(x.shape[1]):
        e = np.zeros(x.shape[1])
        e[j] = h
        Np, _ = shape_functions(family, x + e)
        Nm, _ = shape_functions(family, x - e)
        # central differences, error O(h²) (common practice, no source)
        np.testing.assert_allclose(dN[:, :, j], (Np - Nm) / (2 * h), atol=1e-7)


@pytest.mark.parametrize("family", FAMILIES)
def test_elements_reproduce_their_polynomials(family):
    """Linear fields on linear elements, quadratic fields on quadratic ones, exactly."""
    nat = element_nodes_natural(family)
    quadratic = family in ("tri6", "quad8", "tet10", "hex20")
    d = nat.shape[1]
    rng = np.random.default_rng(2)
    c = rng.normal(size=(d, d)) if quadratic else np.zeros((d, d))
    b = rng.normal(size=d)
    if family in ("quad8", "hex20"):
        c = np.diag(np.diag(c))  # serendipity spans x², y² (and z²) but not every cross term with them
        c = c + np.triu(rng.normal(size=(d, d)), 1)  # xy, xz, yz are spanned too

    def field(x):
        return 0.7 + x @ b + np.einsum("qi,ij,qj->q", x, c, x)

    x = _random_points(family, 9, seed=3)
    N, _ = shape_functions(family, x)
    np.testing.assert_allclose(N @ field(nat), field(x), atol=1e-12)


@pytest.mark.parametrize("family", FAMILIES)
def test_quadrature_integrates_degree_four(family):
    from bridge.fem import MASS_POINTS

    xi, w = quadrature(family, MASS_POINTS[family])
    d = xi.shape[1]
    if family[:3] in ("tri", "tet"):
        # ∫ over the unit simplex of x⁴ = 4! / (4 + d)! (Dirichlet integral, exact)
        import math
        exact = math.factorial(4) / math.factorial(4 + d)
        for j in range(d):
            assert (w * xi[:, j] ** 4).sum() == pytest.approx(exact, rel=1e-12)
        # ∫ x² y² = 2!·2!/(4 + d)! (Dirichlet integral, exact)
        assert (w * xi[:, 0] ** 2 * xi[:, 1] ** 2).sum() == pytest.approx(4 / math.factorial(4 + d), rel=1e-12)
        assert w.sum() == pytest.approx(1 / math.factorial(d), rel=1e-14)
    else:
        # ∫_{-1}^{1} x⁴ dx = 2/5, times 2^(d-1) for the other directions (exact)
        assert (w * xi[:, 0] ** 4).sum() == pytest.approx(2 / 5 * 2 ** (d - 1), rel=1e-12)


@pytest.mark.parametrize("family", FAMILIES)
def test_mass_matrix_sums_to_the_mass_on_a_distorted_element(family):
    nat = element_nodes_natural(family)
    d = nat.shape[1]
    # an affine map keeps straight-edged geometry exact: mass = ρ·|det A|·reference measure
    A = np.array([[2.0, 0.3, 0.1], [0.2, 1.5, -0.2], [0.1, 0.1, 0.8]])[:d, :d]
    pts = nat @ A.T
    pts3 = np.zeros((len(nat), 3))
    pts3[:, :d] = pts
    ref = {"tri": 0.5, "tet": 1 / 6, "qua": 4.0, "hex": 8.0}[family[:3]]
    rho = 7850.0
    M = scalar_mass_matrix(pts3, np.arange(len(nat))[None, :], family, rho, thickness=0.01 if d == 2 else None)
    expected = rho * abs(np.linalg.det(A)) * ref * (0.01 if d == 2 else 1.0)
    assert M.sum() == pytest.approx(expected, rel=1e-12)
    # symmetric and positive definite (consistent mass, common practice, no source)
    Md = M.toarray()
    np.testing.assert_allclose(Md, Md.T, atol=1e-15 * abs(Md).max())
    assert np.linalg.eigvalsh(Md).min() > 0
