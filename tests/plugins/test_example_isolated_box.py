"""The example examples/isolated_instrument_box.toml: six mounting modes on CalculiX, Kratos and
OpenSees, `compare` passing, the mounting modes reported against the excitation bands."""

from __future__ import annotations

import json
import shutil

import numpy as np
import pytest
from typer.testing import CliRunner

from bridge.cli import app
from bridge.model import load_model

EXAMPLE = __import__("pathlib").Path(__file__).resolve().parents[2] / "examples" / "isolated_instrument_box.toml"


@pytest.mark.solver
def test_isolated_box_example_on_three_solvers_compares_and_clears_its_bands(three_solvers, tmp_path):
    model = tmp_path / "box.toml"
    shutil.copyfile(EXAMPLE, model)
    runner = CliRunner()
    res = runner.invoke(app, ["run", str(model), "--out", str(tmp_path / "run"), "--json"])
    assert res.exit_code == 0, res.output
    summaries = {s["solver"]: s for s in json.loads(res.stdout)["runs"]}
    f = {k: np.array(v["frequencies_hz"]) for k, v in summaries.items()}
    assert set(f) == {"calculix", "kratos", "opensees"} and all(v.size == 6 for v in f.values())
    # every mounting mode below the pump's band widened by its margin (49 Hz − 20 %): the box is isolated
    m = load_model(EXAMPLE)
    pump = next(b for b in m.excitation if b.name == "pump_shaft")
    assert f["calculix"].max() < pump.low * (1 - pump.margin)
    for s in summaries.values():
        checks = {c["name"]: c["status"] for c in s["checks"]}
        assert checks["excitation:pump_shaft"] == "ok" and checks["excitation:fan_blade_pass"] == "ok"
    cmp = runner.invoke(app, ["compare", str(tmp_path / "run" / "calculix"), str(tmp_path / "run" / "kratos"),
                              str(tmp_path / "run" / "opensees"), "--json"])
    assert cmp.exit_code == 0, cmp.output
    # three solvers on one model: the same six modes (compare's |Δf| ≤ 1 %, MAC ≥ 0.9; common practice,
    # no source); a rigid box on springs is exact in each, so they agree far closer (measured < 1e-6)
    np.testing.assert_allclose(f["opensees"], f["calculix"], rtol=1e-4)
    np.testing.assert_allclose(f["kratos"], f["calculix"], rtol=1e-4)
