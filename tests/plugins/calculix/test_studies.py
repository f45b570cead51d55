"""Studies with real CalculiX runs: convergence, variants, resume after kill -9, Dask."""

from __future__ import annotations

import json
import os
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from bridge.results import load_result
from bridge.study.converge import run_convergence
from bridge.study.vary import run_variants

pytestmark = pytest.mark.solver


def test_convergence_of_the_clamped_plate(ccx, write_model, plate, tmp_path):
    # 8, 16, 32 divisions: the 4 × 4 mesh is outside the asymptotic range (its p comes out at 3)
    path = write_model(plate("quad8", (8, 8), "clamped", modes=4))
    (st,) = run_convergence(path, tmp_path / "study", levels=3, ratio=2.0, tolerance=0.01)
    assert st.modes[0].gci.verdict == "converged"  # GCI below 1 % and in the asymptotic range
    m1 = st.modes[0]
    assert len(m1.f) == 3 and all(f is not None for f in m1.f)
    # consistent-mass FE frequencies converge from above (Strang & Fix, An Analysis of the Finite Element Method (1973), from memory)
    assert m1.f[0] > m1.f[1] > m1.f[2] and m1.gci.from_above and m1.gci.monotone
    # Richardson-extrapolated f1 within 0.5 % of 1793 Hz (Leissa 1969, λ² = 35.99, from memory)
    assert m1.gci.extrapolated == pytest.approx(1793.0, rel=0.005)
    assert 0.5 < m1.gci.p < 4.0  # an observed order is reported (common practice, no source)
    assert np.isfinite(m1.gci.gci_fine) and m1.gci.gci_fine > 0
    # the repeated pair is followed on every level
    assert all(f is not None for f in st.modes[1].f + st.modes[2].f)
    assert st.passed == all(m.gci.verdict == "converged" for m in st.modes)


def test_converge_exits_10_when_a_mode_is_not_converged(ccx, write_model, plate, tmp_path):
    # 2, 4, 8 divisions of quad8 with a 0.01 % GCI tolerance: the higher modes cannot meet it
    # (their discretisation error on a 2 × 2 mesh is several per cent — common practice, no source)
    from typer.testing import CliRunner

    from bridge.cli import app

    path = write_model(plate("quad8", (2, 2), "clamped", modes=4))
    res = CliRunner().invoke(app, ["converge", str(path), "--levels", "3", "--ratio", "2", "--tolerance", "0.01",
                                   "--out", str(tmp_path / "st"), "--json"])
    assert res.exit_code == 10, res.output
    data = json.loads(res.stdout)
    assert data["passed"] is False and data["unconverged_modes"]
    assert "h_definition" in data
    for m in data["modes"]:  # a GCI for every tracked mode
        assert m["gci"] is None or np.isfinite(m["gci"]["gci_fine"])
    bad = set(data["unconverged_modes"])
    assert all((m["verdict"] == "converged") == (m["mode"] not in bad) for m in data["modes"])


_VARY = """
model = "plate.toml"

[[variant]]
name = "banded"
[variant.set]
supports = [{{ region = "rim", kind = "simply_supported" }}]
excitation = [{{ name = "pump", low = "950 Hz", high = "1000 Hz", margin = 0.0 }}]

[[variant]]
name = "free"
[variant.set]
supports = []
analysis = {{ modes = 10 }}

[[variant]]
name = "hinged"
[variant.set]
supports = [{{ region = "rim", kind = "simply_supported" }}]
"""


def test_support_variants(ccx, write_model, plate, tmp_path):
    write_model(plate("quad8", (20, 20), "clamped", modes=4), "plate.toml")
    study = write_model(_VARY.format(), "variants.toml")
    baseline, variants = run_variants(study, tmp_path / "vary")
    by = {v.name: v for v in variants}
    free, hinged = by["free"], by["hinged"]
    assert baseline.rigid_body_modes == 0 and hinged.rigid_body_modes == 0
    assert free.rigid_body_modes == 6  # set apart: a free body's 6 rigid-body modes
    assert all(p.b >= 6 for p in free.comparison.comparison.pairs)  # never paired with a rigid mode
    p1 = next(p for p in hinged.comparison.comparison.pairs if p.a == 0)
    # SSSS / CCCC fundamental: 19.739 / 35.99 (Navier exact; Leissa 1969, from memory), within
    # 2.5 %: the 1 % (clamped) and 1.5 % (simply supported) tolerances of test_physics combined
    assert p1.fb / p1.fa == pytest.approx(19.739 / 35.99, rel=0.025)
    assert p1.mac > 0.9  # the same (1,1) shape family (common practice, no source)
    # the study is cached: a second run launches nothing and gives the same numbers
    again_base, again = run_variants(study, tmp_path / "vary")
    assert all(v.outcome.state == "cached" for v in again) and again_base.outcome.state == "cached"
    assert again[2].frequencies == hinged.frequencies
    # the hinged plate's first mode (≈ 983 Hz = 1793 × 19.739 / 35.99) sits in the pump's band:
    # that variant's check fails, the others pass, and `vary` prints it and exits 10
    assert by["banded"].status == "fail" and baseline.status != "fail" and hinged.status != "fail"
    from typer.testing import CliRunner

    from bridge.cli import app

    res = CliRunner().invoke(app, ["vary", str(study), "--out", str(tmp_path / "vary")])
    assert res.exit_code == 10, res.output
    assert "excitation:pump" in res.output and "FAIL" in res.output
    from bridge.records import read_record

    data = read_record(tmp_path / "vary", "variants").data  # the versioned, checksummed record
    assert {v["name"]: v["status"] for v in data["variants"]}["banded"] == "fail"
    # the HTML badge of each variant agrees with its checks
    import re

    from bridge.report import build_report

    html = build_report(tmp_path / "vary", pictures=False).read_text()
    blocks = html.split("<h3>Variant ")[1:]
    badge = {b.split("<", 1)[0]: re.search(r'class="pill (\w+)"', b).group(1) for b in blocks}
    assert badge["banded"] == "fail" and badge["hinged"] != "fail" and badge["free"] != "fail"


def _wrapper(tmp_path: Path, ccx: str) -> tuple[Path, Path]:
    """A stand-in for ccx that logs each launch (its working folder) and then runs the real one."""
    log = tmp_path / "launches.log"
    w = tmp_path / "ccx-counting"
    w.write_text(f"#!/bin/sh\necho \"$PWD\" >> '{log}'\nexec '{ccx}' \"$@\"\n")
    w.chmod(0o755)
    return w, log


def test_resume_after_kill_9_never_relaunches_finished_runs(ccx, write_model, plate, tmp_path):
    path = write_model(plate("quad8", (4, 4), "clamped", modes=4))
    wrapper, log = _wrapper(tmp_path, ccx)
    env = dict(os.environ, MODEBRIDGE_CCX=str(wrapper))
    study = tmp_path / "study"
    cmd = [sys.executable, "-m", "bridge.cli", "converge", str(path), "--levels", "4", "--ratio", "2",
           "-j", "1", "--out", str(study), "--json"]
    proc = subprocess.Popen(cmd, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                            start_new_session=True)
    deadline = time.time() + 120
    while time.time() < deadline and len(list(study.glob("runs/*/summary.json"))) < 2:
        time.sleep(0.05)
    os.killpg(proc.pid, signal.SIGKILL)  # the study and its solver, mid-flight
    proc.wait()
    finished_before = {p.parent.name for p in study.glob("runs/*/summary.json")}
    assert 2 <= len(finished_before) < 4
    res = subprocess.run(cmd, env=env, capture_output=True, text=True, timeout=300)
    assert res.returncode in (0, 10), res.stderr  # 10: a mode not converged at this tolerance
    # solves run inside runs/<key>/attempt-*/calculix; other lines are version queries (ccx -v)
    launches = [Path(line).parts for line in log.read_text().split() if "/runs/" in line]
    per_task: dict[str, int] = {}
    for parts in launches:
        key = parts[parts.index("runs") + 1]
        per_task[key] = per_task.get(key, 0) + 1
    for key in finished_before:
        assert per_task[key] == 1  # a finished run is never launched again
    assert len(per_task) == 4 and sum(per_task.values()) <= 4 + 1  # at most the killed one twice
    data = json.loads(res.stdout)
    assert res.returncode == (0 if data["passed"] else 10)
    assert [r["state"] for r in data["runs"]].count("cached") == len(finished_before)
    for folder in study.glob("runs/*"):
        r = load_result(folder / "result.vtkhdf")  # every stored result loads
        assert r.n_modes == 4


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_dask_cluster_gives_the_same_results_as_local(ccx, write_model, plate, tmp_path):
    path = write_model(plate("quad8", (3, 3), "clamped", modes=4))
    port = _free_port()
    addr = f"tcp://127.0.0.1:{port}"
    dask = Path(sys.executable).with_name("dask")
    base = [str(dask)] if dask.exists() else [sys.executable, "-m", "distributed.cli.dask_spawn"]
    sched = subprocess.Popen(base + ["scheduler", "--host", "127.0.0.1", "--port", str(port),
                                     "--no-dashboard"], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                             start_new_session=True)
    worker = subprocess.Popen(base + ["worker", addr, "--nworkers", "2", "--nthreads", "1", "--no-dashboard"],
                              stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, start_new_session=True,
                              cwd=tmp_path)
    try:
        from distributed import Client

        with Client(addr, timeout="30s") as c:
            c.wait_for_workers(2, timeout=60)
        (remote,) = run_convergence(path, tmp_path / "dask", levels=3, scheduler=addr)
        (local,) = run_convergence(path, tmp_path / "local", levels=3, workers=2)
    finally:
        for p in (worker, sched):
            os.killpg(p.pid, signal.SIGTERM)
            p.wait(timeout=30)
    assert all(o.state == "done" for o in remote.outcomes)
    for a, b in zip(remote.modes, local.modes):
        np.testing.assert_allclose(a.f, b.f, rtol=1e-9)  # same decks, same solver: same numbers
    # both studies hold the same tasks (content keys)
    assert sorted(p.name for p in (tmp_path / "dask" / "runs").iterdir()) == \
        sorted(p.name for p in (tmp_path / "local" / "runs").iterdir())
