"""A fully cached study costs nothing: its rerun launches no solver (not even the version
query, which is cached by executable), reads no result and redraws no plot, and prints the same."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

pytestmark = pytest.mark.solver

ROOT = Path(__file__).resolve().parents[3]
#: the subprocess runs this checkout's core and plugins (not an installed copy)
PYTHONPATH = os.pathsep.join([str(ROOT), *(str(ROOT / "plugins" / s) for s in ("calculix", "kratos", "opensees"))])


def _counting_ccx(tmp_path: Path, ccx: str) -> tuple[Path, Path]:
    log = tmp_path / "launches.log"
    w = tmp_path / "ccx-counting"
    w.write_text(f"#!/bin/sh\necho \"$PWD $*\" >> '{log}'\nexec '{ccx}' \"$@\"\n")
    w.chmod(0o755)
    return w, log


def test_cached_converge_launches_nothing_and_redraws_nothing(ccx, write_model, plate, tmp_path):
    path = write_model(plate("quad4", (4, 4), "clamped", modes=3))
    wrapper, log = _counting_ccx(tmp_path, ccx)
    env = dict(os.environ, MODEBRIDGE_CCX=str(wrapper), MODEBRIDGE_CACHE_DIR=str(tmp_path / "cache"),
               PYTHONPATH=PYTHONPATH)
    study = tmp_path / "study"
    cmd = [sys.executable, "-m", "bridge.cli", "converge", str(path), "--levels", "3", "--ratio", "1.5",
           "-j", "1", "--out", str(study), "--json"]
    first = subprocess.run(cmd, env=env, capture_output=True, text=True, timeout=600)
    # exit 0 converged or 10 not converged (a 4 x 4 quad4 start is coarse): either way a finished study
    assert first.returncode in (0, 10), first.stderr
    launches = log.read_text().splitlines()
    solves = [x for x in launches if "/runs/" in x]
    assert len(solves) == 3
    assert len(launches) == 3 + 1  # three solves and one version query for the whole study
    pngs = {p: p.stat().st_mtime_ns for p in study.glob("*.png")}
    assert len(pngs) == 2

    again = subprocess.run(cmd, env=env, capture_output=True, text=True, timeout=600)
    assert again.returncode == first.returncode, again.stderr  # the same verdict from the cache
    assert log.read_text().splitlines() == launches  # nothing launched: no solve, no `ccx -v`
    data = json.loads(again.stdout)
    assert [r["state"] for r in data["runs"]] == ["cached"] * 3
    assert {p: p.stat().st_mtime_ns for p in study.glob("*.png")} == pngs  # nothing redrawn
    before = json.loads(first.stdout)
    for a, b in zip(before["modes"], data["modes"]):  # the stored analysis gives the same numbers
        assert a["f_hz"] == b["f_hz"] and a["gci"] == b["gci"] and a["index"] == b["index"]


def test_a_changed_tolerance_recomputes_the_analysis(ccx, write_model, plate, tmp_path):
    from bridge.study.converge import run_convergence

    path = write_model(plate("quad4", (4, 4), "clamped", modes=3))
    (a,) = run_convergence(path, tmp_path / "s", levels=3, ratio=1.5, tolerance=0.01, workers=1)
    (b,) = run_convergence(path, tmp_path / "s", levels=3, ratio=1.5, tolerance=1e-9, workers=1)
    assert all(o.state == "cached" for o in b.outcomes)
    # the GCI verdict follows the tolerance, so a stored analysis of another tolerance is not reused
    assert b.tolerance == 1e-9 and all(m.gci.verdict != "converged" for m in b.modes if m.gci)
    assert [m.f for m in a.modes] == [m.f for m in b.modes]
