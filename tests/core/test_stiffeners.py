"""Stiffeners: beam members along a shell's edges, seated on one face (issue 9). Core only: the
model syntax, the cut of the plate along the line, the beam elements on the shell's own nodes and
their offsets, the section walls the CalculiX plugin draws, and one clear line per mistake."""

from __future__ import annotations

import textwrap
import tomllib

import numpy as np
import pytest
from typer.testing import CliRunner

from bridge.cli import app
from bridge.model import parse_model
from bridge.pipeline import beam_masses, model_mass, prepare
from bridge.sections import base_to_centroid, rectangles, section_properties

MM = 1e-3

RIBBED = """
name = "ribbed plate"
[geometry]
kind = "plate"
length = "120 mm"
width = "80 mm"
[materials.steel]
youngs_modulus = "210 GPa"
poisson_ratio = 0.3
density = "7850 kg/m^3"
[section]
kind = "shell"
material = "steel"
thickness = "2 mm"
[beam_sections.rib]
shape = "rectangle"
material = "steel"
width = "3 mm"
height = "8 mm"
[regions.rib_line]
select = "line"
start = ["20 mm", "30 mm", "0 mm"]
end = ["100 mm", "30 mm", "0 mm"]
[[members]]
name = "rib"
along = "rib_line"
section = "rib"
side = "top"
[analysis]
modes = 10
[mesh]
family = "quad8"
divisions = [24, 16]
"""


def _prep(text: str, write_model):
    path = write_model(textwrap.dedent(text))
    return prepare(parse_model(tomllib.loads(textwrap.dedent(text))), path)


def test_a_stiffener_runs_on_the_shell_nodes_of_its_line_seated_on_the_top_face(write_model):
    prep = _prep(RIBBED, write_model)
    mesh = prep.mesh
    assert not mesh.extra_nodes  # no nodes of its own: the beam shares the shell's nodes
    ends = mesh.points[mesh.beams]
    # the plate was cut along the partial line (y = 30 mm, x from 20 to 100 mm): quad8 corner and
    # mid-side nodes every 2.5 mm, so 32 beam elements, all on the line
    assert len(mesh.beams) == 32
    assert np.allclose(ends[:, :, 1], 30 * MM) and np.allclose(ends[:, :, 2], 0.0)
    assert ends[:, :, 0].min() == pytest.approx(20 * MM) and ends[:, :, 0].max() == pytest.approx(100 * MM)
    assert mesh.structured  # cut through its ends, the plate stays a grid of rectangles
    # seated on the top face: centroid at t/2 + h/2 = 1 + 4 mm along the normal (+z), local z up
    np.testing.assert_allclose(mesh.beam_offset, np.tile([0, 0, 5 * MM], (32, 1)), atol=1e-12)
    np.testing.assert_allclose(mesh.beam_z, np.tile([0, 0, 1.0], (32, 1)), atol=1e-12)
    # the model's mass holds the rib (ρ A L; the plate's from its elements): exact arithmetic
    rib = 7850 * 3 * 8 * MM**2 * 80 * MM
    assert beam_masses(prep.model, mesh).sum() == pytest.approx(rib, rel=1e-12)
    assert model_mass(prep.model, mesh) == pytest.approx(rib + 7850 * 0.12 * 0.08 * 0.002, rel=1e-9)


def test_bottom_side_and_an_explicit_offset(write_model):
    prep = _prep(RIBBED.replace('side = "top"', 'side = "bottom"'), write_model)
    np.testing.assert_allclose(prep.mesh.beam_offset[:, 2], -5 * MM)
    np.testing.assert_allclose(prep.mesh.beam_z[:, 2], -1.0)  # the section's base on the shell
    prep = _prep(RIBBED.replace('side = "top"', 'offset = "7.5 mm"'), write_model)
    np.testing.assert_allclose(prep.mesh.beam_offset[:, 2], 7.5 * MM)


def test_an_angle_seated_by_its_horizontal_leg():
    dims = {"height": 20 * MM, "width": 15 * MM, "thickness": 2 * MM}
    # centroid height of an unequal angle: z_c = (h² t + (b − t) t²) / (2 A) (first moment of the
    # two legs; common practice, no source)
    h, b, t = 20.0, 15.0, 2.0
    zc = (h * h * t + (b - t) * t * t) / (2 * (h * t + (b - t) * t))
    assert base_to_centroid("angle", dims) == pytest.approx(zc * MM)
    with pytest.raises(ValueError):
        base_to_centroid("general", {})


@pytest.mark.parametrize("shape,dims", [
    ("i_section", {"height": 20, "width": 12, "web": 1.5, "flange": 2}),
    ("channel", {"height": 20, "width": 10, "web": 2, "flange": 2}),
    ("angle", {"height": 20, "width": 15, "thickness": 2}),
    ("rectangle", {"width": 4, "height": 6}),
])
def test_section_walls_carry_the_sections_area_and_second_moments(shape, dims):
    """The walls CalculiX is given (bridge.sections.rectangles) are the section: the same A, Iy, Iz,
    Iyz about the same centroid (parallel-axis sums; Steiner's theorem, common practice, no source)."""
    d = {k: v * MM for k, v in dims.items()}
    p = section_properties(shape, d)
    r = rectangles(shape, d)
    area = sum(w * h for w, h, _, _ in r)
    assert area == pytest.approx(p.area, rel=1e-12)
    assert sum(w * h * y for w, h, y, _ in r) == pytest.approx(0.0, abs=1e-18)
    assert sum(w * h * z for w, h, _, z in r) == pytest.approx(0.0, abs=1e-18)
    assert sum(w * h**3 / 12 + w * h * z * z for w, h, _, z in r) == pytest.approx(p.iy, rel=1e-12)
    assert sum(h * w**3 / 12 + w * h * y * y for w, h, y, _ in r) == pytest.approx(p.iz, rel=1e-12)
    assert sum(w * h * y * z for w, h, y, z in r) == pytest.approx(p.iyz, rel=1e-9, abs=1e-24)


def test_a_skew_line_is_cut_into_an_unstructured_plate(write_model):
    text = RIBBED.replace('start = ["20 mm", "30 mm", "0 mm"]', 'start = ["10 mm", "10 mm", "0 mm"]') \
        .replace('end = ["100 mm", "30 mm", "0 mm"]', 'end = ["110 mm", "70 mm", "0 mm"]') \
        .replace('divisions = [24, 16]', 'size = "5 mm"')
    prep = _prep(text, write_model)
    ends = prep.mesh.points[prep.mesh.beams]
    d = np.array([100.0, 60.0]) / np.hypot(100.0, 60.0)
    rel = ends[:, :, :2] - np.array([10, 10]) * MM
    assert np.abs(rel[:, :, 0] * d[1] - rel[:, :, 1] * d[0]).max() < 1e-9  # every beam node on the line
    length = np.linalg.norm(ends[:, 1] - ends[:, 0], axis=1).sum()
    assert length == pytest.approx(np.hypot(100, 60) * MM, rel=1e-9)  # the whole line, once


def test_a_frame_keeps_its_model_hash():
    """Fields added for stiffeners stay out of a frame's canonical form (studies keep their caches)."""
    text = RIBBED.replace('along = "rib_line"\n', "").replace('side = "top"', 'start = "a"\nend = "b"') \
        .replace("[mesh]", '[reference_points]\na = ["0 mm", "0 mm", "10 mm"]\nb = ["50 mm", "0 mm", "10 mm"]\n[mesh]')
    d = parse_model(tomllib.loads(textwrap.dedent(text))).canonical_dict()
    assert set(d["members"][0]) == {"name", "start", "end", "section", "divisions", "orientation"}


BAD = [
    ('side = "top"', 'side = "top"\nstart = "a"', "members[0]", "not both"),
    ('side = "top"', 'side = "top"\ndivisions = 4', "members[0]", "leave out 'divisions'"),
    ('side = "top"', 'side = "top"\noffset = "5 mm"', "members[0]", "'side' or 'offset'"),
    ('along = "rib_line"\n', "", "members[0]", "needs 'start' and 'end'"),
    ('along = "rib_line"', 'along = "nowhere"', "members[0].along", "region 'nowhere' is not defined"),
    ('select = "line"\nstart = ["20 mm", "30 mm", "0 mm"]\nend = ["100 mm", "30 mm", "0 mm"]',
     'select = "footprint"\nshape = "circle"\ncenter = ["60 mm", "30 mm", "0 mm"]\ndiameter = "10 mm"',
     "members[0].along", "must select edges"),
    ('shape = "rectangle"\nmaterial = "steel"\nwidth = "3 mm"\nheight = "8 mm"',
     'shape = "general"\nmaterial = "steel"\narea = "24 mm^2"\niy = "128 mm^4"\niz = "18 mm^4"\nj = "55 mm^4"\n'
     'shear_area_y = "20 mm^2"\nshear_area_z = "20 mm^2"', "members[0].side", "give 'offset'"),
]


@pytest.mark.parametrize("old,new,field,words", BAD)
def test_a_stiffener_mistake_is_one_clear_line(old, new, field, words, write_model):
    text = textwrap.dedent(RIBBED)
    assert old in text
    path = write_model(text.replace(old, new), "bad.toml")
    res = CliRunner().invoke(app, ["check", str(path)])
    assert res.exit_code == 3, res.output
    line = res.output.strip()
    assert len(line.splitlines()) == 1 and field in line and words in line, line


def test_a_stiffener_on_a_solid_is_one_clear_line(write_model):
    text = textwrap.dedent(RIBBED).replace('kind = "plate"', 'kind = "block"\nheight = "10 mm"') \
        .replace('kind = "shell"\nmaterial = "steel"\nthickness = "2 mm"', 'kind = "solid"\nmaterial = "steel"') \
        .replace('family = "quad8"', 'family = "hex20"').replace("divisions = [24, 16]", "divisions = [4, 4, 2]")
    res = CliRunner().invoke(app, ["check", str(write_model(text, "solid.toml"))])
    assert res.exit_code == 3 and "members[0].along" in res.output and "shell section" in res.output, res.output
