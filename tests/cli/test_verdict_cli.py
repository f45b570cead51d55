"""`check` and `run` refuse what no solver should see, and say why."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from typer.testing import CliRunner

from bridge.cli import app

runner = CliRunner()

_BORED = """
name = "bored plate"
[geometry]
kind = "cad"
file = "bored.step"
[materials.steel]
youngs_modulus = "210 GPa"
poisson_ratio = 0.3
density = "7850 kg/m^3"
[section]
kind = "solid"
material = "steel"
[regions.end]
select = "plane"
axis = "x"
at = "0 mm"
[[supports]]
region = "end"
kind = "clamped"
[analysis]
modes = 4
[mesh]
family = "tet10"
size = "30 mm"
[run]
solvers = ["calculix"]
"""


def _bored_step(path: Path) -> None:
    """A 100 × 60 × 4 mm plate with a 3 mm bore: at 30 mm, gmsh's curved second-order tets
    around the bore invert (minSICN −0.29 measured with gmsh 4.x)."""
    import gmsh

    gmsh.initialize()
    try:
        gmsh.option.setNumber("General.Terminal", 0)
        gmsh.model.add("bored")
        gmsh.option.setString("Geometry.OCCTargetUnit", "M")
        occ = gmsh.model.occ
        box = occ.addBox(0, 0, 0, 0.1, 0.06, 0.004)
        bore = occ.addCylinder(0.03, 0.03, -0.001, 0, 0, 0.006, 0.0015)
        occ.cut([(3, box)], [(3, bore)])
        occ.synchronize()
        gmsh.write(str(path))
    finally:
        gmsh.finalize()


def test_inverted_elements_are_refused_by_check_and_run(tmp_path):
    _bored_step(tmp_path / "bored.step")
    model = tmp_path / "model.toml"
    model.write_text(_BORED)
    res = runner.invoke(app, ["check", str(model)])
    assert res.exit_code == 4, res.output  # a meshing error (README: exit codes)
    msg = " ".join(res.output.split())
    assert "inverted or degenerate tet10 element" in msg and "minSICN -0." in msg and " mm" in msg
    assert "model.toml" in msg  # the file is named
    out = tmp_path / "run"
    res = runner.invoke(app, ["run", str(model), "--out", str(out)])
    assert res.exit_code == 4, res.output
    # refused before any solver started: no deck, no log in the solver's folder
    assert not list(out.glob("calculix/*.inp")) and not list(out.glob("calculix/*.log"))


def test_poor_quality_is_a_warning_with_its_figure(write_model, plate):
    from bridge.meshing.quality import POOR_QUALITY, quality_gate
    from bridge.model import load_model
    from bridge.pipeline import prepare

    path = write_model(plate("tri3", (4, 4)).replace("divisions = [4, 4]", 'size = "10 mm"'))
    prep = prepare(load_model(path), path)
    fig = quality_gate(prep.mesh)
    assert fig["quality_min"] > 0 and fig["quality_poor_below"] == POOR_QUALITY
    # squash the mesh: a sliver is poor (warned), a flipped element inverted (refused)
    prep.mesh.quality[0] = 0.05
    assert quality_gate(prep.mesh)["quality_poor"] == 1
    prep.mesh.quality[0] = -0.2
    with pytest.raises(Exception, match="inverted or degenerate"):
        quality_gate(prep.mesh)


def test_check_on_a_study_file_names_it(write_model, plate):
    write_model(plate(), "plate.toml")
    study = write_model('model = "plate.toml"\n[[variant]]\nname = "free"\nset = { supports = [] }\n', "study.toml")
    res = runner.invoke(app, ["check", str(study)])
    assert res.exit_code == 3
    assert "this is a study file" in res.output and "modebridge vary" in res.output


def test_check_fails_when_no_listed_solver_can_run_the_model(write_model, plate):
    text = plate(supports="free") + """
[reference_points]
motor = ["50 mm", "50 mm", "20 mm"]
[[couplings]]
reference = "motor"
kind = "distributing"
region = "edge"
[regions.edge]
select = "sides"
sides = ["xmax"]
[[masses]]
name = "motor"
mass = "0.1 kg"
point = "motor"
[run]
solvers = ["opensees", "nosuchsolver"]
"""
    res = runner.invoke(app, ["check", str(write_model(text)), "--json"])
    assert res.exit_code == 5, res.output
    data = json.loads(res.stdout)
    assert "has no distributing coupling" in data["solvers"]["opensees"]  # why, per solver
    assert "no such solver plugin" in data["solvers"]["nosuchsolver"]
