"""Pictures and animations of mode shapes (pyvista, offscreen).

The only module of modebridge that imports pyvista. It sets the offscreen
environment before the import: without an offscreen OpenGL library (Debian
``libegl1``) and ``VTK_DEFAULT_OPENGL_WINDOW=vtkEGLRenderWindow`` VTK tries to
open a display and may crash the process (shared/solver-notes.md).

Each mode is drawn as its deformed shape, coloured by the displacement magnitude
relative to the mode's largest, over the outline of the undeformed part. The
deformation is scaled so that the largest displacement is :data:`DEFORMATION`
of the part's largest dimension. Plates (and thin solids) are seen obliquely
from above their mid-plane so out-of-plane shapes show; bulky solids in an
isometric view with z up.
"""

from __future__ import annotations

import io
import os
from dataclasses import dataclass

import numpy as np

__all__ = ["ModeImages", "render_modes", "DEFORMATION", "FRAMES"]

os.environ.setdefault("VTK_DEFAULT_OPENGL_WINDOW", "vtkEGLRenderWindow")
os.environ.setdefault("PYVISTA_OFF_SCREEN", "true")

#: largest displacement drawn as this fraction of the part's largest dimension
#: (a readable exaggeration; common practice, no source)
DEFORMATION = 0.10
#: frames per animation cycle (±sin scaling)
FRAMES = 12
#: a part whose smallest dimension is below this fraction of its largest is drawn as a plate
_THIN = 0.2
_FACES = 10_000  #: faces drawn per mode, about: software rendering is the bottleneck
_CMAP = "viridis"
_BACKGROUND = "#fbfcfd"


@dataclass
class ModeImages:
    mode: int  #: 1-based
    picture: bytes  #: PNG, deformed shape at full amplitude with a colour bar
    animation: bytes  #: animated GIF, FRAMES frames of ±sin scaling, looping


def _pyvista():
    import pyvista as pv

    pv.OFF_SCREEN = True
    return pv


def _frame(points: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, bool]:
    """Axes (e1 longest, e2, n smallest) of the part and whether it is thin (a plate)."""
    ext = np.ptp(points, axis=0)
    centred = points - points.mean(axis=0)
    if points.shape[0] >= 3:
        _, vecs = np.linalg.eigh(centred.T @ centred)
        n = vecs[:, 0]
    else:
        n = np.array([0.0, 0.0, 1.0])
    k = int(np.argmax(np.abs(n)))
    if abs(n[k]) > 0.99:  # snap to a global axis: square plates have no preferred in-plane axes
        n = np.eye(3)[k]
        rest = [i for i in range(3) if i != k]
        i1 = max(rest, key=lambda i: ext[i])
        e1 = np.eye(3)[i1]
    else:
        n = n * np.sign(n[k])
        e1 = vecs[:, 2]
        e1 = e1 * np.sign(e1[int(np.argmax(np.abs(e1)))])
    e2 = np.cross(n, e1)
    proj = np.abs(centred @ np.column_stack([e1, e2, n]))
    size = proj.max(axis=0) * 2
    thin = size[2] <= _THIN * max(size[0], 1e-300)
    return e1, e2, n, bool(thin)


def _view(points: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Direction from the focal point to the camera, and the view-up vector."""
    e1, e2, n, thin = _frame(points)
    if thin:  # oblique from above the mid-plane, about 30° elevation, slightly from the side
        d = -0.35 * e1 - 1.0 * e2 + 0.62 * n
        return d / np.linalg.norm(d), n
    d = np.array([-0.75, -1.0, 0.8])  # bulky solids: isometric-like, z up
    return d / np.linalg.norm(d), np.array([0.0, 0.0, 1.0])


def _subdivision(n_cells: int, cell_type: int) -> int:
    """Subdivision levels of quadratic faces: about 10 000 drawn faces (each level × 4), at most 3."""
    if cell_type not in (22, 23, 24, 25) or n_cells == 0:  # linear cells: nothing to subdivide
        return 0
    return int(np.clip(np.floor(np.log(_FACES / n_cells) / np.log(4.0)), 0, 3))


def _gif(frames: list[np.ndarray], duration_ms: int) -> bytes:
    from PIL import Image

    imgs = [Image.fromarray(f) for f in frames]
    # one palette for every frame (taken from the full-amplitude frame: it holds all colours)
    ref = imgs[FRAMES // 4 if len(imgs) >= FRAMES else 0].quantize(colors=160, method=Image.Quantize.MEDIANCUT)
    pal = [im.quantize(palette=ref, dither=Image.Dither.NONE) for im in imgs]
    buf = io.BytesIO()
    pal[0].save(buf, format="GIF", save_all=True, append_images=pal[1:], duration=duration_ms, loop=0,
                optimize=False, disposal=1)
    return buf.getvalue()


def _png(img: np.ndarray, size: tuple[int, int] | None = None) -> bytes:
    from PIL import Image

    im = Image.fromarray(img)
    if size is not None and im.size != tuple(size):
        im = im.resize(tuple(size), Image.Resampling.LANCZOS)
    buf = io.BytesIO()
    im.save(buf, format="PNG", compress_level=6)
    return buf.getvalue()


def render_modes(points: np.ndarray, cells: np.ndarray, cell_type: int, shapes: np.ndarray,
                 modes: list[int] | None = None, picture_size: tuple[int, int] = (560, 400),
                 animation_size: tuple[int, int] = (360, 260), frames: int = FRAMES,
                 duration_ms: int = 90) -> list[ModeImages]:
    """Picture and animation of each mode in ``modes`` (0-based; default all).

    ``points`` (n, 3) m, ``cells`` (ne, k) in VTK node order of ``cell_type``, ``shapes``
    (m, n, 3) translations (any normalisation: each mode is scaled on its own).
    """
    pv = _pyvista()
    points = np.asarray(points, float)
    shapes = np.asarray(shapes, float)
    modes = list(range(shapes.shape[0])) if modes is None else list(modes)
    if not modes:
        return []
    grid = pv.UnstructuredGrid({int(cell_type): np.asarray(cells, np.int64)}, points)
    for i in modes:
        grid.point_data[f"m{i}"] = shapes[i]
    level = _subdivision(grid.n_cells, int(cell_type))
    surf = grid.extract_surface(nonlinear_subdivision=level, algorithm="dataset_surface") \
        if _has_algorithm(grid) else grid.extract_surface(nonlinear_subdivision=level)
    base = np.array(surf.points, dtype=float)
    _, _, _, thin = _frame(points)
    outline_src = grid.extract_surface(algorithm="dataset_surface") if _has_algorithm(grid) \
        else grid.extract_surface()
    if thin:
        outline = outline_src.extract_feature_edges(boundary_edges=True, feature_edges=True, feature_angle=60,
                                                    manifold_edges=False, non_manifold_edges=False)
    else:
        outline = outline_src.extract_feature_edges(boundary_edges=True, feature_edges=True, feature_angle=30,
                                                    manifold_edges=False, non_manifold_edges=False)
    size = float(np.ptp(points, axis=0).max()) or 1.0
    direction, up = _view(points)

    shown = surf.copy()
    shown.clear_data()
    shown.point_data["u"] = np.zeros(shown.n_points)

    out: list[ModeImages] = []
    # the picture is drawn at twice its size and scaled down: anti-aliasing that works with EGL
    still = pv.Plotter(off_screen=True, window_size=[2 * picture_size[0], 2 * picture_size[1]])
    moving = pv.Plotter(off_screen=True, window_size=list(animation_size))
    try:
        for pl in (still, moving):
            pl.render_window.SetMultiSamples(0)  # MSAA costs 3× per frame in software GL; FXAA below
            pl.set_background(_BACKGROUND)
            # no smooth_shading=True: pyvista would draw a copy with normals, and the poses below
            # change ``shown`` in place; _pose computes the normals itself
            actor = pl.add_mesh(shown, scalars="u", cmap=_CMAP, clim=(0.0, 1.0), specular=0.2,
                                show_scalar_bar=False)
            actor.prop.interpolation = "gouraud"
            pl.add_mesh(outline, color="#1f2933", line_width=3.0 if pl is still else 1.5)
        still.add_scalar_bar(title="displacement / largest", n_labels=3, fmt="%.1f", vertical=False, position_x=0.3,
                             position_y=0.03, width=0.4, height=0.08, color="#1f2933", title_font_size=26,
                             label_font_size=22)
        for i in modes:
            phi = np.asarray(surf.point_data[f"m{i}"], float)
            mag = np.linalg.norm(phi, axis=1)
            peak = float(mag.max())
            scale = DEFORMATION * size / peak if peak > 0 else 0.0
            rel = mag / peak if peak > 0 else mag
            # camera fitted to the part at both extremes of the motion, kept for every frame
            ext = np.vstack([base + scale * phi, base - scale * phi, points])
            lo, hi = ext.min(axis=0), ext.max(axis=0)
            _place_camera(still, lo, hi, direction, up, picture_size, bottom=0.14)
            _place_camera(moving, lo, hi, direction, up, animation_size)
            _pose(shown, base, phi, scale, rel, 1.0)
            picture = _png(_shot(still), picture_size)
            imgs = []
            for k in range(frames):
                _pose(shown, base, phi, scale, rel, float(np.sin(2 * np.pi * k / frames)))
                imgs.append(_shot(moving))
            out.append(ModeImages(i + 1, picture, _gif(imgs, duration_ms)))
    finally:
        still.close()
        moving.close()
    return out


def _shot(plotter) -> np.ndarray:
    # screenshot() renders only the first time; later calls grab the window as it stands
    plotter.render()
    return np.asarray(plotter.screenshot(return_img=True))


def _has_algorithm(grid) -> bool:
    import inspect

    try:
        return "algorithm" in inspect.signature(grid.extract_surface).parameters
    except (TypeError, ValueError):
        return False


def _pose(shown, base: np.ndarray, phi: np.ndarray, scale: float, rel: np.ndarray, s: float) -> None:
    from vtkmodules.vtkFiltersCore import vtkPolyDataNormals

    shown.points = base + (scale * s) * phi
    f = vtkPolyDataNormals()
    f.SetInputData(shown)
    f.SplittingOff()
    f.ComputeCellNormalsOff()
    f.ConsistencyOn()
    f.Update()
    from vtkmodules.util.numpy_support import vtk_to_numpy

    normals = vtk_to_numpy(f.GetOutput().GetPointData().GetNormals())
    if normals.shape[0] == shown.n_points:
        shown.point_data["Normals"] = normals
        shown.point_data.active_normals_name = "Normals"
    shown.point_data["u"] = rel * abs(s)
    shown.point_data.active_scalars_name = "u"
    shown.Modified()


def _place_camera(plotter, lo: np.ndarray, hi: np.ndarray, direction: np.ndarray, up: np.ndarray,
                  size: tuple[int, int], bottom: float = 0.0) -> None:
    """Parallel projection along ``direction`` fitted to the box ``lo``–``hi`` with a small margin
    (and ``bottom``, a fraction of the height kept free for the colour bar)."""
    focal = 0.5 * (lo + hi)
    corners = np.array([[x, y, z] for x in (lo[0], hi[0]) for y in (lo[1], hi[1]) for z in (lo[2], hi[2])])
    right = np.cross(up, direction)
    right /= np.linalg.norm(right) or 1.0
    true_up = np.cross(direction, right)
    rel = corners - focal
    u, v = rel @ right, rel @ true_up
    aspect = size[0] / size[1]
    half_h = max(float(np.abs(v).max()), float(np.abs(u).max()) / aspect, 1e-12)
    shift = bottom * half_h  # move the picture up so the colour bar does not cover it
    cam = plotter.camera
    radius = float(np.linalg.norm(hi - lo)) or 1.0
    cam.SetParallelProjection(True)
    cam.SetFocalPoint(*(focal - shift * true_up))
    cam.SetPosition(*(focal - shift * true_up + 4.0 * radius * direction))
    cam.SetViewUp(*true_up)
    cam.SetParallelScale(1.08 * half_h * (1 + bottom))
    plotter.renderer.ResetCameraClippingRange()
