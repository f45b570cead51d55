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
    if cell_type not in (22, 23, 24, 25):  # linear cells: nothing to subdivide
        return 0
    return 3 if n_cells <= 400 else 2 if n_cells <= 4000 else 1


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


def _png(img: np.ndarray) -> bytes:
    from PIL import Image

    buf = io.BytesIO()
    Image.fromarray(img).save(buf, format="PNG", optimize=True)
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
    centre = 0.5 * (points.min(axis=0) + points.max(axis=0))

    shown = pv.PolyData(base.copy(), faces=surf.faces) if surf.n_faces_strict else surf.copy()
    shown.point_data["u"] = np.zeros(shown.n_points)

    out: list[ModeImages] = []
    plotter = pv.Plotter(off_screen=True, window_size=list(picture_size))
    try:
        plotter.set_background(_BACKGROUND)
        plotter.enable_anti_aliasing("ssaa")
        actor = plotter.add_mesh(shown, scalars="u", cmap=_CMAP, clim=(0.0, 1.0), smooth_shading=True,
                                 specular=0.25, show_scalar_bar=False, lighting=True)
        plotter.add_mesh(outline, color="#1f2933", line_width=1.6)
        bar = plotter.add_scalar_bar(title="|u| / max |u|", n_labels=3, fmt="%.1f", vertical=False,
                                     position_x=0.3, position_y=0.03, width=0.4, height=0.07,
                                     color="#1f2933", title_font_size=13, label_font_size=11)
        del actor
        for i in modes:
            phi = np.asarray(surf.point_data[f"m{i}"], float)
            mag = np.linalg.norm(phi, axis=1)
            peak = float(mag.max())
            scale = DEFORMATION * size / peak if peak > 0 else 0.0
            rel = mag / peak if peak > 0 else mag
            # camera fitted to the part at both extremes of the motion, kept for every frame
            ext = np.vstack([base + scale * phi, base - scale * phi, points])
            lo, hi = ext.min(axis=0), ext.max(axis=0)
            radius = 0.5 * float(np.linalg.norm(hi - lo)) or 1.0
            focal = 0.5 * (lo + hi)
            plotter.window_size = list(picture_size)
            _place_camera(plotter, focal if focal is not None else centre, direction, up, radius, picture_size)
            bar.SetVisibility(True)
            _pose(shown, base, phi, scale, rel, 1.0)
            picture = _png(plotter.screenshot(return_img=True))
            bar.SetVisibility(False)
            plotter.window_size = list(animation_size)
            _place_camera(plotter, focal, direction, up, radius, animation_size)
            imgs = []
            for k in range(frames):
                s = float(np.sin(2 * np.pi * k / frames))
                _pose(shown, base, phi, scale, rel, s)
                imgs.append(plotter.screenshot(return_img=True))
            out.append(ModeImages(i + 1, picture, _gif(imgs, duration_ms)))
    finally:
        plotter.close()
    return out


def _has_algorithm(grid) -> bool:
    import inspect

    try:
        return "algorithm" in inspect.signature(grid.extract_surface).parameters
    except (TypeError, ValueError):
        return False


def _pose(shown, base: np.ndarray, phi: np.ndarray, scale: float, rel: np.ndarray, s: float) -> None:
    shown.points = base + (scale * s) * phi
    shown.point_data["u"] = rel * abs(s)
    shown.Modified()


def _place_camera(plotter, focal, direction, up, radius: float, size: tuple[int, int]) -> None:
    cam = plotter.camera
    cam.SetViewAngle(30.0)
    aspect = size[0] / size[1]
    # distance that fits a sphere of ``radius`` in the narrower field of view, with a margin
    half = np.radians(15.0) * min(1.0, aspect)
    dist = 1.08 * radius / np.sin(half)
    cam.SetFocalPoint(*focal)
    cam.SetPosition(*(np.asarray(focal) + dist * direction))
    cam.SetViewUp(*up)
    cam.OrthogonalizeViewUp()
    plotter.renderer.ResetCameraClippingRange()
