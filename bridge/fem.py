"""Element shape functions, quadrature and the consistent mass matrix.

Used to compute participation factors and effective masses from any solver's
mass-normalised translations, independently of what the solver reports, and
(later) to interpolate mode shapes between meshes.

Node orders are gmsh's. Natural coordinates: simplices on the unit simplex,
quadrilaterals and hexahedra on [-1, 1]^d. Each family's nodes, shape functions and
quadrature come from its record in :mod:`bridge.elements`.
"""

from __future__ import annotations

import numpy as np

from .elements import FamilyView, get_family

__all__ = ["shape_functions", "quadrature", "scalar_mass_matrix", "element_nodes_natural"]


def element_nodes_natural(family: str) -> np.ndarray:
    """Natural coordinates of the element's nodes in gmsh order (from the registry)."""
    return get_family(family).reference_nodes.copy()


def _topology(family: str):
    """(corners, mid-edge corner pairs, quadratic) of a family, from the registry."""
    rec = get_family(family)
    return rec.reference_nodes[:rec.corners], list(rec.edges), rec.order == 2


def shape_functions(family: str, xi: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Values (q, k) and natural derivatives (q, k, d) of the shape functions at points ``xi`` (q, d)."""
    return get_family(family).shape_functions(np.atleast_2d(np.asarray(xi, float)))


def quadrature(family: str, n: int = 3) -> tuple[np.ndarray, np.ndarray]:
    """Gauss points (q, d) and weights (q,): ``n`` points per direction (the family's own rule).

    The built-in simplices use the collapsed (Duffy) product rule, exact for degree 2n - d; the
    mass matrix of the quadratic families needs degree 4: n = 3 on quadrilaterals, hexahedra and
    triangles, n = 4 on tetrahedra (:data:`MASS_POINTS`).
    """
    return get_family(family).quadrature(n)


#: Gauss points per direction that integrate N Nᵀ of each family exactly (derived from the registry)
MASS_POINTS = FamilyView(lambda f: f.mass_points)


def _jacobian_measure(points: np.ndarray, cells: np.ndarray, dN: np.ndarray) -> np.ndarray:
    """|det J| (volume elements) or |∂x/∂ξ × ∂x/∂η| (surface elements) at each Gauss point: (ne, q)."""
    X = points[cells]  # (ne, k, 3)
    J = np.einsum("ekc,qkd->eqcd", X, dN)  # (ne, q, 3, d)
    if J.shape[-1] == 3:
        return np.abs(np.linalg.det(J))
    if J.shape[-1] == 1:  # line elements: |dx/dξ|
        return np.linalg.norm(J[..., 0], axis=-1)
    return np.linalg.norm(np.cross(J[..., 0], J[..., 1]), axis=-1)


def scalar_mass_matrix(points: np.ndarray, cells: np.ndarray, family: str, density,
                       thickness=None) -> "scipy.sparse.csr_matrix":  # noqa: F821
    """Consistent scalar mass matrix ∫ ρ N Nᵀ dV (times thickness for shells), (n, n).

    ``density`` and ``thickness`` are one value, or one per element (several sections).
    The same matrix acts on each translation direction; a body's mass is its total sum.
    """
    xi, w = quadrature(family, get_family(family).mass_points)
    N, dN = shape_functions(family, xi)
    meas = _jacobian_measure(points, cells, dN) * w  # (ne, q)
    scale = np.asarray(density, float) * (np.asarray(thickness, float) if thickness is not None else 1.0)
    Me = np.einsum("eq,qa,qb->eab", meas, N, N)  # (ne, k, k)
    Me = Me * (scale[:, None, None] if scale.ndim == 1 else scale)
    k = cells.shape[1]
    rows = np.repeat(cells, k, axis=1).ravel()
    cols = np.tile(cells, (1, k)).ravel()
    n = points.shape[0]
    import scipy.sparse as sp  # here, not at import: scipy.sparse costs ~0.2 s of start-up

    return sp.csr_matrix((Me.ravel(), (rows, cols)), shape=(n, n))
