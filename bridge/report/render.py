"""Pictures and animations of mode shapes (pyvista, offscreen).

The only module of modebridge that imports pyvista. It sets the offscreen
environment before the import: without an offscreen OpenGL library (Debian
``libegl1``) and ``VTK_DEFAULT_OPENGL_WINDOW=vtkEGLRenderWindow`` VTK tries to
open a display and may crash the process (observed with VTK 9 on headless Debian machines).

Each mode is drawn as its deformed shape, coloured by the displacement magnitude
relative to the mode's largest, with the deformed element edges, over the
outline of the undeformed part (a dark line). The deformation is scaled so that
the largest displacement is :data:`DEFORMATION` of the part's largest dimension.
Plates (and thin solids) are seen obliquely from above their mid-plane, so that
out-of-plane shapes show; bulky solids in an isometric-like view with z up.
Parallel projection: the same size reads the same everywhere in the picture.
"""

from __future__ import annotations

import io
import os
from dataclasses import dataclass

import numpy as np

from ..elements import FamilyView, family_of_vtk

__all__ = ["ModeImages", "render_modes", "render_model", "DEFORMATION", "FRAMES", "view_of", "RENDER_VERSION"]

os.environ.setdefault("VTK_DEFAULT_OPENGL_WINDOW", "vtkEGLRenderWindow")
os.environ.setdefault("PYVISTA_OFF_SCREEN", "true")

#: largest displacement drawn as this fraction of the part's largest dimension
#: (a readable exaggeration; common practice, no source)
DEFORMATION = 0.10
#: frames per animation cycle (the shape scaled by sin(2πk/FRAMES))
FRAMES = 12
#: a part whose smallest dimension is below this fraction of its middle one is viewed as a plate
_THIN = 0.2
#: faces drawn per mode, about (quadratic faces are subdivided up to this): software GL is the
#: bottleneck (about 0.01 s per 10 000 faces and frame here)
_FACES = 10_000
#: element edges are drawn only up to this many (denser meshes would turn the picture dark)
_MAX_EDGES = 6_000
_BACKGROUND = "#fbfcfd"
_INK = "#1f2933"
#: sequential colour map: pale where the part stands still, deep blue where it moves most
_CMAP = "YlGnBu"
#: colours of the one palette every frame of an animation shares (light: a GIF of 40-50 kB)
_GIF_COLOURS = 48
#: bump when the drawing changes: reports keep renders by result hash and this version
RENDER_VERSION = 3

# VTK node order: (corner, corner, mid-side node) of each edge of the quadratic cells, and the
# VTK types of surface (shell) cells; both derived from the registry (bridge/elements.py)
_QUADRATIC_EDGES = FamilyView(lambda f: f.vtk_edges(), key=lambda f: f.vtk_type, where=lambda f: bool(f.vtk_edges()))
_SHELL_TYPES = FamilyView(lambda f: f.name, key=lambda f: f.vtk_type, where=lambda f: f.dim == 2)


@dataclass
class ModeImages:
    mode: int  #: 1-based
    picture: bytes  #: PNG, the deformed shape at full amplitude with a colour bar
    animation: bytes  #: animated GIF of FRAMES frames (±sin scaling), looping


def _pyvista():
    import pyvista as pv

    pv.OFF_SCREEN = True
    return pv


def _axes(points: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, bool]:
    """Axes of the part (e1 longest in-plane, e2, n the thinnest) and whether it is thin."""
    centred = points - points.mean(axis=0)
    n = np.array([0.0, 0.0, 1.0])
    vecs = np.eye(3)
    if points.shape[0] >= 3:
        _, vecs = np.linalg.eigh(centred.T @ centred)
        n = vecs[:, 0]
    k = int(np.argmax(np.abs(n)))
    ext = np.ptp(points, axis=0)
    if abs(n[k]) > 0.99:  # snap to a global axis: a square plate has no preferred in-plane axis
        n = np.eye(3)[k]
        rest = [i for i in range(3) if i != k]
        e1 = np.eye(3)[max(rest, key=lambda i: (ext[i], -i))]
    else:
        n = n * np.sign(n[k])
        e1 = vecs[:, 2] * np.sign(vecs[int(np.argmax(np.abs(vecs[:, 2]))), 2])
    e2 = np.cross(n, e1)
    size = np.ptp(centred @ np.column_stack([e1, e2, n]), axis=0)
    # a plate has two large dimensions and a small one; a beam (two small ones) is a bulky solid here
    return e1, e2, n, bool(size[2] <= _THIN * max(min(size[0], size[1]), 1e-300))


def view_of(points: np.ndarray) -> tuple[np.ndarray, np.ndarray, bool]:
    """Unit direction from the part towards the camera, the view-up vector, and whether the
    part is viewed as a plate."""
    e1, e2, n, thin = _axes(np.asarray(points, float))
    if thin:  # from the front (−e2), a little from the left, about 25° above the mid-plane
        d = -0.3 * e1 - 1.0 * e2 + 0.5 * n
        return d / np.linalg.norm(d), n, True
    d = np.array([-0.8, -1.0, 0.75])  # bulky solids: isometric-like, z up
    return d / np.linalg.norm(d), np.array([0.0, 0.0, 1.0]), False


def _subdivision(n_faces: int, cell_type: int) -> int:
    """Subdivision levels of quadratic faces (each level splits a face in 4), at most 3."""
    if cell_type not in _QUADRATIC_EDGES or n_faces == 0:
        return 0
    return int(np.clip(np.floor(np.log(_FACES / n_faces) / np.log(4.0)), 0, 3))


def _edges(surface_faces: list[np.ndarray], cells: np.ndarray, cell_type: int
           ) -> tuple[np.ndarray, np.ndarray]:
    """Element edges on the surface as polylines through the original nodes (with mid-side
    nodes for quadratic cells), and which of them lie on the boundary (used by one face)."""
    pairs = []
    for face in surface_faces:
        pairs.append(np.column_stack([face, np.roll(face, -1, axis=1)]).reshape(-1, 2))
    if not pairs:
        return np.zeros((0, 2), np.int64), np.zeros(0, bool)
    allp = np.sort(np.vstack(pairs), axis=1)
    uniq, count = np.unique(allp, axis=0, return_counts=True)
    table = _QUADRATIC_EDGES.get(cell_type)
    if table is None:
        return uniq, count == 1
    n = int(cells.max()) + 1
    keys, mids = [], []
    for a, b, m in table:
        lo = np.minimum(cells[:, a], cells[:, b])
        hi = np.maximum(cells[:, a], cells[:, b])
        keys.append(lo * n + hi)
        mids.append(cells[:, m])
    keys_a, mids_a = np.concatenate(keys), np.concatenate(mids)
    order = np.argsort(keys_a)
    keys_a, mids_a = keys_a[order], mids_a[order]
    want = uniq[:, 0] * n + uniq[:, 1]
    pos = np.clip(np.searchsorted(keys_a, want), 0, len(keys_a) - 1)
    found = keys_a[pos] == want
    mid = np.where(found, mids_a[pos], -1)
    lines = np.column_stack([uniq[:, 0], mid, uniq[:, 1]])
    return lines, count == 1


class _Lines:
    """Polylines along element edges, each point a weighted sum of mesh nodes: a quadratic edge
    (corner, mid-side node, corner) is sampled with its own shape functions, so the line lies on
    the drawn (subdivided) surface however the mesh deforms."""

    def __init__(self, pv, points: np.ndarray, lines: np.ndarray, samples: int):
        if lines.shape[1] == 3 and (lines[:, 1] < 0).any():  # a mid-side node not found: chords
            lines = lines[:, [0, 2]]
        if lines.shape[1] == 3:
            k = max(int(samples), 3)
            t = np.linspace(-1.0, 1.0, k)
            w = np.column_stack([0.5 * t * (t - 1.0), 1.0 - t * t, 0.5 * t * (t + 1.0)])  # (k, 3)
            idx = np.repeat(lines[:, None, :], k, axis=1).reshape(-1, 3)
            wts = np.tile(w, (len(lines), 1))
        else:
            k = 2
            idx = lines.reshape(-1, 1)
            wts = np.ones((idx.shape[0], 1))
        self.idx, self.wts = idx, wts
        n = len(lines)
        conn = np.hstack([np.full((n, 1), k), np.arange(n * k).reshape(n, k)]).ravel()
        self.poly = pv.PolyData(self.at(points), lines=conn)

    def at(self, node_values: np.ndarray) -> np.ndarray:
        return np.einsum("lk,lkd->ld", self.wts, node_values[self.idx])

    def pose(self, points: np.ndarray, phi: np.ndarray, factor: float) -> None:
        self.poly.points = self.at(points + factor * phi)
        self.poly.Modified()


def _png(img: np.ndarray, size: tuple[int, int] | None = None) -> bytes:
    """PNG with a 256-colour palette (fast octree): a quarter of the true-colour file (measured on
    the demo's pictures: 25 kB against 99 kB), mean error 1.7 levels of 255, 25 ms per picture
    (median cut: 1.5 s for an error of 0.9)."""
    from PIL import Image

    im = Image.fromarray(img)
    if size is not None and im.size != tuple(size):
        im = im.resize(tuple(size), Image.Resampling.LANCZOS)
    im = im.convert("RGB").quantize(colors=256, method=Image.Quantize.FASTOCTREE, dither=Image.Dither.NONE)
    buf = io.BytesIO()
    im.save(buf, format="PNG", optimize=True)
    return buf.getvalue()


def _gif(frames: list[np.ndarray], duration_ms: int) -> bytes:
    from PIL import Image

    imgs = [Image.fromarray(f) for f in frames]
    # one palette for every frame, from the frame of largest amplitude (it holds every colour)
    ref = imgs[len(imgs) // 4].quantize(colors=_GIF_COLOURS, method=Image.Quantize.FASTOCTREE)
    pal = [im.quantize(palette=ref, dither=Image.Dither.NONE) for im in imgs]
    buf = io.BytesIO()
    pal[0].save(buf, format="GIF", save_all=True, append_images=pal[1:], duration=duration_ms, loop=0,
                disposal=1)
    return buf.getvalue()


def _shot(plotter) -> np.ndarray:
    # Plotter.screenshot() renders only the first time; later calls grab the window as it stands
    plotter.render()
    return np.asarray(plotter.screenshot(return_img=True))


def _normals(poly) -> np.ndarray | None:
    from vtkmodules.util.numpy_support import vtk_to_numpy
    from vtkmodules.vtkFiltersCore import vtkPolyDataNormals

    f = vtkPolyDataNormals()
    f.SetInputData(poly)
    f.SplittingOff()
    f.ComputeCellNormalsOff()
    f.ConsistencyOn()
    f.Update()
    arr = f.GetOutput().GetPointData().GetNormals()
    return None if arr is None else vtk_to_numpy(arr)


def _place_camera(plotter, pts: np.ndarray, direction: np.ndarray, up: np.ndarray,
                  size: tuple[int, int], bottom: float = 0.0) -> None:
    """Parallel projection along ``direction`` fitted to the points ``pts`` with a margin;
    ``bottom`` is the fraction of the height kept free below the part (for the colour bar)."""
    right = np.cross(up, direction)
    right /= np.linalg.norm(right) or 1.0
    screen_up = np.cross(direction, right)
    u, v = pts @ right, pts @ screen_up
    uc, vc = 0.5 * (u.min() + u.max()), 0.5 * (v.min() + v.max())
    centre = pts.mean(axis=0)
    centre = centre + (uc - centre @ right) * right + (vc - centre @ screen_up) * screen_up
    aspect = size[0] / size[1]
    half = max(0.5 * float(np.ptp(v)) / (1.0 - bottom), 0.5 * float(np.ptp(u)) / aspect, 1e-12) * 1.06
    focal = centre - bottom * half * screen_up
    radius = float(np.linalg.norm(np.ptp(pts, axis=0))) or 1.0
    cam = plotter.camera
    cam.SetParallelProjection(True)
    cam.SetFocalPoint(*focal)
    cam.SetPosition(*(focal + 4.0 * radius * direction))
    cam.SetViewUp(*screen_up)
    cam.SetParallelScale(half)
    plotter.renderer.ResetCameraClippingRange()


def _height(points: np.ndarray, direction: np.ndarray, up: np.ndarray, width: int, bottom: float) -> int:
    """Image height for ``width`` that fits the part seen along ``direction``, with room for the
    deformation and a ``bottom`` fraction for the colour bar; between 0.45 and 0.8 of the width."""
    right = np.cross(up, direction)
    right /= np.linalg.norm(right) or 1.0
    screen_up = np.cross(direction, right)
    w = float(np.ptp(points @ right)) or 1.0
    h = float(np.ptp(points @ screen_up))
    ratio = (h / w + 2 * DEFORMATION) / (1.0 - bottom)
    return int(round(width * float(np.clip(ratio, 0.45, 0.8)) / 2) * 2)


def render_modes(points: np.ndarray, cells: np.ndarray, cell_type: int, shapes: np.ndarray,
                 modes: list[int] | None = None, picture_width: int = 560, animation_width: int = 300,
                 frames: int = FRAMES, duration_ms: int = 90, animate: bool = True) -> list[ModeImages]:
    """A picture and an animation of each mode in ``modes`` (0-based indices; default all).

    ``points`` (n, 3) m; ``cells`` (ne, k) in the VTK node order of ``cell_type``; ``shapes``
    (m, n, 3) translations in any normalisation (each mode is scaled on its own). The heights
    follow the part's shape, the same for every mode. ``animate=False`` draws the pictures only
    (``ModeImages.animation`` is then empty).
    """
    pv = _pyvista()
    points = np.asarray(points, float)
    cells = np.asarray(cells, np.int64)
    shapes = np.asarray(shapes, float)
    modes = list(range(shapes.shape[0])) if modes is None else [int(i) for i in modes]
    if not modes or cells.size == 0:
        return []
    cell_type = int(cell_type)
    grid = pv.UnstructuredGrid({cell_type: cells}, points)
    for i in modes:
        grid.point_data[f"m{i}"] = shapes[i]

    # the element faces on the surface, by original node numbers (corners only)
    if cell_type in _SHELL_TYPES:
        corners = cells[:, :family_of_vtk(cell_type).corners]
        faces = [corners]
    else:
        lin = grid.extract_surface(nonlinear_subdivision=0, **_alg(grid))
        faces = _faces_by_size(lin, _original_ids(np.asarray(lin.points, float), points))
    lines, boundary = _edges(faces, cells, cell_type)
    level = _subdivision(sum(len(f) for f in faces), cell_type)
    surf = grid.extract_surface(nonlinear_subdivision=level, **_alg(grid))
    base = np.array(surf.points, dtype=float)
    direction, up, _ = view_of(points)
    bar = 0.14  # of the picture's height, kept for the colour bar
    picture_size = (picture_width, _height(points, direction, up, picture_width, bar))
    animation_size = (animation_width, _height(points, direction, up, animation_width, 0.0))
    samples = 2 ** level + 1  # points per quadratic edge line, matching the surface's subdivision
    if cell_type in _SHELL_TYPES:
        outline = _Lines(pv, points, lines[boundary], samples).poly
    else:
        outline = surf.extract_feature_edges(boundary_edges=True, feature_edges=True, feature_angle=30,
                                             manifold_edges=False, non_manifold_edges=False)
    mesh_lines = _Lines(pv, points, lines, samples) if len(lines) <= _MAX_EDGES else None
    size = float(np.ptp(points, axis=0).max()) or 1.0

    shown = surf.copy()
    shown.clear_data()
    shown.point_data["u"] = np.linspace(0.0, 1.0, shown.n_points)  # the colour bar takes its range
    out: list[ModeImages] = []
    # the picture is drawn at twice its size and scaled down: anti-aliasing that works with EGL
    # (VTK's FXAA falls back to costly SSAA there, and MSAA triples the time per frame)
    still = pv.Plotter(off_screen=True, window_size=[2 * picture_size[0], 2 * picture_size[1]])
    moving = pv.Plotter(off_screen=True, window_size=list(animation_size))
    try:
        surface_actor = None
        for pl, scale_px in ((still, 2.0), (moving, 1.0)):
            pl.render_window.SetMultiSamples(0)
            pl.set_background(_BACKGROUND)
            # no smooth_shading=True: pyvista would draw a copy carrying normals, while the poses
            # below change ``shown`` in place; _pose sets the normals itself
            actor = pl.add_mesh(shown, scalars="u", cmap=_CMAP, clim=(0.0, 1.0), specular=0.3,
                                specular_power=20, show_scalar_bar=False)
            actor.prop.interpolation = "gouraud"
            surface_actor = surface_actor or actor
            if mesh_lines is not None:
                pl.add_mesh(mesh_lines.poly, color="#33415c", line_width=0.8 * scale_px,
                            opacity=0.45 if pl is still else 0.3)
            pl.add_mesh(outline, color=_INK, line_width=1.6 * scale_px)
        still.add_scalar_bar(title="displacement / largest", mapper=surface_actor.mapper, n_labels=3, fmt="%.1f",
                             vertical=False, position_x=0.3, position_y=0.015, width=0.4, height=0.1,
                             color=_INK, title_font_size=24, label_font_size=20)
        for i in modes:
            phi = np.asarray(surf.point_data[f"m{i}"], float)
            mag = np.linalg.norm(phi, axis=1)
            peak = float(mag.max())
            scale = DEFORMATION * size / peak if peak > 0 else 0.0
            rel = mag / peak if peak > 0 else mag
            # the camera frames the part at both extremes of the motion and stays for every frame
            ext = np.vstack([base + scale * phi, base - scale * phi, points])
            _place_camera(still, ext, direction, up, picture_size, bottom=bar)
            _place_camera(moving, ext, direction, up, animation_size)
            node_phi = shapes[i]
            _pose(shown, base, phi, scale, rel, 1.0, mesh_lines, points, node_phi)
            picture = _png(_shot(still), picture_size)
            if not animate:
                out.append(ModeImages(i + 1, picture, b""))
                continue
            imgs = []
            drawn: dict[float, np.ndarray] = {}  # sin takes each value twice a cycle: draw it once
            for k in range(frames):
                s = round(float(np.sin(2 * np.pi * k / frames)), 12)
                if s not in drawn:
                    _pose(shown, base, phi, scale, rel, s, mesh_lines, points, node_phi)
                    drawn[s] = _shot(moving)
                imgs.append(drawn[s])
            out.append(ModeImages(i + 1, picture, _gif(imgs, duration_ms)))
    finally:
        still.close()
        moving.close()
    return out


def _alg(grid) -> dict:
    """``algorithm="dataset_surface"`` where pyvista knows the keyword (it warns without it)."""
    import inspect

    try:
        if "algorithm" in inspect.signature(grid.extract_surface).parameters:
            return {"algorithm": "dataset_surface"}
    except (TypeError, ValueError):
        pass
    return {}


def _original_ids(found: np.ndarray, points: np.ndarray) -> np.ndarray:
    """Indices into ``points`` of the points ``found`` (by position: VTK's vtkOriginalPointIds is
    not reliable on quadratic cells with nonlinear_subdivision=0, measured with VTK 9.7)."""
    from scipy.spatial import cKDTree

    _, idx = cKDTree(points).query(found)
    return np.asarray(idx, np.int64)


def _faces_by_size(poly, ids: np.ndarray) -> list[np.ndarray]:
    """Polygons of ``poly`` grouped by corner count, as original node ids."""
    flat = np.asarray(poly.faces, np.int64)
    groups: dict[int, list[np.ndarray]] = {}
    i = 0
    while i < flat.size:
        k = int(flat[i])
        groups.setdefault(k, []).append(ids[flat[i + 1:i + 1 + k]])
        i += k + 1
    return [np.array(v) for v in groups.values()]


def _pose(shown, base: np.ndarray, phi: np.ndarray, scale: float, rel: np.ndarray, s: float,
          mesh_lines, points: np.ndarray, node_phi: np.ndarray) -> None:
    shown.points = base + (scale * s) * phi
    normals = _normals(shown)
    if normals is not None and normals.shape[0] == shown.n_points:
        shown.point_data["Normals"] = normals
        shown.point_data.active_normals_name = "Normals"
    shown.point_data["u"] = rel * abs(s)
    shown.point_data.active_scalars_name = "u"
    shown.Modified()
    if mesh_lines is not None:
        mesh_lines.pose(points, node_phi, scale * s)


def render_model(points: np.ndarray, cells: np.ndarray, cell_type: int, supported: np.ndarray,
                 masses: list[tuple[int, float]], width: int = 560, beams: np.ndarray | None = None,
                 springs: list[tuple[int, int]] | None = None,
                 couplings: list[tuple[str, int, list[int]]] | None = None) -> bytes:
    """PNG of the model as meshed: the undeformed surface with its element edges, the supported
    nodes as dark red dots, each point mass as an orange ball (its node), beam members as thick
    blue lines, springs as green lines (a spring to the ground runs from its node downwards in the
    picture and ends in a green square), rigid couplings as purple spokes from the reference point
    to the tied nodes and distributing ones as pink spokes, in the view of the mode pictures.
    ``supported`` holds node indices; ``masses`` (node index, kg); ``beams`` (k, 2) node indices;
    ``springs`` (a, b) with b = -1 for the ground; ``couplings`` (kind, reference, tied nodes)."""
    pv = _pyvista()
    points = np.asarray(points, float)
    cells = np.asarray(cells, np.int64)
    beams = np.zeros((0, 2), np.int64) if beams is None else np.asarray(beams, np.int64).reshape(-1, 2)
    direction, up, _ = view_of(points)
    size = (width, _height(points, direction, up, width, 0.12))
    pl = pv.Plotter(off_screen=True, window_size=[2 * size[0], 2 * size[1]])
    try:
        pl.render_window.SetMultiSamples(0)
        pl.set_background(_BACKGROUND)
        if cells.size:
            grid = pv.UnstructuredGrid({int(cell_type): cells}, points)
            surf = grid.extract_surface(nonlinear_subdivision=1 if int(cell_type) in _QUADRATIC_EDGES else 0,
                                        **_alg(grid))
            pl.add_mesh(surf, color="#dfe7ee", specular=0.2, show_edges=False)
            if int(cell_type) in _SHELL_TYPES:
                corners = cells[:, :3] if int(cell_type) in (5, 22) else cells[:, :4]
                lines, _ = _edges([corners], cells, int(cell_type))
                if len(lines) <= 4 * _MAX_EDGES:
                    pl.add_mesh(_Lines(pv, points, lines, 3).poly, color="#52616f", line_width=1.2, opacity=0.6)
            else:
                pl.add_mesh(surf.extract_all_edges() if surf.n_cells <= 2 * _MAX_EDGES
                            else surf.extract_feature_edges(), color="#52616f", line_width=1.2, opacity=0.5)
        extent = float(np.ptp(points, axis=0).max()) or 1.0
        labels = []

        def segments(a: np.ndarray, b: np.ndarray, color: str, width_px: float, label: str) -> None:
            n = len(a)
            conn = np.column_stack([np.full(n, 2), np.arange(0, 2 * n, 2), np.arange(1, 2 * n, 2)]).ravel()
            pl.add_mesh(pv.PolyData(np.column_stack([a, b]).reshape(-1, 3), lines=conn), color=color,
                        line_width=width_px)
            labels.append([label, color])

        if len(beams):
            segments(points[beams[:, 0]], points[beams[:, 1]], "#1864ab", 5.0, f"beams ({len(beams)})")
        for kind, color in (("rigid", "#862e9c"), ("distributing", "#e64980")):
            ties = [(int(r), np.asarray(n, np.int64)) for k, r, n in couplings or [] if k == kind]
            if ties:
                ref = np.concatenate([np.full(n.size, r) for r, n in ties])
                tied = np.concatenate([n for _, n in ties])
                segments(points[ref], points[tied], color, 1.5, f"{kind} couplings ({len(ties)})")
                pl.add_mesh(pv.PolyData(points[[r for r, _ in ties]]), color=color, point_size=12,
                            render_points_as_spheres=True)
        if springs:
            sp = np.asarray(springs, np.int64).reshape(-1, 2)
            a = points[sp[:, 0]]
            ground = sp[:, 1] < 0
            b = np.where(ground[:, None], a - 0.06 * extent * np.asarray(up, float), points[np.maximum(sp[:, 1], 0)])
            segments(a, b, "#2b8a3e", 4.0, f"springs ({len(sp)})")
            if ground.any():
                pl.add_mesh(pv.PolyData(b[ground]), color="#2b8a3e", point_size=10, render_points_as_spheres=False)
        sup = np.unique(np.asarray(supported, np.int64))
        if sup.size:
            pl.add_mesh(pv.PolyData(points[sup]), color="#a61e4d", point_size=9, render_points_as_spheres=True)
            labels.append([f"supports ({sup.size})", "#a61e4d"])
        if masses:
            total = max(sum(kg for _, kg in masses), 1e-300)
            for node, kg in masses:
                r = extent * (0.012 + 0.02 * (kg / total) ** (1 / 3))
                pl.add_mesh(pv.Sphere(radius=r, center=points[int(node)]), color="#f08c00", specular=0.4)
            labels.append([f"masses ({len(masses)})", "#f08c00"])
        if labels:
            # a key of coloured words, bottom right, one per line (VTK's legend box let long labels run
            # past the picture's edge)
            win_w, win_h = 2 * size[0], 2 * size[1]
            font = 30
            longest = max(len(t) for t, _ in labels) + 2
            x = max(8, int(win_w - 0.62 * font * longest - 16))
            for k, (text, colour) in enumerate(reversed(labels)):
                pl.add_text(f"— {text}", position=(x, 10 + int(1.45 * font) * k), font_size=font // 2,
                            color=colour)
        _place_camera(pl, points, direction, up, size, bottom=0.12)
        return _png(_shot(pl), size)
    finally:
        pl.close()
