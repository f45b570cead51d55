"""Beam cross-section properties (bridge.sections) against formulas and independent integration."""

from __future__ import annotations

import math

import numpy as np
import pytest

from bridge.errors import ModelError
from bridge.sections import section_properties

MM = 1e-3


def polygon_moments(xy: np.ndarray) -> tuple[float, float, float, float]:
    """A, Iy = ∫z², Iz = ∫y², Iyz = ∫yz about the centroid of a simple polygon (y, z) by Green's
    theorem (standard polygon formulas; common practice, no source)."""
    y, z = xy[:, 0], xy[:, 1]
    y1, z1 = np.roll(y, -1), np.roll(z, -1)
    c = y * z1 - y1 * z
    A = c.sum() / 2
    yc = ((y + y1) * c).sum() / (6 * A)
    zc = ((z + z1) * c).sum() / (6 * A)
    Iyy = ((z**2 + z * z1 + z1**2) * c).sum() / 12 - A * zc**2
    Izz = ((y**2 + y * y1 + y1**2) * c).sum() / 12 - A * yc**2
    Iyz = ((y * z1 + 2 * y * z + 2 * y1 * z1 + y1 * z) * c).sum() / 24 - A * yc * zc
    return A, Iyy, Izz, Iyz


def test_rectangle_and_its_torsion_constant():
    p = section_properties("rectangle", {"width": 10 * MM, "height": 2 * MM})
    assert p.area == pytest.approx(20 * MM**2)
    assert p.iy == pytest.approx(10 * 8 / 12 * MM**4) and p.iz == pytest.approx(2 * 1000 / 12 * MM**4)
    # thin strip: J ≈ (1/3) w t³ (1 − 0.63 t/w) (Timoshenko & Goodier, Theory of Elasticity, from memory)
    assert p.j == pytest.approx(10 * 8 / 3 * (1 - 0.63 * 0.2) * MM**4, rel=2e-3)
    # square: J = 0.1406 s⁴ (Roark's Formulas for Stress and Strain, Table 10.7, from memory)
    sq = section_properties("rectangle", {"width": 1.0, "height": 1.0})
    assert sq.j == pytest.approx(0.1406, rel=2e-3)
    # Cowper's shear coefficient for a rectangle at ν = 0.3: 0.850 (Cowper 1966, from memory)
    assert p.shear_area_z / p.area == pytest.approx(0.850, abs=1e-3)


def test_round_bar_and_tube():
    r = section_properties("round", {"diameter": 20 * MM})
    assert r.j == pytest.approx(2 * r.iy) and r.iy == pytest.approx(math.pi * 20**4 / 64 * MM**4)
    t = section_properties("tube", {"diameter": 100 * MM, "wall": 1 * MM})
    # thin wall: A ≈ π D_m t, I ≈ π D_m³ t / 8 with the mean diameter (common practice, no source)
    assert t.area == pytest.approx(math.pi * 99 * 1 * MM**2, rel=1e-9)
    assert t.iy == pytest.approx(math.pi * 99**3 / 8 * MM**4, rel=1e-3)


@pytest.mark.parametrize("shape", ["i_section", "channel", "angle"])
def test_thin_walled_sections_match_polygon_integration(shape):
    if shape == "angle":
        h, b, t = 60 * MM, 40 * MM, 5 * MM
        dims = {"height": h, "width": b, "thickness": t}
        poly = np.array([[0, 0], [b, 0], [b, t], [t, t], [t, h], [0, h]])
    else:
        h, b, tw, tf = 100 * MM, 50 * MM, 6 * MM, 8 * MM
        dims = {"height": h, "width": b, "web": tw, "flange": tf}
        if shape == "i_section":
            e = (b - tw) / 2
            poly = np.array([[0, 0], [b, 0], [b, tf], [b - e, tf], [b - e, h - tf], [b, h - tf], [b, h], [0, h],
                             [0, h - tf], [e, h - tf], [e, tf], [0, tf]])
        else:
            poly = np.array([[0, 0], [b, 0], [b, tf], [tw, tf], [tw, h - tf], [b, h - tf], [b, h], [0, h]])
    p = section_properties(shape, dims)
    A, Iy, Iz, Iyz = polygon_moments(poly)
    assert p.area == pytest.approx(A, rel=1e-12)
    assert p.iy == pytest.approx(Iy, rel=1e-12) and p.iz == pytest.approx(Iz, rel=1e-12)
    assert p.iyz == pytest.approx(Iyz, rel=1e-9, abs=1e-20)
    if shape == "angle":
        # the principal axes: tan 2θ = −2 Iyz / (Iy − Iz) (Roark, from memory)
        assert math.tan(2 * p.principal_angle) == pytest.approx(-2 * Iyz / (Iy - Iz), rel=1e-9)
    # open thin-walled torsion constant, Σ b t³ / 3 (Roark, Table 10.7, from memory)
    assert p.j > 0


def test_equal_leg_angle_has_principal_axes_at_45_degrees():
    p = section_properties("angle", {"height": 50 * MM, "width": 50 * MM, "thickness": 5 * MM})
    assert abs(p.principal_angle) == pytest.approx(math.pi / 4, rel=1e-9)


@pytest.mark.parametrize("shape,dims,fragment", [
    ("general", {"area": 0.0, "iy": 1e-8, "iz": 1e-8, "j": 1e-8, "shear_area_y": 1e-5, "shear_area_z": 1e-5},
     "zero area"),
    ("rectangle", {"width": 0.01, "height": -0.002}, "'height' must be positive"),
    ("tube", {"diameter": 0.02, "wall": 0.011}, "thinner than half the diameter"),
    ("i_section", {"height": 0.1, "width": 0.05, "web": 0.006}, "'flange' is missing"),
    ("hexagon", {}, "unknown section shape"),
])
def test_bad_sections_give_one_clear_line(shape, dims, fragment):
    with pytest.raises(ModelError, match=fragment) as info:
        section_properties(shape, dims, field="beam_sections.bar")
    assert "beam_sections.bar" in str(info.value) and "\n" not in str(info.value)
