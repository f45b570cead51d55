"""Test and analysis together on real solver runs (issue 14).

* A "measured" set made from another solver's run on another mesh: a free steel bar
  80 × 24 × 12 mm, the model CalculiX hex20 (C3D20R) 16 × 5 × 3, the "test" Kratos hex20
  20 × 6 × 3 with E scaled by 0.97 (f ∝ √E: every frequency −1.511 %), 2 % noise on the shapes,
  written as UFF in millimetres in a rotated test frame with one tilted sensor.
  (Measured on this machine: the two discretisations agree within 0.05 % at E equal, so a
  0.2 % tolerance on the recovered shift tests the correlation, not the meshes.)
* Effective Independence on the demo panel (examples/cover_panel.toml).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from bridge.checks import rigid_body_count
from bridge.cli import app
from bridge.compare.mac import auto_mac
from bridge.modaltest.efi import fisher
from bridge.modaltest.locate import locate_on_model, model_at
from bridge.modaltest.measured import MeasuredModes, Placement
from bridge.modaltest.plan import candidates_from_model, parse_modes, plan_test
from bridge.modaltest.uff import write_uff
from bridge.pipeline import run_model
from bridge.results import load_result

pytestmark = pytest.mark.solver

ROOT = Path(__file__).resolve().parents[2]
SHIFT = np.sqrt(0.97) - 1  # stiffness −3 %: f ∝ √E

BAR = """
name = "free steel bar"
[geometry]
kind = "block"
length = "80 mm"
width = "24 mm"
height = "12 mm"
[materials.steel]
youngs_modulus = "{E}"
poisson_ratio = 0.3
density = "7850 kg/m^3"
[section]
kind = "solid"
material = "steel"
[analysis]
modes = 12
[mesh]
family = "hex20"
divisions = [{div}]
"""


@pytest.fixture(scope="module")
def bar_runs(tmp_path_factory):
    import importlib.util
    import os
    import shutil

    if shutil.which("ccx") is None or importlib.util.find_spec("KratosMultiphysics") is None:
        if os.environ.get("CI"):
            pytest.fail("ccx and Kratos are needed in CI")
        pytest.skip("ccx or Kratos not installed")
    tmp = tmp_path_factory.mktemp("bar")
    (tmp / "model.toml").write_text(BAR.format(E="210 GPa", div="16, 5, 3"))
    (tmp / "test.toml").write_text(BAR.format(E="203.7 GPa", div="20, 6, 3"))  # 0.97 × 210 GPa, another mesh
    _, (a,) = run_model(tmp / "model.toml", tmp / "model", solvers=["calculix"])
    _, (b,) = run_model(tmp / "test.toml", tmp / "test", solvers=["kratos"])
    assert a.ok and b.ok, (a.error, b.error)
    return tmp, tmp / "model" / "calculix" / "result.vtkhdf", b.result


def _sensors():
    P, D = [], []
    for x in np.arange(5, 80, 10) * 1e-3:  # top face, along z
        for y in (4e-3, 20e-3):
            P.append([x, y, 12e-3])
            D.append([0, 0, 1.0])
    for x in np.arange(5, 80, 10) * 1e-3:  # side face y = 0, along y
        P.append([x, 0.0, 6e-3])
        D.append([0, 1.0, 0])
    t = np.radians(30)  # the end face x = 80 mm: sensors tilted 30° from x towards z
    for y in (6e-3, 18e-3):
        P.append([80e-3, y, 6e-3])
        D.append([np.cos(t), 0, np.sin(t)])
    return np.array(P), np.array(D)


def _measured(test_result, noise=0.02, seed=11) -> MeasuredModes:
    P, D = _sensors()
    rb = rigid_body_count(test_result.frequencies, test_result.eigenvalues)
    elastic = np.arange(rb, test_result.n_modes)
    S = model_at(test_result, locate_on_model(test_result, P), D, elastic)
    rng = np.random.default_rng(seed)
    S = S + noise * np.abs(S).max(axis=1, keepdims=True) * rng.standard_normal(S.shape)
    # the test frame: rotated 90° about z, origin at the part's (80, 0, 0) mm; file in mm
    R = np.column_stack([[0, 1.0, 0], [-1.0, 0, 0], [0, 0, 1.0]])
    pl = Placement(R, np.array([0.08, 0.0, 0.0]))
    return MeasuredModes(points=P, directions=D, point_labels=[str(101 + i // 1) for i in range(len(P))],
                         frequencies=test_result.frequencies[elastic], shapes=S, length_unit="mm", placement=pl)


FRAME = 'origin = ["80 mm", "0 mm", "0 mm"]\nx_axis = [0, 1, 0]\ny_axis = [-1, 0, 0]\n'


def test_other_solver_other_mesh_shifted_and_noisy(bar_runs):
    tmp, model_path, test_result = bar_runs
    m = _measured(test_result)
    write_uff(m, tmp / "hammer.uff", title="synthetic test of the bar")
    (tmp / "frame.toml").write_text(FRAME)
    r = CliRunner().invoke(app, ["correlate", str(model_path), str(tmp / "hammer.uff"), "--frame",
                                 str(tmp / "frame.toml"), "--json", "--csv", str(tmp / "pairs.csv")])
    assert r.exit_code == 0, r.output
    d = json.loads(r.stdout)
    assert d["rigid_body_modes_model"] == 6 and not d["off_model"]
    pairs = d["pairs"]
    # every measured mode paired with the model mode it came from (same order: no close modes here)
    assert [(p["model_mode"], p["test_mode"]) for p in pairs] == [(6 + k, k) for k in range(1, 7)]
    for p in pairs:
        assert p["mac"] >= 0.9  # issue acceptance
        assert abs(p["df"] - SHIFT) <= 0.002, p  # within 0.2 % of the known shift (issue acceptance)
    assert d["frequency_bias"]["stiffness_scale"] == pytest.approx(0.97, abs=0.003)
    assert all(s["comac"] >= 0.8 for s in d["sensors"])  # no sensor flagged (common practice, no source)
    # the tilted end-face sensors came back with their direction in the part's frame
    tilted = [s for s in d["sensors"] if abs(s["direction"][2] - 0.5) < 1e-9 and s["direction"][0] > 0.8]
    assert len(tilted) == 2
    assert d["passed"] is True


def test_swapped_sensor_pair_flagged_by_comac(bar_runs):
    tmp, model_path, test_result = bar_runs
    m = _measured(test_result)
    i, j = 2, 12  # two top-face sensors 10 mm and 60 mm from the end: their cables swapped
    m.shapes[:, [i, j]] = m.shapes[:, [j, i]]
    write_uff(m, tmp / "swapped.uff")
    (tmp / "frame.toml").write_text(FRAME)
    r = CliRunner().invoke(app, ["correlate", str(model_path), str(tmp / "swapped.uff"), "--frame",
                                 str(tmp / "frame.toml"), "--json"])
    d = json.loads(r.stdout)
    flagged = sorted(k for k, s in enumerate(d["sensors"]) if s["comac"] < 0.8)
    assert flagged == [i, j], [round(s["comac"], 3) for s in d["sensors"]]
    assert any("CoMAC" in w for w in d["warnings"])


@pytest.fixture(scope="module")
def panel(tmp_path_factory):
    import os
    import shutil

    if shutil.which("ccx") is None:
        if os.environ.get("CI"):
            pytest.fail("ccx is needed in CI")
        pytest.skip("ccx not installed")
    out = tmp_path_factory.mktemp("panel")
    _, (o,) = run_model(ROOT / "examples" / "cover_panel.toml", out, solvers=["calculix"])
    assert o.ok, o.error
    return out / "calculix" / "result.vtkhdf"


def test_efi_on_the_demo_panel(panel, tmp_path):
    res = load_result(panel)
    modes = parse_modes(None, res)
    cand = candidates_from_model(res)
    n = 12
    plan = plan_test(res, n, modes, cand)
    phi = cand.phi[:, modes]
    rng = np.random.default_rng(2026)
    draws = [fisher(phi[rng.choice(len(phi), n, replace=False)])[0] for _ in range(100)]
    # the chosen set's Fisher determinant beats all of 100 random draws of the same size (issue acceptance)
    assert plan.efi.log10_det > max(draws)
    # EfI's largest auto-MAC off-diagonal below that of an evenly spaced grid of the same size (cell
    # centres of nx × ny cells over the 240 × 160 mm panel, normal sensors), at four sizes (issue
    # acceptance). Only the largest: the mean off-diagonal is mixed (measured: EfI 0.037 vs grid 0.028
    # at 12 sensors, 0.027 vs 0.029 at 24), since EfI maximises the Fisher determinant, not auto-MAC.
    off = ~np.eye(len(modes), dtype=bool)
    for nx, ny in ((4, 3), (4, 4), (5, 4), (6, 4)):
        k = nx * ny
        p = plan if k == n else plan_test(res, k, modes, cand)
        xs = (np.arange(nx) + 0.5) / nx * 0.24
        ys = (np.arange(ny) + 0.5) / ny * 0.16
        G = np.array([[x, y, 0.0] for x in xs for y in ys])
        g = model_at(res, locate_on_model(res, G), np.tile([0, 0, 1.0], (k, 1)), modes)
        grid = auto_mac(g)[off].max()
        assert p.auto_mac[off].max() < grid, (k, p.auto_mac[off].max(), grid)
    # the plan command writes the chosen set; read back and correlated with the model: MAC 1, Δf 0
    r = CliRunner().invoke(app, ["plan-test", str(panel), "--sensors", str(n), "--out", str(tmp_path / "plan.uff")])
    assert r.exit_code == 0, r.output
    r = CliRunner().invoke(app, ["correlate", str(panel), str(tmp_path / "plan.uff"), "--json"])
    assert r.exit_code == 0, r.output
    d = json.loads(r.stdout)
    assert all(p["df"] == 0.0 and p["mac"] >= 1 - 1e-9 for p in d["pairs"])  # issue acceptance
    assert len(d["pairs"]) == len(modes)
    # a region as candidates (from the run's mesh.vtu): the screwed rim does not move out of plane
    r = CliRunner().invoke(app, ["plan-test", str(panel), "--sensors", str(n), "--candidates", "screwed_rim",
                                 "--out", str(tmp_path / "rim.uff")])
    assert r.exit_code == 15 and "zero at every candidate" in r.output, r.output
    r = CliRunner().invoke(app, ["plan-test", str(panel), "--sensors", "4", "--candidates", "no_such_region",
                                 "--out", str(tmp_path / "x.uff")])
    assert r.exit_code == 15 and "no region 'no_such_region'" in r.output and "screwed_rim" in r.output


def test_plan_on_a_solid_model_uses_its_faces(bar_runs, tmp_path):
    _, model_path, _ = bar_runs
    res = load_result(model_path)
    cand = candidates_from_model(res)
    # the bar's boundary nodes (hex20: corners and mid-edge nodes of the boundary faces) off its
    # sharp edges, each with the normal of its face
    p = cand.points
    on_face = (np.isclose(p[:, 0], 0) | np.isclose(p[:, 0], 0.08) | np.isclose(p[:, 1], 0) | np.isclose(p[:, 1], 0.024)
               | np.isclose(p[:, 2], 0) | np.isclose(p[:, 2], 0.012))
    assert on_face.all()
    assert np.allclose(np.abs(cand.directions).max(axis=1), 1.0)  # every normal along an axis: no edge nodes
    plan = plan_test(res, 12, parse_modes(None, res), cand)
    assert plan.max_off_diagonal <= 0.1  # the goal of the issue, met on this bar (common practice, no source)
