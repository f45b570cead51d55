"""The model at test points: each point placed on the model, the model's translations there
interpolated with the element's own shape functions (as ``compare`` maps between meshes) and
projected onto the sensor direction.

A test point is located in the element whose (clipped) natural-coordinate image lies nearest
to it: on a shell model this projects the point onto the mid-surface (a sensor glued on the
top face sits half a thickness away); on a solid model a point within the tolerance outside
the surface is taken at the nearest point of the nearest element. A point farther than
``max_distance`` from the model is *off the model*: it is named and left out.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.spatial import cKDTree

from ..compare.mapping import FAMILY_OF_VTK, _clip, _geometry_family, _solve_natural
from ..fem import _topology, shape_functions
from ..mesh import gmsh_order_from_vtk
from ..results import ModalResult
from .measured import TestDataError

__all__ = ["Located", "locate_on_model", "model_at", "surface_nodes", "node_normals", "element_size",
           "default_max_distance"]

#: |mean of the unit face normals at a node| below this: a sharp edge, no normal (cos 18°; common
#: practice, no source)
SHARP = 0.95
_TET_FACES = [(0, 1, 2), (0, 1, 3), (0, 2, 3), (1, 2, 3)]
_HEX_FACES = [(0, 1, 2, 3), (4, 5, 6, 7), (0, 1, 5, 4), (1, 2, 6, 5), (2, 3, 7, 6), (3, 0, 4, 7)]


def _family(result: ModalResult) -> str:
    fam = FAMILY_OF_VTK.get(int(result.cell_type))
    if fam is None:
        raise TestDataError(f"the model's cells (VTK type {result.cell_type}) cannot be interpolated")
    return fam


def _gmsh_cells(result: ModalResult) -> np.ndarray:
    return gmsh_order_from_vtk(_family(result), result.cells)


def element_size(result: ModalResult) -> float:
    """Median element size (diagonal of the element's bounding box), m."""
    X = result.points[result.cells]
    return float(np.median(np.linalg.norm(X.max(axis=1) - X.min(axis=1), axis=1)))


def default_max_distance(result: ModalResult) -> float:
    """Half the median element size: a sensor glued on a shell's face or a coordinate read off a
    drawing to a millimetre or so still lands on the model (common practice, no source)."""
    return 0.5 * element_size(result)


@dataclass
class Located:
    element: np.ndarray  #: (t,) element index (−1 when off the model)
    xi: np.ndarray  #: (t, d) natural coordinates (clipped into the element)
    distance: np.ndarray  #: (t,) m, from the point to its image on the model
    off: np.ndarray  #: (t,) bool, farther than the tolerance

    @property
    def on(self) -> np.ndarray:
        return ~self.off


def locate_on_model(result: ModalResult, targets: np.ndarray, max_distance: float | None = None,
                    k: int = 12) -> Located:
    family = _family(result)
    cells = _gmsh_cells(result)
    d = 2 if family[:3] in ("tri", "qua") else 3
    X = result.points[cells]
    gfam, Xg = _geometry_family(family, X)
    tree = cKDTree(Xg.mean(axis=1))
    targets = np.atleast_2d(np.asarray(targets, float))
    kk = min(k, len(cells))
    _, cand = tree.query(targets, k=kk)
    cand = np.asarray(cand).reshape(len(targets), kk)
    xi, dist = _solve_natural(gfam, Xg, cand, targets, d)
    best = np.argmin(dist, axis=1)
    rows = np.arange(len(targets))
    md = default_max_distance(result) if max_distance is None else float(max_distance)
    dd = dist[rows, best]
    return Located(cand[rows, best], _clip(gfam, xi[rows, best]), dd, dd > md)


def model_at(result: ModalResult, loc: Located, directions: np.ndarray | None = None,
             modes: np.ndarray | None = None) -> np.ndarray:
    """The model's translations at located points (m, t, 3), or along ``directions`` (m, t)."""
    family = _family(result)
    cells = _gmsh_cells(result)
    N, _ = shape_functions(family, loc.xi)
    conn = cells[loc.element]  # (t, nn)
    sh = result.shapes if modes is None else result.shapes[np.asarray(modes)]
    u = np.einsum("tn,mtnc->mtc", N, sh[:, conn, :])
    if directions is None:
        return u
    return np.einsum("mtc,tc->mt", u, np.asarray(directions, float))


def _faces(family: str, cells: np.ndarray) -> tuple[np.ndarray, list]:
    """Boundary faces (corner indices) of a solid mesh and their cycles."""
    faces = _TET_FACES if family.startswith("tet") else _HEX_FACES
    allf = np.concatenate([cells[:, list(f)] for f in faces])
    key = np.sort(allf, axis=1)
    _, inv, cnt = np.unique(key, axis=0, return_inverse=True, return_counts=True)
    return allf[cnt[inv.ravel()] == 1], faces


def surface_nodes(result: ModalResult) -> np.ndarray:
    """Indices of the nodes on the model's surface: every node of a shell model; the nodes of the
    boundary faces (corners and mid-edge nodes) of a solid one."""
    family = _family(result)
    if family[:3] in ("tri", "qua"):
        return np.arange(result.points.shape[0])
    cells = _gmsh_cells(result)
    bf, _ = _faces(family, cells)
    nodes = set(np.unique(bf).tolist())
    corners, edges, quadratic = _topology(family)
    if quadratic:
        nc = corners.shape[0]
        bedges = set()
        for f in bf:
            for i in range(len(f)):
                a, b = f[i], f[(i + 1) % len(f)]
                bedges.add((min(a, b), max(a, b)))
        for e, (a, b) in enumerate(edges):
            ca, cb = cells[:, a], cells[:, b]
            mid = cells[:, nc + e]
            for x, y, m in zip(ca, cb, mid):
                if (min(x, y), max(x, y)) in bedges:
                    nodes.add(int(m))
    return np.array(sorted(nodes), dtype=np.int64)


def node_normals(result: ModalResult) -> np.ndarray:
    """Unit surface normals at the nodes (n, 3); zero where a node is not on the surface or sits on
    a sharp edge. Shells: the area-weighted mean of the elements' normals around the node (their
    orientation as meshed); solids: of the boundary faces' (pointing away from the centroid)."""
    family = _family(result)
    cells = _gmsh_cells(result)
    P = result.points
    acc = np.zeros_like(P)
    uacc = np.zeros_like(P)
    cnt = np.zeros(P.shape[0])
    if family[:3] in ("tri", "qua"):
        c = cells
        if family.startswith("tri"):
            nrm = np.cross(P[c[:, 1]] - P[c[:, 0]], P[c[:, 2]] - P[c[:, 0]])
        else:
            nrm = np.cross(P[c[:, 2]] - P[c[:, 0]], P[c[:, 3]] - P[c[:, 1]])
        for j in range(c.shape[1]):
            np.add.at(acc, c[:, j], nrm)
            np.add.at(uacc, c[:, j], _unit(nrm))
            np.add.at(cnt, c[:, j], 1)
    else:
        faces = _TET_FACES if family.startswith("tet") else _HEX_FACES
        corners, edges, quadratic = _topology(family)
        nc = corners.shape[0]
        allf = np.concatenate([cells[:, list(f)] for f in faces])
        # each face's mid-edge nodes (quadratic elements), in the same row order
        mids = None
        if quadratic:
            emap = {frozenset(e): nc + k for k, e in enumerate(edges)}
            mids = np.concatenate([cells[:, [emap[frozenset((f[i], f[(i + 1) % len(f)]))] for i in range(len(f))]]
                                   for f in faces])
        key = np.sort(allf, axis=1)
        _, inv, times = np.unique(key, axis=0, return_inverse=True, return_counts=True)
        bmask = times[inv.ravel()] == 1
        bf = allf[bmask]
        if bf.shape[1] == 3:
            nrm = np.cross(P[bf[:, 1]] - P[bf[:, 0]], P[bf[:, 2]] - P[bf[:, 0]])
        else:
            nrm = np.cross(P[bf[:, 2]] - P[bf[:, 0]], P[bf[:, 3]] - P[bf[:, 1]])
        # orient each face normal away from the part's centre (for a sign only)
        cen = P.mean(axis=0)
        sgn = np.sign(np.einsum("ij,ij->i", nrm, P[bf].mean(axis=1) - cen))
        nrm = nrm * np.where(sgn == 0, 1, sgn)[:, None]
        nodes_of_face = bf if mids is None else np.hstack([bf, mids[bmask]])
        for j in range(nodes_of_face.shape[1]):
            np.add.at(acc, nodes_of_face[:, j], nrm)
            np.add.at(uacc, nodes_of_face[:, j], _unit(nrm))
            np.add.at(cnt, nodes_of_face[:, j], 1)
    # on a sharp edge or corner of the part (faces around the node more than ~18° apart) no one
    # normal exists: a sensor cannot sit there along one, so the node gets none
    spread = np.linalg.norm(uacc, axis=1) / np.maximum(cnt, 1)
    n = np.linalg.norm(acc, axis=1, keepdims=True)
    ok = (n[:, 0] > 0) & (spread >= SHARP)
    return np.where(ok[:, None], acc / np.where(n > 0, n, 1), 0.0)


def _unit(v: np.ndarray) -> np.ndarray:
    n = np.linalg.norm(v, axis=1, keepdims=True)
    return v / np.where(n > 0, n, 1)
