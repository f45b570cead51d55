"""Happy paths of the ``modebridge`` command line (errors: test_bad_inputs.py)."""

from __future__ import annotations

import json
import re
from pathlib import Path

import pytest
from typer.testing import CliRunner

from bridge.cli import app
from bridge.cli.run import CAUTION
from modebridge_calculix.adapter import CalculixAdapter

runner = CliRunner()

# 10 × 10 quad4 plate clamped on all four edges (issue spec): 11 × 11 = 121 nodes, 100 elements,
# 40 boundary nodes, 81 interior nodes × 6 DOF = 486 free DOF (common practice, no source)
PLATE_COUNTS = {"nodes": 121, "elements": 100, "constrained_nodes": 40, "free_dof": 486, "dofs_per_node": 6}


def _ok(result) -> None:
    assert result.exit_code == 0, result.output
    assert result.exception is None, repr(result.exception)
    assert "Traceback" not in result.output


def test_schema_prints_json_schema():
    result = runner.invoke(app, ["schema"])
    _ok(result)
    schema = json.loads(result.stdout)
    assert "properties" in schema
    assert {"name", "geometry", "materials", "section", "mesh"} <= set(schema["properties"])
    assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    assert result.stderr == ""


@pytest.mark.solver
def test_solvers_json_lists_calculix(ccx, monkeypatch):
    monkeypatch.delenv("MODEBRIDGE_CCX", raising=False)
    result = runner.invoke(app, ["solvers", "--json"])
    _ok(result)
    rows = {r["name"]: r for r in json.loads(result.stdout)}
    row = rows["calculix"]
    assert row["executable"] == ccx
    assert row["plugin"] == "modebridge-calculix"
    assert row["capabilities"] == CalculixAdapter.capabilities.as_dict()
    assert {"quad4", "quad8", "hex20", "tet10"} <= set(row["capabilities"]["families"])
    assert "modal" in row["capabilities"]["analyses"]
    assert re.fullmatch(r"\d+\.\d+(\.\d+)?", row["solver_version"])  # e.g. "2.20" from `ccx -v`


def test_solvers_json_without_executable(tmp_path, monkeypatch):
    monkeypatch.delenv("MODEBRIDGE_CCX", raising=False)
    monkeypatch.setenv("PATH", str(tmp_path))
    result = runner.invoke(app, ["solvers", "--json"])
    _ok(result)  # listing solvers is not an error when one is not installed
    row = {r["name"]: r for r in json.loads(result.stdout)}["calculix"]
    assert row["executable"] is None and row["solver_version"] is None


@pytest.mark.solver
def test_solvers_table(ccx, monkeypatch):
    monkeypatch.delenv("MODEBRIDGE_CCX", raising=False)
    result = runner.invoke(app, ["solvers"])
    _ok(result)
    # the table is sized to the terminal (80 columns here), so long cells may be cut: check the
    # cells that fit, and that the executable was found (a missing one prints "not found")
    (row,) = [line for line in result.stdout.splitlines() if line.startswith("│ calculix ")]
    assert "not found" not in row
    rows = json.loads(runner.invoke(app, ["solvers", "--json"]).stdout)
    version = {r["name"]: r for r in rows}["calculix"]["solver_version"]
    assert version and version in row


def test_check_json_counts_the_clamped_plate(plate, write_model):
    path = write_model(plate("quad4", (10, 10), "clamped"))
    result = runner.invoke(app, ["check", str(path), "--json"])
    _ok(result)
    summary = json.loads(result.stdout)
    mesh = summary["mesh"]
    assert mesh["family"] == "quad4"
    assert {k: mesh[k] for k in PLATE_COUNTS} == PLATE_COUNTS
    assert summary["solvers"] == {"calculix": "ok"}
    (support,) = summary["supports"]
    assert support["region"] == "rim" and support["kind"] == "clamped"
    assert support["nodes"] == PLATE_COUNTS["constrained_nodes"]
    # ρ·a·b·h = 7850 kg/m³ × 0.1 m × 0.1 m × 0.002 m (exact geometry of the fixture)
    assert summary["total_mass_kg"] == pytest.approx(7850 * 0.1 * 0.1 * 0.002, rel=1e-9)


def test_check_text_counts_the_clamped_plate(plate, write_model):
    path = write_model(plate("quad4", (10, 10), "clamped"))
    result = runner.invoke(app, ["check", str(path)])
    _ok(result)
    first = result.stdout.splitlines()[0]  # the summary is one line, also when piped
    c = PLATE_COUNTS
    assert first.startswith("steel plate clamped: quad4 mesh")
    for phrase in (f"{c['nodes']} nodes", f"{c['elements']} elements",
                   f"{c['constrained_nodes']} constrained nodes", f"{c['free_dof']} free DOF",
                   f"({c['dofs_per_node']} per node)"):
        assert phrase in first, first
    assert "solver calculix: ok" in result.stdout


@pytest.mark.solver
def test_run_json_summary(ccx, plate, write_model, tmp_path):
    path = write_model(plate("quad4", (4, 4), "clamped", modes=3))
    out = tmp_path / "out"
    result = runner.invoke(app, ["run", str(path), "--out", str(out), "--json"])
    _ok(result)
    summary = json.loads(result.stdout)
    assert summary["solver"] == "calculix" and summary["element_type"] == "S4"  # deck.ELEMENT_TYPES
    f = summary["frequencies_hz"]
    assert len(f) == 3  # modes = 3 asked in the model
    assert all(a > 0 for a in f) and f == sorted(f)
    assert summary["rigid_body_modes"] == 0  # a clamped plate has none (common practice, no source)
    assert Path(summary["result_file"]) == out / "calculix" / "result.vtkhdf"
    assert Path(summary["result_file"]).is_file()
    assert json.loads((out / "calculix" / "summary.json").read_text()) == summary
    assert not (out / "calculix" / "error.txt").exists()


@pytest.mark.solver
def test_run_text_output(ccx, plate, write_model, tmp_path):
    path = write_model(plate("quad4", (4, 4), "clamped", modes=3))
    out = tmp_path / "out"
    result = runner.invoke(app, ["run", str(path), "--out", str(out)])
    _ok(result)
    assert "Natural frequencies" in result.stdout
    assert f"result: {out / 'calculix' / 'result.vtkhdf'}" in result.stdout
    assert CAUTION in result.stdout  # one line, not wrapped
    assert result.stderr == ""
