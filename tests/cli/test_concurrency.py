"""Runs and studies racing into the same and into different folders (issue 12): every command
that exits 0 holds results of its own model (content hash in the result's provenance, and the
frequencies it printed), every other one is a clear refusal (FolderBusyError, exit 75).
Real CalculiX, slowed by a wrapper so that the commands overlap."""

from __future__ import annotations

import json
import os
import re
import subprocess
import sys
import time
from pathlib import Path

import pytest

from bridge.errors import FolderBusyError
from bridge.model import load_model
from bridge.records import read_record, resolve_path
from bridge.results import load_result, result_checksum

ROOT = Path(__file__).resolve().parents[2]
PYPATH = os.pathsep.join(str(ROOT / p) for p in ("", "plugins/calculix", "plugins/kratos", "plugins/opensees"))
_ANSI = re.compile(r"\x1b\[[0-9;?]*[A-Za-z]")

PLATE = """
name = "{name}"
[geometry]
kind = "plate"
length = "100 mm"
width = "100 mm"
[materials.mat]
youngs_modulus = "{e}"
poisson_ratio = 0.3
density = "{rho}"
[section]
kind = "shell"
material = "mat"
thickness = "2 mm"
[regions.rim]
select = "sides"
sides = ["xmin", "xmax", "ymin", "ymax"]
[[supports]]
region = "rim"
kind = "clamped"
[analysis]
modes = 2
[mesh]
family = "quad4"
divisions = [2, 2]
"""


@pytest.mark.solver
def test_racing_runs_and_studies(ccx, tmp_path):
    steel = tmp_path / "steel.toml"
    steel.write_text(PLATE.format(name="steel plate", e="210 GPa", rho="7850 kg/m^3"))
    alu = tmp_path / "alu.toml"
    alu.write_text(PLATE.format(name="aluminium plate", e="70 GPa", rho="2700 kg/m^3"))
    slow = tmp_path / "ccx-slow"
    slow.write_text(f"#!/bin/sh\nsleep 1.5\nexec '{ccx}' \"$@\"\n")
    slow.chmod(0o755)
    slower = tmp_path / "ccx-slower"  # the first writer of each shared folder holds it long enough
    slower.write_text(f"#!/bin/sh\nsleep 15\nexec '{ccx}' \"$@\"\n")
    slower.chmod(0o755)
    env = dict(os.environ, PYTHONPATH=PYPATH, MODEBRIDGE_CCX=str(slow), MODEBRIDGE_CACHE=str(tmp_path / "cache"))
    jobs = [  # (kind, model, folder): the first two start first and hold their folders
        ("run", steel, "shared-run"), ("converge", steel, "shared-study"),
        ("run", alu, "shared-run"), ("converge", alu, "shared-study"),
        ("run", steel, "run-a"), ("run", alu, "run-b"), ("converge", alu, "study-c"),
    ]

    def start(kind, model, folder, ccx_path):
        args = [kind, str(model), "--out", folder, "--json"] + (["--levels", "3", "-j", "1"] if kind == "converge" else [])
        return subprocess.Popen([sys.executable, "-m", "bridge.cli", *args], cwd=tmp_path,
                                env=dict(env, MODEBRIDGE_CCX=str(ccx_path)), stdout=subprocess.PIPE,
                                stderr=subprocess.PIPE, text=True)

    def wait_for(predicate) -> None:
        deadline = time.time() + 120
        while time.time() < deadline and not predicate():
            time.sleep(0.05)

    # each shared folder: its first writer holds it (a 15 s solve), then the second arrives
    procs = [start(*jobs[0], slower), start(*jobs[1], slower)]
    wait_for(lambda: (tmp_path / "shared-run" / "calculix" / "job.inp").is_file())
    procs.append(start(*jobs[2], slow))
    wait_for(lambda: list((tmp_path / "shared-study").glob("runs/*/attempt-*")))
    procs.append(start(*jobs[3], slow))
    procs += [start(*job, slow) for job in jobs[4:]]  # and the others race into folders of their own
    outcomes = [(job, *p.communicate(timeout=600), p.returncode) for job, p in zip(jobs, procs)]
    # the latecomers into the held folders were refused
    assert outcomes[2][3] == outcomes[3][3] == FolderBusyError.exit_code, [o[2][-500:] for o in outcomes[2:4]]

    winners: dict[str, list] = {}
    for (kind, model, folder), out, err, rc in outcomes:
        # converge exits 10 when a mode is not converged (a 2 x 2 quad4 start is too coarse for that):
        # a finished study with its verdict, not a refusal
        finished = rc == 0 or (kind == "converge" and rc == 10 and out.strip().startswith("{"))
        if not finished:  # a refusal, in one clear line, and nothing else
            lines = [ln for ln in _ANSI.sub("", err).splitlines() if ln.strip()]
            assert rc == FolderBusyError.exit_code, (kind, folder, rc, err)
            assert len(lines) == 1 and lines[0].startswith("error: ") and "another modebridge" in lines[0]
            assert folder.startswith("shared"), (folder, err)  # only a shared folder is ever busy
            continue
        winners.setdefault(folder, []).append((model, json.loads(out)))
    # the commands into folders of their own all finished; each shared folder had at least one
    assert all(len(winners.get(f, [])) == 1 for f in ("run-a", "run-b", "study-c"))
    assert winners.get("shared-run") and winners.get("shared-study")
    isolated = {steel: winners["run-a"][0][1]["frequencies_hz"], alu: winners["run-b"][0][1]["frequencies_hz"]}
    # f ∝ √(E/ρ) for one plate and mesh (Blevins 1979, plate formulas, from memory): the materials'
    # frequencies differ by √((210/7850)/(70/2700)) = 1.0158, so a swapped result would show
    ratio = [a / b for a, b in zip(isolated[steel], isolated[alu])]
    assert ratio == pytest.approx([((210 / 7850) / (70 / 2700)) ** 0.5] * 2, rel=1e-5)
    for folder in ("shared-run", "run-a", "run-b"):
        for model, data in winners[folder]:
            # what a successful run printed is its own model's (same model, mesh and solver: same numbers)
            assert data["frequencies_hz"] == isolated[model], (folder, model.name)
        # the result on disk is one winner's, whole, and of that winner's model
        r = load_result(tmp_path / folder / "calculix" / "result.vtkhdf")
        owner = [m for m, d in winners[folder] if d["result_sha256"] == result_checksum(tmp_path / folder / "calculix"
                                                                                          / "result.vtkhdf")]
        assert len(owner) >= 1 and r.metadata["provenance"]["model_hash"] == load_model(owner[0]).content_hash()
        assert [float(f) for f in r.frequencies] == isolated[owner[0]]
    for folder in ("shared-study", "study-c"):
        for model, data in winners[folder]:
            own = load_model(model).content_hash()
            assert all(r["state"] in ("done", "cached") for r in data["runs"])
            for run in data["runs"]:
                r = load_result(resolve_path(run["folder"], tmp_path / folder) / "result.vtkhdf")
                assert r.metadata["provenance"]["model_hash"] == own, (folder, model.name, run["label"])
        rec = read_record(tmp_path / folder / "convergence.json", "convergence")  # whole and verified
        assert rec.checked and any(rec.data[0]["runs"] == d["runs"] for _, d in winners[folder])
