"""The runner and the locating of Kratos: subprocess handling, timeouts, log scanning.

These use stand-in ``run_case.py`` scripts run by the test's own interpreter (the runner's
``find_python`` is patched), so they need no Kratos; the last one checks that locating Kratos
imports nothing of it.
"""

from __future__ import annotations

import os
import subprocess
import sys
import textwrap
import time

import pytest

import bridge.process
from bridge.errors import SolverNotFoundError, SolverRunError, SolverTimeoutError
from modebridge_kratos import runner
from modebridge_kratos.adapter import KratosAdapter


@pytest.fixture
def case(tmp_path, monkeypatch):
    monkeypatch.setattr(runner, "find_python", lambda: sys.executable)

    def _write(body: str):
        (tmp_path / "run_case.py").write_text(textwrap.dedent(body))
        return tmp_path

    return _write


def test_success_logs_and_records(case):
    folder = case("""
        import os
        print("[WARNING] ReadMaterialsUtility: WARNING:: The properties ID: 1 is already defined in model part(s)")
        print("[WARNING] Something: a warning that matters")
        print("threads", os.environ["OMP_NUM_THREADS"])
    """)
    rec = runner.run_case(folder, threads=2, timeout=60)
    assert rec.returncode == 0 and rec.command == [sys.executable, "run_case.py"]
    assert rec.log_path == folder / "kratos.log"
    assert "threads 2" in rec.log_path.read_text()
    # the warning every modebridge case prints is known and dropped; others are kept
    assert rec.warnings == ["[WARNING] Something: a warning that matters"]


def test_a_failing_case_names_the_exception(case):
    folder = case("""
        raise RuntimeError("Error: Properties #1 is not found. [Line 12 ]")
    """)
    with pytest.raises(SolverRunError) as info:
        runner.run_case(folder, timeout=60)
    assert "Properties #1 is not found" in str(info.value) and info.value.returncode == 1
    assert "kratos.log" in str(info.value)


def test_an_exception_printed_on_exit_0_is_an_error(case):
    folder = case("""
        print("RuntimeError: Error: The following errors occured in a parallel region!")
    """)
    with pytest.raises(SolverRunError, match="parallel region"):
        runner.run_case(folder, timeout=60)


def test_timeout_kills_the_whole_process_group(case):
    folder = case("""
        import subprocess, sys, time
        child = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(60)"])
        open("child.pid", "w").write(str(child.pid))
        time.sleep(60)
    """)
    t0 = time.perf_counter()
    with pytest.raises(SolverTimeoutError, match="time limit of 2 s"):
        runner.run_case(folder, timeout=2)
    assert time.perf_counter() - t0 < 20
    pid = int((folder / "child.pid").read_text())
    for _ in range(50):  # the orphaned grandchild is reaped by init shortly after the kill
        try:
            with open(f"/proc/{pid}/stat") as fh:
                state = fh.read().split()[2]
        except FileNotFoundError:
            break
        if state == "Z":
            break
        time.sleep(0.1)
    else:
        os.kill(pid, 9)
        pytest.fail("the solver's child process outlived the timeout")


def test_missing_kratos_is_reported(tmp_path, monkeypatch):
    monkeypatch.setattr(runner, "find_python", lambda: None)
    with pytest.raises(SolverNotFoundError, match="pip install -e plugins/kratos"):
        runner.run_case(tmp_path, timeout=60)


def test_scan_log():
    errors, warnings = runner.scan_log(textwrap.dedent("""
        [WARNING] DEPRECATION-Warning; AnalysisStage: ModifyAfterSolverInitialize is deprecated. Please, use X
        [WARNING] Logger:   spaced    out
        Traceback (most recent call last):
        RuntimeError: Error: bad
        ValueError: worse
    """))
    assert errors == ["RuntimeError: Error: bad", "ValueError: worse"]
    assert warnings == ["[WARNING] Logger: spaced out"]


def test_importable_needs_every_part():
    assert runner._importable("json.decoder")
    assert not runner._importable("json.no_such_module")
    assert not runner._importable("no_such_package_xyz.sub")


def test_locating_kratos_imports_nothing_of_it():
    code = textwrap.dedent("""
        import sys
        from modebridge_kratos.adapter import KratosAdapter
        a = KratosAdapter()
        print(a.locate() is not None, a.version())
        assert not any(m.startswith("KratosMultiphysics") for m in sys.modules), "Kratos was imported"
    """)
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60)
    assert proc.returncode == 0, proc.stderr
    found, version = proc.stdout.split()
    if found == "True":
        assert version.startswith("10.4")  # the version pinned in plugins/kratos/pyproject.toml
    assert KratosAdapter.name == "kratos"


def test_ctrl_c_kills_the_solver(case, monkeypatch):
    folder = case("""
        import time
        time.sleep(60)
    """)
    started = []

    def interrupted(proc, timeout):  # the runner's wait for the solver: the user presses Ctrl-C
        started.append(proc.pid)
        raise KeyboardInterrupt

    monkeypatch.setattr(bridge.process, "_wait", interrupted)
    with pytest.raises(KeyboardInterrupt):
        runner.run_case(folder, timeout=60)
    (pid,) = started
    assert not os.path.exists(f"/proc/{pid}")  # killed and reaped by the runner
