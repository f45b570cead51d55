"""Map mode shapes from one mesh onto the points of another with the element shape functions.

For each target point the containing source element is found (candidates from a k-d tree
of element centroids, natural coordinates by Newton / Gauss-Newton iteration), and the
source field is interpolated there with that element's own shape functions. A field the
source elements represent exactly (linear on linear elements, quadratic on quadratic ones)
is reproduced exactly. Shell (surface) elements project the target point onto the surface.
"""

from __future__ import annotations

import numpy as np
from scipy.spatial import cKDTree

from ..errors import BridgeError
from ..fem import shape_functions
from ..mesh import gmsh_order_from_vtk

__all__ = ["locate_points", "map_shapes", "MappingError", "FAMILY_OF_VTK"]

#: VTK cell type -> family (the neutral result stores VTK types and VTK node order)
FAMILY_OF_VTK = {5: "tri3", 22: "tri6", 9: "quad4", 23: "quad8", 10: "tet4", 24: "tet10",
                 12: "hex8", 25: "hex20"}


class MappingError(BridgeError):
    exit_code = 11


def _inside(family: str, xi: np.ndarray, tol: float) -> np.ndarray:
    if family[:3] in ("tri", "tet"):
        return (xi >= -tol).all(axis=-1) & (xi.sum(axis=-1) <= 1 + tol)
    return (np.abs(xi) <= 1 + tol).all(axis=-1)


def _clip(family: str, xi: np.ndarray) -> np.ndarray:
    if family[:3] in ("tri", "tet"):
        xi = np.clip(xi, 0.0, 1.0)
        s = xi.sum(axis=-1, keepdims=True)
        return np.where(s > 1, xi / np.maximum(s, 1.0), xi)
    return np.clip(xi, -1.0, 1.0)


def _centre(family: str, d: int) -> np.ndarray:
    return np.full(d, 1.0 / (d + 1)) if family[:3] in ("tri", "tet") else np.zeros(d)


def locate_points(points: np.ndarray, cells: np.ndarray, family: str, targets: np.ndarray,
                  k: int = 8, tol: float = 1e-6, max_distance: float | None = None,
                  chunk: int = 20000) -> tuple[np.ndarray, np.ndarray]:
    """For each target point: the index of its element and its natural coordinates.

    ``cells`` are in gmsh node order. Points outside every candidate element (beyond ``tol`` in
    natural coordinates, or farther than ``max_distance`` from a shell surface) raise MappingError.
    """
    d = 2 if family[:3] in ("tri", "qua") else 3
    X = points[cells]  # (ne, k, 3)
    centroids = X.mean(axis=1)
    size = np.linalg.norm(X.max(axis=1) - X.min(axis=1), axis=1)
    if max_distance is None:
        max_distance = 0.05 * float(np.median(size)) + 1e-12
    tree = cKDTree(centroids)
    kk = min(k, len(cells))
    out_e = np.empty(len(targets), dtype=np.int64)
    out_xi = np.empty((len(targets), d))
    for s in range(0, len(targets), chunk):
        T = targets[s:s + chunk]
        _, cand = tree.query(T, k=kk)
        cand = cand.reshape(len(T), kk)
        Xc = X[cand]  # (t, kk, nn, 3)
        xi = np.broadcast_to(_centre(family, d), (len(T), kk, d)).copy()
        for _ in range(12):
            N, dN = shape_functions(family, xi.reshape(-1, d))
            N = N.reshape(len(T), kk, -1)
            dN = dN.reshape(len(T), kk, -1, d)
            x = np.einsum("tcn,tcnx->tcx", N, Xc)
            J = np.einsum("tcnd,tcnx->tcxd", dN, Xc)  # (t, kk, 3, d)
            r = T[:, None, :] - x
            JtJ = np.einsum("tcxd,tcxe->tcde", J, J)
            Jtr = np.einsum("tcxd,tcx->tcd", J, r)
            try:
                step = np.linalg.solve(JtJ, Jtr[..., None])[..., 0]
            except np.linalg.LinAlgError:
                step = np.linalg.lstsq(JtJ.reshape(-1, d, d)[0], Jtr.reshape(-1, d)[0], rcond=None)[0]
            xi = xi + step
            xi = np.clip(xi, -3, 3)
            if np.abs(step).max() < 1e-13:
                break
        N, _ = shape_functions(family, _clip(family, xi).reshape(-1, d))
        x = np.einsum("tcn,tcnx->tcx", N.reshape(len(T), kk, -1), Xc)
        dist = np.linalg.norm(T[:, None, :] - x, axis=-1)
        ok = _inside(family, xi, tol) & (dist <= max_distance)
        # prefer an element that contains the point; among those the nearest
        score = np.where(ok, dist, np.inf)
        best = np.argmin(score, axis=1)
        rows = np.arange(len(T))
        found = np.isfinite(score[rows, best])
        if not found.all():
            bad = int(np.flatnonzero(~found)[0]) + s
            raise MappingError(f"point {bad} at {targets[bad].round(6).tolist()} m lies outside the other mesh: "
                               "the meshes do not cover the same part")
        out_e[s:s + chunk] = cand[rows, best]
        out_xi[s:s + chunk] = xi[rows, best]
    return out_e, out_xi


def map_shapes(src_points: np.ndarray, src_cells_vtk: np.ndarray, vtk_type: int, shapes: np.ndarray,
               targets: np.ndarray, **kw) -> np.ndarray:
    """Interpolate ``shapes`` (m, n_src, c) defined on a source mesh at ``targets`` (t, 3): (m, t, c)."""
    family = FAMILY_OF_VTK.get(int(vtk_type))
    if family is None:
        raise MappingError(f"cannot interpolate on VTK cell type {vtk_type}")
    cells = gmsh_order_from_vtk(family, src_cells_vtk)
    elem, xi = locate_points(src_points, cells, family, targets, **kw)
    d = xi.shape[1]
    N, _ = shape_functions(family, xi.reshape(-1, d))
    conn = cells[elem]  # (t, nn)
    return np.einsum("tn,mtnc->mtc", N, shapes[:, conn, :])
