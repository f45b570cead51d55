"""Meshing with gmsh (the only module that imports gmsh).

Plates and blocks are meshed structured (transfinite) with quads and hexes,
unstructured with triangles and tetrahedra; CAD bodies unstructured with
tetrahedra. Second order families are serendipity for quad8/hex20.
Every named region becomes a physical group.
"""

from __future__ import annotations

import math
import threading
from pathlib import Path

import numpy as np

from ..errors import MeshingError, ModelError
from ..elements import FamilyView, cell_measure, get_family
from ..mesh import Mesh, RegionPart
from ..model import (BlockGeometry, BoxRegion, CadGeometry, Model, PlaneRegion, PlateGeometry, PolygonGeometry,
                     SideRegion)

__all__ = ["build_mesh", "write_step_box"]

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
        try:
            gmsh.initialize(readConfigFiles=False, interruptible=False)
        except TypeError:  # older gmsh without the keywords
            gmsh.initialize()
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


def _build_geometry(gmsh, model: Model, model_dir: Path) -> tuple[int, list[int], np.ndarray]:
    occ = gmsh.model.occ
    geo = model.geometry
    if isinstance(geo, PlateGeometry):
        x0, y0, z0 = geo.origin
        bbox = np.array([[x0, y0, z0], [x0 + geo.length, y0 + geo.width, z0]])
        if not geo.patches:
            tag = occ.addRectangle(x0, y0, z0, geo.length, geo.width)
            occ.synchronize()
            return 2, [tag], bbox
        return 2, _patched_plate(gmsh, geo), bbox
    if isinstance(geo, PolygonGeometry):
        pts = [occ.addPoint(x, y, 0.0) for x, y in geo.vertices]
        lines = [occ.addLine(pts[i], pts[(i + 1) % len(pts)]) for i in range(len(pts))]
        tag = occ.addPlaneSurface([occ.addCurveLoop(lines)])
        occ.synchronize()
        v = np.asarray(geo.vertices, float)
        return 2, [tag], np.array([[v[:, 0].min(), v[:, 1].min(), 0.0], [v[:, 0].max(), v[:, 1].max(), 0.0]])
    if isinstance(geo, BlockGeometry):
        x0, y0, z0 = geo.origin
        tag = occ.addBox(x0, y0, z0, geo.length, geo.width, geo.height)
        occ.synchronize()
        return 3, [tag], np.array([[x0, y0, z0], [x0 + geo.length, y0 + geo.width, z0 + geo.height]])
    assert isinstance(geo, CadGeometry)
    path = (model_dir / geo.file).resolve()
    if not path.is_file():
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
    vols = gmsh.model.getEntities(3)
    if not vols:
        raise MeshingError(f"geometry.file: {path.name} holds no solid body (only surfaces or curves); "
                           "a CAD geometry needs at least one closed volume")
    if len(vols) > 1 and geo.join:
        occ.fragment(vols[:1], vols[1:])
        occ.synchronize()
        vols = gmsh.model.getEntities(3)
    lo = np.full(3, np.inf)
    hi = np.full(3, -np.inf)
    for d, t in vols:
        b = gmsh.model.getBoundingBox(d, t)
        lo = np.minimum(lo, b[:3])
        hi = np.maximum(hi, b[3:])
    return 3, [t for _, t in vols], np.array([lo, hi])


def _patched_plate(gmsh, geo: PlateGeometry) -> list[int]:
    """A plate cut along every patch edge into a grid of rectangles (all four-sided, so quads stay
    structured), made conforming by OCC fragment; returns the face tags."""
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

    xs = cuts(x0, x1, [c for p in geo.patches for c in (p.min[0], p.max[0])])
    ys = cuts(y0, y1, [c for p in geo.patches for c in (p.min[1], p.max[1])])
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


def _select(gmsh, model: Model, name: str, region, dim_body: int, bbox: np.ndarray, tol: float) -> list[tuple[int, int]]:
    if isinstance(region, SideRegion):
        edim = dim_body - 1
        out = []
        for side in region.sides:
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
    assert isinstance(region, PlaneRegion)
    edim = _ENTITY_DIM[region.entity] if region.entity else dim_body - 1
    axis = _AXES.index(region.axis)
    out = []
    for d, t in gmsh.model.getEntities(edim):
        b = gmsh.model.getBoundingBox(d, t)
        if abs(b[axis] - region.at) <= tol and abs(b[axis + 3] - region.at) <= tol:
            out.append((d, t))
    return out


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
        tags = [t for d, t in selections[sec.region] if d == dim and t in body]
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
        dim, body, bbox = _build_geometry(gmsh, model, model_dir)
        if dim != fdim:
            raise MeshingError(f"mesh.family: '{family}' is a {fdim}-D element but the geometry is {dim}-D")
        diag = float(np.linalg.norm(bbox[1] - bbox[0]))
        tol = max(1e-9, 1e-6 * diag) + 2e-7  # OCC pads bounding boxes by about 1e-7
        structured = rec.structured
        if structured:
            if isinstance(model.geometry, CadGeometry):
                raise MeshingError(f"mesh.family: '{family}' needs a plate or block geometry; "
                                   "mesh CAD bodies with tet4 or tet10")
            _mesh_structured(gmsh, model, dim, body, level, tol)
        else:
            h = _mesh_size(model, level, bbox)
            gmsh.option.setNumber("Mesh.MeshSizeMin", h * 0.5)
            gmsh.option.setNumber("Mesh.MeshSizeMax", h)
            gmsh.option.setNumber("Mesh.MeshSizeFromPoints", 0)
            gmsh.option.setNumber("Mesh.MeshSizeExtendFromBoundary", 0)
            gmsh.option.setNumber("Mesh.Algorithm", 6)
        # regions and their physical groups, before meshing so they are kept with the mesh
        selections = {}
        for name, region in model.regions.items():
            ents = _select(gmsh, model, name, region, dim, bbox, tol)
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
        try:
            gmsh.model.mesh.generate(dim)
            if order >= 2:
                gmsh.option.setNumber("Mesh.SecondOrderIncomplete", 1 if rec.incomplete else 0)
                gmsh.model.mesh.setOrder(order)
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
                elem_section.append(np.full(len(eg), owner[v], dtype=np.int64))
        if not conns:
            raise MeshingError("gmsh produced no elements")
        cells = np.concatenate(conns)
        etags = np.concatenate(elem_tags)
        cell_section = np.concatenate(elem_section)
        quality = np.asarray(gmsh.model.mesh.getElementQualities(etags, "minSICN"))

        # keep only the points the body's elements use, numbered compactly
        used = np.unique(cells)
        compact = np.full(tags.size, -1, dtype=np.int64)
        compact[used] = np.arange(used.size)
        points = coords[used]
        cells = compact[cells]

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
                parts.append(RegionPart(dim=d, nodes=idx, axis=axis, weights=w))
            if not any(p.nodes.size for p in parts):
                raise MeshingError(f"regions.{name}: the selected entities hold no mesh nodes")
            regions[name] = parts

    # representative element size: (mean measure)^(1/dim)
    meas = _cell_measure(points, cells, family)
    h = float(np.mean(meas) ** (1.0 / fdim))
    mesh = Mesh(points=points, family=family, cells=cells, regions=regions, quality=quality,
                element_size=h, level=level, structured=structured, cell_section=cell_section,
                section_names=[n for n, _ in model.section_list()])
    if save_to is not None:
        save_mesh(mesh, save_to)
    return mesh


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
