"""The example examples/instrument_box_on_ribbed_panel.toml: a box on four mounts on a ribbed
panel (shells, stiffeners off the mid-surface, couplings, springs between points, a mass with
inertia) on every solver, the six mounting modes told apart from the panel's, reported against
the excitation bands and passing `compare`; the ribbed panel's own modes as far apart as measured."""

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


def _box_share(result) -> np.ndarray:
    """Per mode: the box's largest motion over the panel's largest. The box's nodes are its centre
    of gravity and the six nodes that carry its inertia (at ±45…110 mm about it: they show its
    rotations too), i.e. the nodes of no shell element above the panel's plane."""
    p = result.points
    shell = np.zeros(len(p), bool)
    shell[np.unique(result.cells)] = True
    box = ~shell & (p[:, 2] > 1e-3)
    u = np.linalg.norm(result.shapes, axis=2)  # (modes, nodes)
    return u[:, box].max(axis=1) / u[:, shell].max(axis=1)


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
    pump = next(b for b in m.excitation if b.name == "pump_shaft")
    for name, s in summaries.items():
        checks = {c["name"]: c["status"] for c in s["checks"]}
        assert checks["excitation:pump_shaft"] == "ok" and checks["excitation:fan_blade_pass"] == "ok", name
        r = load_result(tmp_path / "run" / name / "result.vtkhdf")
        share = _box_share(r)
        # the six mounting modes come first: the box moves more than any point of the panel (its
        # six rigid-body motions on the mounts), and every later mode is the panel's (box nearly still;
        # the ratio 1 as the divide: common practice, no source)
        assert (share[:6] > 1.0).all() and (share[6:] < 1.0).all(), (name, share.round(3))
        # all six below the pump's band widened by its margin: the box is isolated (the example's question)
        assert r.frequencies[5] < pump.low * (1 - pump.margin), name
    cmp = runner.invoke(app, ["compare", *(str(tmp_path / "run" / n) for n in ("calculix", "kratos", "opensees")),
                              "--json"])
    assert cmp.exit_code in (0, 10), cmp.output
    for c in json.loads(cmp.stdout)["comparisons"]:
        pairs = {p["a"]: p for p in c["pairs"]}
        assert sorted(pairs) == list(range(1, 13)) and all(p["b"] == p["a"] for p in pairs.values())
        # the six mounting modes: |Δf| ≤ 1 % and MAC ≥ 0.9 (compare's defaults; common practice, no
        # source) — measured ≤ 0.11 %, MAC 1.000
        assert all(pairs[k]["ok"] for k in range(1, 7)), c["b"]
        # the ribbed panel's own modes: the same shapes (MAC ≥ 0.99), but the three stiffener models
        # (CalculiX's B32R expanded into bricks with OFFSET, Kratos's and OpenSees' beams hung on
        # torsion-free links) spread by up to 3.9 % on these 10 x 16 mm ribs (measured: CalculiX
        # 3.3–3.9 % below the others on modes 7 and 9); within 5 % (our measurement; README says so)
        for k in range(7, 13):
            assert pairs[k]["mac"] >= 0.99 and abs(pairs[k]["df"]) <= 0.05, (c["b"], pairs[k])
