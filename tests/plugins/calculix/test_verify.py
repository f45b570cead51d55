"""The verification suite on CalculiX, and a case of the user's own."""

from __future__ import annotations

import json
import shutil

import pytest
from typer.testing import CliRunner

from bridge.cli import app
from bridge.errors import ModelError
from bridge.verify import BUILTIN, load_cases

runner = CliRunner()


def test_builtin_cases_load_and_name_their_sources():
    cases = load_cases()
    names = {c.name for c in cases}
    assert {"plate_clamped", "plate_simply_supported", "plate_free", "nafems_fv12", "nafems_fv32",
            "beam_cantilever", "beam_free_free", "bar_axial", "shell_cylinder_rings", "isolated_box", "tip_inertia",
            "frame_cantilever"} <= names
    for c in cases:
        assert c.source and c.tolerance_note and len(c.tolerance) == len(c.targets)


@pytest.mark.solver
def test_every_builtin_case_passes_on_calculix(ccx, tmp_path):
    res = runner.invoke(app, ["verify", "--solver", "calculix", "--out", str(tmp_path / "v"), "--json"])
    data = json.loads(res.stdout)
    failed = [(c["case"], c["error"], c["modes"]) for c in data["cases"] if not c["passed"]]
    assert res.exit_code == 0 and not failed, failed
    assert (tmp_path / "v" / "verify.json").is_file()
    # the targets are the published ones, within each case's stated tolerance (see the case files)
    assert all(len(c["modes"]) >= 2 for c in data["cases"])


@pytest.mark.solver
def test_a_users_case_that_misses_its_target_fails(ccx, tmp_path):
    mine = tmp_path / "mine" / "wrong_plate"
    shutil.copytree(BUILTIN / "plate_clamped", mine)
    text = (mine / "case.toml").read_text()
    # a deliberately wrong target: 10 % above Leissa's λ² = 35.99 (the test's own invention)
    (mine / "case.toml").write_text(text.replace("targets_hz = [1793.1", "targets_hz = [1972.4"))
    res = runner.invoke(app, ["verify", "--solver", "calculix", "--only", "wrong_plate", "--cases",
                              str(tmp_path / "mine"), "--out", str(tmp_path / "v"), "--json"])
    assert res.exit_code == 10
    (case,) = json.loads(res.stdout)["cases"]
    assert not case["passed"] and not case["modes"][0]["passed"] and case["modes"][1]["passed"]


def test_a_case_folder_without_targets_is_refused(tmp_path):
    bad = tmp_path / "cases" / "x"
    shutil.copytree(BUILTIN / "plate_clamped", bad)
    (bad / "case.toml").write_text('title = "x"\nsource = "y"\ntolerance = 0.01\n')
    with pytest.raises(ModelError, match="targets_hz"):
        load_cases([tmp_path / "cases"], builtin=False)
