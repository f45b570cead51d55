"""Verdicts you can trust, on real CalculiX runs: mass_sum for second-order families, the
rigid-body count of partial supports, warnings that are signal, the element matrix."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from bridge.cli import app
from bridge.pipeline import run_model

pytestmark = pytest.mark.solver
ROOT = Path(__file__).resolve().parents[3]
runner = CliRunner()

_STEEL = """
[materials.steel]
youngs_modulus = "210 GPa"
poisson_ratio = 0.3
density = "7850 kg/m^3"
"""


def _block(family: str, mesh: str, supports: str, modes: int = 10) -> str:
    return f"""
name = "block {family}"
[geometry]
kind = "block"
length = "100 mm"
width = "40 mm"
height = "20 mm"
{_STEEL}
[section]
kind = "solid"
material = "steel"
{supports}
[analysis]
modes = {modes}
[mesh]
family = "{family}"
{mesh}
"""


# NAFEMS FV52-type support: w = 0 along the bottom edges (NAFEMS R0015, 1987), which leaves the
# three in-plane rigid-body motions free by design
_FV52 = """
[regions.bottom_edges]
select = "plane"
axis = "z"
at = "0 mm"
entity = "edge"
[[supports]]
region = "bottom_edges"
kind = "fixed_dofs"
dofs = ["uz"]
"""
_CLAMPED_END = """
[regions.root]
select = "sides"
sides = ["xmin"]
[[supports]]
region = "root"
kind = "clamped"
"""


def _checks(outcome) -> dict:
    return {c.name: c for c in outcome.checks}


@pytest.mark.parametrize("text", [
    _block("hex20", "divisions = [6, 3, 2]", ""),            # free body
    _block("hex20", "divisions = [6, 3, 2]", _FV52),         # FV52-type edge support
    _block("hex20", "divisions = [6, 3, 2]", _CLAMPED_END),  # cantilever
    _block("tet10", 'size = "12 mm"', ""),
    _block("tet10", 'size = "12 mm"', _CLAMPED_END),
], ids=["hex20-free", "hex20-fv52", "hex20-clamped", "tet10-free", "tet10-clamped"])
def test_mass_sum_and_rigid_modes_on_second_order_solids(ccx, write_model, tmp_path, text):
    _, (o,) = run_model(write_model(text), tmp_path / "run")
    assert o.ok, o.error
    c = _checks(o)
    assert c["mass_sum"].status == "ok", c["mass_sum"].message
    assert c["rigid_body_modes"].status == "ok", c["rigid_body_modes"].message
    figs = c["mass_sum"].figures
    # the effective masses of the computed modes never exceed rᵀMr (Bessel's inequality for
    # M-orthonormal modes; exact, no source) by more than the stated 2 % allowance
    assert max(figs["share_of_free_dof_mass"]) <= 1.02
    if "bottom_edges" in text:
        assert c["rigid_body_modes"].figures["expected"] == 3
        # serendipity corner nodes carry negative consistent-mass row sums: with the bottom edges'
        # nodes held, the mass on free DOF in z exceeds the model's mass (1.035 × on FV52, issue 10)
        assert figs["free_dof_mass_over_model_mass"][2] > 1.0


@pytest.mark.parametrize("supports", ["free", "clamped"])
def test_mass_sum_on_quad8_plates(ccx, write_model, plate, tmp_path, supports):
    _, (o,) = run_model(write_model(plate("quad8", (6, 6), supports, modes=10)), tmp_path / "run")
    c = _checks(o)
    assert c["mass_sum"].status == "ok", c["mass_sum"].message
    assert c["rigid_body_modes"].status == "ok", c["rigid_body_modes"].message


def test_symmetry_half_model_has_no_rigid_mode(ccx, write_model, plate, tmp_path):
    text = plate("quad4", (8, 4), "free", modes=4) + """
[regions.root]
select = "sides"
sides = ["xmin"]
[regions.mirror]
select = "sides"
sides = ["ymin"]
[[supports]]
region = "root"
kind = "clamped"
[[supports]]
region = "mirror"
kind = "symmetry"
normal = "y"
"""
    _, (o,) = run_model(write_model(text), tmp_path / "run")
    c = _checks(o)["rigid_body_modes"]
    assert c.status == "ok" and c.figures["expected"] == 0 and c.figures["found"] == 0


def test_point_mass_run_carries_no_solver_warning(ccx, tmp_path):
    # the demo (a 0.2 kg connector: a CalculiX *MASS element) — ccx warns about its internal
    # material MASS, which is harmless and filtered with its reason (HARMLESS_WARNINGS); no
    # other warning is in the log, so none may reach the summary, the checks or the report
    from modebridge_calculix.runner import HARMLESS_WARNINGS

    from bridge.report import build_report

    out = tmp_path / "demo"
    _, (o,) = run_model(ROOT / "examples" / "cover_panel.toml", out)
    assert o.ok, o.error
    log = (out / "calculix" / "job.log").read_text(errors="replace")
    assert "material MASS" in " ".join(log.split())  # the solver did print it…
    assert HARMLESS_WARNINGS and o.summary["warnings"] == []  # …and it is not passed on
    assert "solver_warnings" not in {c.name for c in o.checks}
    html = build_report(out, pictures=False).read_text()
    assert "solver warning" not in html.lower()


def test_calculix_tri3_is_warned_with_its_figure(ccx, write_model, plate, tmp_path):
    path = write_model(plate("tri3", (4, 4), "clamped", modes=3).replace("divisions = [4, 4]", 'size = "20 mm"'))
    res = runner.invoke(app, ["check", str(path), "--json"])
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    assert any("S3" in w and "+26 %" in w for w in data["warnings"])  # measured by verify --matrix
    _, (o,) = run_model(path, tmp_path / "run")
    c = _checks(o)["element"]
    assert c.status == "warn" and "+26 %" in c.message


def test_element_matrix_on_every_family_and_solver(three_solvers, tmp_path):
    # verify --matrix: every family on every solver that offers it, at the stated meshes of the
    # matrix cases (Leissa 1969 plates, NAFEMS FV32, Blevins 1979 cantilever)
    res = runner.invoke(app, ["verify", "--matrix", "--out", str(tmp_path / "m"), "--json"])
    assert res.exit_code in (0, 10), res.output
    data = json.loads(res.stdout)
    cells = {(c["family"], c["solver"]): c for c in data["cells"]}
    offered = {"calculix": {"tri3", "tri6", "quad4", "quad8", "tet4", "tet10", "hex8", "hex20"},
               "kratos": {"tri3", "quad4", "tet4", "tet10", "hex20"},
               "opensees": {"tri3", "quad4", "tet4", "tet10", "hex8", "hex20"}}
    assert set(cells) == {(f, s) for s, fams in offered.items() for f in fams}
    for c in cells.values():
        assert c["worst_deviation"] is not None, c
    # CalculiX's S3 is +25 % stiff on the clamped plate (issue 10: 2241 against 1793 Hz): it
    # fails the matrix, and the others' tri3 pass (Leissa 1969 within 1.5 %)
    assert not cells[("tri3", "calculix")]["passed"] and cells[("tri3", "calculix")]["worst_deviation"] > 0.2
    assert cells[("tri3", "kratos")]["passed"] and cells[("tri3", "opensees")]["passed"]
    # second-order solids on every solver within 1.5 % of Blevins (1979)
    for s in offered:
        assert cells[("tet10", s)]["passed"] and cells[("hex20", s)]["passed"]
    assert data["passed"] is False and res.exit_code == 10
