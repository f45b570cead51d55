"""Several sections on real solvers: a plate with a doubler (two thicknesses) against a stepped
hex20 solid, and a CAD assembly of two bodies of two materials (issue 8, item 3)."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from bridge.cli import app
from bridge.mesh import Mesh
from bridge.model import parse_model
from bridge.pipeline import Prepared, make_job, run_model, run_one
from bridge.plugins import get_plugin_manager, get_solver
from bridge.results import load_result
from bridge.supports import resolve_constraints, resolve_masses

pytestmark = pytest.mark.solver

RHO = 7850.0
#: plate 100 x 60 mm, 1 mm thick, with a 40 x 30 mm doubler of 2 mm in its middle (x 30..70, y 15..45)
PLATE_AREA, DOUBLER_AREA, T1, T2 = 0.1 * 0.06, 0.04 * 0.03, 0.001, 0.002


def doubler_model(family: str, divisions: tuple[int, int]) -> str:
    return f"""
name = "plate with doubler"
[geometry]
kind = "plate"
length = "100 mm"
width = "60 mm"
patches = [{{ min = ["30 mm", "15 mm"], max = ["70 mm", "45 mm"] }}]
[materials.steel]
youngs_modulus = "210 GPa"
poisson_ratio = 0.3
density = "7850 kg/m^3"
[sections.sheet]
kind = "shell"
material = "steel"
thickness = "1 mm"
[sections.doubler]
kind = "shell"
material = "steel"
thickness = "2 mm"
region = "doubler"
[regions.doubler]
select = "box"
entity = "face"
min = ["30 mm", "15 mm", "-0.5 mm"]
max = ["70 mm", "45 mm", "0.5 mm"]
[analysis]
modes = 12
[mesh]
family = "{family}"
divisions = [{divisions[0]}, {divisions[1]}]
"""


_CORNERS = np.array([(0, 0, 0), (1, 0, 0), (1, 1, 0), (0, 1, 0), (0, 0, 1), (1, 0, 1), (1, 1, 1), (0, 1, 1)])
#: gmsh's hex20 edge order (mid-edge nodes 8..19)
_EDGES = [(0, 1), (0, 3), (0, 4), (1, 2), (1, 5), (2, 3), (2, 6), (3, 7), (4, 5), (4, 7), (5, 6), (6, 7)]


def stepped_hex20(xs, ys, zs, keep, h: float, hz: float) -> tuple[np.ndarray, np.ndarray]:
    """Structured hex20 mesh (gmsh node order) of the union of the grid boxes
    [xs[i], xs[i+1]] × [ys[j], ys[j+1]] × [zs[k], zs[k+1]] for which keep(i, j, k)."""
    def axis(c, size):
        pts, owner = [c[0]], []
        for i in range(len(c) - 1):
            n = max(1, int(round((c[i + 1] - c[i]) / size)))
            pts.extend(np.linspace(c[i], c[i + 1], 2 * n + 1)[1:])
            owner.extend([i] * n)
        return np.array(pts), np.array(owner)

    X, ox = axis(xs, h)
    Y, oy = axis(ys, h)
    Z, oz = axis(zs, hz)
    offsets = np.vstack([2 * _CORNERS] + [_CORNERS[a] + _CORNERS[b] for a, b in _EDGES])  # order-2 lattice
    shape = (X.size, Y.size, Z.size)
    cells = [np.ravel_multi_index((np.array([2 * i, 2 * j, 2 * k]) + offsets).T, shape)
             for i in range(ox.size) for j in range(oy.size) for k in range(oz.size)
             if keep(ox[i], oy[j], oz[k])]
    cells = np.array(cells)
    used = np.unique(cells)
    compact = np.full(int(np.prod(shape)), -1)
    compact[used] = np.arange(used.size)
    i, j, k = np.unravel_index(used, shape)
    return np.column_stack([X[i], Y[j], Z[k]]), compact[cells]


def stepped_solid_frequencies(tmp_path: Path, h: float = 0.004, hz: float = 0.0005) -> np.ndarray:
    """The doubler plate as a solid: 1 mm sheet, the doubler 0.5 mm proud on each face (same
    mid-surface as the shells), hex20 (C3D20R) on CalculiX, free. With h = 4 mm, hz = 0.5 mm its
    first six elastic frequencies lie within 0.2 % of h = 2 mm, hz = 0.25 mm, 35821 nodes (measured,
    CalculiX 2.20: 792.40 against 790.97 Hz for the first)."""
    pts, cells = stepped_hex20([0, .03, .07, .1], [0, .015, .045, .06], [-.001, -.0005, .0005, .001],
                               lambda i, j, k: k == 1 or (i == 1 and j == 1), h, hz)
    model = parse_model({
        "name": "stepped solid", "geometry": {"kind": "block", "length": "100 mm", "width": "60 mm",
                                              "height": "2 mm"},
        "materials": {"steel": {"youngs_modulus": "210 GPa", "poisson_ratio": 0.3, "density": "7850 kg/m^3"}},
        "section": {"kind": "solid", "material": "steel"}, "analysis": {"modes": 12},
        "mesh": {"family": "hex20", "divisions": [1, 1, 1]}})
    mesh = Mesh(points=pts, family="hex20", cells=cells)
    cons = resolve_constraints(model, mesh)
    prep = Prepared(model, None, mesh, cons, resolve_masses(model, mesh, cons.fixed))
    out = run_one(get_solver(get_plugin_manager(), "calculix"), prep, make_job(prep), tmp_path / "solid")
    assert out.ok, out.error
    # the solid's mass is the analytic one (exact element measures)
    assert out.result.total_mass == pytest.approx(RHO * (PLATE_AREA * T1 + DOUBLER_AREA * (T2 - T1)), rel=1e-9)
    return out.result.frequencies[6:12]


def test_doubler_shells_match_the_stepped_solid_on_three_solvers(three_solvers, write_model, tmp_path):
    solid = stepped_solid_frequencies(tmp_path)
    q8 = write_model(doubler_model("quad8", (40, 24)), "q8.toml")
    q4 = write_model(doubler_model("quad4", (40, 24)), "q4.toml")
    _, (c,) = run_model(q8, tmp_path / "q8", solvers=["calculix"])
    _, outs = run_model(q4, tmp_path / "q4", solvers=["kratos", "opensees"])
    runs = {"calculix S8R": c, **{f"{o.solver} quad4": o for o in outs}}
    for name, o in runs.items():
        assert o.ok, (name, o.error)
        assert [ch.status for ch in o.checks if ch.status == "fail"] == [], (name, o.checks)
        f = o.result.frequencies
        assert np.all(f[:6] < 1.0), name  # free: six rigid-body modes
        saved = load_result(o.folder / "result.vtkhdf").metadata["sections"]
        assert [(x["name"], x["region"], x["elements"]) for x in saved] == \
            [("sheet", None, 40 * 24 - 16 * 12), ("doubler", "doubler", 16 * 12)]
        dev = f[6:12] / solid - 1
        # shells against the converged solid model within 2 % on the first 6 elastic modes
        # (issue 8 acceptance; the solid model as reference: common practice, no source).
        # Measured (CalculiX 2.20, Kratos 10.4, openseespy 3.7.1.2): S8R +0.4..+0.9 %, Kratos quad4
        # +0.6..+1.6 %, OpenSees quad4 +0.6..+1.0 % (shells are a little stiffer at the step, where
        # the solid's doubler is not fully effective).
        assert np.all(np.abs(dev) < 0.02), (name, np.round(100 * dev, 2).tolist())
        # mass: analytic ρ (A t1 + A_d (t2 − t1)) to 0.1 % (issue 8 acceptance)
        assert o.result.total_mass == pytest.approx(RHO * (PLATE_AREA * T1 + DOUBLER_AREA * (T2 - T1)), rel=1e-3)


def _two_box_step(path: Path) -> Path:
    """Two boxes stacked in z: 60 x 40 x 8 mm (bottom) and 60 x 40 x 4 mm (top), written in metres."""
    from bridge.meshing.gmsh import _Session

    with _Session() as gmsh:
        gmsh.model.add("stack")
        gmsh.option.setString("Geometry.OCCTargetUnit", "M")  # as bridge.meshing.gmsh.write_step_box
        gmsh.model.occ.addBox(0, 0, 0, 0.06, 0.04, 0.008)
        gmsh.model.occ.addBox(0, 0, 0.008, 0.06, 0.04, 0.004)
        gmsh.model.occ.synchronize()
        gmsh.write(str(path))
    return path


ASSEMBLY = """
name = "two-material stack"
[geometry]
kind = "cad"
file = "stack.step"
{join}
[materials.steel]
youngs_modulus = "210 GPa"
poisson_ratio = 0.3
density = "7850 kg/m^3"
[materials.aluminium]
youngs_modulus = "70 GPa"
poisson_ratio = 0.33
density = "2700 kg/m^3"
[regions.base]
select = "box"
entity = "volume"
min = ["0 mm", "0 mm", "0 mm"]
max = ["60 mm", "40 mm", "8 mm"]
[regions.cap]
select = "box"
entity = "volume"
min = ["0 mm", "0 mm", "8 mm"]
max = ["60 mm", "40 mm", "12 mm"]
[sections.base]
kind = "solid"
material = "steel"
region = "base"
[sections.cap]
kind = "solid"
material = "aluminium"
region = "cap"
[analysis]
modes = {modes}
[mesh]
family = "tet10"
size = "8 mm"
"""

#: ρ V of the two bodies: steel 60 × 40 × 8 mm, aluminium 60 × 40 × 4 mm (analytic)
STACK_MASS = 7850 * 0.06 * 0.04 * 0.008 + 2700 * 0.06 * 0.04 * 0.004


def test_cad_assembly_of_two_materials_is_joined_on_three_solvers(three_solvers, tmp_path):
    _two_box_step(tmp_path / "stack.step")
    path = tmp_path / "stack.toml"
    path.write_text(ASSEMBLY.format(join="", modes=8))
    res = CliRunner().invoke(app, ["check", str(path), "--json"])
    assert res.exit_code == 0, res.output
    info = json.loads(res.stdout)
    # total mass equals the analytic sum to 0.1 % (issue 8 acceptance)
    assert info["total_mass_kg"] == pytest.approx(STACK_MASS, rel=1e-3)
    by_name = {s["name"]: s for s in info["sections"]}
    assert by_name["base"]["material"] == "steel" and by_name["cap"]["material"] == "aluminium"
    assert by_name["base"]["mass_kg"] == pytest.approx(7850 * 0.06 * 0.04 * 0.008, rel=1e-3)
    assert by_name["cap"]["thickness_m"] is None and by_name["cap"]["kind"] == "solid"
    _, outs = run_model(path, tmp_path / "joined", solvers=["calculix", "kratos", "opensees"])
    f = {}
    for o in outs:
        assert o.ok, (o.solver, o.error)
        assert o.result.total_mass == pytest.approx(STACK_MASS, rel=1e-3)
        fr = o.result.frequencies
        # joined where they touch: one free body, six rigid-body modes, the 7th elastic
        # (a block 60 x 40 x 12 mm: first elastic mode in the tens of kHz; common practice, no source)
        assert np.all(fr[:6] < 1.0) and fr[6] > 1e4, (o.solver, fr.tolist())
        f[o.solver] = fr[6:8]
    # the same mesh on three solvers: elastic modes within 1 % of each other (common practice, no source)
    stack = np.array(list(f.values()))
    assert np.all(np.ptp(stack, axis=0) / stack.mean(axis=0) < 0.01), f


def test_cad_bodies_kept_apart_move_apart(ccx, tmp_path):
    _two_box_step(tmp_path / "stack.step")
    path = tmp_path / "stack.toml"
    path.write_text(ASSEMBLY.format(join="join = false", modes=14))
    _, (o,) = run_model(path, tmp_path / "apart", solvers=["calculix"])
    assert o.ok, o.error
    # two separate free bodies: twelve rigid-body modes (mechanics, no source needed)
    fr = o.result.frequencies
    assert np.all(fr[:12] < 1.0) and fr[12] > 1e3, fr.tolist()  # the 4 mm cap alone: about 5.2 kHz
