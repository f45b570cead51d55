"""Every model on every solver (issue 11): the demo on all three with the element each gets, and
a solver option in the model re-runs only its study task."""

from __future__ import annotations

import json
import tomllib
from pathlib import Path

import pytest
from typer.testing import CliRunner

from bridge.cli import app
from bridge.compare.results import Thresholds, compare_results
from bridge.study.executor import Task, run_tasks

pytestmark = pytest.mark.solver

ROOT = Path(__file__).resolve().parents[2]


def test_the_demo_runs_on_every_solver_and_compares(three_solvers, tmp_path):
    out = tmp_path / "demo"
    res = CliRunner().invoke(app, ["run", str(ROOT / "examples" / "cover_panel.toml"), "--solver", "all",
                                   "--out", str(out), "--json"])
    assert res.exit_code == 0, res.output
    runs = {r["solver"]: r for r in json.loads(res.stdout)["runs"]}
    assert set(runs) == set(three_solvers)
    # the summary says which element each solver got and why
    assert runs["calculix"]["element"]["family"] == "quad8" and runs["calculix"]["element"]["element_type"] == "S8R"
    for name in ("kratos", "opensees"):
        el = runs[name]["element"]
        assert (el["requested"], el["family"], el["size_factor"], el["how"]) == ("quad8", "quad4", 0.5, "substitute")
        assert "has no 8-node shell" in el["reason"]
        assert runs[name]["mesh"]["elements"] == 4 * runs["calculix"]["mesh"]["elements"]
        assert (out / name / "mesh.vtu").is_file()
    # compare with the default thresholds (MAC ≥ 0.9, |Δf| ≤ 1 %; common practice, no source)
    for name in ("kratos", "opensees"):
        cmp = CliRunner().invoke(app, ["compare", str(out / "calculix"), str(out / name)])
        assert cmp.exit_code == 0, cmp.output
        assert "verdict: pass" in cmp.output
    # the terminal says it too
    text = CliRunner().invoke(app, ["run", str(ROOT / "examples" / "cover_panel.toml"), "--solver", "opensees",
                                    "--out", str(tmp_path / "one")])
    assert text.exit_code == 0, text.output
    assert "element: ShellMITC4 — quad4 at half the element size instead of quad8: OpenSees has no 8-node shell" \
        in text.output


def test_a_changed_solver_option_reruns_only_its_task(three_solvers, plate, tmp_path):
    base = tomllib.loads(plate("quad4", (6, 6), "clamped", modes=3))
    study = tmp_path / "study"

    def tasks(options: dict | None):
        raw = dict(base, **({"solver_options": options} if options else {}))
        return [Task(f"{s}", raw, str(tmp_path), s) for s in ("calculix", "opensees")]

    states = lambda outs: {o.task.solver: o.state for o in outs}  # noqa: E731
    first = run_tasks(tasks(None), study, workers=1)
    assert states(first) == {"calculix": "done", "opensees": "done"}, [o.error for o in first]
    assert first[1].summary["element_type"] == "ShellMITC4"
    assert states(run_tasks(tasks(None), study, workers=1)) == {"calculix": "cached", "opensees": "cached"}
    # the default given explicitly is the same run; another solver's option does not touch these
    same = run_tasks(tasks({"opensees": {"quad_shell": "ShellMITC4"}, "kratos": {"shell_theory": "thick"}}),
                     study, workers=1)
    assert states(same) == {"calculix": "cached", "opensees": "cached"}
    changed = run_tasks(tasks({"opensees": {"quad_shell": "ShellDKGQ"}}), study, workers=1)
    assert states(changed) == {"calculix": "cached", "opensees": "done"}
    assert changed[1].summary["element_type"] == "ShellDKGQ"
    assert changed[1].summary["solver_options"] == {"quad_shell": "ShellDKGQ", "tri_shell": "ASDShellT3"}
    assert changed[1].folder != first[1].folder
    assert states(run_tasks(tasks({"opensees": {"quad_shell": "ShellDKGQ"}}), study, workers=1))["opensees"] == "cached"


def test_a_pinned_family_wins(three_solvers, plate, write_model, tmp_path):
    from bridge.pipeline import run_model

    path = write_model(plate("quad8", (8, 8), "clamped", modes=4, extra='solver_family = { kratos = "tri3" }'))
    _, outs = run_model(path, tmp_path / "pin", solvers=["kratos"])
    (o,) = outs
    assert o.ok, o.error
    assert o.summary["element"]["how"] == "pinned" and o.summary["element"]["family"] == "tri3"
    assert o.summary["element_type"] == "ShellThinElementCorotational3D3N"
    _, (c,) = run_model(path, tmp_path / "ref", solvers=["calculix"])
    # a coarse tri3 mesh against S8R: the same part, paired by shape (MAC ≥ 0.9; common practice)
    cmp = compare_results(c.result, o.result, "calculix", "kratos", Thresholds(min_mac=0.9, max_df=0.10))
    assert cmp.mapped and all(p["mac"] >= 0.9 for p in cmp.pair_verdicts())
