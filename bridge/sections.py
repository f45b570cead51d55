"""Beam cross-sections: area, second moments, torsion constant and shear areas, SI.

Groundwork for beam members (issue 9, part B): the properties a beam element needs, computed
from the section's dimensions, each formula with its source. Local axes of a section: y across
(width), z up (height); ``iy`` = ∫ z² dA (bending about y, deflection along z), ``iz`` = ∫ y² dA.
Properties are about the centroid; for sections without two axes of symmetry (channel, angle)
``iyz`` = ∫ y z dA and ``principal_angle`` (rad, from y to the first principal axis) say how the
principal axes lie, and the shear centre is not modelled (the beam axis is the centroid).

Shear areas use Cowper's shear coefficients (G. R. Cowper, "The shear coefficient in Timoshenko's
beam theory", J. Appl. Mech. 33 (1966) 335–340, from memory): rectangle 10(1+ν)/(12+11ν), solid
circle 6(1+ν)/(7+6ν), thin tube 2(1+ν)/(4+3ν); for I, channel and angle sections the area of the
web (or leg) parallel to the shear, common practice (no source).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

from .errors import ModelError

__all__ = ["SectionProperties", "section_properties", "SHAPES", "base_to_centroid", "rectangles"]

#: section shapes and their dimensions (SI lengths)
SHAPES = {
    "rectangle": ("width", "height"),
    "round": ("diameter",),
    "tube": ("diameter", "wall"),
    "i_section": ("height", "width", "web", "flange"),
    "channel": ("height", "width", "web", "flange"),
    "angle": ("height", "width", "thickness"),
    "general": ("area", "iy", "iz", "j", "shear_area_y", "shear_area_z"),
}


@dataclass(frozen=True)
class SectionProperties:
    area: float  #: m²
    iy: float  #: m⁴, ∫ z² dA
    iz: float  #: m⁴, ∫ y² dA
    j: float  #: m⁴, torsion constant
    shear_area_y: float  #: m², for shear along y
    shear_area_z: float  #: m², for shear along z
    iyz: float = 0.0  #: m⁴, ∫ y z dA about the centroid
    principal_angle: float = 0.0  #: rad

    def as_dict(self) -> dict:
        return asdict(self)


def _rect_torsion(b: float, h: float) -> float:
    """J of a solid rectangle: a b³ [16/3 − 3.36 (b/a)(1 − b⁴/(12 a⁴))], a ≥ b half-sides
    (Young & Budynas, Roark's Formulas for Stress and Strain, 7th ed., Table 10.7 case 4, from memory)."""
    a, c = max(b, h) / 2, min(b, h) / 2
    return a * c**3 * (16 / 3 - 3.36 * (c / a) * (1 - c**4 / (12 * a**4)))


def _principal(iy: float, iz: float, iyz: float) -> float:
    return 0.5 * math.atan2(-2 * iyz, iy - iz) if abs(iyz) > 1e-30 else 0.0


def section_properties(shape: str, dims: dict[str, float], poisson_ratio: float = 0.3,
                       field: str = "section") -> SectionProperties:
    """Properties of a section ``shape`` with dimensions ``dims`` (m); ModelError naming ``field``
    for a missing, non-positive or inconsistent dimension (a wall thicker than half the tube, a
    web wider than the flange, …) or a zero area."""
    if shape not in SHAPES:
        raise ModelError(f"unknown section shape '{shape}'; accepted: {', '.join(SHAPES)}", field=field)
    need = SHAPES[shape]
    for k in need:
        if k not in dims:
            raise ModelError(f"a '{shape}' section needs {', '.join(need)}; '{k}' is missing", field=field)
        if not (math.isfinite(dims[k]) and dims[k] > 0):
            what = "a section with zero area" if k == "area" else f"'{k}' must be positive"
            raise ModelError(f"{what} (got {dims[k]:g})", field=f"{field}.{k}")
    nu = poisson_ratio
    d = dims
    if shape == "rectangle":
        b, h = d["width"], d["height"]
        k = 10 * (1 + nu) / (12 + 11 * nu)
        return SectionProperties(b * h, b * h**3 / 12, h * b**3 / 12, _rect_torsion(b, h), k * b * h, k * b * h)
    if shape == "round":
        D = d["diameter"]
        A = math.pi * D**2 / 4
        I = math.pi * D**4 / 64
        k = 6 * (1 + nu) / (7 + 6 * nu)
        return SectionProperties(A, I, I, 2 * I, k * A, k * A)
    if shape == "tube":
        D, t = d["diameter"], d["wall"]
        if 2 * t >= D:
            raise ModelError(f"the wall ({t * 1e3:g} mm) must be thinner than half the diameter "
                             f"({D * 1e3:g} mm); use 'round' for a solid bar", field=f"{field}.wall")
        Di = D - 2 * t
        A = math.pi * (D**2 - Di**2) / 4
        I = math.pi * (D**4 - Di**4) / 64
        k = 2 * (1 + nu) / (4 + 3 * nu)
        return SectionProperties(A, I, I, 2 * I, k * A, k * A)
    if shape in ("i_section", "channel"):
        h, b, tw, tf = d["height"], d["width"], d["web"], d["flange"]
        if 2 * tf >= h or tw > b:
            raise ModelError("the flanges must be thinner than half the height and the web no wider than "
                             "the flanges", field=field)
        hw = h - 2 * tf
        A = 2 * b * tf + hw * tw
        iy = (b * h**3 - (b - tw) * hw**3) / 12
        # thin-walled open section: J = Σ (1/3) b t³ over the walls (Roark, Table 10.7, from memory)
        j = (2 * b * tf**3 + hw * tw**3) / 3
        if shape == "i_section":
            iz = (2 * tf * b**3 + hw * tw**3) / 12
            return SectionProperties(A, iy, iz, j, 2 * b * tf * 5 / 6, hw * tw)
        yc = (2 * b * tf * b / 2 + hw * tw * tw / 2) / A  # centroid from the back of the web
        iz = 2 * (tf * b**3 / 12 + b * tf * (b / 2 - yc) ** 2) + hw * tw**3 / 12 + hw * tw * (tw / 2 - yc) ** 2
        return SectionProperties(A, iy, iz, j, 2 * b * tf * 5 / 6, hw * tw)
    if shape == "angle":
        h, b, t = d["height"], d["width"], d["thickness"]
        if t >= min(h, b):
            raise ModelError("the legs must be longer than they are thick", field=f"{field}.thickness")
        # two rectangles: the vertical leg t × h at y ∈ [0, t], the horizontal one (b − t) × t at z ∈ [0, t]
        parts = [(t * h, t / 2, h / 2, t, h), ((b - t) * t, t + (b - t) / 2, t / 2, b - t, t)]
        A = sum(p[0] for p in parts)
        yc = sum(p[0] * p[1] for p in parts) / A
        zc = sum(p[0] * p[2] for p in parts) / A
        iy = sum(w * hh**3 / 12 + a * (z - zc) ** 2 for a, y, z, w, hh in parts)
        iz = sum(hh * w**3 / 12 + a * (y - yc) ** 2 for a, y, z, w, hh in parts)
        iyz = sum(a * (y - yc) * (z - zc) for a, y, z, w, hh in parts)
        j = (h + b - t) * t**3 / 3
        return SectionProperties(A, iy, iz, j, b * t * 5 / 6, h * t * 5 / 6, iyz, _principal(iy, iz, iyz))
    # general
    if d["shear_area_y"] > d["area"] or d["shear_area_z"] > d["area"]:
        raise ModelError("a shear area cannot exceed the area", field=field)
    return SectionProperties(d["area"], d["iy"], d["iz"], d["j"], d["shear_area_y"], d["shear_area_z"])


def rectangles(shape: str, dims: dict[str, float]) -> list[tuple[float, float, float, float]]:
    """The section as non-overlapping rectangles (width along y, height along z, centre y, centre z),
    centres about the section's centroid; rectangle, i_section, channel and angle (the walls of
    :func:`section_properties`: the same area, centroid and second moments). Empty for other shapes."""
    d = dims
    if shape == "rectangle":
        return [(d["width"], d["height"], 0.0, 0.0)]
    if shape == "i_section":
        h, b, tw, tf = d["height"], d["width"], d["web"], d["flange"]
        hw = h - 2 * tf
        return [(b, tf, 0.0, (h - tf) / 2), (tw, hw, 0.0, 0.0), (b, tf, 0.0, -(h - tf) / 2)]
    if shape == "channel":  # web at y ∈ [0, tw] (its back at y = 0), flanges reach to y = b
        h, b, tw, tf = d["height"], d["width"], d["web"], d["flange"]
        hw = h - 2 * tf
        parts = [(b, tf, b / 2, (h - tf) / 2), (tw, hw, tw / 2, 0.0), (b, tf, b / 2, -(h - tf) / 2)]
    elif shape == "angle":  # vertical leg t × h at y ∈ [0, t], horizontal leg at z ∈ [0, t]
        h, b, t = d["height"], d["width"], d["thickness"]
        parts = [(t, h, t / 2, h / 2), (b - t, t, t + (b - t) / 2, t / 2)]
    else:
        return []
    area = sum(w * hh for w, hh, _, _ in parts)
    yc = sum(w * hh * y for w, hh, y, _ in parts) / area
    zc = sum(w * hh * z for w, hh, _, z in parts) / area
    return [(w, hh, y - yc, z - zc) for w, hh, y, z in parts]


def base_to_centroid(shape: str, dims: dict[str, float]) -> float:
    """Height of the centroid above the section's base (its lowest point along local z), m: half
    the height of a symmetric section, z_c of an angle (its horizontal leg is the base). Raises
    ValueError for a 'general' section, which has no shape."""
    d = dims
    if shape in ("round", "tube"):
        return d["diameter"] / 2
    if shape in ("rectangle", "i_section", "channel"):
        return d["height"] / 2
    if shape == "angle":
        return -min(z - hh / 2 for _, hh, _, z in rectangles(shape, dims))
    raise ValueError(f"a '{shape}' section has no base")
