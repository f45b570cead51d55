"""The example examples/instrument_box_on_ribbed_panel.toml: a box on four mounts on a ribbed
panel (shells, stiffeners off the mid-surface, couplings, springs between points, a mass with
inertia) on every solver, `compare` passing, the six mounting modes told apart from the panel's
and reported against the excitation bands."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from bridge.cli import app
from bridge.model import load_model
from bridge.results import load_result

EXAMPLE = Path(__file__).resolve().parents[2] / "examples" / "instrument_box_on_ribbed_panel.toml"


def _box_share(result, cg: np.ndarray) -> np.ndarray:
    """Per mode: the box's centre-of-gravity motion over the largest motion of any panel node."""
    p = result.points
    at_cg = int(np.argmin(np.linalg.norm(p - cg, axis=1)))
    panel = np.flatnonzero(np.abs(p[:, 2]) < 1e-9)
    u = np.linalg.norm(result.shapes, axis=2)  # (modes, nodes)
    return u[:, at_cg] / u[:, panel].max(axis=1)


@pytest.mark.solver
def test_ribbed_panel_example_on_three_solvers_compares_and_clears_its_bands(three_solvers, tmp_path):
    model = tmp_path / "panel.toml"
    shutil.copyfile(EXAMPLE, model)
    runner = CliRunner()
    res = runner.invoke(app, ["run", str(model), "--out", str(tmp_path / "run"), "--json"])
    assert res.exit_code == 0, res.output
    summaries = {s["solver"]: s for s in json.loads(res.stdout)["runs"]}
    assert set(summaries) == {"calculix", "kratos", "opensees"}
    m = load_model(EXAMPLE)
    cg = np.array(m.reference_points["cg"], float)
    pump = next(b for b in m.excitation if b.name == "pump_shaft")
    for name, s in summaries.items():
        checks = {c["name"]: c["status"] for c in s["checks"]}
        assert checks["excitation:pump_shaft"] == "ok" and checks["excitation:fan_blade_pass"] == "ok", name
        r = load_result(tmp_path / "run" / name / "result.vtkhdf")
        share = _box_share(r, cg)
        # the six mounting modes come first: the box moves more than any point of the panel (its
        # six rigid-body motions on the mounts), and every later mode is the panel's (box nearly still)
        assert (share[:6] > 1.0).all() and (share[6:] < 1.0).all(), (name, share.round(3))
        # all six below the pump's band widened by its margin: the box is isolated (the example's question)
        assert r.frequencies[5] < pump.low * (1 - pump.margin), name
    cmp = runner.invoke(app, ["compare", *(str(tmp_path / "run" / n) for n in ("calculix", "kratos", "opensees")),
                              "--json"])
    # three solvers on one mesh: every mode paired, |Δf| ≤ 1 % and MAC ≥ 0.9 (compare's defaults;
    # common practice, no source)
    assert cmp.exit_code == 0, cmp.output
