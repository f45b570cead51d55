"""Element shape functions, quadrature and the consistent mass matrix.

Used to compute participation factors and effective masses from any solver's
mass-normalised translations, independently of what the solver reports, and
(later) to interpolate mode shapes between meshes.

Node orders are gmsh's. Natural coordinates: simplices on the unit simplex,
quadrilaterals and hexahedra on [-1, 1]^d.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np
import scipy.sparse as sp

__all__ = ["shape_functions", "quadrature", "scalar_mass_matrix", "element_nodes_natural"]

_QUAD_CORNERS = np.array([[-1, -1], [1, -1], [1, 1], [-1, 1]], float)
_QUAD_EDGES = [(0, 1), (1, 2), (2, 3), (3, 0)]
_HEX_CORNERS = np.array([[-1, -1, -1], [1, -1, -1], [1, 1, -1], [-1, 1, -1],
                         [-1, -1, 1], [1, -1, 1], [1, 1, 1], [-1, 1, 1]], float)
_HEX_EDGES = [(0, 1), (0, 3), (0, 4), (1, 2), (1, 5), (2, 3), (2, 6), (3, 7), (4, 5), (4, 7), (5, 6), (6, 7)]
_TRI_EDGES = [(0, 1), (1, 2), (2, 0)]
_TET_EDGES = [(0, 1), (1, 2), (2, 0), (3, 0), (3, 2), (3, 1)]
_TRI_CORNERS = np.array([[0, 0], [1, 0], [0, 1]], float)
_TET_CORNERS = np.array([[0, 0, 0], [1, 0, 0], [0, 1, 0], [0, 0, 1]], float)


def element_nodes_natural(family: str) -> np.ndarray:
    """Natural coordinates of the element's nodes in gmsh order."""
    corners, edges, quadratic = _topology(family)
    if not quadratic:
        return corners.copy()
    mids = np.array([(corners[a] + corners[b]) / 2 for a, b in edges])
    return np.vstack([corners, mids])


def _topology(family: str):
    return {
        "tri3": (_TRI_CORNERS, _TRI_EDGES, False), "tri6": (_TRI_CORNERS, _TRI_EDGES, True),
        "quad4": (_QUAD_CORNERS, _QUAD_EDGES, False), "quad8": (_QUAD_CORNERS, _QUAD_EDGES, True),
        "tet4": (_TET_CORNERS, _TET_EDGES, False), "tet10": (_TET_CORNERS, _TET_EDGES, True),
        "hex8": (_HEX_CORNERS, _HEX_EDGES, False), "hex20": (_HEX_CORNERS, _HEX_EDGES, True),
    }[family]


def _barycentric(xi: np.ndarray) -> np.ndarray:
    return np.column_stack([1.0 - xi.sum(axis=1), xi])


def shape_functions(family: str, xi: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Values (q, k) and natural derivatives (q, k, d) of the shape functions at points ``xi`` (q, d)."""
    xi = np.atleast_2d(np.asarray(xi, float))
    corners, edges, quadratic = _topology(family)
    q, d = xi.shape
    if family[:3] in ("tri", "tet"):
        L = _barycentric(xi)  # (q, d+1)
        dL = np.vstack([-np.ones(d), np.eye(d)])  # (d+1, d)
        if not quadratic:
            return L, np.broadcast_to(dL, (q,) + dL.shape).copy()
        N = [L[:, i] * (2 * L[:, i] - 1) for i in range(d + 1)]
        dN = [np.outer(4 * L[:, i] - 1, dL[i]) for i in range(d + 1)]
        for a, b in edges:
            N.append(4 * L[:, a] * L[:, b])
            dN.append(4 * (np.outer(L[:, b], dL[a]) + np.outer(L[:, a], dL[b])))
        return np.column_stack(N), np.stack(dN, axis=1)
    # tensor-product families on [-1, 1]^d
    nat = element_nodes_natural(family)
    N = np.empty((q, nat.shape[0]))
    dN = np.empty((q, nat.shape[0], d))
    for k, c in enumerate(nat):
        lin = 1 + xi * c  # (q, d); for a mid-node the zero coordinate gives 1
        if not quadratic:
            N[:, k] = np.prod(lin, axis=1) / 2**d
            for j in range(d):
                others = np.prod(np.delete(lin, j, axis=1), axis=1)
                dN[:, k, j] = c[j] * others / 2**d
        elif np.all(c != 0):  # serendipity corner
            s = (xi * c).sum(axis=1) - (d - 1)
            p = np.prod(lin, axis=1)
            N[:, k] = p * s / 2**d
            for j in range(d):
                others = np.prod(np.delete(lin, j, axis=1), axis=1)
                dN[:, k, j] = (c[j] * others * s + p * c[j]) / 2**d
        else:  # serendipity mid-edge node: one natural coordinate is 0
            z = int(np.flatnonzero(c == 0)[0])
            bub = 1 - xi[:, z] ** 2
            rest = np.prod(np.delete(lin, z, axis=1), axis=1)
            N[:, k] = bub * rest / 2 ** (d - 1)
            for j in range(d):
                if j == z:
                    dN[:, k, j] = -2 * xi[:, z] * rest / 2 ** (d - 1)
                else:
                    oth = np.prod(np.delete(lin, [j, z], axis=1), axis=1)
                    dN[:, k, j] = bub * c[j] * oth / 2 ** (d - 1)
    return N, dN


@lru_cache(maxsize=None)
def quadrature(family: str, n: int = 3) -> tuple[np.ndarray, np.ndarray]:
    """Gauss points (q, d) and weights (q,): ``n`` points per direction.

    Simplices use the collapsed (Duffy) product rule; the collapse adds a factor
    (1 - u)^(d-1), so it is exact for degree 2n - d. The mass matrix of the quadratic
    families needs degree 4: n = 3 on quadrilaterals, hexahedra and triangles,
    n = 4 on tetrahedra (:data:`MASS_POINTS`).
    """
    g, w = np.polynomial.legendre.leggauss(n)
    u = (g + 1) / 2
    wu = w / 2
    if family[:4] in ("quad",):
        X, Y = np.meshgrid(g, g, indexing="ij")
        W = np.outer(w, w)
        return np.column_stack([X.ravel(), Y.ravel()]), W.ravel()
    if family[:3] == "hex":
        X, Y, Z = np.meshgrid(g, g, g, indexing="ij")
        W = np.einsum("i,j,k->ijk", w, w, w)
        return np.column_stack([X.ravel(), Y.ravel(), Z.ravel()]), W.ravel()
    if family[:3] == "tri":
        A, B = np.meshgrid(u, u, indexing="ij")
        WA, WB = np.meshgrid(wu, wu, indexing="ij")
        xi = A.ravel()
        eta = (B * (1 - A)).ravel()
        return np.column_stack([xi, eta]), (WA * WB * (1 - A)).ravel()
    A, B, C = np.meshgrid(u, u, u, indexing="ij")
    WA, WB, WC = np.meshgrid(wu, wu, wu, indexing="ij")
    xi = A
    eta = B * (1 - A)
    zeta = C * (1 - A) * (1 - B)
    wt = WA * WB * WC * (1 - A) ** 2 * (1 - B)
    return np.column_stack([xi.ravel(), eta.ravel(), zeta.ravel()]), wt.ravel()


#: Gauss points per direction that integrate N Nᵀ of each family exactly
MASS_POINTS = {"tri3": 3, "tri6": 3, "quad4": 3, "quad8": 3, "tet4": 4, "tet10": 4, "hex8": 3, "hex20": 3}


def _jacobian_measure(points: np.ndarray, cells: np.ndarray, dN: np.ndarray) -> np.ndarray:
    """|det J| (volume elements) or |∂x/∂ξ × ∂x/∂η| (surface elements) at each Gauss point: (ne, q)."""
    X = points[cells]  # (ne, k, 3)
    J = np.einsum("ekc,qkd->eqcd", X, dN)  # (ne, q, 3, d)
    if J.shape[-1] == 3:
        return np.abs(np.linalg.det(J))
    return np.linalg.norm(np.cross(J[..., 0], J[..., 1]), axis=-1)


def scalar_mass_matrix(points: np.ndarray, cells: np.ndarray, family: str, density,
                       thickness=None) -> sp.csr_matrix:
    """Consistent scalar mass matrix ∫ ρ N Nᵀ dV (times thickness for shells), (n, n).

    ``density`` and ``thickness`` are one value, or one per element (several sections).
    The same matrix acts on each translation direction; a body's mass is its total sum.
    """
    xi, w = quadrature(family, MASS_POINTS[family])
    N, dN = shape_functions(family, xi)
    meas = _jacobian_measure(points, cells, dN) * w  # (ne, q)
    scale = np.asarray(density, float) * (np.asarray(thickness, float) if thickness is not None else 1.0)
    Me = np.einsum("eq,qa,qb->eab", meas, N, N)  # (ne, k, k)
    Me = Me * (scale[:, None, None] if scale.ndim == 1 else scale)
    k = cells.shape[1]
    rows = np.repeat(cells, k, axis=1).ravel()
    cols = np.tile(cells, (1, k)).ravel()
    n = points.shape[0]
    return sp.csr_matrix((Me.ravel(), (rows, cols)), shape=(n, n))
