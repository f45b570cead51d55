"""Pictures and animations of mode shapes (VTK, offscreen).

The only module of modebridge's reports that draws in 3D. It uses VTK's own modules
(``vtkmodules``), not pyvista: pyvista's first plotter imports ``matplotlib.pyplot`` (through its
colour module), which with pyvista's own import cost every drawing process 1.3 s before its first
picture (measured with pyvista 0.49, VTK 9.7: 0.5 s ``import pyvista``, 0.74 s the first
``Plotter``); the VTK modules below import in about 0.3 s. It sets the offscreen environment
before the import: without an offscreen OpenGL library (Debian ``libegl1``) and
``VTK_DEFAULT_OPENGL_WINDOW=vtkEGLRenderWindow`` VTK tries to open a display and may crash the
process (observed with VTK 9 on headless Debian machines).

Each mode is drawn as its deformed shape, coloured by the displacement magnitude
relative to the mode's largest, with the deformed element edges, over the
outline of the undeformed part (a dark line). The deformation is scaled so that
the largest displacement is :data:`DEFORMATION` of the part's largest dimension.
Plates (and thin solids) are seen obliquely from above their mid-plane, so that
out-of-plane shapes show; bulky solids in an isometric-like view with z up.
Parallel projection: the same size reads the same everywhere in the picture.
"""

from __future__ import annotations

import functools
import io
import os
from dataclasses import dataclass
from types import SimpleNamespace
from typing import Callable, Iterable, Iterator

import numpy as np

from ..elements import FamilyView, family_of_vtk

__all__ = ["ModeImages", "iter_modes", "draw_tasks", "render_model", "DEFORMATION", "FRAMES", "view_of", "RENDER_VERSION"]

os.environ.setdefault("VTK_DEFAULT_OPENGL_WINDOW", "vtkEGLRenderWindow")
os.environ.setdefault("PYVISTA_OFF_SCREEN", "true")  # for pyvista elsewhere in the same process

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
#: sequential colour map, pale where the part stands still, deep blue where it moves most: the
#: 9-class YlGnBu scheme of ColorBrewer (C. A. Brewer, colorbrewer2.org), interpolated linearly
#: between its classes into 256 colours, as matplotlib's "YlGnBu" does
_YLGNBU = ("#ffffd9", "#edf8b1", "#c7e9b4", "#7fcdbb", "#41b6c4", "#1d91c0", "#225ea8", "#253494", "#081d58")
#: colours of the one palette every frame of an animation shares (light: a GIF of 40-50 kB)
_GIF_COLOURS = 48
#: bump when the drawing changes: reports keep renders by result hash and this version
RENDER_VERSION = 5

# VTK node order: (corner, corner, mid-side node) of each edge of the quadratic cells, and the
# VTK types of surface (shell) cells; both derived from the registry (bridge/elements.py)
_QUADRATIC_EDGES = FamilyView(lambda f: f.vtk_edges(), key=lambda f: f.vtk_type, where=lambda f: bool(f.vtk_edges()))
_SHELL_TYPES = FamilyView(lambda f: f.name, key=lambda f: f.vtk_type, where=lambda f: f.dim == 2)


@dataclass
class ModeImages:
    mode: int  #: 1-based
    picture: bytes  #: PNG, the deformed shape at full amplitude with a colour bar
    animation: bytes  #: animated GIF of FRAMES frames (±sin scaling), looping


@functools.cache
def _vtk() -> SimpleNamespace:
    """The VTK classes drawn with, imported on first use (``RENDER_VERSION`` alone costs nothing):
    only the modules needed, about 0.3 s in all here (vtkCommonCore 0.14 s, vtkCommonDataModel
    0.06 s, vtkRenderingOpenGL2 0.07 s; measured with ``python -X importtime``, VTK 9.7)."""
    from vtkmodules import vtkRenderingFreeType  # noqa: F401 - text (labels, scalar bar)
    from vtkmodules import vtkRenderingOpenGL2  # noqa: F401 - the OpenGL back end (EGL window)
    from vtkmodules.util import numpy_support
    from vtkmodules.vtkCommonCore import vtkLookupTable, vtkPoints, vtkUnsignedCharArray
    from vtkmodules.vtkCommonDataModel import vtkCellArray, vtkPolyData, vtkUnstructuredGrid
    from vtkmodules.vtkFiltersCore import vtkExtractEdges, vtkFeatureEdges, vtkPolyDataNormals
    from vtkmodules.vtkFiltersGeometry import vtkDataSetSurfaceFilter
    from vtkmodules.vtkFiltersSources import vtkSphereSource
    from vtkmodules.vtkRenderingAnnotation import vtkScalarBarActor
    from vtkmodules.vtkRenderingCore import (vtkActor, vtkLightKit, vtkPolyDataMapper, vtkRenderer, vtkRenderWindow,
                                             vtkTextActor)

    return SimpleNamespace(**{k: v for k, v in locals().items() if k.startswith("vtk")}, np=numpy_support)


def _rgb(colour: str) -> tuple[float, float, float]:
    """``#rrggbb`` as three floats in [0, 1]."""
    c = colour.lstrip("#")
    return tuple(int(c[i:i + 2], 16) / 255.0 for i in (0, 2, 4))


def _lookup_table():
    """256 colours of :data:`_YLGNBU`, linear between its 9 classes, over the range [0, 1]."""
    v = _vtk()
    x = np.linspace(0.0, 1.0, 256)
    nodes = np.linspace(0.0, 1.0, len(_YLGNBU))
    rgb = np.array([_rgb(c) for c in _YLGNBU])
    table = np.column_stack([np.interp(x, nodes, rgb[:, k]) for k in range(3)] + [np.ones(256)])
    lut = v.vtkLookupTable()
    lut.SetNumberOfTableValues(256)
    for i, row in enumerate(table):
        lut.SetTableValue(i, *row)
    lut.SetRange(0.0, 1.0)
    return lut


def _vtk_points(xyz: np.ndarray):
    v = _vtk()
    pts = v.vtkPoints()
    pts.SetData(v.np.numpy_to_vtk(np.ascontiguousarray(xyz, dtype=float), deep=True))
    return pts


def _cell_array(offsets: np.ndarray, connectivity: np.ndarray):
    v = _vtk()
    ca = v.vtkCellArray()
    ca.SetData(v.np.numpy_to_vtkIdTypeArray(np.ascontiguousarray(offsets, np.int64), deep=True),
               v.np.numpy_to_vtkIdTypeArray(np.ascontiguousarray(connectivity, np.int64), deep=True))
    return ca


def _grid(points: np.ndarray, cells: np.ndarray, cell_type: int):
    """A vtkUnstructuredGrid of one cell type."""
    ug = _vtk().vtkUnstructuredGrid()
    ug.SetPoints(_vtk_points(points))
    k = cells.shape[1]
    ug.SetCells(int(cell_type), _cell_array(np.arange(0, k * (len(cells) + 1), k), cells.ravel()))
    return ug


def _polylines(xyz: np.ndarray, k: int):
    """PolyData of consecutive polylines of ``k`` points each through ``xyz``."""
    poly = _vtk().vtkPolyData()
    poly.SetPoints(_vtk_points(xyz))
    n = len(xyz) // k
    poly.SetLines(_cell_array(np.arange(0, k * (n + 1), k), np.arange(n * k)))
    return poly


def _vertices(xyz: np.ndarray):
    """PolyData of one vertex per point."""
    poly = _vtk().vtkPolyData()
    poly.SetPoints(_vtk_points(np.asarray(xyz, float).reshape(-1, 3)))
    n = poly.GetNumberOfPoints()
    poly.SetVerts(_cell_array(np.arange(n + 1), np.arange(n)))
    return poly


def _surface(grid, level: int):
    """The outer surface of ``grid`` (vtkDataSetSurfaceFilter), quadratic faces split ``level``
    times; point data interpolated onto the new points."""
    f = _vtk().vtkDataSetSurfaceFilter()
    f.SetInputData(grid)
    f.SetNonlinearSubdivisionLevel(int(level))
    f.Update()
    return f.GetOutput()


def _positions(poly) -> np.ndarray:
    return np.array(_vtk().np.vtk_to_numpy(poly.GetPoints().GetData()), dtype=float)


def _set_positions(poly, xyz: np.ndarray) -> None:
    poly.GetPoints().SetData(_vtk().np.numpy_to_vtk(np.ascontiguousarray(xyz, dtype=float), deep=True))
    poly.Modified()


def _actor(poly, colour: str | None = None, line_width: float = 1.0, opacity: float = 1.0,
           specular: float = 0.0, specular_power: float = 100.0, point_size: float | None = None,
           spheres: bool = False):
    """An actor of ``poly`` in one colour (no scalars), lit, flat shaded."""
    v = _vtk()
    mapper = v.vtkPolyDataMapper()
    mapper.SetInputData(poly)
    mapper.ScalarVisibilityOff()
    actor = v.vtkActor()
    actor.SetMapper(mapper)
    p = actor.GetProperty()
    if colour is not None:
        p.SetColor(*_rgb(colour))
    p.SetAmbient(0.0)
    p.SetDiffuse(1.0)
    p.SetSpecular(specular)
    p.SetSpecularPower(specular_power)
    p.SetLineWidth(line_width)
    p.SetOpacity(opacity)
    if point_size is not None:
        p.SetPointSize(point_size)
        p.SetRenderPointsAsSpheres(bool(spheres))
    return actor


class _Scene:
    """An offscreen window with one renderer: the background, the light kit of a lit scene
    (pyvista's default, kept for the look of earlier reports), no multisampling (the pictures are
    supersampled instead)."""

    def __init__(self, size: tuple[int, int]):
        v = _vtk()
        self.window = v.vtkRenderWindow()
        self.window.SetOffScreenRendering(1)
        self.window.SetMultiSamples(0)
        self.window.SetSize(int(size[0]), int(size[1]))
        self.renderer = v.vtkRenderer()
        self.renderer.SetBackground(*_rgb(_BACKGROUND))
        self.renderer.AutomaticLightCreationOff()
        v.vtkLightKit().AddLightsToRenderer(self.renderer)
        self.renderer.LightFollowCameraOn()
        self.renderer.TwoSidedLightingOn()
        self.window.AddRenderer(self.renderer)
        self.camera = self.renderer.GetActiveCamera()

    def add(self, prop):
        self.renderer.AddActor(prop)
        return prop

    def shot(self) -> np.ndarray:
        """The pixels as rendered now, (height, width, 3) uint8, top row first."""
        v = _vtk()
        self.window.Render()
        w, h = self.window.GetSize()
        buf = v.vtkUnsignedCharArray()
        self.window.GetPixelData(0, 0, w - 1, h - 1, 0, buf, 0)  # the back buffer, just drawn
        return np.ascontiguousarray(v.np.vtk_to_numpy(buf).reshape(h, w, -1)[::-1, :, :3])

    def close(self) -> None:
        self.window.Finalize()


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

    def __init__(self, points: np.ndarray, lines: np.ndarray, samples: int):
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
        self.poly = _polylines(self.at(points), k)

    def at(self, node_values: np.ndarray) -> np.ndarray:
        return np.einsum("lk,lkd->ld", self.wts, node_values[self.idx])

    def pose(self, points: np.ndarray, phi: np.ndarray, factor: float) -> None:
        _set_positions(self.poly, self.at(points + factor * phi))


def _png(img: np.ndarray, size: tuple[int, int] | None = None) -> bytes:
    """PNG with a 256-colour palette (fast octree): a quarter of the true-colour file (measured on
    the demo's pictures: 25 kB against 99 kB), mean error 1.7 levels of 255, 25 ms per picture
    (median cut: 1.5 s for an error of 0.9)."""
    from PIL import Image

    im = Image.fromarray(img)
    if size is not None and im.size != tuple(size):
        k = im.size[0] // size[0]
        if k >= 2 and im.size == (k * size[0], k * size[1]):
            im = im.reduce(k)  # the mean of each k x k block: the supersampling, 10x faster than Lanczos
        else:
            im = im.resize(tuple(size), Image.Resampling.LANCZOS)
    im = im.convert("RGB").quantize(colors=256, method=Image.Quantize.FASTOCTREE, dither=Image.Dither.NONE)
    buf = io.BytesIO()
    im.save(buf, format="PNG", compress_level=6)  # zlib's default; optimize=True costs 3x for a few %
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


def _normals(poly) -> np.ndarray | None:
    """Point normals of ``poly`` as posed now, from its points and polygons alone."""
    v = _vtk()
    bare = v.vtkPolyData()
    bare.SetPoints(poly.GetPoints())
    bare.SetPolys(poly.GetPolys())
    f = v.vtkPolyDataNormals()
    f.SetInputData(bare)
    f.SplittingOff()
    f.ComputeCellNormalsOff()
    f.ConsistencyOn()
    f.Update()
    arr = f.GetOutput().GetPointData().GetNormals()
    return None if arr is None else v.np.vtk_to_numpy(arr)


def _place_camera(scene: _Scene, pts: np.ndarray, direction: np.ndarray, up: np.ndarray,
                  size: tuple[int, int], bottom: float = 0.0, fixed_depth: bool = False) -> None:
    """Parallel projection along ``direction`` fitted to the points ``pts`` with a margin;
    ``bottom`` is the fraction of the height kept free below the part (for the colour bar);
    ``fixed_depth``: the depth range spans ``pts`` (which then hold every pose to be drawn)."""
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
    cam = scene.camera
    cam.SetParallelProjection(True)
    cam.SetFocalPoint(*focal)
    cam.SetPosition(*(focal + 4.0 * radius * direction))
    cam.SetViewUp(*screen_up)
    cam.SetParallelScale(half)
    if fixed_depth:
        # near and far planes from ``pts`` themselves, not from what the scene holds now (the pose
        # of the mode drawn before): the same picture whatever was drawn before it in this process
        lo, hi = pts.min(axis=0), pts.max(axis=0)
        scene.renderer.ResetCameraClippingRange(lo[0], hi[0], lo[1], hi[1], lo[2], hi[2])
    else:
        scene.renderer.ResetCameraClippingRange()


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


def iter_modes(points: np.ndarray, cells: np.ndarray, cell_type: int, shapes: np.ndarray,
               candidates: list[int], modes: Iterable[int], picture_width: int = 560, animation_width: int = 300,
               frames: int = FRAMES, duration_ms: int = 90, animate: bool = True) -> Iterator[ModeImages]:
    """A picture and an animation of each mode ``modes`` gives (0-based), one mode at a time:
    ``modes`` is read only as each picture is wanted (several processes may share the modes to
    draw, each taking the next when it is free), and every mode it gives must be among
    ``candidates`` (the scene is set up for these).

    ``points`` (n, 3) m; ``cells`` (ne, k) in the VTK node order of ``cell_type``; ``shapes``
    (m, n, 3) translations in any normalisation (each mode is scaled on its own). The heights
    follow the part's shape, the same for every mode. ``animate=False`` draws the pictures only
    (``ModeImages.animation`` is then empty)."""
    v = _vtk()
    points = np.asarray(points, float)
    cells = np.asarray(cells, np.int64)
    shapes = np.asarray(shapes, float)
    candidates = [int(i) for i in candidates]
    if not candidates or cells.size == 0:
        return
    cell_type = int(cell_type)
    grid = _grid(points, cells, cell_type)
    for i in candidates:
        arr = v.np.numpy_to_vtk(np.ascontiguousarray(shapes[i]), deep=True)
        arr.SetName(f"m{i}")
        grid.GetPointData().AddArray(arr)

    # the element faces on the surface, by original node numbers (corners only)
    if cell_type in _SHELL_TYPES:
        corners = cells[:, :family_of_vtk(cell_type).corners]
        faces = [corners]
    else:
        lin = _surface(grid, 0)
        faces = _faces_by_size(lin, _original_ids(_positions(lin), points))
    lines, boundary = _edges(faces, cells, cell_type)
    level = _subdivision(sum(len(f) for f in faces), cell_type)
    surf = _surface(grid, level)
    base = _positions(surf)
    direction, up, _ = view_of(points)
    bar = 0.14  # of the picture's height, kept for the colour bar
    picture_size = (picture_width, _height(points, direction, up, picture_width, bar))
    animation_size = (animation_width, _height(points, direction, up, animation_width, 0.0))
    samples = 2 ** level + 1  # points per quadratic edge line, matching the surface's subdivision
    if cell_type in _SHELL_TYPES:
        outline = _Lines(points, lines[boundary], samples).poly
    else:
        fe = v.vtkFeatureEdges()
        fe.SetInputData(surf)
        fe.BoundaryEdgesOn()
        fe.FeatureEdgesOn()
        fe.SetFeatureAngle(30.0)
        fe.ManifoldEdgesOff()
        fe.NonManifoldEdgesOff()
        fe.ColoringOff()
        fe.Update()
        outline = fe.GetOutput()
    mesh_lines = _Lines(points, lines, samples) if len(lines) <= _MAX_EDGES else None
    size = float(np.ptp(points, axis=0).max()) or 1.0

    shown = v.vtkPolyData()
    shown.CopyStructure(surf)
    shown.SetPoints(_vtk_points(base))
    lut = _lookup_table()
    # the picture is drawn at twice its size and scaled down: anti-aliasing that works with EGL
    # (VTK's FXAA falls back to costly SSAA there, and MSAA triples the time per frame)
    still = _Scene((2 * picture_size[0], 2 * picture_size[1]))
    moving = _Scene(animation_size)
    try:
        for scene, scale_px in ((still, 2.0), (moving, 1.0)):
            mapper = v.vtkPolyDataMapper()
            mapper.SetInputData(shown)
            mapper.SetLookupTable(lut)
            mapper.SetScalarRange(0.0, 1.0)
            mapper.SetScalarModeToUsePointData()
            mapper.SetColorModeToMapScalars()
            mapper.InterpolateScalarsBeforeMappingOn()  # the colours follow the values across a face
            mapper.ScalarVisibilityOn()
            actor = v.vtkActor()
            actor.SetMapper(mapper)
            p = actor.GetProperty()
            p.SetAmbient(0.0)
            p.SetDiffuse(1.0)
            p.SetSpecular(0.3)
            p.SetSpecularPower(20.0)
            p.SetInterpolationToGouraud()  # with the normals _pose sets on every frame
            scene.add(actor)
            if mesh_lines is not None:
                scene.add(_actor(mesh_lines.poly, "#33415c", line_width=0.8 * scale_px,
                                 opacity=0.45 if scene is still else 0.3))
            scene.add(_actor(outline, _INK, line_width=1.6 * scale_px))
        still.renderer.AddViewProp(_scalar_bar(lut))
        # the colour bar settles its layout in the first render: one render before the first
        # picture, so that a mode's picture is the same whichever picture of its process it is
        still.window.Render()
        for i in modes:
            i = int(i)
            phi = np.array(v.np.vtk_to_numpy(surf.GetPointData().GetArray(f"m{i}")), dtype=float)
            mag = np.linalg.norm(phi, axis=1)
            peak = float(mag.max())
            scale = DEFORMATION * size / peak if peak > 0 else 0.0
            rel = mag / peak if peak > 0 else mag
            # the camera frames the part at both extremes of the motion and stays for every frame
            ext = np.vstack([base + scale * phi, base - scale * phi, points])
            _place_camera(still, ext, direction, up, picture_size, bottom=bar, fixed_depth=True)
            _place_camera(moving, ext, direction, up, animation_size, fixed_depth=True)
            node_phi = shapes[i]
            _pose(shown, base, phi, scale, rel, 1.0, mesh_lines, points, node_phi)
            picture = _png(still.shot(), picture_size)
            if not animate:
                yield ModeImages(i + 1, picture, b"")
                continue
            imgs = []
            drawn: dict[float, np.ndarray] = {}  # sin takes each value twice a cycle: draw it once
            for k in range(frames):
                s = round(float(np.sin(2 * np.pi * k / frames)), 12)
                if s not in drawn:
                    _pose(shown, base, phi, scale, rel, s, mesh_lines, points, node_phi)
                    drawn[s] = moving.shot()
                imgs.append(drawn[s])
            yield ModeImages(i + 1, picture, _gif(imgs, duration_ms))
    finally:
        still.close()
        moving.close()


def draw_tasks(jobs: list[tuple], tasks: list[tuple[int, int]], take: Callable[[], int | None],
               put: Callable[[int, object], None], animate: bool = True) -> None:
    """Draw shared tasks: ``tasks[k]`` = (job, 0-based mode), ``jobs[j]`` = (points, cells,
    cell_type, shapes, candidates) of one result. ``take()`` claims the next task's index (None:
    none left) and is called only when this process is free, so processes that start late draw
    fewer; ``put(k, outcome)`` hands over each task's: its ModeImages, the exception of a result
    whose drawing failed (for each of its tasks this process claims), or None (no cells to draw)."""
    k = take()
    while k is not None:
        j = tasks[k][0]

        def these() -> Iterator[int]:
            nonlocal k
            while k is not None and tasks[k][0] == j:
                yield tasks[k][1]
                k = take()  # after the mode is drawn: a task is claimed when it can start

        failed: Exception | None = None
        try:
            for im in iter_modes(*jobs[j], these(), animate=animate):
                put(k, im)
        except Exception as exc:  # noqa: BLE001 - handed to the report, which says so
            failed = exc
        while k is not None and tasks[k][0] == j:  # failed, or nothing to draw (no cells)
            put(k, failed)
            k = take()


def _worker(jobs: list[tuple], tasks: list[tuple[int, int]], counter, conn, animate: bool) -> None:
    """A drawing process (started by bridge.report.build): draws the tasks it takes from the
    shared ``counter`` and sends (task, (mode, png, gif), an error line or None) on its own pipe
    ``conn``; the pipe's end (this process exiting, however) tells the builder it is done."""

    def put(k: int, res) -> None:
        if isinstance(res, ModeImages):
            conn.send((k, (res.mode, res.picture, res.animation)))
        elif res is None:
            conn.send((k, None))
        else:
            conn.send((k, f"{type(res).__name__}: {' '.join(str(res).split())}"))

    try:
        draw_tasks(jobs, tasks, lambda: take(counter, len(tasks)), put, animate)
    finally:
        conn.close()


def take(counter, n: int) -> int | None:
    """The next task index of a shared ``multiprocessing.Value`` counter, or None past ``n``."""
    with counter.get_lock():
        k = int(counter.value)
        if k >= n:
            return None
        counter.value = k + 1
        return k


def _scalar_bar(lut):
    """The horizontal colour bar below the part: 3 labels and the title above the bar."""
    bar = _vtk().vtkScalarBarActor()
    bar.SetLookupTable(lut)
    bar.SetTitle("displacement / largest")
    bar.SetNumberOfLabels(3)
    bar.SetLabelFormat("%.1f")
    bar.SetOrientationToHorizontal()
    bar.SetTextPositionToSucceedScalarBar()
    bar.SetMaximumNumberOfColors(256)
    bar.UnconstrainedFontSizeOn()
    bar.AnnotationTextScalingOff()
    bar.GetPositionCoordinate().SetCoordinateSystemToNormalizedViewport()
    bar.SetPosition(0.3, 0.015)
    bar.SetWidth(0.4)
    bar.SetHeight(0.1)
    for prop, pt in ((bar.GetTitleTextProperty(), 24), (bar.GetLabelTextProperty(), 20),
                     (bar.GetAnnotationTextProperty(), 20)):
        prop.SetFontFamilyToArial()
        prop.SetFontSize(pt)
        prop.SetColor(*_rgb(_INK))
        prop.BoldOff()
        prop.ItalicOff()
        prop.ShadowOff()
    bar.GetTitleTextProperty().SetJustificationToCentered()
    return bar


def _original_ids(found: np.ndarray, points: np.ndarray) -> np.ndarray:
    """Indices into ``points`` of the points ``found`` (by position: VTK's vtkOriginalPointIds is
    not reliable on quadratic cells with nonlinear_subdivision=0, measured with VTK 9.7)."""
    from scipy.spatial import cKDTree

    _, idx = cKDTree(points).query(found)
    return np.asarray(idx, np.int64)


def _faces_by_size(poly, ids: np.ndarray) -> list[np.ndarray]:
    """Polygons of ``poly`` grouped by corner count, as original node ids."""
    v = _vtk()
    polys = poly.GetPolys()
    offsets = np.asarray(v.np.vtk_to_numpy(polys.GetOffsetsArray()), np.int64)
    conn = np.asarray(v.np.vtk_to_numpy(polys.GetConnectivityArray()), np.int64)
    counts = np.diff(offsets)
    groups = []
    for k in dict.fromkeys(counts.tolist()):  # in the order of first appearance
        start = offsets[:-1][counts == k]
        groups.append(ids[conn[start[:, None] + np.arange(k)]])
    return groups


def _pose(shown, base: np.ndarray, phi: np.ndarray, scale: float, rel: np.ndarray, s: float,
          mesh_lines, points: np.ndarray, node_phi: np.ndarray) -> None:
    v = _vtk()
    _set_positions(shown, base + (scale * s) * phi)
    pd = shown.GetPointData()
    normals = _normals(shown)
    if normals is not None and normals.shape[0] == shown.GetNumberOfPoints():
        arr = v.np.numpy_to_vtk(np.ascontiguousarray(normals), deep=True)
        arr.SetName("Normals")
        pd.SetNormals(arr)
    u = v.np.numpy_to_vtk(np.ascontiguousarray(rel * abs(s), dtype=float), deep=True)
    u.SetName("u")
    pd.SetScalars(u)
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
    v = _vtk()
    points = np.asarray(points, float)
    cells = np.asarray(cells, np.int64)
    beams = np.zeros((0, 2), np.int64) if beams is None else np.asarray(beams, np.int64).reshape(-1, 2)
    direction, up, _ = view_of(points)
    size = (width, _height(points, direction, up, width, 0.12))
    scene = _Scene((2 * size[0], 2 * size[1]))
    try:
        if cells.size:
            grid = _grid(points, cells, int(cell_type))
            surf = _surface(grid, 1 if int(cell_type) in _QUADRATIC_EDGES else 0)
            scene.add(_actor(surf, "#dfe7ee", specular=0.2))
            if int(cell_type) in _SHELL_TYPES:
                corners = cells[:, :3] if int(cell_type) in (5, 22) else cells[:, :4]
                lines, _ = _edges([corners], cells, int(cell_type))
                if len(lines) <= 4 * _MAX_EDGES:
                    scene.add(_actor(_Lines(points, lines, 3).poly, "#52616f", line_width=1.2, opacity=0.6))
            else:
                if surf.GetNumberOfCells() <= 2 * _MAX_EDGES:
                    f = v.vtkExtractEdges()
                else:
                    f = v.vtkFeatureEdges()  # boundary, non-manifold and 30° feature edges
                    f.ManifoldEdgesOff()  # (pyvista's default drew every edge here: a dark picture)
                    f.ColoringOff()
                f.SetInputData(surf)
                f.Update()
                scene.add(_actor(f.GetOutput(), "#52616f", line_width=1.2, opacity=0.5))
        extent = float(np.ptp(points, axis=0).max()) or 1.0
        labels = []

        def segments(a: np.ndarray, b: np.ndarray, color: str, width_px: float, label: str) -> None:
            scene.add(_actor(_polylines(np.column_stack([a, b]).reshape(-1, 3), 2), color, line_width=width_px))
            labels.append([label, color])

        if len(beams):
            segments(points[beams[:, 0]], points[beams[:, 1]], "#1864ab", 5.0, f"beams ({len(beams)})")
        for kind, color in (("rigid", "#862e9c"), ("distributing", "#e64980")):
            ties = [(int(r), np.asarray(n, np.int64)) for k, r, n in couplings or [] if k == kind]
            if ties:
                ref = np.concatenate([np.full(n.size, r) for r, n in ties])
                tied = np.concatenate([n for _, n in ties])
                segments(points[ref], points[tied], color, 1.5, f"{kind} couplings ({len(ties)})")
                scene.add(_actor(_vertices(points[[r for r, _ in ties]]), color, point_size=12, spheres=True))
        if springs:
            sp = np.asarray(springs, np.int64).reshape(-1, 2)
            a = points[sp[:, 0]]
            ground = sp[:, 1] < 0
            b = np.where(ground[:, None], a - 0.06 * extent * np.asarray(up, float), points[np.maximum(sp[:, 1], 0)])
            segments(a, b, "#2b8a3e", 4.0, f"springs ({len(sp)})")
            if ground.any():
                scene.add(_actor(_vertices(b[ground]), "#2b8a3e", point_size=10, spheres=False))
        sup = np.unique(np.asarray(supported, np.int64))
        if sup.size:
            scene.add(_actor(_vertices(points[sup]), "#a61e4d", point_size=9, spheres=True))
            labels.append([f"supports ({sup.size})", "#a61e4d"])
        if masses:
            total = max(sum(kg for _, kg in masses), 1e-300)
            for node, kg in masses:
                ball = v.vtkSphereSource()
                ball.SetCenter(*points[int(node)])
                ball.SetRadius(extent * (0.012 + 0.02 * (kg / total) ** (1 / 3)))
                ball.SetThetaResolution(30)
                ball.SetPhiResolution(30)
                ball.Update()
                scene.add(_actor(ball.GetOutput(), "#f08c00", specular=0.4))
            labels.append([f"masses ({len(masses)})", "#f08c00"])
        if labels:
            # a key of coloured words, bottom right, one per line (VTK's legend box let long labels run
            # past the picture's edge)
            win_w = 2 * size[0]
            font = 30  # pixels of the doubled window
            longest = max(len(t) for t, _ in labels) + 2
            x = max(8, int(win_w - 0.62 * font * longest - 16))
            for k, (text, colour) in enumerate(reversed(labels)):
                actor = v.vtkTextActor()
                actor.SetInput(f"— {text}")
                actor.SetPosition(x, 10 + int(1.45 * font) * k)
                prop = actor.GetTextProperty()
                prop.SetFontFamilyToArial()
                prop.SetFontSize(font)
                prop.SetColor(*_rgb(colour))
                scene.renderer.AddViewProp(actor)
        _place_camera(scene, points, direction, up, size, bottom=0.12)
        return _png(scene.shot(), size)
    finally:
        scene.close()
