"""Map mode shapes from one mesh onto the points of another with the element shape functions.

For each target point the containing source element is found (candidates from a k-d tree
of element centroids, natural coordinates by Newton / Gauss-Newton iteration), and the
source field is interpolated there with that element's own shape functions. A field the
source elements represent exactly (linear on linear elements, quadratic on quadratic ones)
is reproduced exactly. Shell (surface) elements project the target point onto the surface.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from scipy.spatial import cKDTree

from ..errors import BridgeError, ExitCode
from ..elements import FamilyView, family_of_vtk, get_family
from ..fem import shape_functions
from ..mesh import gmsh_order_from_vtk

__all__ = ["locate_points", "map_shapes", "MappingError", "FAMILY_OF_VTK"]

#: VTK cell type -> family (the neutral result stores VTK types and VTK node order); derived
#: from the registry (bridge/elements.py)
FAMILY_OF_VTK = FamilyView(lambda f: f.name, key=lambda f: f.vtk_type)


class MappingError(BridgeError):
    exit_code = ExitCode.MAPPING


def _inside(family: str, xi: np.ndarray, tol: float) -> np.ndarray:
    if get_family(family).simplex:
        return (xi >= -tol).all(axis=-1) & (xi.sum(axis=-1) <= 1 + tol)
    return (np.abs(xi) <= 1 + tol).all(axis=-1)


def _clip(family: str, xi: np.ndarray) -> np.ndarray:
    if get_family(family).simplex:
        xi = np.clip(xi, 0.0, 1.0)
        s = xi.sum(axis=-1, keepdims=True)
        return np.where(s > 1, xi / np.maximum(s, 1.0), xi)
    return np.clip(xi, -1.0, 1.0)


def _centre(family: str, d: int) -> np.ndarray:
    return np.full(d, 1.0 / (d + 1)) if get_family(family).simplex else np.zeros(d)


def _geometry_family(family: str, X: np.ndarray) -> tuple[str, np.ndarray]:
    """The family and nodes to invert the element map with: a quadratic element whose mid-edge
    nodes sit at their edge midpoints has the geometry of its linear counterpart (cheaper, and
    the natural coordinates are the same)."""
    rec = get_family(family)
    lin = rec.linear
    if lin is None or not rec.edges or rec.n_nodes != rec.corners + len(rec.edges):
        return family, X
    edges = rec.edges
    nc = rec.corners
    mids = np.stack([(X[:, a] + X[:, b]) / 2 for a, b in edges], axis=1)
    scale = np.abs(X).max() + 1e-300
    if np.abs(X[:, nc:] - mids).max() <= 1e-12 * scale:
        return lin, X[:, :nc]
    return family, X


def _solve_natural(gfam: str, Xg: np.ndarray, cand: np.ndarray, T: np.ndarray, d: int):
    """Natural coordinates of points T (t, 3) in candidate elements cand (t, c); distance to the image."""
    t, c = cand.shape
    Xc = Xg[cand]  # (t, c, nn, 3)
    xi = np.broadcast_to(_centre(gfam, d), (t, c, d)).copy()
    for _ in range(12):
        N, dN = shape_functions(gfam, xi.reshape(-1, d))
        N = N.reshape(t, c, -1)
        dN = dN.reshape(t, c, -1, d)
        x = np.einsum("tcn,tcnx->tcx", N, Xc)
        J = np.einsum("tcnd,tcnx->tcxd", dN, Xc)  # (t, c, 3, d)
        r = T[:, None, :] - x
        JtJ = np.einsum("tcxd,tcxe->tcde", J, J)
        Jtr = np.einsum("tcxd,tcx->tcd", J, r)
        # a tiny Tikhonov term: a degenerate candidate gets a small step instead of an error
        JtJ = JtJ + np.eye(d) * (1e-14 * np.trace(JtJ, axis1=-2, axis2=-1)[..., None, None] + 1e-300)
        step = np.linalg.solve(JtJ, Jtr[..., None])[..., 0]
        xi = np.clip(xi + step, -3, 3)
        if np.abs(step).max() < 1e-10:  # natural coordinates: round-off keeps steps near 1e-13
            break
    N, _ = shape_functions(gfam, _clip(gfam, xi).reshape(-1, d))
    x = np.einsum("tcn,tcnx->tcx", N.reshape(t, c, -1), Xc)
    return xi, np.linalg.norm(T[:, None, :] - x, axis=-1)


def locate_points(points: np.ndarray, cells: np.ndarray, family: str, targets: np.ndarray,
                  k: int = 8, tol: float = 1e-6, max_distance: float | None = None,
                  chunk: int = 50000) -> tuple[np.ndarray, np.ndarray]:
    """For each target point: the index of its element and its natural coordinates.

    ``cells`` are in gmsh node order. The element whose centroid is nearest is tried first;
    points it does not contain try the ``k`` nearest. Points outside every candidate (beyond
    ``tol`` in natural coordinates, or farther than ``max_distance`` from a shell surface)
    raise MappingError.
    """
    d = get_family(family).dim
    X = points[cells]  # (ne, k, 3)
    gfam, Xg = _geometry_family(family, X)
    centroids = Xg.mean(axis=1)
    size = np.linalg.norm(Xg.max(axis=1) - Xg.min(axis=1), axis=1)
    if max_distance is None:
        max_distance = 0.05 * float(np.median(size)) + 1e-12
    tree = cKDTree(centroids)
    kk = min(k, len(cells))
    out_e = np.empty(len(targets), dtype=np.int64)
    out_xi = np.empty((len(targets), d))
    for s in range(0, len(targets), chunk):
        T = targets[s:s + chunk]
        _, near = tree.query(T, k=1)
        near = np.asarray(near).reshape(len(T), 1)
        xi, dist = _solve_natural(gfam, Xg, near, T, d)
        ok = _inside(gfam, xi, tol)[:, 0] & (dist[:, 0] <= max_distance)
        out_e[s:s + chunk][ok] = near[ok, 0]
        out_xi[s:s + chunk][ok] = xi[ok, 0]
        miss = np.flatnonzero(~ok)
        if miss.size and kk > 1:
            _, cand = tree.query(T[miss], k=kk)
            cand = cand.reshape(miss.size, kk)
            xi2, dist2 = _solve_natural(gfam, Xg, cand, T[miss], d)
            good = _inside(gfam, xi2, tol) & (dist2 <= max_distance)
            score = np.where(good, dist2, np.inf)  # among the containing elements, the nearest
            best = np.argmin(score, axis=1)
            rows = np.arange(miss.size)
            found = np.isfinite(score[rows, best])
            if not found.all():
                bad = int(miss[np.flatnonzero(~found)[0]]) + s
                raise MappingError(f"point {bad} at {targets[bad].round(6).tolist()} m lies outside the other "
                                   "mesh: the meshes do not cover the same part")
            out_e[s + miss] = cand[rows, best]
            out_xi[s + miss] = xi2[rows, best]
        elif miss.size:
            bad = int(miss[0]) + s
            raise MappingError(f"point {bad} at {targets[bad].round(6).tolist()} m lies outside the other mesh: "
                               "the meshes do not cover the same part")
    return out_e, out_xi


def map_shapes(src_points: np.ndarray, src_cells_vtk: np.ndarray, vtk_type: int, shapes: np.ndarray,
               targets: np.ndarray, **kw) -> np.ndarray:
    """Interpolate ``shapes`` (m, n_src, c) defined on a source mesh at ``targets`` (t, 3): (m, t, c)."""
    rec = family_of_vtk(int(vtk_type))
    if rec is None:
        raise MappingError(f"cannot interpolate on VTK cell type {vtk_type}")
    family = rec.name
    cells = gmsh_order_from_vtk(family, src_cells_vtk)
    elem, xi = locate_points(src_points, cells, family, targets, **kw)
    d = xi.shape[1]
    N, _ = shape_functions(family, xi.reshape(-1, d))
    conn = cells[elem]  # (t, nn)
    # the interpolation as a sparse (t, n_src) matrix applied to all modes and components at once
    t, nn = conn.shape
    P = sp.csr_matrix((N.ravel(), (np.repeat(np.arange(t), nn), conn.ravel())), shape=(t, src_points.shape[0]))
    m, n, c = shapes.shape
    flat = np.ascontiguousarray(np.moveaxis(shapes, 0, 1).reshape(n, m * c))
    return np.ascontiguousarray(np.moveaxis((P @ flat).reshape(t, m, c), 1, 0))
