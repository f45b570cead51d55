"""Size guards: estimate a mesh's nodes, free DOF and memory from the model before meshing, and
refuse a model that would not fit, with the figures and the way to override.

The estimate uses the same divisions the mesher uses (``meshing.gmsh._divisions``): structured
quads and hexes exactly, triangles and tetrahedra from the element size (about 1.2 nodes per
h² of area, or per h³ of volume, for gmsh's frontal algorithms; quadratic elements have about
4 (shells) or 8 (solids) times the nodes of linear ones on the same divisions). CAD geometry is
not estimated before meshing (its size is unknown until the file is read).

Memory: about :data:`BYTES_PER_DOF` bytes per free DOF for meshing, the deck and the solver's
factorised stiffness together (a deliberately generous figure; common practice, no source).

Override: ``[mesh] max_dof = N`` in the model raises the limit to N free DOF and skips the
memory check (the analyst takes responsibility).
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass

from .errors import ModelError

__all__ = ["SizeEstimate", "estimate_size", "check_size", "DEFAULT_MAX_DOF", "BYTES_PER_DOF",
           "check_extent"]

#: free DOF above which a model is refused unless ``mesh.max_dof`` allows it
DEFAULT_MAX_DOF = 2_000_000
#: estimated peak bytes per DOF (mesh + deck + factorisation); generous (no source)
BYTES_PER_DOF = 4096
#: geometry extents outside this range (m) are refused: the geometry kernel's tolerance is 1e-7
#: m, and beyond 10 km nothing modebridge meshes is meant
EXTENT_RANGE = (1e-5, 1e4)


@dataclass
class SizeEstimate:
    nodes: int
    dof: int  #: upper bound: supports are not subtracted
    memory_bytes: int
    level: int


def _extents(model) -> list[tuple[str, float]]:
    from .model import BlockGeometry, PlateGeometry, PolygonGeometry

    geo = model.geometry
    if isinstance(geo, PlateGeometry):
        return [("geometry.length", geo.length), ("geometry.width", geo.width)]
    if isinstance(geo, BlockGeometry):
        return [("geometry.length", geo.length), ("geometry.width", geo.width), ("geometry.height", geo.height)]
    if isinstance(geo, PolygonGeometry):
        xs = [v[0] for v in geo.vertices]
        ys = [v[1] for v in geo.vertices]
        return [("geometry.vertices", max(max(xs) - min(xs), max(ys) - min(ys)))]
    return []


def check_extent(model, source=None) -> None:
    """Refuse geometry the kernel cannot mesh meaningfully (too small or too large)."""
    lo, hi = EXTENT_RANGE
    for field, value in _extents(model):
        if not (lo <= value <= hi):
            raise ModelError(f"{value:.3g} m is outside what modebridge meshes ({lo:g} m to {hi:g} m); "
                             "check the unit", source=source, field=field)
    for name, sec in model.section_list():
        t = getattr(sec, "thickness", None)
        if t is not None and not (lo / 10 <= t <= hi):
            field = "section.thickness" if model.section is not None else f"sections.{name}.thickness"
            raise ModelError(f"{t:.3g} m is outside {lo / 10:g} m to {hi:g} m; check the unit",
                             source=source, field=field)


def estimate_size(model, level: int = 0) -> SizeEstimate | None:
    """Nodes, DOF and memory of the mesh at ``level``; None where it cannot be told before meshing
    (CAD, profile, enclosure, cylinder) and for a model without continuum."""
    from .meshing.gmsh import _divisions
    from .model import BlockGeometry, PlateGeometry, PolygonGeometry

    if not isinstance(model.geometry, (PlateGeometry, PolygonGeometry, BlockGeometry)):
        return None  # CAD, sheet parts, cylinders: unknown before meshing; 'points': no mesh
    n = [float(x) for x in _divisions(model, level)]
    fam = model.mesh.family
    quadratic = fam in ("tri6", "quad8", "tet10", "hex20")
    structured = fam in ("quad4", "quad8", "hex8", "hex20")
    if len(n) == 2:
        nodes = (n[0] + 1) * (n[1] + 1) * (1.0 if structured else 1.2) * (4 if quadratic else 1)
    else:
        nodes = (n[0] + 1) * (n[1] + 1) * (n[2] + 1) * (1.0 if structured else 1.2) * (8 if quadratic else 1)
    dof = nodes * (6 if model.is_shell else 3)
    nodes_i = int(min(nodes, 1e18))
    dof_i = int(min(dof, 1e18))
    return SizeEstimate(nodes_i, dof_i, int(min(dof * BYTES_PER_DOF, 1e21)), level)


def _physical_memory() -> int | None:
    try:
        return os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    except (ValueError, OSError, AttributeError):
        return None


def check_size(model, level: int = 0, source=None) -> SizeEstimate | None:
    """Refuse, before meshing, a model whose mesh would exceed the DOF limit or this machine's
    memory; ``mesh.max_dof`` raises the limit and skips the memory check."""
    check_extent(model, source)
    est = estimate_size(model, level)
    if est is None:
        return None
    override = getattr(model.mesh, "max_dof", None)
    limit = override or DEFAULT_MAX_DOF
    where = f" at refinement level {level}" if level else ""
    if est.dof > limit:
        raise ModelError(f"the mesh{where} would have about {_fmt(est.nodes)} nodes and {_fmt(est.dof)} DOF, above "
                         f"the limit of {_fmt(limit)} DOF; coarsen the mesh, or set [mesh] max_dof = N to allow "
                         "more", source=source, field="mesh.size" if model.mesh.size is not None else "mesh.divisions")
    ram = _physical_memory()
    if override is None and ram and est.memory_bytes > ram:
        raise ModelError(f"the mesh{where} would need about {est.memory_bytes / 2**30:.1f} GiB "
                         f"({_fmt(est.dof)} DOF) but this machine has {ram / 2**30:.1f} GiB; coarsen the mesh, "
                         "or set [mesh] max_dof = N to run it anyway", source=source, field="mesh")
    return est


def _fmt(x: float) -> str:
    if x >= 1e15:
        return f"{x:.1e}"
    if x >= 1e6:
        return f"{x / 1e6:.3g} M"
    return f"{int(x):d}" if float(x).is_integer() or x == math.floor(x) else f"{x:.0f}"
