"""Meshing with gmsh (the only module that imports gmsh).

Plates and blocks are meshed structured (transfinite) with quads and hexes,
unstructured with triangles and tetrahedra; CAD bodies unstructured with
tetrahedra. Second order families are serendipity for quad8/hex20.
Every named region becomes a physical group.
"""

from __future__ import annotations

import math
import os
import threading
from pathlib import Path

import numpy as np

from ..errors import MeshingError, ModelError
from ..elements import FamilyView, cell_measure, get_family
from ..mesh import Mesh, RegionPart
from ..model import (BlockGeometry, BoxRegion, CadGeometry, CylinderGeometry, EnclosureGeometry, FootprintRegion,
                     LineRegion, Model, NamedRegion, PlaneRegion, PlateGeometry, PointRegion, PolygonGeometry,
                     ProfileGeometry, SideRegion)

__all__ = ["build_mesh", "write_step_box", "write_step", "profile_faces", "profile_solid"]

#: family -> gmsh element type (derived from the registry, bridge/elements.py)
_GMSH_TYPE = FamilyView(lambda f: f.gmsh_type)
_ENTITY_DIM = {"point": 0, "edge": 1, "face": 2, "volume": 3}
_CAD_SCALE = {"m": 1.0, "mm": 1e-3, "cm": 1e-2, "in": 0.0254}
_AXES = "xyz"
_lock = threading.Lock()  # gmsh keeps global state: one model at a time per process


class _Session:
    def __enter__(self):
        import gmsh

        _lock.acquire()
        # gmsh's FLTK writes its preferences (~/.fltk) on the first initialize: into modebridge's
        # cache folder instead of the user's home (bridge.cache)
        from ..cache import cache_dir

        home = os.environ.get("HOME")
        os.environ["HOME"] = str(cache_dir() / "gmsh")
        try:
            gmsh.initialize(readConfigFiles=False, interruptible=False)
        except TypeError:  # older gmsh without the keywords
            gmsh.initialize()
        finally:
            if home is None:
                os.environ.pop("HOME", None)
            else:
                os.environ["HOME"] = home
        gmsh.option.setNumber("General.Terminal", 0)
        gmsh.option.setNumber("General.Verbosity", 1)
        self.gmsh = gmsh
        return gmsh

    def __exit__(self, *exc):
        try:
            self.gmsh.finalize()
        finally:
            _lock.release()
        return False


def _divisions(model: Model, level: int) -> list[int]:
    spec = model.mesh
    factor = spec.ratio**level
    geo = model.geometry
    if spec.divisions is not None:
        return [max(1, int(round(n * factor))) for n in spec.divisions]
    if isinstance(geo, PolygonGeometry):
        v = np.asarray(geo.vertices, float)
        e = np.linalg.norm(np.roll(v, -1, axis=0) - v, axis=1)
        dims = [max(e[0::2]), max(e[1::2])]
    else:
        dims = [geo.length, geo.width] + ([geo.height] if isinstance(geo, BlockGeometry) else [])
    h = spec.size / factor
    return [max(1, int(math.ceil(d / h - 1e-9))) for d in dims]


def _cutouts(gmsh, geo, faces, names: dict | None) -> list[int]:
    """Cut the holes of a plate or polygon out of its ``faces`` (tags); the faces left."""
    occ = gmsh.model.occ
    tools = []
    z0 = geo.origin[2] if isinstance(geo, PlateGeometry) else 0.0
    for c in geo.cutouts:
        if c.shape == "circle":
            tools.append((2, occ.addDisk(c.center[0], c.center[1], z0, c.diameter / 2, c.diameter / 2)))
        else:
            a, b = c.size
            tools.append((2, occ.addRectangle(c.center[0] - a / 2, c.center[1] - b / 2, z0, a, b)))
    faces = [faces] if isinstance(faces, int) else list(faces)
    out, _ = occ.cut([(2, f) for f in faces], tools)
    occ.synchronize()
    faces = [t for d, t in out if d == 2]
    if not faces:
        raise MeshingError("geometry.cutouts: the cut-outs remove the whole plate")
    if names is not None:
        names["plate"] = [(2, t) for t in faces]
    return faces


def _join(gmsh, groups: dict[str, list[tuple[int, int]]], entities: list[tuple[int, int]]) -> list[tuple[int, int]]:
    """Fragment ``entities`` against each other (shared edges become one, so the mesh conforms)
    and carry the named groups over to the new entities. Returns the entities after fragmenting."""
    occ = gmsh.model.occ
    if len(entities) < 2:
        occ.synchronize()
        return entities
    out, out_map = occ.fragment(entities[:1], entities[1:])
    occ.synchronize()
    old_to_new = {dt: list(m) for dt, m in zip(entities, out_map)}
    for name, members in groups.items():
        new = []
        for dt in members:
            new.extend(old_to_new.get(dt, [dt]))
        groups[name] = list(dict.fromkeys(new))
    return [dt for dt in out if dt[0] == entities[0][0]]


def _profile_curves(gmsh, geo: ProfileGeometry) -> tuple[list[int], list[str]]:
    """The profile's mid-line in the plane x = 0 as OCC curves (lines and bend arcs) and the
    group each belongs to (flat_k, bend_k)."""
    occ = gmsh.model.occ
    p = np.asarray(geo.points, float)
    radii = list(geo.radii) if geo.radii is not None else [0.0] * (len(p) - 2)
    # for each inner vertex: tangent points on the incoming and outgoing segments and the arc centre
    starts = [p[0]]
    arcs = []
    for k in range(1, len(p) - 1):
        r = radii[k - 1]
        a = p[k - 1] - p[k]
        b = p[k + 1] - p[k]
        la, lb = np.linalg.norm(a), np.linalg.norm(b)
        a, b = a / la, b / lb
        cos = float(np.clip(np.dot(a, b), -1.0, 1.0))
        half = math.acos(cos) / 2  # half the angle between the two legs
        if r <= 0 or abs(math.pi / 2 - half) < 1e-9:  # sharp corner, or no turn at all
            arcs.append(None)
            starts.append(p[k])
            continue
        if half < 1e-6:
            raise MeshingError(f"geometry.points: the profile folds back on itself at point {k + 1}")
        d = r / math.tan(half)
        if d > la * (1 - 1e-9) or d > lb * (1 - 1e-9):
            raise MeshingError(f"geometry.radii: the bend radius at point {k + 1} ({r * 1e3:.4g} mm) does not "
                               "fit between the neighbouring points")
        t1, t2 = p[k] + a * d, p[k] + b * d
        bis = (a + b) / np.linalg.norm(a + b)
        centre = p[k] + bis * (r / math.sin(half))
        arcs.append((t1, t2, centre))
    pts3 = lambda q: occ.addPoint(0.0, float(q[0]), float(q[1]))  # noqa: E731
    curves, groups = [], []
    cur = pts3(p[0])
    bend = 0
    for k in range(1, len(p)):
        arc = arcs[k - 1] if k < len(p) - 1 else None
        end_pt = arc[0] if arc is not None else p[k]
        nxt = pts3(end_pt)
        curves.append(occ.addLine(cur, nxt))
        groups.append(f"flat_{k}")
        cur = nxt
        if arc is not None:
            bend += 1
            c = pts3(arc[2])
            e = pts3(arc[1])
            curves.append(occ.addCircleArc(cur, c, e))
            groups.append(f"bend_{k}")
            cur = e
    return curves, groups


def _edges_at(gmsh, axis: int, at: float, tol: float) -> list[tuple[int, int]]:
    out = []
    for d, t in gmsh.model.getEntities(1):
        b = gmsh.model.getBoundingBox(d, t)
        if abs(b[axis] - at) <= tol and abs(b[axis + 3] - at) <= tol:
            out.append((d, t))
    return out


def _bbox_of(gmsh, entities) -> np.ndarray:
    lo = np.full(3, np.inf)
    hi = np.full(3, -np.inf)
    for d, t in entities:
        b = gmsh.model.getBoundingBox(d, t)
        lo = np.minimum(lo, b[:3])
        hi = np.maximum(hi, b[3:])
    return np.array([lo, hi])


def _build_geometry(gmsh, model: Model, model_dir: Path,
                    names: dict | None = None) -> tuple[int, list[int], np.ndarray]:
    """Build the model's geometry in gmsh; return its dimension, body entity tags and bounding box.
    ``names`` (when given) is filled with the geometry's own named groups: name -> [(dim, tag)]."""
    occ = gmsh.model.occ
    geo = model.geometry
    groups: dict[str, list[tuple[int, int]]] = {}
    if names is None:
        names = {}
    if isinstance(geo, PlateGeometry):
        x0, y0, z0 = geo.origin
        bbox = np.array([[x0, y0, z0], [x0 + geo.length, y0 + geo.width, z0]])
        straight = [ab for ab in _stiffener_lines(model) if _axis_of(*ab) is not None]
        if not geo.patches and not straight:
            tag = occ.addRectangle(x0, y0, z0, geo.length, geo.width)
            occ.synchronize()
            faces = [tag]
        else:
            faces = _patched_plate(gmsh, geo, straight)
        if geo.cutouts:
            faces = _cutouts(gmsh, geo, faces, names)
        return 2, faces, bbox
    if isinstance(geo, PolygonGeometry):
        pts = [occ.addPoint(x, y, 0.0) for x, y in geo.vertices]
        lines = [occ.addLine(pts[i], pts[(i + 1) % len(pts)]) for i in range(len(pts))]
        tag = occ.addPlaneSurface([occ.addCurveLoop(lines)])
        occ.synchronize()
        faces = _cutouts(gmsh, geo, tag, names) if geo.cutouts else [tag]
        v = np.asarray(geo.vertices, float)
        return 2, faces, np.array([[v[:, 0].min(), v[:, 1].min(), 0.0], [v[:, 0].max(), v[:, 1].max(), 0.0]])
    if isinstance(geo, BlockGeometry):
        x0, y0, z0 = geo.origin
        tag = occ.addBox(x0, y0, z0, geo.length, geo.width, geo.height)
        occ.synchronize()
        return 3, [tag], np.array([[x0, y0, z0], [x0 + geo.length, y0 + geo.width, z0 + geo.height]])
    if isinstance(geo, ProfileGeometry):
        curves, cgroups = _profile_curves(gmsh, geo)
        faces = []
        for c, g in zip(curves, cgroups):
            out = occ.extrude([(1, c)], geo.length, 0.0, 0.0)
            f = [dt for dt in out if dt[0] == 2]
            faces.extend(f)
            groups.setdefault(g, []).extend(f)
        faces = _join(gmsh, groups, faces)
        bbox = _bbox_of(gmsh, faces)
        tol = 1e-6 * float(np.linalg.norm(bbox[1] - bbox[0])) + 2e-7
        groups["end_0"] = _edges_at(gmsh, 0, 0.0, tol)
        groups["end_1"] = _edges_at(gmsh, 0, geo.length, tol)
        names.update(groups)
        return 2, [t for _, t in faces], bbox
    if isinstance(geo, EnclosureGeometry):
        x0, y0, z0 = geo.origin
        box = occ.addBox(x0, y0, z0, geo.length, geo.width, geo.height)
        occ.synchronize()
        faces = [dt for dt in gmsh.model.getBoundary([(3, box)], oriented=False)]
        occ.remove([(3, box)])
        occ.synchronize()
        bbox = np.array([[x0, y0, z0], [x0 + geo.length, y0 + geo.width, z0 + geo.height]])
        tol = 1e-6 * float(np.linalg.norm(bbox[1] - bbox[0])) + 2e-7
        keep = []
        for d, t in faces:
            b = np.array(gmsh.model.getBoundingBox(d, t))
            ext = b[3:] - b[:3]
            ax = int(np.argmin(ext))
            side = "min" if abs(b[ax] - bbox[0][ax]) <= tol else "max"
            name = {("z", "min"): "bottom", ("z", "max"): "top"}.get((_AXES[ax], side), f"side_{_AXES[ax]}{side}")
            if name == "top":
                if geo.top == "open":
                    occ.remove([(d, t)])
                    continue
                name = "lid" if geo.top == "lid" else "top"
            groups[name] = [(d, t)]
            if name.startswith("side_"):
                groups.setdefault("walls", []).append((d, t))
            keep.append((d, t))
        occ.synchronize()
        names.update(groups)
        return 2, [t for _, t in keep], bbox
    if isinstance(geo, CylinderGeometry):
        a = _AXES.index(geo.axis)
        e1, e2 = np.eye(3)[(a + 1) % 3], np.eye(3)[(a + 2) % 3]
        c0 = np.asarray(geo.origin, float)
        centre = occ.addPoint(*c0)
        ring = [occ.addPoint(*(c0 + geo.radius * (math.cos(k * math.pi / 2) * e1 + math.sin(k * math.pi / 2) * e2)))
                for k in range(4)]
        arcs = [occ.addCircleArc(ring[k], centre, ring[(k + 1) % 4]) for k in range(4)]
        vec = np.zeros(3)
        vec[a] = geo.length
        faces = []
        for c in arcs:
            faces.extend(dt for dt in occ.extrude([(1, c)], *vec) if dt[0] == 2)
        occ.remove([(0, centre)])
        wall = _join(gmsh, groups, faces)
        bbox = _bbox_of(gmsh, wall)
        tol = 1e-6 * float(np.linalg.norm(bbox[1] - bbox[0])) + 2e-7
        names.update({"wall": wall, "end_0": _edges_at(gmsh, a, geo.origin[a], tol),
                      "end_1": _edges_at(gmsh, a, geo.origin[a] + geo.length, tol)})
        return 2, [t for _, t in wall], bbox
    assert isinstance(geo, CadGeometry)
    path = (model_dir / geo.file).resolve()
    if not path.is_file():
        if path.exists():  # a FIFO or a device is never opened: gmsh would wait or read forever
            kind = "a folder" if path.is_dir() else "a named pipe, device or socket"
            raise MeshingError(f"geometry.file: {path} is {kind}, not a regular CAD file")
        raise MeshingError(f"geometry.file: CAD file not found: {path}")
    suffix = path.suffix.lower()
    if suffix in (".step", ".stp", ".iges", ".igs"):
        gmsh.option.setString("Geometry.OCCTargetUnit", "M")
    try:
        dimtags = occ.importShapes(str(path))
    except Exception as exc:
        raise MeshingError(f"geometry.file: gmsh cannot read {path.name}: {exc}") from None
    if suffix == ".brep":
        s = _CAD_SCALE[geo.unit]
        if s != 1.0:
            occ.dilate(dimtags, 0, 0, 0, s, s, s)
    occ.synchronize()
    for d in (0, 1, 2, 3):  # the labels the file gives its parts and faces
        for dt in gmsh.model.getEntities(d):
            label = gmsh.model.getEntityName(*dt)
            # gmsh gives a STEP part's label as a path "Shapes/<assembly>/<instance>/<part>":
            # the region name is the part's own label (the last component)
            own = label.rsplit("/", 1)[-1].strip() if label else ""
            if own:
                groups.setdefault(own, []).append(dt)
    vols = gmsh.model.getEntities(3)
    if model.is_shell:
        if vols:
            raise MeshingError(f"geometry.file: {path.name} holds {len(vols)} solid body(ies); a shell section "
                               "needs a surface model (faces only, the part's mid-surface); use a solid section")
        faces = gmsh.model.getEntities(2)
        if not faces:
            raise MeshingError(f"geometry.file: {path.name} holds no faces; a shell section needs a surface model")
        faces = _join(gmsh, groups, faces)
        names.update(groups)
        return 2, [t for _, t in faces], _bbox_of(gmsh, faces)
    if not vols:
        raise MeshingError(f"geometry.file: {path.name} holds no solid body (only surfaces or curves); "
                           "a solid section needs at least one closed volume (for a surface model use a "
                           "shell section)")
    if len(vols) > 1 and geo.join:
        vols = _join(gmsh, groups, vols)
    names.update(groups)
    return 3, [t for _, t in vols], _bbox_of(gmsh, vols)


def _stiffener_lines(model: Model) -> list[tuple[np.ndarray, np.ndarray]]:
    """The segments of the ``line`` regions that members run along (stiffeners): the shell is cut
    there so that its mesh has nodes on them."""
    out = []
    for mb in model.members:
        reg = model.regions.get(mb.along) if mb.along is not None else None
        if isinstance(reg, LineRegion):
            out.append((np.asarray(reg.start, float), np.asarray(reg.end, float)))
    return out


def _axis_of(a: np.ndarray, b: np.ndarray) -> int | None:
    """The axis a segment runs along, or None (skew)."""
    d = np.abs(b - a)
    if d.max() <= 0:
        return None
    k = int(np.argmax(d))
    return k if np.delete(d, k).max() <= 1e-9 * d[k] else None


def _embed_lines(gmsh, model: Model, dim: int, body: list[int], names: dict, tol: float) -> list[int]:
    """Cut the shell's faces along stiffener lines that no edge covers yet (OCC fragment: the mesh
    gets nodes on the line); face groups follow the split faces. Returns the body's face tags."""
    if dim != 2:
        return body
    todo = [(a, b) for a, b in _stiffener_lines(model) if not _curves_on_segment(gmsh, a, b, tol)]
    if not todo:
        return body
    occ = gmsh.model.occ
    lines = [(1, occ.addLine(occ.addPoint(*a), occ.addPoint(*b))) for a, b in todo]
    faces = [(2, t) for t in body]
    _, out_map = occ.fragment(faces, lines)
    occ.synchronize()
    old_to_new = {dt: [x for x in m if x[0] == 2] for dt, m in zip(faces, out_map)}
    for name, members in names.items():
        new = []
        for dt in members:
            new.extend(old_to_new.get(dt, [dt]) if dt[0] == 2 else [dt])
        names[name] = list(dict.fromkeys(new))
    faces = [t for d, t in gmsh.model.getEntities(2)]
    # a line inside a face (not from edge to edge) stays a loose curve of the BRep: embed it
    for k in range(len(todo)):
        for _, c in out_map[len(body) + k]:
            mid = _curve_samples(gmsh, c, 3)[1]
            for f in faces:
                bound = {abs(int(t)) for _, t in gmsh.model.getBoundary([(2, f)], oriented=False)}
                if c in bound:
                    continue
                q = np.asarray(gmsh.model.getClosestPoint(2, f, mid.tolist())[0])
                if np.linalg.norm(q - mid) <= tol:
                    gmsh.model.mesh.embed(1, [c], 2, f)
    return faces


def _patched_plate(gmsh, geo: PlateGeometry, lines=()) -> list[int]:
    """A plate cut along every patch edge (and along the axis-parallel stiffener ``lines``, through
    their ends) into a grid of rectangles (all four-sided, so quads stay structured), made
    conforming by OCC fragment; returns the face tags."""
    occ = gmsh.model.occ
    x0, y0, z0 = geo.origin
    x1, y1 = x0 + geo.length, y0 + geo.width
    scale = max(geo.length, geo.width)

    def cuts(lo, hi, values):
        out = [lo, hi]
        for v in sorted(values):
            if lo < v < hi and all(abs(v - c) > 1e-9 * scale for c in out):
                out.append(v)
        return sorted(out)

    at = [[c for p in geo.patches for c in (p.min[k], p.max[k])] for k in (0, 1)]
    for a, b in lines:  # a line along x cuts at its y and at its ends' x (and the other way round)
        k = _axis_of(a, b)
        at[k] += [a[k], b[k]]
        at[1 - k].append(a[1 - k])
    xs = cuts(x0, x1, at[0])
    ys = cuts(y0, y1, at[1])
    tags = [occ.addRectangle(xa, ya, z0, xb - xa, yb - ya)
            for xa, xb in zip(xs[:-1], xs[1:]) for ya, yb in zip(ys[:-1], ys[1:])]
    if len(tags) > 1:
        occ.fragment([(2, tags[0])], [(2, t) for t in tags[1:]])
    occ.synchronize()
    return [t for _, t in gmsh.model.getEntities(2)]


def _curve_axis(gmsh, tag: int, tol: float) -> str | None:
    b = np.array(gmsh.model.getBoundingBox(1, tag))
    ext = b[3:] - b[:3]
    long = np.flatnonzero(ext > tol)
    return _AXES[long[0]] if long.size == 1 else None


def _mesh_structured(gmsh, model: Model, dim: int, body: list[int], level: int, tol: float) -> None:
    n = _divisions(model, level)
    if isinstance(model.geometry, PolygonGeometry):  # four edges: 1 and 3 get n[0], 2 and 4 get n[1]
        _, edges = gmsh.model.getAdjacencies(2, body[0])
        loop = list(edges)  # in the order the curve loop was built
        for k, c in enumerate(loop):
            gmsh.model.mesh.setTransfiniteCurve(abs(int(c)), n[k % 2] + 1)
        gmsh.model.mesh.setTransfiniteSurface(body[0])
        gmsh.model.mesh.setRecombine(2, body[0])
        return
    geo = model.geometry
    span = [geo.length, geo.width] + ([geo.height] if isinstance(geo, BlockGeometry) else [])
    for _, c in gmsh.model.getEntities(1):
        axis = _curve_axis(gmsh, c, tol)
        if axis is None:
            raise MeshingError("structured meshing needs axis-aligned straight edges")
        a = _AXES.index(axis)
        b = gmsh.model.getBoundingBox(1, c)
        # an edge cut by patches gets its share of the divisions (the whole edge: all of them)
        share = (b[a + 3] - b[a]) / span[a]
        k = n[a] if share > 1 - 1e-6 else max(1, int(round(n[a] * share)))
        gmsh.model.mesh.setTransfiniteCurve(c, k + 1)
    for _, s in gmsh.model.getEntities(2):
        gmsh.model.mesh.setTransfiniteSurface(s)
        gmsh.model.mesh.setRecombine(2, s)
    if dim == 3:
        for v in body:
            gmsh.model.mesh.setTransfiniteVolume(v)
            gmsh.model.mesh.setRecombine(3, v)


def _mesh_size(model: Model, level: int, bbox: np.ndarray) -> float:
    spec = model.mesh
    factor = spec.ratio**level
    if spec.size is not None:
        return spec.size / factor
    ext = bbox[1] - bbox[0]
    n = _divisions(model, level)
    return min(e / k for e, k in zip(ext, n) if e > 0)


def _curve_samples(gmsh, tag: int, n: int = 5) -> np.ndarray:
    lo, hi = gmsh.model.getParametrizationBounds(1, tag)
    u = np.linspace(lo[0], hi[0], n)
    return np.asarray(gmsh.model.getValue(1, tag, u.tolist())).reshape(-1, 3)


def _curve_direction(gmsh, tag: int, tol: float) -> np.ndarray | None:
    """Unit direction of a straight curve (any orientation), None for a curved one."""
    p = _curve_samples(gmsh, tag)
    d = p[-1] - p[0]
    length = float(np.linalg.norm(d))
    if length <= tol:
        return None
    d = d / length
    off = (p - p[0]) - np.outer((p - p[0]) @ d, d)
    return d if np.linalg.norm(off, axis=1).max() <= tol else None


def _curves_on_segment(gmsh, a, b, tol: float) -> list[tuple[int, int]]:
    a = np.asarray(a, float)
    b = np.asarray(b, float)
    ab = b - a
    L2 = float(ab @ ab)
    out = []
    for d, t in gmsh.model.getEntities(1):
        p = _curve_samples(gmsh, t)
        s = np.clip((p - a) @ ab / L2, 0.0, 1.0)
        if np.linalg.norm(p - (a + np.outer(s, ab)), axis=1).max() <= tol:
            out.append((d, t))
    return out


def _select(gmsh, model: Model, name: str, region, dim_body: int, bbox: np.ndarray, tol: float,
            names: dict | None = None) -> list[tuple[int, int]]:
    if isinstance(region, SideRegion):
        edim = dim_body - 1
        out = []
        for side in region.sides:
            if isinstance(side, int):  # a polygon's edge k: from vertex k to vertex k + 1
                v = model.geometry.vertices
                a, b = v[side - 1], v[side % len(v)]
                out.extend(_curves_on_segment(gmsh, [a[0], a[1], 0.0], [b[0], b[1], 0.0], tol))
                continue
            axis = _AXES.index(side[0])
            at = bbox[0 if side.endswith("min") else 1][axis]
            for d, t in gmsh.model.getEntities(edim):
                b = gmsh.model.getBoundingBox(d, t)
                if abs(b[axis] - at) <= tol and abs(b[axis + 3] - at) <= tol:
                    out.append((d, t))
        return sorted(set(out))
    if isinstance(region, BoxRegion):
        edim = _ENTITY_DIM[region.entity] if region.entity else dim_body - 1
        lo = np.asarray(region.min) - tol
        hi = np.asarray(region.max) + tol
        return sorted(gmsh.model.getEntitiesInBoundingBox(*lo, *hi, edim))
    if isinstance(region, NamedRegion):
        names = names or {}
        if region.name not in names:
            known = ", ".join(sorted(names)) or "(none)"
            what = "the CAD file gives no entity the label" if isinstance(model.geometry, CadGeometry) \
                else f"a {model.geometry.kind} has no face or edge group named"
            raise MeshingError(f"regions.{name}.name: {what} '{region.name}'; known names: {known}")
        ents = names[region.name]
        if region.entity:
            ents = [dt for dt in ents if dt[0] == _ENTITY_DIM[region.entity]]
        return sorted(set(ents))
    if isinstance(region, LineRegion):
        return _curves_on_segment(gmsh, region.start, region.end, tol)
    assert isinstance(region, PlaneRegion)
    edim = _ENTITY_DIM[region.entity] if region.entity else dim_body - 1
    axis = _AXES.index(region.axis)
    out = []
    for d, t in gmsh.model.getEntities(edim):
        b = gmsh.model.getBoundingBox(d, t)
        if abs(b[axis] - region.at) <= tol and abs(b[axis + 3] - region.at) <= tol:
            out.append((d, t))
    return out


def _footprint_faces(gmsh, name: str, region: FootprintRegion, body: list[int], reach: float):
    """The body faces through the footprint's centre and the surface normal there."""
    c = np.asarray(region.center, float)
    found, best = [], (np.inf, None)
    for t in body:
        q = np.asarray(gmsh.model.getClosestPoint(2, t, c.tolist())[0])
        dist = float(np.linalg.norm(q - c))
        if dist < best[0]:
            best = (dist, t)
        if dist <= reach:
            found.append(t)
    if not found:
        raise MeshingError(f"regions.{name}.center: the footprint misses the part: its centre "
                           f"{(c * 1e3).round(4).tolist()} mm is {best[0] * 1e3:.4g} mm from the nearest face")
    uv = gmsh.model.getParametrization(2, found[0], c.tolist())
    n = np.asarray(gmsh.model.getNormal(found[0], uv))[:3]
    return found, n / np.linalg.norm(n)


def _inside_footprint(region: FootprintRegion, pts: np.ndarray, normal: np.ndarray) -> np.ndarray:
    c = np.asarray(region.center, float)
    u = np.asarray(region.direction, float)
    u = u - (u @ normal) * normal
    if np.linalg.norm(u) < 1e-6:  # the given direction is along the normal: take another axis
        alt = np.eye(3)[int(np.argmin(np.abs(normal)))]
        u = alt - (alt @ normal) * normal
    u /= np.linalg.norm(u)
    v = np.cross(normal, u)
    d = pts - c
    du, dv, dn = d @ u, d @ v, d @ normal
    eps = 1e-9
    if region.shape == "rectangle":
        a, b = region.size
        inside = (np.abs(du) <= a / 2 + eps) & (np.abs(dv) <= b / 2 + eps)
        depth = max(a, b) / 2
    else:
        r = region.diameter / 2
        inside = du**2 + dv**2 <= (r + eps) ** 2
        depth = r
    return inside & (np.abs(dn) <= depth)


def _size_fields(gmsh, model: Model, selections: dict, level: int, h: float) -> None:
    """Background size field for ``mesh.local_sizes``: the given size on and near each region."""
    field = gmsh.model.mesh.field
    ids = []
    factor = model.mesh.ratio**level
    for name, size in model.mesh.local_sizes.items():
        size = size / factor
        region = model.regions[name]
        if isinstance(region, (FootprintRegion, PointRegion)):
            f = field.add("Ball")
            c = region.center if isinstance(region, FootprintRegion) else region.at
            if isinstance(region, PointRegion):
                radius = region.radius
            elif region.shape == "circle":
                radius = region.diameter / 2
            else:
                radius = float(np.hypot(*region.size)) / 2
            for key, val in zip(("XCenter", "YCenter", "ZCenter"), c):
                field.setNumber(f, key, float(val))
            field.setNumber(f, "Radius", float(radius))
            field.setNumber(f, "Thickness", float(size))
        else:
            f = field.add("Constant")
            ents = selections.get(name, [])
            for d, key in ((0, "PointsList"), (1, "CurvesList"), (2, "SurfacesList"), (3, "VolumesList")):
                tags = [t for dd, t in ents if dd == d]
                if tags:
                    field.setNumbers(f, key, tags)
            field.setNumber(f, "IncludeBoundary", 1)
        field.setNumber(f, "VIn", float(size))
        field.setNumber(f, "VOut", float(h))
        ids.append(f)
    if ids:
        m = field.add("Min")
        field.setNumbers(m, "FieldsList", ids)
        field.setAsBackgroundMesh(m)
        gmsh.option.setNumber("Mesh.MeshSizeMin", min(model.mesh.local_sizes.values()) / factor * 0.5)


_FLIP = {"tri3": [0, 2, 1], "tri6": [0, 2, 1, 5, 4, 3], "quad4": [0, 3, 2, 1], "quad8": [0, 3, 2, 1, 7, 6, 5, 4]}


def _orient(cells: np.ndarray, family: str) -> tuple[np.ndarray, np.ndarray]:
    """Orient shell elements consistently: across every edge shared by exactly two elements the two
    run it in opposite directions (their normals then point to the same side). The first element of
    each connected part keeps its orientation. Returns the cells and the 0-based part of each cell."""
    nc = 4 if family.startswith("quad") else 3
    corners = cells[:, :nc]
    ne = cells.shape[0]
    a = corners.ravel()
    b = np.roll(corners, -1, axis=1).ravel()
    owner = np.repeat(np.arange(ne), nc)
    key = np.minimum(a, b) * (int(cells.max()) + 1) + np.maximum(a, b)
    forward = a < b
    order = np.argsort(key, kind="stable")
    k = key[order]
    # edges shared by exactly two elements
    starts = np.flatnonzero(np.r_[True, k[1:] != k[:-1]])
    counts = np.diff(np.r_[starts, k.size])
    pairs = starts[counts == 2]
    e1, e2 = order[pairs], order[pairs + 1]
    same = forward[e1] == forward[e2]  # same direction: one of the two must flip
    c1, c2 = owner[e1], owner[e2]
    src = np.r_[c1, c2]
    dst = np.r_[c2, c1]
    par = np.r_[same, same]
    order = np.argsort(src, kind="stable")
    src, dst, par = src[order], dst[order], par[order]
    indptr = np.searchsorted(src, np.arange(ne + 1))
    flip = np.zeros(ne, dtype=bool)
    part = np.full(ne, -1, dtype=np.int64)
    n_parts = 0
    for seed in range(ne):
        if part[seed] >= 0:
            continue
        part[seed] = n_parts
        stack = [seed]
        while stack:
            c = stack.pop()
            for j in range(indptr[c], indptr[c + 1]):
                n = dst[j]
                if part[n] < 0:
                    part[n] = n_parts
                    flip[n] = flip[c] ^ par[j]
                    stack.append(n)
        n_parts += 1
    out = cells.copy()
    out[flip] = cells[flip][:, _FLIP[family]]
    return out, part


def _node_parts(cells: np.ndarray, n_points: int) -> tuple[int, np.ndarray]:
    """Connected parts of a mesh (elements joined through shared nodes): count and part per cell.
    Label propagation with pointer jumping, numpy only (``check`` imports no scipy)."""
    labels = np.arange(n_points)
    while True:
        low = labels[cells].min(axis=1)
        new = labels.copy()
        np.minimum.at(new, cells, low[:, None])
        new = new[new]  # pointer jumping
        new = new[new]
        if np.array_equal(new, labels):
            break
        labels = new
    uniq, inv = np.unique(labels[cells[:, 0]], return_inverse=True)
    return int(uniq.size), inv.ravel()


def _where(gmsh, dim: int, tag: int) -> str:
    b = np.asarray(gmsh.model.getBoundingBox(dim, tag)) + np.array([1e-7] * 3 + [-1e-7] * 3)  # OCC padding
    return ", ".join(f"{a} {b[i]:.6g}..{b[i + 3]:.6g} m" for i, a in enumerate(_AXES) if b[i + 3] - b[i] > 1e-9
                     ) or f"at {b[:3].round(9).tolist()} m"


def _section_owners(gmsh, model: Model, dim: int, body: list[int],
                    selections: dict[str, list[tuple[int, int]]]) -> dict[int, int]:
    """Index of the section of every body entity (face of a shell, volume of a solid).

    Every entity must lie in exactly one section: a region's entities go to its section, the
    remaining ones to the section without a region (if there is one)."""
    secs = model.section_list()
    if model.section is not None:
        return {t: 0 for t in body}
    word = "face" if dim == 2 else "body"
    owner: dict[int, int] = {}
    rest = None
    for i, (name, sec) in enumerate(secs):
        if sec.region is None:
            rest = i
            continue
        tags = [t for d, t in selections.get(sec.region, []) if d == dim and t in body]
        if not tags:
            raise ModelError(f"region '{sec.region}' holds no {word} of the part; a {sec.kind} section "
                             f"needs {word}s", field=f"sections.{name}.region")
        for t in tags:
            if t in owner:
                raise ModelError(f"{word} {t} ({_where(gmsh, dim, t)}) lies in two sections, "
                                 f"'{secs[owner[t]][0]}' and '{name}'; every element belongs to exactly "
                                 "one section: narrow one of the regions", field=f"sections.{name}.region")
            owner[t] = i
    for t in body:
        if t not in owner:
            if rest is None:
                raise ModelError(f"{word} {t} ({_where(gmsh, dim, t)}) belongs to no section; give a section "
                                 "a region that holds it, or add one section without 'region' for the rest",
                                 field="sections")
            owner[t] = rest
    if rest is not None and rest not in owner.values():
        raise ModelError(f"section '{secs[rest][0]}' (the rest of the body) covers no {word}: the other "
                         "sections claim them all", field=f"sections.{secs[rest][0]}")
    return owner


def _element_measures(gmsh, dim: int, tag: int, coords_of) -> tuple[np.ndarray, np.ndarray]:
    """Nodes (gmsh tags) of an entity's elements and each node's tributary measure."""
    types, _, ntags = gmsh.model.mesh.getElements(dim, tag)
    node_list, weight_list = [], []
    for et, nt in zip(types, ntags):
        _, edim, _, nper, _, ncorner = gmsh.model.mesh.getElementProperties(et)
        conn = np.asarray(nt, dtype=np.int64).reshape(-1, nper)
        corners = coords_of(conn[:, :ncorner])  # (ne, nc, 3)
        if edim == 0:
            meas = np.ones(conn.shape[0])
        elif edim == 1:
            meas = np.linalg.norm(corners[:, 1] - corners[:, 0], axis=1)
        elif edim == 2:
            a = np.linalg.norm(np.cross(corners[:, 1] - corners[:, 0], corners[:, 2] - corners[:, 0]), axis=1) / 2
            if ncorner == 4:
                a = a + np.linalg.norm(np.cross(corners[:, 2] - corners[:, 0], corners[:, 3] - corners[:, 0]), axis=1) / 2
            meas = a
        else:
            meas = np.ones(conn.shape[0])
        node_list.append(conn.ravel())
        weight_list.append(np.repeat(meas / nper, nper))
    if not node_list:
        return np.empty(0, np.int64), np.empty(0)
    return np.concatenate(node_list), np.concatenate(weight_list)


def _is_structured(model: Model) -> bool:
    """Quads and hexes are structured (transfinite) on a plate, a four-sided polygon and a block."""
    geo = model.geometry
    if isinstance(geo, BlockGeometry):
        return True
    if isinstance(geo, PlateGeometry):  # a skew stiffener line makes it unstructured
        return not geo.cutouts and all(_axis_of(a, b) is not None for a, b in _stiffener_lines(model))
    if isinstance(geo, PolygonGeometry):
        return not geo.cutouts and len(geo.vertices) == 4
    return False


def _four_sided_patches(gmsh, body: list[int], h: float, tol: float) -> bool:
    """Make every face a structured quad patch when each has four sides with equal opposite
    lengths (panels, profile segments, bends, cylinder quarters): a regular mesh with nodes
    matching across shared edges. False (nothing set) when a face does not qualify."""
    plan = {}
    for f in body:
        if len(gmsh.model.mesh.getEmbedded(2, f)):  # a stiffener line inside: no transfinite patch
            return False
        curves = [abs(int(c)) for _, c in gmsh.model.getBoundary([(2, f)], oriented=False)]
        if len(curves) != 4 or len(set(curves)) != 4:
            return False
        ends = [{abs(int(p)) for _, p in gmsh.model.getBoundary([(1, c)], oriented=False)} for c in curves]
        lengths = [gmsh.model.occ.getMass(1, c) for c in curves]
        for k in range(4):
            opposite = [j for j in range(4) if j != k and not (ends[j] & ends[k])]
            if len(opposite) != 1 or abs(lengths[k] - lengths[opposite[0]]) > 1e-6 * max(lengths) + tol:
                return False
        for c, length in zip(curves, lengths):
            plan[c] = max(1, int(math.ceil(length / h - 1e-6)))
    for c, n in plan.items():
        gmsh.model.mesh.setTransfiniteCurve(c, n + 1)
    for f in body:
        gmsh.model.mesh.setTransfiniteSurface(f)
        gmsh.model.mesh.setRecombine(2, f)
    return True


def _generate(gmsh, dim: int, rec, recombine: bool, h: float) -> None:
    """Mesh; with ``recombine`` (unstructured quads) fall back to subdividing a coarser mesh when
    recombination leaves triangles."""
    if recombine:
        gmsh.option.setNumber("Mesh.Algorithm", 8)  # frontal-Delaunay for quads
        gmsh.option.setNumber("Mesh.RecombineAll", 1)
        gmsh.option.setNumber("Mesh.RecombinationAlgorithm", 1)  # blossom
    gmsh.model.mesh.generate(dim)
    if recombine:
        types = set()
        for _, t in gmsh.model.getEntities(2):
            types.update(int(x) for x in gmsh.model.mesh.getElements(2, t)[0])
        if types - {3}:
            gmsh.model.mesh.clear()
            gmsh.option.setNumber("Mesh.SubdivisionAlgorithm", 1)  # every element into quads of half its size
            gmsh.option.setNumber("Mesh.MeshSizeFactor", 2.0)  # every size, local ones too, twice: halved again
            gmsh.model.mesh.generate(dim)
    if rec.order >= 2:
        gmsh.option.setNumber("Mesh.SecondOrderIncomplete", 1 if rec.incomplete else 0)
        gmsh.model.mesh.setOrder(rec.order)


def build_mesh(model: Model, model_dir: str | Path = ".", level: int = 0,
               save_to: str | Path | None = None) -> Mesh:
    """Mesh ``model`` at refinement ``level`` (0 = as specified, each level finer by ``mesh.ratio``).

    With ``save_to`` the mesh is also written there (``.vtu``, opens in ParaView).
    """
    model_dir = Path(model_dir)
    family = model.mesh.family
    rec = get_family(family)
    fdim, nper, order = rec.dim, rec.n_nodes, rec.order
    with _Session() as gmsh:
        gmsh.model.add("modebridge")
        names: dict[str, list[tuple[int, int]]] = {}
        dim, body, bbox = _build_geometry(gmsh, model, model_dir, names)
        if dim != fdim:
            raise MeshingError(f"mesh.family: '{family}' is a {fdim}-D element but the geometry is {dim}-D")
        diag = float(np.linalg.norm(bbox[1] - bbox[0]))
        tol = max(1e-9, 1e-6 * diag) + 2e-7  # OCC pads bounding boxes by about 1e-7
        body = _embed_lines(gmsh, model, dim, body, names, tol)
        structured = rec.structured and _is_structured(model)
        recombine = rec.shape == "quad" and not structured
        h = _mesh_size(model, level, bbox)
        if structured:
            _mesh_structured(gmsh, model, dim, body, level, tol)
        else:
            if rec.structured and rec.dim == 3:
                raise MeshingError(f"mesh.family: '{family}' needs a block geometry; "
                                   "mesh CAD bodies with tet4 or tet10")
            gmsh.option.setNumber("Mesh.MeshSizeMin", h * 0.5)
            gmsh.option.setNumber("Mesh.MeshSizeMax", h)
            gmsh.option.setNumber("Mesh.MeshSizeFromPoints", 0)
            gmsh.option.setNumber("Mesh.MeshSizeExtendFromBoundary", 0)
            gmsh.option.setNumber("Mesh.Algorithm", 6)
            if dim == 3 and isinstance(model.geometry, CadGeometry):
                # gmsh's default Delaunay left degenerate tetrahedra (minSICN 0.0) in a 2 mm bent
                # sheet at 1.5 mm, and CalculiX stopped on a non-positive Jacobian; HXT with
                # Netgen's optimiser gave minSICN 0.37 at 1, 1.5 and 2 mm (measured here).
                # Blocks keep the default (their meshes are what the tests were written on).
                gmsh.option.setNumber("Mesh.Algorithm3D", 10)
                gmsh.option.setNumber("Mesh.OptimizeNetgen", 1)
        # regions and their physical groups, before meshing so they are kept with the mesh
        selections = {}
        deferred = {}  # footprints and points: picked from the mesh's nodes after meshing
        for name, region in model.regions.items():
            if isinstance(region, (FootprintRegion, PointRegion)):
                if isinstance(region, FootprintRegion) and dim != 2:
                    raise MeshingError(f"regions.{name}: a footprint lies on a shell's faces; "
                                       "for a solid use 'box' or 'point'")
                deferred[name] = region
                continue
            ents = _select(gmsh, model, name, region, dim, bbox, tol, names)
            if not ents:
                raise MeshingError(f"regions.{name}: the selector picks no geometric entity; "
                                   f"the body spans {bbox[0].round(6).tolist()} to {bbox[1].round(6).tolist()} m")
            selections[name] = ents
            by_dim: dict[int, list[int]] = {}
            for d, t in ents:
                by_dim.setdefault(d, []).append(t)
            for d, tags in by_dim.items():
                gmsh.model.addPhysicalGroup(d, tags, name=name)
        owner = _section_owners(gmsh, model, dim, body, selections)
        gmsh.model.addPhysicalGroup(dim, body, name="body")
        if model.mesh.local_sizes:
            if structured:
                raise MeshingError("mesh.local_sizes: a structured mesh (divisions) has no local sizes; "
                                   "give 'size' on a geometry meshed unstructured")
            _size_fields(gmsh, model, selections, level, h)
        if recombine and not model.mesh.local_sizes and _four_sided_patches(gmsh, body, h, tol):
            recombine = False
            structured = True
        footprint_faces = {}
        for name, region in deferred.items():
            if isinstance(region, FootprintRegion):
                footprint_faces[name] = _footprint_faces(gmsh, name, region, body, 1e-3 * diag + tol)
        try:
            _generate(gmsh, dim, rec, recombine, h)
        except MeshingError:
            raise
        except Exception as exc:
            raise MeshingError(f"gmsh failed to mesh the geometry: {exc}") from None

        tags, coords, _ = gmsh.model.mesh.getNodes()
        tags = np.asarray(tags, dtype=np.int64)
        coords = np.asarray(coords).reshape(-1, 3)
        lookup = np.full(int(tags.max()) + 1, -1, dtype=np.int64)
        lookup[tags] = np.arange(tags.size)

        want = rec.gmsh_type
        conns = []
        elem_tags = []
        cell_entity = []
        elem_section = []
        for v in body:
            types, etags, ntags = gmsh.model.mesh.getElements(dim, v)
            for et, eg, nt in zip(types, etags, ntags):
                if et != want:
                    name = gmsh.model.mesh.getElementProperties(et)[0]
                    raise MeshingError(f"mesh.family: gmsh produced '{name}' elements where '{family}' "
                                       "was asked for; the geometry does not allow a pure mesh of this family")
                conns.append(lookup[np.asarray(nt, dtype=np.int64).reshape(-1, nper)])
                elem_tags.append(np.asarray(eg))
                cell_entity.append(np.full(len(eg), v, dtype=np.int64))
                elem_section.append(np.full(len(eg), owner[v], dtype=np.int64))
        if not conns:
            raise MeshingError("gmsh produced no elements")
        cells = np.concatenate(conns)
        etags = np.concatenate(elem_tags)
        cell_entity = np.concatenate(cell_entity)
        cell_section = np.concatenate(elem_section)
        quality = np.asarray(gmsh.model.mesh.getElementQualities(etags, "minSICN"))

        # keep only the points the body's elements use, numbered compactly
        used = np.unique(cells)
        compact = np.full(tags.size, -1, dtype=np.int64)
        compact[used] = np.arange(used.size)
        points = coords[used]
        cells = compact[cells]

        if dim == 2:
            n_parts, part_of = _node_parts(cells, points.shape[0])
            if n_parts > 1:
                sizes = np.bincount(part_of)
                what = ("the surface model" if isinstance(model.geometry, CadGeometry) else "the part")
                raise MeshingError(f"geometry: {what} falls apart into {n_parts} unconnected parts "
                                   f"({', '.join(str(int(k)) for k in sizes)} elements): faces that should meet "
                                   "leave a gap; close it in the CAD (or join the faces) so the part is one piece")
            if family in _FLIP and (not structured or not isinstance(model.geometry, (PlateGeometry, PolygonGeometry))):
                cells, _ = _orient(cells, family)

        def coords_of(gtags):
            return coords[lookup[gtags]]

        regions: dict[str, list[RegionPart]] = {}
        for name, ents in selections.items():
            parts = []
            for d, t in ents:
                ntag, _, _ = gmsh.model.mesh.getNodes(d, t, includeBoundary=True)
                idx = compact[lookup[np.asarray(ntag, dtype=np.int64)]]
                idx = np.unique(idx[idx >= 0])
                enodes, ew = _element_measures(gmsh, d, t, coords_of)
                if enodes.size:
                    eidx = compact[lookup[enodes]]
                    ok = eidx >= 0
                    acc = np.zeros(points.shape[0])
                    np.add.at(acc, eidx[ok], ew[ok])
                    w = acc[idx]
                else:
                    w = np.ones(idx.size)
                axis = _curve_axis(gmsh, t, tol) if d == 1 else None
                direction = _curve_direction(gmsh, t, tol) if d == 1 else None
                parts.append(RegionPart(dim=d, nodes=idx, axis=axis, weights=w, direction=direction))
            if not any(p.nodes.size for p in parts):
                raise MeshingError(f"regions.{name}: the selected entities hold no mesh nodes")
            regions[name] = parts
        for name, region in deferred.items():
            if isinstance(region, PointRegion):
                dist = np.linalg.norm(points - np.asarray(region.at), axis=1)
                idx = np.flatnonzero(dist <= region.radius * (1 + 1e-9))
                if not idx.size:
                    raise MeshingError(f"regions.{name}.radius: the capture radius "
                                       f"{region.radius * 1e3:.4g} mm catches no mesh node; the nearest node is "
                                       f"{dist.min() * 1e3:.4g} mm from 'at'")
                regions[name] = [RegionPart(dim=0, nodes=idx, axis=None, weights=np.ones(idx.size))]
                continue
            faces, normal = footprint_faces[name]
            on = np.zeros(points.shape[0], dtype=bool)
            for t in faces:
                ntag, _, _ = gmsh.model.mesh.getNodes(2, t, includeBoundary=True)
                nidx = compact[lookup[np.asarray(ntag, dtype=np.int64)]]
                on[nidx[nidx >= 0]] = True
            cand = np.flatnonzero(on)
            inside = np.zeros(points.shape[0], dtype=bool)
            inside[cand[_inside_footprint(region, points[cand], normal)]] = True
            idx = np.flatnonzero(inside)
            if not idx.size:
                raise MeshingError(f"regions.{name}: the footprint catches no mesh node (it is smaller than "
                                   f"the elements there, {h * 1e3:.4g} mm); make it larger or refine the mesh")
            # tributary area inside the footprint: the elements wholly inside share their area
            # among their nodes (a node on the footprint's border gets the inside part only)
            acc = np.zeros(points.shape[0])
            for t in faces:
                enodes, ew = _element_measures(gmsh, 2, t, coords_of)
                eidx = compact[lookup[enodes]]
                nper_e = max(1, enodes.size // max(1, len(gmsh.model.mesh.getElements(2, t)[1][0])))
                eidx = eidx.reshape(-1, nper_e)
                full = inside[eidx].all(axis=1) & (eidx >= 0).all(axis=1)
                np.add.at(acc, eidx[full].ravel(), ew.reshape(-1, nper_e)[full].ravel())
            regions[name] = [RegionPart(dim=2, nodes=idx, axis=None, weights=acc[idx])]

        surfaces = _surface_notes(gmsh, names, cells, cell_entity, points, family) if dim == 2 else []

    # representative element size: (mean measure)^(1/dim)
    meas = _cell_measure(points, cells, family)
    h = float(np.mean(meas) ** (1.0 / fdim))
    mesh = Mesh(points=points, family=family, cells=cells, regions=regions, quality=quality,
                element_size=h, level=level, structured=structured, cell_section=cell_section,
                section_names=[n for n, _ in model.section_list()], cell_entity=cell_entity,
                surfaces=surfaces)
    if save_to is not None:
        save_mesh(mesh, save_to)
    return mesh


def _cell_normals(points: np.ndarray, cells: np.ndarray, family: str) -> np.ndarray:
    nc = 4 if family.startswith("quad") else 3
    p = points[cells[:, :nc]]
    if nc == 4:
        n = np.cross(p[:, 2] - p[:, 0], p[:, 3] - p[:, 1])
    else:
        n = np.cross(p[:, 1] - p[:, 0], p[:, 2] - p[:, 0])
    return n / np.linalg.norm(n, axis=1, keepdims=True)


def _surface_notes(gmsh, names: dict, cells, cell_entity, points, family) -> list[dict]:
    """Per face: its groups, element count, and its normal (after orientation): the one direction of
    a flat face, or "curved" with the spread of the element normals."""
    normals = _cell_normals(points, cells, family)
    group_of: dict[int, list[str]] = {}
    for name, ents in names.items():
        for d, t in ents:
            if d == 2:
                group_of.setdefault(t, []).append(name)
    out = []
    for t in np.unique(cell_entity)[:200]:
        sel = cell_entity == t
        n = normals[sel]
        mean = n.mean(axis=0)
        flat = bool(np.linalg.norm(n - n[0], axis=1).max() < 1e-6)
        out.append({"face": int(t), "groups": sorted(group_of.get(int(t), [])), "elements": int(sel.sum()),
                    "normal": [round(float(x), 6) for x in n[0]] if flat else "curved",
                    "mean_normal": [round(float(x), 6) for x in mean]})
    return out


def _cell_measure(points: np.ndarray, cells: np.ndarray, family: str) -> np.ndarray:
    return cell_measure(points, cells, family)


def save_mesh(mesh: Mesh, path: str | Path) -> Path:
    """Write the mesh as VTU with one 0/1 point array per named region (and, with several sections,
    a cell array ``section``: each element's section index in the model's order)."""
    import meshio

    from ..io import atomic_path

    path = Path(path)
    vtk_type, conn = mesh.vtk_cells()
    meshio_type = get_family(mesh.family).meshio_type
    point_data = {}
    for name in mesh.regions:
        mask = np.zeros(mesh.n_nodes, dtype=np.int8)
        mask[mesh.region_nodes(name)] = 1
        point_data[f"region_{name}"] = mask
    # meshio reorders to VTK itself for tetra10/hexahedron20? It takes VTK order for VTU: pass gmsh order
    # through meshio's own gmsh->vtk handling is not applied here, so give VTK order directly.
    cell_data = {"quality_minSICN": [mesh.quality]} if mesh.quality is not None else {}
    if len(mesh.section_names) > 1:  # index into the model's sections, in their order
        cell_data["section"] = [mesh.cell_sections().astype(np.int32)]
    m = meshio.Mesh(mesh.points, [(meshio_type, conn)], point_data=point_data, cell_data=cell_data)
    with atomic_path(path) as tmp:
        meshio.write(tmp, m, file_format="vtu")
    return path


def write_step_box(path: str | Path, lo, hi) -> Path:
    """Write a box as a STEP file (for tests and examples); coordinates in metres."""
    path = Path(path)
    with _Session() as gmsh:
        gmsh.model.add("box")
        gmsh.option.setString("Geometry.OCCTargetUnit", "M")
        lo = np.asarray(lo, float)
        hi = np.asarray(hi, float)
        gmsh.model.occ.addBox(*lo, *(hi - lo))
        gmsh.model.occ.synchronize()
        gmsh.write(str(path))
    return path


def write_step(path: str | Path, build, labels: list[str] | None = None) -> Path:
    """Write a STEP file (metres) of what ``build(gmsh)`` makes with gmsh's OCC kernel (for tests,
    examples and benchmarks). ``labels`` names the file's top-level shapes in the order they were
    made (STEP product names: gmsh reads them back as entity labels, i.e. CAD names)."""
    import re

    path = Path(path)
    with _Session() as gmsh:
        gmsh.model.add("step")
        gmsh.option.setString("Geometry.OCCTargetUnit", "M")
        build(gmsh)
        gmsh.model.occ.synchronize()
        gmsh.write(str(path))
    if labels:
        text = path.read_text(encoding="utf-8", errors="replace")
        pattern = re.compile(r"Open CASCADE STEP translator [0-9.]+ [0-9]+\.([0-9]+)")

        def name(m):
            k = int(m.group(1)) - 1
            return labels[k] if k < len(labels) else m.group(0)

        text = pattern.sub(name, text)
        assembly = re.sub(r"[^A-Za-z0-9_-]", "_", path.stem)
        path.write_text(re.sub(r"Open CASCADE STEP translator [0-9.]+ [0-9]+", assembly, text), encoding="utf-8")
    return path


def profile_faces(gmsh, points, length: float, radii=None) -> list[tuple[int, int]]:
    """The mid-surface faces of an extruded sheet profile (as geometry kind 'profile' builds it),
    for writing test and example CAD files; coordinates in metres."""
    from ..model import ProfileGeometry

    geo = ProfileGeometry.model_construct(kind="profile", points=[list(map(float, p)) for p in points],
                                          radii=radii, length=float(length))
    curves, _ = _profile_curves(gmsh, geo)
    faces = []
    for c in curves:
        faces.extend(dt for dt in gmsh.model.occ.extrude([(1, c)], length, 0.0, 0.0) if dt[0] == 2)
    return faces


def profile_solid(gmsh, points, length: float, thickness: float, radii=None) -> list[tuple[int, int]]:
    """A solid sheet part: the profile's mid-line thickened by ``thickness`` (half each side, bends
    with inner/outer radii r ∓ t/2) and extruded along x; coordinates in metres."""
    occ = gmsh.model.occ
    p = np.asarray(points, float)
    radii = list(radii) if radii is not None else [0.0] * (len(p) - 2)
    seg = np.diff(p, axis=0)
    tang = seg / np.linalg.norm(seg, axis=1, keepdims=True)
    nrm = np.c_[-tang[:, 1], tang[:, 0]]
    pieces = []
    for k in range(len(seg)):  # one slab per straight segment, trimmed at the bend tangent points
        a, b = p[k].copy(), p[k + 1].copy()
        for end, vertex in ((0, k), (1, k + 1)):
            if 0 < vertex < len(p) - 1 and radii[vertex - 1] > 0:
                u1, u2 = tang[vertex - 1], tang[vertex]
                half = math.acos(float(np.clip(np.dot(-u1, u2), -1, 1))) / 2
                d = radii[vertex - 1] / math.tan(half)
                if end == 0:
                    a = a + tang[k] * d
                else:
                    b = b - tang[k] * d
        corners = [a + nrm[k] * thickness / 2, b + nrm[k] * thickness / 2,
                   b - nrm[k] * thickness / 2, a - nrm[k] * thickness / 2]
        pts = [occ.addPoint(0.0, float(c[0]), float(c[1])) for c in corners]
        lines = [occ.addLine(pts[i], pts[(i + 1) % 4]) for i in range(4)]
        pieces.append(occ.addPlaneSurface([occ.addCurveLoop(lines)]))
    for k in range(1, len(p) - 1):  # the bends: annular sectors, or a filler at a sharp corner
        r = radii[k - 1]
        u1, u2 = tang[k - 1], tang[k]
        half = math.acos(float(np.clip(np.dot(-u1, u2), -1, 1))) / 2
        if r <= 0:
            continue
        d = r / math.tan(half)
        bis = (-u1 + u2) / np.linalg.norm(-u1 + u2)
        centre = p[k] + bis * (r / math.sin(half))
        t1, t2 = p[k] - u1 * d, p[k] + u2 * d
        ring = []
        for rr in (r - thickness / 2, r + thickness / 2):
            q1 = centre + (t1 - centre) * rr / r
            q2 = centre + (t2 - centre) * rr / r
            ring.append((q1, q2))
        c = occ.addPoint(0.0, float(centre[0]), float(centre[1]))
        (i1, i2), (o1, o2) = ring
        pi1, pi2, po1, po2 = (occ.addPoint(0.0, float(q[0]), float(q[1])) for q in (i1, i2, o1, o2))
        loop = [occ.addCircleArc(pi1, c, pi2), occ.addLine(pi2, po2), occ.addCircleArc(po2, c, po1),
                occ.addLine(po1, pi1)]
        pieces.append(occ.addPlaneSurface([occ.addCurveLoop(loop)]))
    faces = [(2, t) for t in pieces]
    if len(faces) > 1:
        faces, _ = occ.fuse(faces[:1], faces[1:])
    vols = []
    for dt in faces:
        vols.extend(v for v in occ.extrude([dt], length, 0.0, 0.0) if v[0] == 3)
    return vols
