"""Shell parts of any shape (issue 8): sheet parts built with gmsh's OCC kernel, CAD surface
models, footprint / point / line / named regions, unstructured quads, skew supports. No solver."""

from __future__ import annotations

import math

import numpy as np
import pytest
from typer.testing import CliRunner

from bridge.cli import app
from bridge.errors import MeshingError, ModelError
from bridge.meshing.gmsh import build_mesh, profile_faces, write_step
from bridge.model import load_model, parse_model
from bridge.pipeline import make_job, model_mass, prepare
from bridge.supports import resolve_constraints, resolve_masses

STEEL = {"steel": {"youngs_modulus": "210 GPa", "poisson_ratio": 0.3, "density": "7850 kg/m^3"}}
runner = CliRunner()


def error_line(result, exit_code: int) -> str:
    """The one ``error:`` line a failed command prints (no traceback), after its exit code."""
    assert result.exit_code == exit_code, result.output
    assert "Traceback" not in result.output + result.stderr
    lines = [x for x in result.stderr.splitlines() if x.strip()]
    assert len(lines) == 1 and lines[0].startswith("error: "), result.stderr
    return lines[0]


def shell(geometry: dict, family: str = "quad4", size: str = "5 mm", thickness: str = "1 mm", **extra) -> dict:
    d = {"name": "sheet part", "geometry": geometry, "materials": STEEL,
         "section": {"kind": "shell", "material": "steel", "thickness": thickness},
         "mesh": {"family": family, "size": size}}
    d.update(extra)
    return d


def consistently_oriented(mesh) -> bool:
    """Every edge shared by exactly two elements is run in opposite directions by them."""
    nc = 4 if mesh.family.startswith("quad") else 3
    c = mesh.cells[:, :nc]
    a, b = c.ravel(), np.roll(c, -1, axis=1).ravel()
    count: dict = {}
    for x, y in zip(a, b):
        count.setdefault((min(x, y), max(x, y)), []).append(x < y)
    return all(d[0] != d[1] for d in count.values() if len(d) == 2)


BRACKET_POINTS = [["0 mm", "30 mm"], ["0 mm", "0 mm"], ["40 mm", "0 mm"]]


def test_profile_bracket_is_one_conforming_quad_mesh_with_named_faces():
    m = parse_model(shell({"kind": "profile", "points": BRACKET_POINTS, "radii": ["4 mm"], "length": "20 mm"},
                          size="2 mm", regions={"leg": {"select": "named", "name": "flat_2"},
                                                "root": {"select": "named", "name": "end_0"}}))
    mesh = build_mesh(m)
    assert mesh.family == "quad4" and mesh.cells.shape[1] == 4
    assert consistently_oriented(mesh)
    # the mid-line: 30 - 4 + π·4/2 + 40 - 4 mm (the bend's tangent points sit r from the corner)
    arc = math.pi * 4 / 2
    area = (26 + arc + 36) * 20e-6
    cells_area = model_mass(m, mesh) / (7850 * 1e-3)
    assert cells_area == pytest.approx(area, rel=2e-3)  # the bend is faceted by its elements
    groups = {tuple(s["groups"]) for s in mesh.surfaces}
    assert groups == {("flat_1",), ("bend_1",), ("flat_2",)}
    normals = {s["groups"][0]: s["normal"] for s in mesh.surfaces}
    assert normals["bend_1"] == "curved"
    # flat_1 lies in y = 0, flat_2 in z = 0; orientation carried round the bend keeps them on
    # the same side of the sheet: both point out of the inside corner or both into it
    n1, n2 = np.array(normals["flat_1"]), np.array(normals["flat_2"])
    assert abs(abs(n1[1]) - 1) < 1e-9 and abs(abs(n2[2]) - 1) < 1e-9
    assert np.sign(n1[1]) == np.sign(n2[2])
    # 20 mm at 2 mm: ten elements along the extrusion; the end edge holds every node across the profile
    leg = mesh.points[mesh.region_nodes("leg")]
    assert np.allclose(leg[:, 2], 0.0) and leg[:, 1].min() == pytest.approx(4e-3)
    root = mesh.points[mesh.region_nodes("root")]
    assert np.allclose(root[:, 0], 0.0)
    assert len(root) == len(np.unique(np.round(mesh.points[:, 1:] * 1e9), axis=0))


@pytest.mark.parametrize("points,radii,faces", [
    ([["0 mm", "20 mm"], ["0 mm", "0 mm"], ["30 mm", "0 mm"], ["30 mm", "20 mm"]], None, 3),  # channel
    ([["0 mm", "0 mm"], ["10 mm", "0 mm"], ["10 mm", "20 mm"], ["30 mm", "20 mm"], ["30 mm", "0 mm"],
      ["40 mm", "0 mm"]], ["2 mm", "2 mm", "2 mm", "2 mm"], 9),  # hat, bent
    ([["0 mm", "0 mm"], ["15 mm", "0 mm"], ["15 mm", "25 mm"], ["30 mm", "25 mm"]], ["3 mm", "3 mm"], 5),  # Z
])
def test_channel_hat_and_z_profiles(points, radii, faces):
    geo = {"kind": "profile", "points": points, "length": "50 mm"}
    if radii:
        geo["radii"] = radii
    mesh = build_mesh(parse_model(shell(geo, family="quad8", size="4 mm")))
    assert len(mesh.surfaces) == faces
    assert consistently_oriented(mesh)
    assert mesh.quality.min() > 0.3


def test_enclosure_lid_footprint_and_screw_points_counts():
    # a 200 x 150 x 60 mm box of panels, lid separate; 10 mm quads make a regular grid on the lid
    regions = {
        "lid": {"select": "named", "name": "lid"},
        "pcb": {"select": "footprint", "shape": "rectangle", "center": ["100 mm", "75 mm", "60 mm"],
                "size": ["80 mm", "50 mm"]},
        "flange": {"select": "footprint", "shape": "circle", "center": ["50 mm", "40 mm", "60 mm"],
                   "diameter": "25 mm"},
        "screw": {"select": "point", "at": ["20 mm", "20 mm", "60 mm"], "radius": "11 mm"},
        "corner": {"select": "point", "at": ["0 mm", "0 mm", "60 mm"], "radius": "1 mm"},
    }
    m = parse_model(shell({"kind": "enclosure", "length": "200 mm", "width": "150 mm", "height": "60 mm",
                           "top": "lid"}, size="10 mm", regions=regions,
                          masses=[{"name": "board", "mass": "0.3 kg", "region": "pcb"}]))
    prep = prepare(m)
    mesh = prep.mesh
    assert consistently_oriented(mesh)
    # what the geometry implies (common practice, no source): the lid is a 21 x 16 grid of nodes
    # at 10 mm; the rectangle 60..140 x 50..100 mm holds 9 x 6 of them; the circle of radius
    # 12.5 mm about (50, 40) the grid nodes with dx² + dy² <= 12.5² ; the screw's 11 mm radius
    # about (20, 20) the node itself and its four neighbours; the lid's corner only itself
    gx, gy = np.meshgrid(np.arange(0, 201, 10), np.arange(0, 151, 10))
    assert len(mesh.region_nodes("lid")) == gx.size
    assert len(mesh.region_nodes("pcb")) == int(((abs(gx - 100) <= 40) & (abs(gy - 75) <= 25)).sum()) == 54
    assert len(mesh.region_nodes("flange")) == int(((gx - 50) ** 2 + (gy - 40) ** 2 <= 12.5**2).sum())
    assert len(mesh.region_nodes("screw")) == 5
    assert len(mesh.region_nodes("corner")) == 1
    # the board's mass lands entirely inside its footprint, all of it
    placed = [x for x in prep.masses if x.source == "board"]
    assert sum(x.mass for x in placed) == pytest.approx(0.3, rel=1e-12)
    xyz = mesh.points[[x.node for x in placed]]
    assert np.all(np.abs(xyz[:, 0] - 0.1) <= 0.04 + 1e-9) and np.all(np.abs(xyz[:, 1] - 0.075) <= 0.025 + 1e-9)
    assert np.allclose(xyz[:, 2], 0.06)
    # spread by tributary area: an interior node carries four times a corner node's share
    share = {tuple(np.round(mesh.points[x.node] * 1e3)): x.mass for x in placed}
    assert share[(100.0, 70.0, 60.0)] == pytest.approx(4 * share[(60.0, 50.0, 60.0)], rel=1e-9)


def test_enclosure_faces_and_normals_are_stated_per_face():
    m = parse_model(shell({"kind": "enclosure", "length": "100 mm", "width": "80 mm", "height": "40 mm",
                           "top": "closed"}, size="10 mm"))
    mesh = build_mesh(m)
    names = sorted(g for s in mesh.surfaces for g in s["groups"] if g != "walls")
    assert names == ["bottom", "side_xmax", "side_xmin", "side_ymax", "side_ymin", "top"]
    # a closed box oriented consistently: every normal points out, or every one in
    c = mesh.points.mean(axis=0)
    sides = []
    for s in mesh.surfaces:
        n = np.array(s["normal"])
        centre = mesh.points[np.unique(mesh.cells[mesh.cell_entity == s["face"]])].mean(axis=0)
        sides.append(np.sign(n @ (centre - c)))
    assert len(set(sides)) == 1


def test_thin_cylinder_mesh_is_regular_and_consistently_oriented():
    m = parse_model(shell({"kind": "cylinder", "radius": "50 mm", "length": "60 mm"}, size="5 mm"))
    mesh = build_mesh(m)
    assert consistently_oriented(mesh)
    r = np.hypot(mesh.points[:, 0], mesh.points[:, 1])
    assert np.allclose(r, 0.05, rtol=1e-9)
    # four quarters of ceil(78.54 / 5) = 16 elements round, 12 along
    assert mesh.n_elements == 64 * 12
    n = mesh.node_normals()
    radial = mesh.points[:, :2] / r[:, None]
    dots = np.einsum("ij,ij->i", n[:, :2], radial)
    assert np.allclose(np.abs(dots), 1.0, atol=1e-3) and len(set(np.sign(dots))) == 1


def test_plate_with_a_hole_mass_and_unstructured_quads():
    # 120 x 80 x 2 mm steel with a 30 mm central hole: analytic mass ρ t (L W − π d² / 4)
    raw = shell({"kind": "plate", "length": "120 mm", "width": "80 mm",
                 "cutouts": [{"shape": "circle", "center": ["60 mm", "40 mm"], "diameter": "30 mm"}]},
                family="quad8", size="4 mm", thickness="2 mm",
                regions={"rim": {"select": "point", "at": ["60 mm", "40 mm", "0 mm"], "radius": "15.01 mm"}})
    m = parse_model({**raw, "mesh": {"family": "quad8", "size": "4 mm", "local_sizes": {"rim": "1.5 mm"}}})
    mesh = build_mesh(m)
    assert mesh.cells.shape[1] == 8 and not mesh.structured
    analytic = 7850 * 2e-3 * (0.12 * 0.08 - math.pi * 0.03**2 / 4)
    # mass from the elements' measures (as `check` reports it) within 0.1 % (issue 8; exact geometry)
    assert model_mass(m, mesh) == pytest.approx(analytic, rel=1e-3)
    rim = mesh.points[mesh.region_nodes("rim")]
    assert np.allclose(np.hypot(rim[:, 0] - 0.06, rim[:, 1] - 0.04), 0.015, rtol=1e-6)
    # the local size refines the rim: at 4 mm about π·30 / 4 ≈ 24 element edges round the hole,
    # with 1.5 mm near it at least twice as many (quad8: two nodes per edge)
    coarse = build_mesh(parse_model(raw))
    assert len(rim) >= 2 * len(coarse.region_nodes("rim")) >= 2 * 2 * 20


def test_rectangular_cutouts_and_polygon_with_a_hole():
    m = parse_model(shell({"kind": "polygon", "vertices": [["0 mm", "0 mm"], ["100 mm", "0 mm"], ["120 mm", "60 mm"],
                                                           ["40 mm", "80 mm"], ["-10 mm", "40 mm"]],
                           "cutouts": [{"shape": "rectangle", "center": ["50 mm", "35 mm"], "size": ["30 mm", "20 mm"]}]},
                          family="quad4", size="5 mm"))
    mesh = build_mesh(m)
    assert mesh.cells.shape[1] == 4 and consistently_oriented(mesh)
    v = np.array([[0, 0], [100, 0], [120, 60], [40, 80], [-10, 40]], float) * 1e-3
    area = 0.5 * abs(np.dot(v[:, 0], np.roll(v[:, 1], -1)) - np.dot(v[:, 1], np.roll(v[:, 0], -1))) - 0.03 * 0.02
    assert model_mass(m, mesh) == pytest.approx(7850 * 1e-3 * area, rel=1e-9)


def test_polygon_sides_pick_its_real_edges():
    verts = [["0 mm", "0 mm"], ["100 mm", "0 mm"], ["150 mm", "80 mm"], ["50 mm", "80 mm"], ["-20 mm", "40 mm"]]
    m = parse_model(shell({"kind": "polygon", "vertices": verts}, size="5 mm",
                          regions={"e3": {"select": "sides", "sides": [3]}, "e45": {"select": "sides", "sides": [4, 5]},
                                   "skew": {"select": "line", "start": ["100 mm", "0 mm", "0 mm"],
                                            "end": ["150 mm", "80 mm", "0 mm"]}}))
    mesh = build_mesh(m)
    v = np.array([[float(x[:-3]), float(y[:-3])] for x, y in verts]) * 1e-3

    def on_edge(p, a, b):
        t = np.clip((p - a) @ (b - a) / ((b - a) @ (b - a)), 0, 1)
        return np.linalg.norm(p - (a + np.outer(t, b - a)), axis=1) < 1e-9

    p = mesh.points[:, :2]
    e3 = mesh.region_nodes("e3")
    assert set(e3) == set(np.flatnonzero(on_edge(p, v[2], v[3])))  # edge 3: vertex 3 to vertex 4
    e45 = mesh.region_nodes("e45")
    assert set(e45) == set(np.flatnonzero(on_edge(p, v[3], v[4]) | on_edge(p, v[4], v[0])))
    (part,) = mesh.regions["skew"]
    d = (v[2] - v[1]) / np.linalg.norm(v[2] - v[1])
    assert abs(abs(part.direction[:2] @ d) - 1) < 1e-12


def test_simply_supported_on_skew_edges_holds_w_and_the_along_edge_translation():
    # a square plate turned by 30°: every edge is skew
    c, s = math.cos(math.pi / 6), math.sin(math.pi / 6)
    square = np.array([[0, 0], [1, 0], [1, 1], [0, 1]], float) * 0.1
    verts = [[f"{(c * x - s * y) * 1e3:.12g} mm", f"{(s * x + c * y) * 1e3:.12g} mm"] for x, y in square]
    m = parse_model(shell({"kind": "polygon", "vertices": verts}, size="10 mm",
                          regions={"rim": {"select": "sides", "sides": [1, 2, 3, 4]}},
                          supports=[{"region": "rim", "kind": "simply_supported"}]))
    prep = prepare(m)
    mesh, con = prep.mesh, prep.constraints
    rows: dict[int, list[np.ndarray]] = {}
    for n in range(mesh.n_nodes):
        rows[n] = [np.eye(3)[j] for j in range(3) if con.fixed[n, j]]
    for eq in con.equations:
        r = np.zeros(3)
        for node, dof, coef in eq:
            r[dof] = coef
        rows[eq[0][0]].append(r)
    rim = set(mesh.region_nodes("rim"))
    corners = {int(np.argmin(np.linalg.norm(mesh.points[:, :2] - (np.array([c * x - s * y, s * x + c * y])), axis=1)))
               for x, y in square}
    for k in range(4):
        a = np.r_[c * square[k, 0] - s * square[k, 1], s * square[k, 0] + c * square[k, 1]]
        b = np.r_[c * square[(k + 1) % 4, 0] - s * square[(k + 1) % 4, 1],
                  s * square[(k + 1) % 4, 0] + c * square[(k + 1) % 4, 1]]
        t = np.r_[(b - a) / np.linalg.norm(b - a), 0.0]
        across = np.cross([0, 0, 1.0], t)
        for n in rim - corners:
            p = mesh.points[n, :2]
            if abs((b - a)[0] * (p - a)[1] - (b - a)[1] * (p - a)[0]) > 1e-12:
                continue
            space = np.array(rows[n])
            assert space.shape[0] == 2  # w and the along-edge translation, nothing else
            proj = space.T @ np.linalg.pinv(space.T)  # projector on the held directions
            assert np.allclose(proj @ [0, 0, 1.0], [0, 0, 1.0])
            assert np.allclose(proj @ t, t)
            assert np.allclose(proj @ across, 0.0)  # free to move in-plane across the edge
            assert not con.fixed[n, 3:].any()  # the edge rotates freely
    for n in corners:  # two edges meet: all three translations held
        assert len(rows[n]) == 3 and np.linalg.matrix_rank(np.array(rows[n])) == 3
    assert len(con.equations) > 0
    job = make_job(prep)
    assert len(job.equations) == len(con.equations)
    assert con.free_dof(6) == mesh.n_nodes * 6 - con.fixed.sum() - len(con.equations)


def test_supports_on_axis_edges_are_unchanged_without_equations(plate):
    import tomllib

    m = parse_model(tomllib.loads(plate("quad4", (4, 4), "simply_supported")))
    prep = prepare(m)
    assert prep.constraints.equations == []
    rim = prep.mesh.region_nodes("rim")
    assert prep.constraints.fixed[rim, 2].all()


def _bracket_step(path, labels=None, gap: float = 0.0):
    pts = [[0.0, 0.03], [0.0, 0.0], [0.04, 0.0]]

    def build(gmsh):
        if gap:
            occ = gmsh.model.occ
            occ.addRectangle(0, 0, 0, 0.02, 0.04)
            occ.addRectangle(0, 0, gap, 0.02, 0.04)
            occ.rotate([(2, 2)], 0, 0, gap, 1, 0, 0, math.pi / 2)
        else:
            profile_faces(gmsh, pts, 0.02, [0.004])

    return write_step(path, build, labels)


def test_cad_surface_model_matches_the_builtin_profile_and_its_labels_are_regions(tmp_path):
    step = _bracket_step(tmp_path / "bracket.step", labels=["leg_a", "bend", "leg_b"])
    cad = parse_model(shell({"kind": "cad", "file": "bracket.step"}, size="2 mm",
                            regions={"wall_leg": {"select": "named", "name": "leg_a"}}))
    prof = parse_model(shell({"kind": "profile", "points": BRACKET_POINTS, "radii": ["4 mm"], "length": "20 mm"},
                             size="2 mm"))
    a = build_mesh(cad, tmp_path)
    b = build_mesh(prof)
    assert step.is_file()
    assert a.n_nodes == b.n_nodes and a.n_elements == b.n_elements
    assert model_mass(cad, a) == pytest.approx(model_mass(prof, b), rel=1e-9)
    assert consistently_oriented(a)
    leg = a.points[a.region_nodes("wall_leg")]
    assert np.allclose(leg[:, 1], 0.0) and leg[:, 2].min() == pytest.approx(4e-3)


def test_cad_with_a_gap_says_it_falls_apart(tmp_path):
    _bracket_step(tmp_path / "gap.step", gap=0.5e-3)
    m = parse_model(shell({"kind": "cad", "file": "gap.step"}, size="5 mm"))
    with pytest.raises(MeshingError, match="falls apart into 2 unconnected parts"):
        build_mesh(m, tmp_path)


def test_cad_solid_with_a_shell_section_is_refused(tmp_path):
    from bridge.meshing.gmsh import write_step_box

    write_step_box(tmp_path / "box.step", [0, 0, 0], [0.01, 0.01, 0.01])
    m = parse_model(shell({"kind": "cad", "file": "box.step"}))
    with pytest.raises(MeshingError, match="solid body.*shell section needs a surface model"):
        build_mesh(m, tmp_path)


def test_model_validation_of_the_new_kinds():
    with pytest.raises(ModelError, match="radii"):
        parse_model(shell({"kind": "profile", "points": BRACKET_POINTS, "radii": [], "length": "5 mm"}))
    with pytest.raises(ModelError, match="'size'"):
        parse_model(shell({"kind": "plate", "length": "1 m", "width": "1 m"},
                          regions={"f": {"select": "footprint", "shape": "rectangle", "center": ["0 m"] * 3,
                                         "diameter": "1 mm"}}))
    with pytest.raises(ModelError, match="edges \\(1 to 4\\)"):
        parse_model(shell({"kind": "polygon", "vertices": [["0 m", "0 m"], ["1 m", "0 m"], ["1 m", "1 m"],
                                                             ["0 m", "1 m"]]},
                          regions={"e": {"select": "sides", "sides": [5]}}))
    with pytest.raises(ModelError, match="mid-surface: use a shell section"):
        parse_model({**shell({"kind": "enclosure", "length": "1 m", "width": "1 m", "height": "1 m"}),
                     "section": {"kind": "solid", "material": "steel"}, "mesh": {"family": "tet10", "size": "1 m"}})


# --- bad inputs: one clear line each, exit code of a meshing error ---------------------------

BAD_HEAD = """
name = "bad part"
[materials.steel]
youngs_modulus = "210 GPa"
poisson_ratio = 0.3
density = "7850 kg/m^3"
[section]
kind = "shell"
material = "steel"
thickness = "1 mm"
[mesh]
family = "quad4"
size = "10 mm"
"""

LID = """
[geometry]
kind = "enclosure"
length = "200 mm"
width = "150 mm"
height = "60 mm"
top = "lid"
"""


@pytest.mark.parametrize("body,expect", [
    (LID + """
[regions.pcb]
select = "footprint"
shape = "rectangle"
center = ["100 mm", "75 mm", "90 mm"]
size = ["80 mm", "50 mm"]
""", "regions.pcb.center: the footprint misses the part: its centre [100.0, 75.0, 90.0] mm is 30 mm from the nearest face"),
    (LID + """
[regions.screw]
select = "point"
at = ["5 mm", "5 mm", "60 mm"]
radius = "2 mm"
""", "regions.screw.radius: the capture radius 2 mm catches no mesh node; the nearest node is 7.071 mm from 'at'"),
    ("""
[geometry]
kind = "cad"
file = "gap.step"
""", "geometry: the surface model falls apart into 2 unconnected parts"),
    ("""
[geometry]
kind = "cad"
file = "bracket.step"
[regions.flange]
select = "named"
name = "flange"
""", "regions.flange.name: the CAD file gives no entity the label 'flange'; known names: bend, leg_a, leg_b"),
])
def test_bad_sheet_inputs_give_one_clear_line(body, expect, tmp_path):
    _bracket_step(tmp_path / "gap.step", gap=0.5e-3)
    _bracket_step(tmp_path / "bracket.step", labels=["leg_a", "bend", "leg_b"])
    path = tmp_path / "bad.toml"
    path.write_text(BAD_HEAD + body, encoding="utf-8")
    line = error_line(runner.invoke(app, ["check", str(path)]), MeshingError.exit_code)
    assert str(path) in line and expect in line


def test_check_reports_the_mass_of_a_part_with_a_hole(tmp_path):
    import json

    path = tmp_path / "hole.toml"
    path.write_text(BAD_HEAD.replace("bad part", "plate with a hole").replace('"1 mm"', '"2 mm"')
                    .replace('"10 mm"', '"3 mm"') + """
[geometry]
kind = "plate"
length = "120 mm"
width = "80 mm"
cutouts = [{ shape = "circle", center = ["60 mm", "40 mm"], diameter = "30 mm" }]
""", encoding="utf-8")
    res = runner.invoke(app, ["check", str(path), "--json"])
    assert res.exit_code == 0, res.output
    mass = json.loads(res.stdout)["total_mass_kg"]
    # ρ t (L W − π d²/4): analytic, to 0.1 % (issue 8)
    assert mass == pytest.approx(7850 * 2e-3 * (0.12 * 0.08 - math.pi * 0.03**2 / 4), rel=1e-3)
    assert load_model(path).geometry.cutouts[0].diameter == pytest.approx(0.03)
