"""The neutral model: one description of a part that every solver plugin reads.

A model is a TOML file (schema: :func:`json_schema`, documented in the README).
Every dimensional value carries its unit and is stored here in SI base units
(m, kg, s, Pa). Validation errors become :class:`bridge.errors.ModelError`
naming the file, the field path, the problem and what is accepted.
"""

from __future__ import annotations

import hashlib
import json
import re
import tomllib
import unicodedata
from pathlib import Path
from typing import Annotated, Any, Literal, Union, get_args

from pydantic import (
    BaseModel,
    AfterValidator,
    BeforeValidator,
    ConfigDict,
    Field,
    ValidationError,
    WithJsonSchema,
    field_validator,
    model_validator,
)

from .elements import families_for_section, family_names, get_family
from .errors import ModelError, UnitError
from .units import DIMENSIONS, QuantityError, parse_quantity

__all__ = [
    "Model",
    "load_model",
    "read_toml",
    "parse_model",
    "json_schema",
    "SHELL_FAMILIES",
    "SOLID_FAMILIES",
    "SIDES",
    "DOF_NAMES",
    "SUPPORT_KINDS",
    "COUPLING_KINDS",
    "GROUND",
    "SURFACE_KINDS",
    "DEFAULT_SECTION_NAME",
]

#: element families of each section kind, derived from the registry (bridge/elements.py) when this
#: module is imported; validation asks the registry itself, so a family registered later counts
SHELL_FAMILIES = families_for_section("shell")
SOLID_FAMILIES = families_for_section("solid")
#: Sides of a primitive: a plate has four edges, a block six faces.
SIDES = ("xmin", "xmax", "ymin", "ymax", "zmin", "zmax")
DOF_NAMES = ("ux", "uy", "uz", "rx", "ry", "rz")
#: Support kinds a model may name (a plugin declares the subset it supports).
SUPPORT_KINDS = ("clamped", "pinned", "simply_supported", "symmetry", "fixed_dofs")
#: How a reference point is tied to its nodes: rigidly, or only following their weighted mean.
COUPLING_KINDS = ("rigid", "distributing")
#: The name of the fixed ground a spring may end on.
GROUND = "ground"

#: The name the single ``[section]`` of a model goes by (in ``check``, meshes and jobs).
DEFAULT_SECTION_NAME = "section"

#: Names that reach a solver deck or a file name: a letter, then letters, digits, _ or -.
NAME_PATTERN = r"^[A-Za-z][A-Za-z0-9_-]{0,47}$"
_NAME_RE = re.compile(NAME_PATTERN)
#: A model's title may hold spaces and dots, but no path separators or control characters.
TITLE_PATTERN = r"^[A-Za-z0-9][A-Za-z0-9 _.,()+-]{0,79}$"


def _quantity(dimension: str):
    _, si_unit, example = DIMENSIONS[dimension]
    return Annotated[
        float,
        BeforeValidator(lambda v, _d=dimension: parse_quantity(v, _d)),
        WithJsonSchema({"type": "string", "description": f"a {dimension} with its unit, e.g. \"{example}\"",
                        "examples": [example]}),
    ]


Length = _quantity("length")
Mass = _quantity("mass")
Pressure = _quantity("pressure")
Density = _quantity("density")
Inertia = _quantity("inertia")
Stiffness = _quantity("stiffness")
RotationalStiffness = _quantity("rotational_stiffness")
Frequency = _quantity("frequency")
Duration = _quantity("time")
Point = Annotated[list[Length], Field(min_length=3, max_length=3)]
Name = Annotated[str, Field(pattern=NAME_PATTERN)]


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


# --- geometry -------------------------------------------------------------

Point2 = Annotated[list[Length], Field(min_length=2, max_length=2)]


class CircleCutout(_Strict):
    """A circular hole through a flat plate or polygon (x, y of its centre in the plate's plane)."""

    shape: Literal["circle"]
    center: Point2
    diameter: Annotated[Length, Field(gt=0)]


class RectangleCutout(_Strict):
    """A rectangular hole (sides along x and y) through a flat plate or polygon."""

    shape: Literal["rectangle"]
    center: Point2
    size: Annotated[list[Annotated[Length, Field(gt=0)]], Field(min_length=2, max_length=2)]  #: along x, y


Cutout = Annotated[Union[CircleCutout, RectangleCutout], Field(discriminator="shape")]
class Patch(_Strict):
    """A rectangle of a plate (x-y corners in the model's coordinates) meshed as faces of its own.

    The plate is cut along the lines of every patch's edges, so a ``box`` region with
    ``entity = "face"`` picks the patch (e.g. a doubler with a section of its own).
    """

    min: Point2
    max: Point2

    @model_validator(mode="after")
    def _ordered(self):
        if any(lo >= hi for lo, hi in zip(self.min, self.max)):
            raise ValueError("min must be below max in x and in y")
        return self


class PlateGeometry(_Strict):
    """A flat rectangular plate in the x-y plane: the mid-surface of a shell."""

    kind: Literal["plate"]
    length: Annotated[Length, Field(gt=0)]  #: along x
    width: Annotated[Length, Field(gt=0)]  #: along y
    origin: Point = Field(default_factory=lambda: [0.0, 0.0, 0.0])  #: corner with the smallest coordinates
    cutouts: list[Cutout] = Field(default_factory=list)  #: holes; their x, y are absolute
    #: rectangles meshed as faces of their own (for sections or regions on part of the plate)
    patches: Annotated[list[Patch], Field(max_length=32)] = Field(
        default_factory=list, description="rectangles meshed as faces of their own: the plate is cut along "
                                          "their edges, so a 'box' region with entity = \"face\" picks them")

    @model_validator(mode="after")
    def _patches_inside(self):
        x0, y0, _ = self.origin
        x1, y1 = x0 + self.length, y0 + self.width
        tol = 1e-9 * max(self.length, self.width)
        for i, p in enumerate(self.patches):
            if p.min[0] < x0 - tol or p.min[1] < y0 - tol or p.max[0] > x1 + tol or p.max[1] > y1 + tol:
                raise ValueError(f"patches[{i}] reaches outside the plate ({x0:g}..{x1:g} m in x, "
                                 f"{y0:g}..{y1:g} m in y)")
        return self


class PolygonGeometry(_Strict):
    """A flat polygonal plate in the z = 0 plane (shell mid-surface), vertices in order.

    With four vertices quads are meshed structured ('divisions' counts elements along the first
    and the second edge); otherwise unstructured.
    """

    kind: Literal["polygon"]
    vertices: Annotated[list[Point2], Field(min_length=3, max_length=64)]
    cutouts: list[Cutout] = Field(default_factory=list)  #: holes

    @model_validator(mode="after")
    def _area(self):
        import numpy as _np

        v = _np.asarray(self.vertices, float)
        x, y = v[:, 0], v[:, 1]
        area = 0.5 * (_np.dot(x, _np.roll(y, -1)) - _np.dot(y, _np.roll(x, -1)))
        if abs(area) <= 1e-18:
            raise ValueError("the vertices enclose no area")
        return self


class BlockGeometry(_Strict):
    """A rectangular block, for solid elements."""

    kind: Literal["block"]
    length: Annotated[Length, Field(gt=0)]  #: along x
    width: Annotated[Length, Field(gt=0)]  #: along y
    height: Annotated[Length, Field(gt=0)]  #: along z
    origin: Point = Field(default_factory=lambda: [0.0, 0.0, 0.0])


class CadGeometry(_Strict):
    """A STEP, IGES or BREP file read by gmsh's OpenCASCADE kernel: solid bodies (solid section) or
    faces (shell section: the faces are the mid-surface, joined where they share edges).
    Names the file gives its faces and edges are regions (``select = "named"``)."""

    kind: Literal["cad"]
    file: str  #: relative to the model file
    unit: Literal["m", "mm", "cm", "in"] = "mm"  #: length unit the CAD file is drawn in
    #: bodies that touch share their nodes there (conforming mesh); false keeps them apart
    join: bool = Field(True, description="bodies that touch share their nodes there (conforming); "
                                         "false keeps them apart")

    @field_validator("file")
    @classmethod
    def _cad_suffix(cls, v: str) -> str:
        if Path(v).suffix.lower() not in (".step", ".stp", ".iges", ".igs", ".brep"):
            raise ValueError("must be a .step, .stp, .iges, .igs or .brep file")
        return v


class ProfileGeometry(_Strict):
    """A sheet profile extruded along x: the polyline (y, z) of its mid-surface with optional bend
    radii at the inner vertices (angle, channel, hat and Z sections; a bent bracket).

    Face groups (region ``select = "named"``): ``flat_1`` … one per straight segment, ``bend_1`` …
    one per rounded vertex; edge groups ``end_0`` (x = 0) and ``end_1`` (x = length).
    """

    kind: Literal["profile"]
    points: Annotated[list[Point2], Field(min_length=2, max_length=32)]  #: (y, z) of the mid-surface
    radii: list[Annotated[Length, Field(ge=0)]] | None = None  #: mid-surface bend radius per inner vertex (0 = sharp)
    length: Annotated[Length, Field(gt=0)]  #: extrusion along x

    @model_validator(mode="after")
    def _segments(self):
        import numpy as _np

        p = _np.asarray(self.points, float)
        seg = _np.linalg.norm(_np.diff(p, axis=0), axis=1)
        if (seg <= 0).any():
            raise ValueError("two consecutive profile points coincide")
        if self.radii is not None and len(self.radii) != len(self.points) - 2:
            raise ValueError(f"'radii' needs one value per inner point ({len(self.points) - 2}), "
                             f"not {len(self.radii)}")
        return self


class EnclosureGeometry(_Strict):
    """A box of thin panels (mid-surfaces) from ``origin`` to ``origin + (length, width, height)``.

    Face groups: ``bottom``, ``side_xmin``, ``side_xmax``, ``side_ymin``, ``side_ymax``, ``walls``
    (the four sides) and, unless ``top = "open"``, ``top`` (``top = "closed"``) or ``lid``
    (``top = "lid"``: the same panel, named as a part of its own). Panels share their edges.
    """

    kind: Literal["enclosure"]
    length: Annotated[Length, Field(gt=0)]  #: along x
    width: Annotated[Length, Field(gt=0)]  #: along y
    height: Annotated[Length, Field(gt=0)]  #: along z
    origin: Point = Field(default_factory=lambda: [0.0, 0.0, 0.0])
    top: Literal["open", "closed", "lid"] = "open"


class CylinderGeometry(_Strict):
    """The mid-surface of a thin circular cylinder (a tube wall), open at both ends.

    Face group ``wall``; edge groups ``end_0`` and ``end_1``.
    """

    kind: Literal["cylinder"]
    radius: Annotated[Length, Field(gt=0)]  #: mid-surface radius
    length: Annotated[Length, Field(gt=0)]
    axis: Literal["x", "y", "z"] = "z"
    origin: Point = Field(default_factory=lambda: [0.0, 0.0, 0.0])  #: centre of the end at the lower axis coordinate


class PointsGeometry(_Strict):
    """No continuum: the model is its reference points, tied by couplings and springs, joined by
    beam members and carrying masses (equipment on mounts, a frame). Needs neither a section nor
    a mesh."""

    kind: Literal["points"]


class BeamSection(_Strict):
    """A beam cross-section of a named shape (see :mod:`bridge.sections`), lengths with units;
    ``general`` takes area, iy, iz, j and the shear areas directly."""

    shape: Literal["rectangle", "round", "tube", "i_section", "channel", "angle", "general"]
    material: Name
    width: Length | None = None
    height: Length | None = None
    diameter: Length | None = None
    wall: Length | None = None
    web: Length | None = None
    flange: Length | None = None
    thickness: Length | None = None
    area: Annotated[float, BeforeValidator(lambda v: parse_quantity(v, "area"))] | None = None
    iy: Annotated[float, BeforeValidator(lambda v: parse_quantity(v, "second_moment"))] | None = None
    iz: Annotated[float, BeforeValidator(lambda v: parse_quantity(v, "second_moment"))] | None = None
    j: Annotated[float, BeforeValidator(lambda v: parse_quantity(v, "second_moment"))] | None = None
    shear_area_y: Annotated[float, BeforeValidator(lambda v: parse_quantity(v, "area"))] | None = None
    shear_area_z: Annotated[float, BeforeValidator(lambda v: parse_quantity(v, "area"))] | None = None

    def dims(self) -> dict[str, float]:
        return {k: v for k, v in self.model_dump().items() if k not in ("shape", "material") and v is not None}


class Member(_Strict):
    """A straight beam member between two reference points (``start``, ``end``), meshed with
    ``divisions`` elements, or a stiffener ``along`` a region of edges of a shell, whose beam
    elements join the shell mesh's nodes on those edges.

    ``orientation``: the direction of the section's local z (its height); default global z (global
    y for a member along z); a stiffener's default is the shell's normal there. ``side`` ("top":
    the side the shell's normal points to, or "bottom") seats a stiffener's section on that face of
    the shell: its centroid lies t/2 + c from the mid-surface (t the shell's thickness, c the
    centroid's height above the section's base) and its local z points away from the shell.
    ``offset``: instead, the centroid's distance from the nodes along the local z (signed)."""

    name: Name
    start: Name | None = None  #: a reference point
    end: Name | None = None  #: a reference point
    along: Name | None = None  #: a region of shell edges (a stiffener)
    section: Name  #: a beam section
    divisions: Annotated[int, Field(ge=1, le=2000)] = 10
    orientation: Annotated[list[float], Field(min_length=3, max_length=3)] | None = None
    side: Literal["top", "bottom"] | None = None
    offset: Length | None = None  #: m, the centroid's distance from the nodes along the local z

    @model_validator(mode="after")
    def _ends_or_along(self):
        if self.along is not None:
            if self.start is not None or self.end is not None:
                raise ValueError("give either 'along' (a region of shell edges) or 'start' and 'end' "
                                 "(reference points), not both")
            if "divisions" in self.model_fields_set:
                raise ValueError("a member 'along' a region takes the shell mesh's nodes there: leave out "
                                 "'divisions' (refine the shell mesh instead)")
        else:
            if self.start is None or self.end is None:
                raise ValueError("a member needs 'start' and 'end' (reference points), or 'along' (a region "
                                 "of shell edges)")
            if self.side is not None:
                raise ValueError("'side' seats a stiffener on a shell's face: it needs 'along'; give "
                                 "'offset' for a member between reference points")
        if self.side is not None and self.offset is not None:
            raise ValueError("give 'side' or 'offset', not both")
        return self


Geometry = Annotated[Union[PlateGeometry, PolygonGeometry, BlockGeometry, CadGeometry, ProfileGeometry,
                           EnclosureGeometry, CylinderGeometry, PointsGeometry],
                     Field(discriminator="kind")]
#: geometry kinds that are mid-surfaces (shell sections); "cad" may be either (surfaces or solids)
SURFACE_KINDS = ("plate", "polygon", "profile", "enclosure", "cylinder")


# --- regions ----------------------------------------------------------------

class SideRegion(_Strict):
    """Sides of the primitive: edges of a plate, faces of a block; a polygon's edges by number
    (edge k runs from vertex k to vertex k + 1, counted from 1) or by bounding-box side."""

    select: Literal["sides"]
    sides: Annotated[list[Union[Literal[SIDES], Annotated[int, Field(ge=1, le=64)]]],  # type: ignore[valid-type]
                     Field(min_length=1)]


class BoxRegion(_Strict):
    """Every entity of the given kind that lies wholly inside an axis-aligned box."""

    select: Literal["box"]
    min: Point
    max: Point
    entity: Literal["point", "edge", "face", "volume"] | None = None  #: default: edges of a plate, faces of a solid

    @model_validator(mode="after")
    def _ordered(self):
        if any(lo > hi for lo, hi in zip(self.min, self.max)):
            raise ValueError("min must not exceed max in any coordinate")
        return self


class PlaneRegion(_Strict):
    """Every entity of the given kind that lies in the plane ``axis = at``."""

    select: Literal["plane"]
    axis: Literal["x", "y", "z"]
    at: Length
    entity: Literal["point", "edge", "face"] | None = None


#: a label a CAD file gives an entity, or a built-in face/edge group name
CAD_NAME_PATTERN = r"^[A-Za-z0-9][A-Za-z0-9 _.:/#+-]{0,79}$"


class NamedRegion(_Strict):
    """The entities a CAD file labels ``name`` (STEP face/edge names), or a face/edge group of a
    built-in geometry (``lid``, ``walls``, ``flat_1``, ``end_0`` …)."""

    select: Literal["named"]
    name: Annotated[str, Field(pattern=CAD_NAME_PATTERN)]
    entity: Literal["point", "edge", "face", "volume"] | None = None  #: only entities of this kind


class FootprintRegion(_Strict):
    """The mesh nodes inside a rectangle or circle drawn on the part's surface around ``center``
    (a PCB, a motor flange): nodes of the faces through ``center`` whose projection on the
    surface's tangent plane there falls inside. Masses on it are spread by tributary area."""

    select: Literal["footprint"]
    shape: Literal["rectangle", "circle"]
    center: Point
    size: Annotated[list[Annotated[Length, Field(gt=0)]], Field(min_length=2, max_length=2)] | None = None  #: rectangle
    diameter: Annotated[Length, Field(gt=0)] | None = None  #: circle
    direction: Annotated[list[float], Field(min_length=3, max_length=3)] = \
        Field(default_factory=lambda: [1.0, 0.0, 0.0])  #: the rectangle's first side, projected on the surface

    @model_validator(mode="after")
    def _dims(self):
        if self.shape == "rectangle" and (self.size is None or self.diameter is not None):
            raise ValueError("a rectangle footprint takes 'size' = [a, b] (and no 'diameter')")
        if self.shape == "circle" and (self.diameter is None or self.size is not None):
            raise ValueError("a circle footprint takes 'diameter' (and no 'size')")
        return self


class PointRegion(_Strict):
    """The mesh nodes within ``radius`` of ``at`` (a screw: the rim of its hole, or the nodes
    around a point)."""

    select: Literal["point"]
    at: Point
    radius: Annotated[Length, Field(gt=0)]


class LineRegion(_Strict):
    """The straight edges that lie on the segment from ``start`` to ``end`` (any direction)."""

    select: Literal["line"]
    start: Point
    end: Point

    @model_validator(mode="after")
    def _length(self):
        if self.start == self.end:
            raise ValueError("'start' and 'end' coincide")
        return self


Region = Annotated[Union[SideRegion, BoxRegion, PlaneRegion, NamedRegion, FootprintRegion, PointRegion,
                         LineRegion], Field(discriminator="select")]


# --- materials, sections ----------------------------------------------------

class Material(_Strict):
    """Isotropic linear elastic material."""

    youngs_modulus: Annotated[Pressure, Field(gt=0)]
    poisson_ratio: Annotated[float, Field(gt=-1.0, lt=0.5, allow_inf_nan=False, strict=True)]
    density: Annotated[Density, Field(gt=0)]


class ShellSection(_Strict):
    kind: Literal["shell"]
    material: Name
    thickness: Annotated[Length, Field(gt=0)]


class SolidSection(_Strict):
    kind: Literal["solid"]
    material: Name


Section = Annotated[Union[ShellSection, SolidSection], Field(discriminator="kind")]


class NamedShellSection(ShellSection):
    """A shell section on the faces of a region (or, without ``region``, on every face no other
    section claims)."""

    region: Name | None = Field(None, description="a region of faces; none: every face no other section claims")


class NamedSolidSection(SolidSection):
    """A solid section on the bodies of a region (or, without ``region``, on every body no other
    section claims)."""

    region: Name | None = Field(None, description="a region of volumes; none: every body no other section claims")


NamedSection = Annotated[Union[NamedShellSection, NamedSolidSection], Field(discriminator="kind")]


# --- supports, masses ---------------------------------------------------------

class Support(_Strict):
    """A support on a named region, or on a reference point (``point``).

    * ``clamped``: all translations and (shells) rotations fixed.
    * ``pinned``: translations fixed, rotations free.
    * ``simply_supported`` (shell plate edges): out-of-plane and along-edge translations fixed;
      the edge may rotate and move in-plane across the edge.
    * ``symmetry``: mirror plane with the given ``normal``.
    * ``fixed_dofs``: the listed degrees of freedom.
    """

    region: Name | None = None
    point: Name | None = None  #: a reference point instead of a region
    kind: Literal[SUPPORT_KINDS]  # type: ignore[valid-type]
    dofs: list[Literal[DOF_NAMES]] | None = None  # type: ignore[valid-type]
    normal: Literal["x", "y", "z"] | None = None

    @model_validator(mode="after")
    def _extra_fields(self):
        if (self.region is None) == (self.point is None):
            raise ValueError("give exactly one of 'region' (a named region) or 'point' (a reference point)")
        if self.point is not None and self.kind == "simply_supported":
            raise ValueError("'simply_supported' holds plate edges; a reference point takes clamped, "
                             "pinned or fixed_dofs")
        if self.kind == "fixed_dofs" and not self.dofs:
            raise ValueError("kind 'fixed_dofs' needs 'dofs', a list from ux, uy, uz, rx, ry, rz")
        if self.kind != "fixed_dofs" and self.dofs is not None:
            raise ValueError(f"'dofs' belongs only to kind 'fixed_dofs', not '{self.kind}'")
        if self.kind == "symmetry" and self.normal is None:
            raise ValueError("kind 'symmetry' needs 'normal' = \"x\", \"y\" or \"z\"")
        if self.kind != "symmetry" and self.normal is not None:
            raise ValueError(f"'normal' belongs only to kind 'symmetry', not '{self.kind}'")
        return self


class PointMass(_Strict):
    """Mounted equipment: a mass at a point (nearest node), spread over a region, or at a
    reference point (``point``), where it may carry its inertia tensor about its centre of gravity.

    ``inertia``: [Ixx, Iyy, Izz] (principal axes along x, y, z) or [Ixx, Iyy, Izz, Ixy, Iyz, Ixz],
    the components of the inertia tensor at the centre of gravity, products of inertia with the
    tensor's sign (Ixy = −∫ x y dm).
    """

    name: Name
    mass: Annotated[Mass, Field(gt=0)]
    at: Point | None = None
    region: Name | None = None
    point: Name | None = None  #: a reference point (see ``reference_points``)
    inertia: Annotated[list[Inertia], Field(min_length=3, max_length=6)] | None = None

    @model_validator(mode="after")
    def _where(self):
        if sum(x is not None for x in (self.at, self.region, self.point)) != 1:
            raise ValueError("give exactly one of 'at' (a point), 'region' (a named region) or "
                             "'point' (a reference point)")
        if self.inertia is not None:
            if self.point is None:
                raise ValueError("'inertia' needs 'point': put the mass at a reference point at its centre "
                                 "of gravity and tie that point to its footprint with a coupling")
            inertia_tensor(self.inertia)  # raises ValueError when not physical
        return self


def inertia_tensor(values) -> "np.ndarray":
    """The 3 × 3 inertia tensor from [Ixx, Iyy, Izz] or [Ixx, Iyy, Izz, Ixy, Iyz, Ixz]; ValueError when it
    is not positive definite or its principal moments break the triangle inequality I1 ≤ I2 + I3
    (a body's second moments ∫ x² dm cannot be negative)."""
    import numpy as _np

    v = [float(x) for x in values]
    if len(v) not in (3, 6):
        raise ValueError("'inertia' takes 3 values [Ixx, Iyy, Izz] or 6 [Ixx, Iyy, Izz, Ixy, Iyz, Ixz]")
    ixy, iyz, ixz = v[3:] if len(v) == 6 else (0.0, 0.0, 0.0)
    J = _np.array([[v[0], ixy, ixz], [ixy, v[1], iyz], [ixz, iyz, v[2]]])
    p = _np.linalg.eigvalsh(J)
    scale = max(abs(p).max(), 1e-300)
    if p[0] <= 1e-12 * scale:
        raise ValueError(f"the inertia tensor is not positive definite (principal moments "
                         f"{', '.join(f'{x:.4g}' for x in p)} kg*m^2); every principal moment must be > 0")
    if p[2] > p[0] + p[1] + 1e-9 * scale:
        raise ValueError(f"the principal moments {', '.join(f'{x:.4g}' for x in p)} kg*m^2 break the triangle "
                         "inequality (the largest must not exceed the sum of the other two): no body has them")
    return J


Direction = Annotated[list[float], Field(min_length=3, max_length=3)]


class Coupling(_Strict):
    """A reference point tied to nodes: ``rigid`` (the nodes move as one rigid body with the point),
    or ``distributing`` (the point follows the weighted mean motion of the nodes and adds no
    stiffness). The nodes are those of ``region`` and/or the reference points listed in ``points``."""

    reference: Name  #: a reference point
    kind: Literal[COUPLING_KINDS]  # type: ignore[valid-type]
    region: Name | None = None
    points: list[Name] | None = None

    @model_validator(mode="after")
    def _nodes(self):
        if self.region is None and not self.points:
            raise ValueError("a coupling needs the nodes it ties: 'region' (a named region) or 'points' "
                             "(reference points); none given")
        if self.points and self.reference in self.points:
            raise ValueError(f"the reference point '{self.reference}' cannot be among its own 'points'")
        return self


class Spring(_Strict):
    """Elastic mounts (isolators, bushings) in their own axes.

    One mount per reference point in ``points`` (a bushing of several mounts at once), or the
    stiffness shared over the nodes of ``region`` by their tributary length/area (an elastic
    bedding with the given total stiffness). Each mount goes to ``to``: "ground" or a reference point.
    ``stiffness`` acts along the mount's x, y, z axes; ``axes`` gives its x and y directions
    (z = x × y; default: the global axes). ``rotational_stiffness`` needs rotations at both ends:
    reference points that lead a rigid coupling, or the ground.
    """

    name: Name
    points: Annotated[list[Name], Field(min_length=1)] | None = None
    region: Name | None = None
    to: Name = GROUND
    stiffness: Annotated[list[Annotated[Stiffness, Field(ge=0)]], Field(min_length=3, max_length=3)]
    rotational_stiffness: Annotated[list[Annotated[RotationalStiffness, Field(ge=0)]],
                                    Field(min_length=3, max_length=3)] | None = None
    axes: Annotated[list[Direction], Field(min_length=2, max_length=2)] | None = None

    @model_validator(mode="after")
    def _check(self):
        if (self.points is None) == (self.region is None):
            raise ValueError("give exactly one of 'points' (reference points, one mount each) or 'region'")
        if not any(k > 0 for k in self.stiffness + (self.rotational_stiffness or [])):
            raise ValueError("every stiffness is zero: the spring would hold nothing")
        if self.axes is not None:
            spring_axes(self.axes)
        return self


def spring_axes(axes) -> "np.ndarray":
    """Rows: the mount's unit x, y, z in global coordinates (y made orthogonal to x)."""
    import numpy as _np

    if axes is None:
        return _np.eye(3)
    x = _np.asarray(axes[0], float)
    y = _np.asarray(axes[1], float)
    if not (_np.linalg.norm(x) > 0 and _np.linalg.norm(y) > 0):
        raise ValueError("'axes' holds a zero vector; give the mount's x and y directions")
    x = x / _np.linalg.norm(x)
    y = y - x * (x @ y)
    if _np.linalg.norm(y) < 1e-6 * _np.linalg.norm(axes[1]):
        raise ValueError("'axes': the x and y directions are parallel")
    y = y / _np.linalg.norm(y)
    return _np.vstack([x, y, _np.cross(x, y)])


# --- analysis, mesh, requirements --------------------------------------------

class Analysis(_Strict):
    modes: Annotated[int, Field(ge=1, le=500)] = 10
    min_frequency: Annotated[Frequency, Field(ge=0)] | None = None
    max_frequency: Annotated[Frequency, Field(gt=0)] | None = None
    #: directions in which the 90 % effective-mass rule is checked (those the part is excited in)
    mass_directions: Annotated[list[Literal["x", "y", "z"]], Field(min_length=1)] = \
        Field(default_factory=lambda: ["x", "y", "z"])

    @model_validator(mode="after")
    def _bounds(self):
        if self.min_frequency is not None and self.max_frequency is not None \
                and self.min_frequency >= self.max_frequency:
            raise ValueError("min_frequency must be below max_frequency")
        return self


def _known_family(v: str) -> str:
    if v not in family_names():
        raise ValueError(f"must be one of {', '.join(family_names())}")
    return v


def _option_value(v):
    if isinstance(v, (bool, int, float, str)):
        return v
    raise ValueError("a solver option is a string, a number or true/false")


class MeshSpec(_Strict):
    #: the preferred element family (a solver without it gets its own best substitute)
    family: Annotated[str, AfterValidator(_known_family)]
    size: Annotated[Length, Field(gt=0)] | None = None  #: target element size
    divisions: Annotated[list[Annotated[int, Field(ge=1, le=2000)]], Field(min_length=2, max_length=3)] | None = None
    levels: Annotated[int, Field(ge=1, le=8)] = 3  #: refinement levels for studies
    ratio: Annotated[float, Field(ge=1.3, le=4.0)] = 2.0  #: refinement ratio between levels
    #: element size near named regions, e.g. { rim = "1 mm" } (unstructured meshes; scaled by the level)
    local_sizes: dict[Name, Annotated[Length, Field(gt=0)]] = Field(default_factory=dict)
    #: allow meshes up to this many DOF (default: bridge.guards.DEFAULT_MAX_DOF and this machine's memory)
    max_dof: Annotated[int, Field(ge=1)] | None = None
    #: solver name -> family that solver must use (pinned), e.g. {kratos = "tri3"}
    solver_family: dict[Name, Annotated[str, AfterValidator(_known_family)]] = Field(default_factory=dict)

    @model_validator(mode="after")
    def _size_or_divisions(self):
        if (self.size is None) == (self.divisions is None):
            raise ValueError("give exactly one of 'size' (e.g. \"5 mm\") or 'divisions' (e.g. [10, 10])")
        return self


class Band(_Strict):
    """An excitation frequency band that the modes must stay clear of."""

    name: Name
    low: Annotated[Frequency, Field(gt=0)]
    high: Annotated[Frequency, Field(gt=0)]
    margin: Annotated[float, Field(ge=0, le=1)] = 0.15  #: widen the band by this fraction each way

    @model_validator(mode="after")
    def _ordered(self):
        if self.low > self.high:
            raise ValueError("low must not exceed high")
        return self


class RunSettings(_Strict):
    solvers: Annotated[list[Name], Field(min_length=1)] = Field(default_factory=lambda: ["calculix"])
    timeout: Annotated[Duration, Field(gt=0)] = 1800.0
    #: solver threads of a run; None: every core the process may use (studies split the cores themselves)
    threads: Annotated[int, Field(ge=1, le=256)] | None = None
    #: Dask scheduler for studies, e.g. "tcp://10.0.0.5:8786" (``--scheduler`` overrides it)
    scheduler: Annotated[str, Field(pattern=r"^(tcp|tls|inproc|ws|wss)://[A-Za-z0-9_.:\[\]-]+$")] | None = None


class Model(_Strict):
    """A complete neutral model. Values are SI after validation."""

    name: Annotated[str, Field(pattern=TITLE_PATTERN)]
    description: Annotated[str, Field(max_length=2000)] = ""

    @field_validator("description")
    @classmethod
    def _printable(cls, v: str) -> str:
        # control characters (NUL, escapes) and bidirectional overrides (U+202E …) would reach
        # reports and terminals; new lines and tabs are text
        for ch in v:
            if ch in "\n\t":
                continue
            if unicodedata.category(ch) in ("Cc", "Cs") or 0x202A <= ord(ch) <= 0x202E \
                    or 0x2066 <= ord(ch) <= 0x2069 or ch in "\u200e\u200f\u061c":
                raise ValueError(f"holds the control character U+{ord(ch):04X}; use printable text "
                                 "(new lines and tabs are allowed)")
        return v
    geometry: Geometry
    materials: dict[Name, Material] = Field(default_factory=dict)
    #: one section on the whole body ...
    section: Section | None = Field(None, description="one section on the whole body (or give 'sections')")
    #: ... or several, by name, each on a region (see :meth:`section_list`)
    sections: Annotated[dict[Name, NamedSection], Field(max_length=64)] = Field(
        default_factory=dict,
        description="several sections by name, each on a 'region' of faces (shells) or volumes (solids); "
                    "at most one leaves out 'region' and takes the rest; every element in exactly one")
    regions: dict[Name, Region] = Field(default_factory=dict)
    #: named extra nodes (6 DOF where a rigid coupling gives them rotations): name -> point
    reference_points: dict[Name, Point] = Field(default_factory=dict)
    couplings: list[Coupling] = Field(default_factory=list)
    springs: list[Spring] = Field(default_factory=list)
    beam_sections: dict[Name, BeamSection] = Field(default_factory=dict)
    members: list[Member] = Field(default_factory=list)
    supports: list[Support] = Field(default_factory=list)
    masses: list[PointMass] = Field(default_factory=list)
    analysis: Analysis = Field(default_factory=Analysis)
    mesh: MeshSpec | None = None  #: required unless the geometry is "points"
    excitation: list[Band] = Field(default_factory=list)
    run: RunSettings = Field(default_factory=RunSettings)
    #: solver name -> its options (declared by its plugin; validated when the solver is chosen)
    solver_options: dict[Name, dict[Name, Annotated[Any, AfterValidator(_option_value),
                                                    WithJsonSchema({"type": ["string", "number", "boolean"]})]]] \
        = Field(default_factory=dict)

    @property
    def is_shell(self) -> bool:
        """Shell section (nodes with rotations); also true for a model without continuum."""
        if not self.has_continuum:
            return True
        return self.section_list()[0][1].kind == "shell"

    @property
    def has_continuum(self) -> bool:
        return self.geometry.kind != "points"

    @property
    def grounded(self) -> bool:
        """Supports or springs to the ground hold the model (it is not a free body)."""
        return bool(self.supports) or any(s.to == GROUND for s in self.springs)


    def section_list(self) -> list[tuple[str, ShellSection | SolidSection]]:
        """(name, section) of every section in order; the single ``[section]`` is named
        :data:`DEFAULT_SECTION_NAME` and covers the whole body."""
        if self.section is not None:
            return [(DEFAULT_SECTION_NAME, self.section)]
        return list(self.sections.items())

    def section_region(self, name: str) -> str | None:
        """The region a section covers, or None: the whole body / every element no other claims."""
        sec = self.sections.get(name)
        return getattr(sec, "region", None) if sec is not None else None

    @model_validator(mode="after")
    def _references(self):
        self._connections()
        if not self.has_continuum:
            return self._points_only()
        if self.mesh is None:
            raise _FieldError("mesh", "required key is missing (only a 'points' geometry has no mesh)")
        if (self.section is None) == (not self.sections):
            raise _FieldError("section", "give exactly one of [section] (one section on the whole body) or "
                                         "[sections.NAME] tables (several, each with a 'region')")
        field_of = (lambda n, key: f"section.{key}") if self.section is not None else \
            (lambda n, key: f"sections.{n}.{key}")
        kinds = {s.kind for _, s in self.section_list()}
        if len(kinds) > 1:
            raise _FieldError("sections", "mixes shell and solid sections; a model is either shells or solids")
        rest = []
        for n, sec in self.section_list():
            if sec.material not in self.materials:
                raise _FieldError(field_of(n, "material"),
                                  f"material '{sec.material}' is not defined; defined: "
                                  f"{_listing(self.materials)}")
            region = getattr(sec, "region", None)
            if region is None:
                rest.append(n)
                continue
            if region not in self.regions:
                raise _FieldError(field_of(n, "region"),
                                  f"region '{region}' is not defined; defined: {_listing(self.regions)}")
            want = "face" if sec.kind == "shell" else "volume"
            r = self.regions[region]
            entity = getattr(r, "entity", None)
            if isinstance(r, SideRegion) or entity != want:
                got = "sides" if isinstance(r, SideRegion) else (entity or "the default entity")
                raise _FieldError(field_of(n, "region"),
                                  f"a {sec.kind} section needs a region of {want}s (select = \"box\" or "
                                  f"\"plane\" with entity = \"{want}\"); region '{region}' picks {got}")
        if len(rest) > 1:
            raise _FieldError(f"sections.{rest[1]}.region",
                              f"sections '{rest[0]}' and '{rest[1]}' both lack 'region'; only one section "
                              "may cover the rest of the body")
        for i, s in enumerate(self.supports):
            if s.region is not None and s.region not in self.regions:
                raise _FieldError(f"supports[{i}].region",
                                  f"region '{s.region}' is not defined; defined: {_listing(self.regions)}")
        names = set()
        for i, m in enumerate(self.masses):
            if m.region is not None and m.region not in self.regions:
                raise _FieldError(f"masses[{i}].region",
                                  f"region '{m.region}' is not defined; defined: {_listing(self.regions)}")
            if m.name in names:
                raise _FieldError(f"masses[{i}].name", f"mass name '{m.name}' is used twice")
            names.add(m.name)
        shell = self.is_shell
        fam = self.mesh.family
        fam_kind = get_family(fam).section_kind
        sec_kind = self.section_list()[0][1].kind  # all sections share it (checked above)
        if fam_kind != sec_kind:
            raise _FieldError("mesh.family", f"'{fam}' is a {fam_kind} family but the section is "
                                             f"{'a shell' if shell else sec_kind}; use one of "
                                             f"{', '.join(families_for_section(sec_kind))}")
        for solver, pinned in self.mesh.solver_family.items():
            if get_family(pinned).section_kind != sec_kind:
                raise _FieldError(f"mesh.solver_family.{solver}",
                                  f"'{pinned}' is a {get_family(pinned).section_kind} family but the section is "
                                  f"{sec_kind}; use one of {', '.join(families_for_section(sec_kind))}")
        kind = self.geometry.kind
        flat = kind in ("plate", "polygon")
        kind_field = field_of(self.section_list()[0][0], "kind")
        surface = kind in SURFACE_KINDS
        if not shell and surface:
            raise _FieldError(kind_field, f"a '{kind}' geometry is a mid-surface: use a shell section, "
                                          "or a 'block' or 'cad' geometry for solids")
        if shell and kind == "block":
            raise _FieldError(kind_field, "a 'block' is a solid: shell sections need a mid-surface geometry "
                                          f"({', '.join(SURFACE_KINDS)} or a CAD file of faces)")
        if kind == "polygon" and get_family(self.mesh.family).shape == "quad" and self.mesh.divisions is not None \
                and len(self.geometry.vertices) != 4:
            raise _FieldError("mesh.divisions", "'divisions' on a polygon need exactly four vertices; "
                                                "give 'size' instead (unstructured quads)")
        if self.mesh.divisions is not None:
            want = 2 if flat else 3
            if not flat and kind != "block":
                raise _FieldError("mesh.divisions", f"a {kind} geometry is meshed by 'size', not 'divisions'")
            if flat and getattr(self.geometry, "cutouts", None):
                raise _FieldError("mesh.divisions", "a plate with cut-outs is meshed by 'size', not 'divisions'")
            if len(self.mesh.divisions) != want:
                raise _FieldError("mesh.divisions", f"a {kind} takes {want} divisions "
                                                    f"({'nx, ny' if want == 2 else 'nx, ny, nz'})")
        for name in self.mesh.local_sizes:
            if name not in self.regions:
                raise _FieldError(f"mesh.local_sizes.{name}",
                                  f"region '{name}' is not defined; defined: {_listing(self.regions)}")
        for rname, r in self.regions.items():
            if isinstance(r, SideRegion):
                if kind not in ("plate", "polygon", "block"):
                    raise _FieldError(f"regions.{rname}.select",
                                      f"'sides' select the sides of a plate, polygon or block; for a {kind} "
                                      "use 'named', 'box', 'plane', 'line', 'point' or 'footprint'")
                numbered = [s for s in r.sides if isinstance(s, int)]
                if numbered and kind != "polygon":
                    raise _FieldError(f"regions.{rname}.sides",
                                      "numbered sides are a polygon's edges; a plate or block takes "
                                      "xmin, xmax, ymin, ymax (, zmin, zmax)")
                if kind == "polygon":
                    n = len(self.geometry.vertices)
                    over = [s for s in numbered if s > n]
                    if over:
                        raise _FieldError(f"regions.{rname}.sides",
                                          f"the polygon has {n} edges (1 to {n}); {over[0]} is not one of them")
                bad = [s for s in r.sides if isinstance(s, str) and s.startswith("z")] if flat else []
                if bad:
                    raise _FieldError(f"regions.{rname}.sides",
                                      f"a plate has edges xmin, xmax, ymin, ymax only, not {', '.join(bad)}")
        for i, s in enumerate(self.supports):
            if s.kind == "simply_supported" and not shell:
                raise _FieldError(f"supports[{i}].kind",
                                  "'simply_supported' is for shell edges; for solids use "
                                  "'pinned' or 'fixed_dofs'")
            if not shell and s.dofs and any(d.startswith("r") for d in s.dofs):
                raise _FieldError(f"supports[{i}].dofs",
                                  "solid elements have no rotations; use ux, uy, uz")
        return self

    def _points_only(self):
        if self.section is not None or self.sections or self.mesh is not None:
            raise _FieldError("geometry.kind", "a 'points' geometry has no continuum: leave out 'section' and 'mesh'")
        if self.regions:
            raise _FieldError("regions", "a 'points' geometry has no regions; couplings, springs, supports "
                                         "and masses name reference points")
        if not self.reference_points:
            raise _FieldError("reference_points", "a 'points' geometry needs at least one reference point")
        for i, m in enumerate(self.masses):
            if m.point is None:
                raise _FieldError(f"masses[{i}]", "a 'points' geometry has no mesh nodes: give 'point'")
        if not self.masses and not self.members:
            raise _FieldError("masses", "a model without continuum needs a mass at a reference point, "
                                        "or beam members")
        return self

    def _connections(self):
        """Names used by couplings, springs, supports and masses exist; reference points are used."""
        refs = self.reference_points
        clash = sorted(set(refs) & set(self.regions))
        if clash:
            raise _FieldError(f"reference_points.{clash[0]}", f"'{clash[0]}' names both a region and a reference point")
        if GROUND in refs:
            raise _FieldError(f"reference_points.{GROUND}", f"'{GROUND}' is the fixed ground; choose another name")

        def need_ref(name, field):
            if name not in refs:
                raise _FieldError(field, f"reference point '{name}' is not defined; defined: {_listing(refs)}")

        def need_region(name, field):
            if name not in self.regions:
                raise _FieldError(field, f"region '{name}' is not defined; defined: {_listing(self.regions)}")

        used: set[str] = set()
        for name, sec in self.beam_sections.items():
            if sec.material not in self.materials:
                raise _FieldError(f"beam_sections.{name}.material", f"material '{sec.material}' is not defined; "
                                                                    f"defined: {_listing(self.materials)}")
            from .sections import section_properties

            try:
                section_properties(sec.shape, sec.dims(), self.materials[sec.material].poisson_ratio,
                                   field=f"beam_sections.{name}")
            except ModelError as exc:
                raise _FieldError(exc.field or f"beam_sections.{name}", exc.detail) from None
        names_seen: set[str] = set()
        for i, mb in enumerate(self.members):
            if mb.section not in self.beam_sections:
                raise _FieldError(f"members[{i}].section", f"beam section '{mb.section}' is not defined; defined: "
                                                           f"{_listing(self.beam_sections)}")
            if mb.name in names_seen:
                raise _FieldError(f"members[{i}].name", f"member name '{mb.name}' is used twice")
            names_seen.add(mb.name)
            if mb.along is not None:
                self._stiffener(i, mb, need_region)
                continue
            need_ref(mb.start, f"members[{i}].start")
            need_ref(mb.end, f"members[{i}].end")
            a, b = refs[mb.start], refs[mb.end]
            if sum((x - y) ** 2 for x, y in zip(a, b)) <= 1e-18:
                raise _FieldError(f"members[{i}].end", "the member has zero length")
            used.update((mb.start, mb.end))
        leaders: dict[str, str] = {}
        tied: dict[str, int] = {}
        for i, c in enumerate(self.couplings):
            need_ref(c.reference, f"couplings[{i}].reference")
            if c.reference in leaders:
                raise _FieldError(f"couplings[{i}].reference", f"reference point '{c.reference}' already leads a coupling; "
                                                               "list all its nodes in one coupling")
            leaders[c.reference] = c.kind
            if c.region is not None:
                need_region(c.region, f"couplings[{i}].region")
            for p in c.points or []:
                need_ref(p, f"couplings[{i}].points")
                if p in tied:
                    raise _FieldError(f"couplings[{i}].points", f"reference point '{p}' is already tied by coupling "
                                                                f"{tied[p]}; a point follows one coupling only")
                tied[p] = i
            used.add(c.reference)
            used.update(c.points or [])
        for ref, i in tied.items():
            if ref in leaders:
                raise _FieldError(f"couplings[{i}].points", f"reference point '{ref}' leads a coupling of its own: "
                                                            "chained couplings are not supported; tie its nodes directly")
        for i, s in enumerate(self.springs):
            for p in s.points or []:
                need_ref(p, f"springs[{i}].points")
                if p == s.to:
                    raise _FieldError(f"springs[{i}].to", f"the mount '{p}' cannot end on itself")
            if s.region is not None:
                need_region(s.region, f"springs[{i}].region")
            if s.to != GROUND:
                need_ref(s.to, f"springs[{i}].to")
            if s.rotational_stiffness is not None and any(k > 0 for k in s.rotational_stiffness):
                ends = list(s.points or []) + ([s.to] if s.to != GROUND else [])
                bad = [e for e in ends if leaders.get(e) != "rigid"]
                if s.region is not None or bad:
                    raise _FieldError(f"springs[{i}].rotational_stiffness",
                                      "rotations exist only at reference points that lead a rigid coupling "
                                      f"(and at the ground); {'a region' if s.region is not None else repr(bad[0])} "
                                      "has none")
            used.update(s.points or [])
            if s.to != GROUND:
                used.add(s.to)
        for i, s in enumerate(self.supports):
            if s.point is not None:
                need_ref(s.point, f"supports[{i}].point")
                if s.point in tied:
                    raise _FieldError(f"supports[{i}].point", f"reference point '{s.point}' is tied by a coupling: "
                                                              "support its coupling's reference point instead")
                if s.kind == "symmetry":
                    raise _FieldError(f"supports[{i}].kind", "a reference point takes clamped, pinned or fixed_dofs")
                used.add(s.point)
        for i, m in enumerate(self.masses):
            if m.point is not None:
                need_ref(m.point, f"masses[{i}].point")
                if m.inertia is not None and m.point in leaders and leaders[m.point] != "rigid":
                    raise _FieldError(f"masses[{i}].inertia", f"reference point '{m.point}' leads a distributing "
                                                              "coupling, which carries no rotations; use a rigid one")
                if m.inertia is not None and m.point in tied:
                    raise _FieldError(f"masses[{i}].inertia", f"reference point '{m.point}' is tied by a coupling: "
                                                              "put the mass with its inertia at the coupling's reference point")
        for name in refs:
            if name not in used:
                raise _FieldError(f"reference_points.{name}", f"reference point '{name}' is connected to nothing: "
                                                              "tie it with a coupling or a spring")

    def _stiffener(self, i: int, mb: Member, need_region) -> None:
        """A member along a region: a shell model, a region of edges, a section with a base for 'side'."""
        if not self.has_continuum or not self.is_shell:
            raise _FieldError(f"members[{i}].along", "a member along a region is a stiffener on a shell: the "
                                                     "model needs a shell section (for a frame use 'start' and 'end')")
        need_region(mb.along, f"members[{i}].along")
        reg = self.regions[mb.along]
        entity = getattr(reg, "entity", None)
        if isinstance(reg, (FootprintRegion, PointRegion)) or entity in ("point", "face", "volume"):
            raise _FieldError(f"members[{i}].along", f"region '{mb.along}' must select edges (select = \"line\", "
                                                     "\"sides\", \"named\" edges, or \"box\"/\"plane\" with "
                                                     "entity = \"edge\")")
        if mb.side is not None and self.beam_sections[mb.section].shape == "general":
            raise _FieldError(f"members[{i}].side", "a 'general' section has no shape to seat on the shell: give "
                                                    "'offset' (the centroid's distance from the mid-surface)")

    def canonical_dict(self) -> dict:
        """The model as plain SI values: what the content hash is taken of.

        Keys left at their empty default by features added later (``sections``, a plate's
        ``patches``, a CAD file's ``join``) are left out, so models written before keep their hash."""
        d = self.model_dump(mode="json")
        if not d.get("sections"):
            d.pop("sections", None)
        if d.get("section") is None:
            d.pop("section", None)
        geo = d.get("geometry") or {}
        if geo.get("kind") == "plate" and not geo.get("patches"):
            geo.pop("patches", None)
        if geo.get("kind") == "cad" and geo.get("join") is True:
            geo.pop("join", None)
        for mb in d.get("members") or []:  # stiffener fields unset: frames keep their hashes
            for key in ("along", "side", "offset"):
                if mb.get(key) is None:
                    mb.pop(key, None)
        if (d.get("mesh") or {}).get("max_dof", 0) is None:
            del d["mesh"]["max_dof"]  # unset: hashes stay those of models written before the field
        return d

    def content_hash(self) -> str:
        blob = json.dumps(self.canonical_dict(), sort_keys=True, separators=(",", ":"))
        return hashlib.sha256(blob.encode()).hexdigest()

    def physics_hash(self) -> str:
        """Hash of what defines the physical part (geometry, materials, section, regions, supports,
        masses), leaving out the mesh, the analysis request, the run settings and the names:
        results of one part on different meshes or solvers share it."""
        d = self.canonical_dict()
        for key in ("name", "description", "mesh", "analysis", "excitation", "run", "solver_options"):
            d.pop(key, None)
        blob = json.dumps(d, sort_keys=True, separators=(",", ":"))
        return hashlib.sha256(blob.encode()).hexdigest()

    @property
    def material(self) -> Material | None:
        """The first (or only) section's material (None without continuum)."""
        if not self.has_continuum:
            return None
        return self.materials[self.section_list()[0][1].material]


class _FieldError(ValueError):
    """Raised inside a model validator to name the field it concerns."""

    def __init__(self, field: str, message: str):
        super().__init__(message)
        self.field = field
        self.message = message


def _listing(names) -> str:
    names = list(names)
    return ", ".join(names) if names else "(none)"


def _loc_to_path(loc: tuple) -> str:
    out = ""
    for k, part in enumerate(loc):
        if part == "points" and k > 0 and loc[k - 1] == "geometry":
            continue  # the geometry's discriminator tag, not the 'points' field of a spring or coupling
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            if part in ("plate", "polygon", "block", "cad", "profile", "enclosure", "cylinder", "sides", "box",
                        "plane", "named", "footprint", "point", "line", "circle", "rectangle", "shell", "solid",
                        "[key]"):
                continue  # discriminator tags and the dict-key marker that pydantic inserts
            text = str(part)
            if not re.fullmatch(r"[A-Za-z0-9_-]+", text):
                text = json.dumps(text)  # a crafted key is shown escaped, never raw
            out += ("." if out else "") + text
    return out


def _unwrap(tp) -> list[type]:
    """The pydantic model classes inside an annotation (through Annotated, Union, list, dict)."""
    if isinstance(tp, type) and issubclass(tp, BaseModel):
        return [tp]
    out: list[type] = []
    for arg in get_args(tp):
        out.extend(_unwrap(arg))
    return out


def _accepted_keys(loc: tuple) -> list[str]:
    """Field names accepted at the place an unknown key was found."""
    current: list[type] = [Model]
    for part in loc[:-1]:
        if isinstance(part, int) or part == "[key]":
            continue
        with_field = [c for c in current if part in c.model_fields]
        if with_field:
            nxt: list[type] = []
            for cls in with_field:
                nxt.extend(_unwrap(cls.model_fields[part].annotation))
            current = nxt
            continue
        tagged = [c for c in current
                  if any(f in c.model_fields and part in get_args(c.model_fields[f].annotation)
                         for f in ("kind", "select"))]
        if tagged:
            current = tagged
        # otherwise a dict key (a material or region name): the candidates stay
    return list(current[0].model_fields) if len(current) == 1 else []


def _describe(err: dict) -> str:
    kind = err["type"]
    msg = err["msg"]
    if kind == "extra_forbidden":
        keys = _accepted_keys(tuple(err["loc"]))
        return "unknown key" + (f"; accepted here: {', '.join(keys)}" if keys else "")
    if kind == "missing":
        return "required key is missing"
    if kind == "string_pattern_mismatch":
        if (err.get("ctx") or {}).get("pattern") == TITLE_PATTERN:
            return ("not an accepted model name: start with a letter or digit and use letters, digits, "
                    "spaces and _ . , ( ) + - (at most 80 characters; no slashes)")
        return ("not an accepted name: start with a letter and use letters, digits, _ or - "
                "(at most 48 characters)")
    if kind == "union_tag_invalid" or kind == "literal_error":
        return msg.replace("Input should be", "must be")
    if msg.startswith("Value error, "):
        msg = msg[len("Value error, "):]
    return msg.replace("Input should be", "must be")


def parse_model(data: dict, source: str | Path | None = None) -> Model:
    """Validate a model given as a dict (as read from TOML)."""
    if not isinstance(data, dict):
        raise ModelError(f"a model is a table of keys, not a {type(data).__name__}", source=source)
    try:
        return Model.model_validate(data)
    except RecursionError:
        raise ModelError("nested too deeply to be a model", source=source) from None
    except ValidationError as exc:
        errors = sorted(exc.errors(), key=lambda e: e["type"] != "extra_forbidden")
        err = errors[0]
        ctx = err.get("ctx") or {}
        inner = ctx.get("error")
        if isinstance(inner, _FieldError):
            raise ModelError(inner.message, source=source, field=inner.field) from None
        field = _loc_to_path(err["loc"])
        text = _describe(err)
        cls = UnitError if isinstance(inner, QuantityError) else ModelError
        extra = ""
        if len(exc.errors()) > 1:
            extra = f" (and {len(exc.errors()) - 1} more problem(s))"
        raise cls(text + extra, source=source, field=field) from None


def load_model(path: str | Path) -> Model:
    """Read and validate a model file (TOML): a regular file of bounded size, UTF-8 (a byte-order
    mark is accepted), not nested deeper than TOML files are."""
    path = Path(path)
    data = read_toml(path)
    if "variant" in data and isinstance(data.get("model"), str) and "geometry" not in data:
        raise ModelError("this is a study file (a baseline 'model' and [[variant]] tables), not a model: "
                         "use `modebridge vary` on it", source=path)
    return parse_model(data, source=path)


def read_toml(path: str | Path, what: str = "model file") -> dict:
    """A TOML input file as a dict; every problem is a :class:`ModelError` naming the file."""
    from .io import read_input

    path = Path(path)
    raw = read_input(path, what)
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        raise ModelError(f"not UTF-8 text; a {what} is TOML", source=path) from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ModelError(f"malformed TOML: {exc}", source=path) from None
    except RecursionError:
        raise ModelError("malformed TOML: nested too deeply", source=path) from None


def json_schema() -> dict:
    """The JSON Schema of a model file, for editors."""
    schema = Model.model_json_schema()
    mesh = schema.get("$defs", {}).get("MeshSpec", {}).get("properties", {})
    if "family" in mesh:  # the families registered now (bridge/elements.py)
        mesh["family"] = {"type": "string", "enum": list(family_names()),
                          "description": "the preferred element family: "
                          + "; ".join(f"{k}: {', '.join(families_for_section(k))}" for k in ("shell", "solid")
                                      if families_for_section(k))}
    schema["$schema"] = "https://json-schema.org/draft/2020-12/schema"
    schema["title"] = "modebridge model"
    return schema
