"""The OpenSees runner with stand-in scripts (no OpenSees needed): failures, timeouts, Ctrl-C."""

from __future__ import annotations

import importlib.util
import os
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest

import bridge.process
from bridge.errors import SolverNotFoundError, SolverRunError, SolverTimeoutError
from modebridge_opensees import runner
from modebridge_opensees.runner import ENV_PYTHON, find_python, run_script, scan_log


@pytest.fixture
def fake(monkeypatch, tmp_path):
    """Write a stand-in model_os.py; the runner runs it with this interpreter."""
    monkeypatch.setattr(runner, "find_python", lambda: sys.executable)

    def _write(body: str) -> Path:
        (tmp_path / "model_os.py").write_text(textwrap.dedent(body))
        return tmp_path

    return _write


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    # a zombie still answers kill(0); it has exited for our purpose
    try:
        with open(f"/proc/{pid}/stat") as fh:
            return fh.read().split()[2] != "Z"
    except FileNotFoundError:
        return False


SLEEPER = """
import subprocess, sys, time
child = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(60)"])
open("child.pid", "w").write(str(child.pid))
time.sleep(60)
"""


def test_a_clean_run(fake):
    folder = fake("""
        import os
        print("modebridge: wrote 4 modes to model_os.npz")
        print("threads", os.environ["OMP_NUM_THREADS"], os.environ["OPENBLAS_NUM_THREADS"])
        print("Process 0 Terminating")
    """)
    rec = run_script(folder, threads=2, timeout=60)
    assert rec.command == [sys.executable, "model_os.py"] and rec.returncode == 0
    assert rec.log_path == folder / "opensees.log"
    assert "threads 2 2" in rec.log_path.read_text()


def test_a_warning_with_exit_0_is_a_failure(fake):
    # OpenSees prints and carries on; openseespy need not raise (measured with this solver on a machine of this kind)
    folder = fake("""
        print("WARNING element type NoSuchElement is unknown")
        print("modebridge: wrote 4 modes to model_os.npz")
    """)
    with pytest.raises(SolverRunError, match="OpenSees reported: WARNING element type") as info:
        run_script(folder, timeout=60)
    assert info.value.returncode == 0 and info.value.log_path.endswith("opensees.log")


def test_the_scripts_own_error(fake):
    folder = fake("""
        import sys
        print("modebridge: ERROR eigen returned 3 of the 6 modes asked for")
        sys.exit(3)
    """)
    with pytest.raises(SolverRunError, match="3 of the 6 modes") as info:
        run_script(folder, timeout=60)
    assert info.value.returncode == 3


def test_a_crash_names_its_last_line(fake):
    folder = fake("""
        raise RuntimeError("boom")
    """)
    with pytest.raises(SolverRunError, match="exited with code 1: RuntimeError: boom"):
        run_script(folder, timeout=60)


def test_timeout_kills_the_process_group(fake):
    folder = fake(SLEEPER)
    t0 = time.perf_counter()
    with pytest.raises(SolverTimeoutError, match="time limit of 2 s"):
        run_script(folder, timeout=2)
    assert time.perf_counter() - t0 < 30
    pid = int((folder / "child.pid").read_text())
    deadline = time.time() + 5
    while _alive(pid) and time.time() < deadline:
        time.sleep(0.05)
    assert not _alive(pid)  # the script's own child went with it


def test_ctrl_c_kills_the_process_group(fake, monkeypatch):
    folder = fake(SLEEPER)

    def interrupted(proc, timeout):  # the runner's wait: wait for the child, then "press Ctrl-C"
        end = time.time() + 10
        while not (folder / "child.pid").exists() and time.time() < end:
            time.sleep(0.05)
        raise KeyboardInterrupt

    monkeypatch.setattr(bridge.process, "_wait", interrupted)
    with pytest.raises(KeyboardInterrupt):
        run_script(folder, timeout=60)
    pid = int((folder / "child.pid").read_text())
    deadline = time.time() + 5
    while _alive(pid) and time.time() < deadline:
        time.sleep(0.05)
    assert not _alive(pid)


def test_no_python(monkeypatch, tmp_path):
    monkeypatch.setattr(runner, "find_python", lambda: None)
    with pytest.raises(SolverNotFoundError, match="pip install -e plugins/opensees"):
        run_script(tmp_path)


def test_find_python_honours_the_setting(monkeypatch):
    monkeypatch.setenv(ENV_PYTHON, "/nonexistent/python3")
    assert find_python() is None  # a wrong setting is not replaced by another interpreter
    monkeypatch.setenv(ENV_PYTHON, sys.executable)
    has = importlib.util.find_spec("openseespy") is not None
    assert (find_python() is not None) == has
    monkeypatch.delenv(ENV_PYTHON)
    assert (find_python() == sys.executable) == has


def test_locating_does_not_import_opensees():
    code = ("import sys; from modebridge_opensees.adapter import OpenSeesAdapter as A; a = A(); "
            "a.locate(); a.version(); "
            "sys.exit(1 if any(m.startswith('openseespy') for m in sys.modules) else 0)")
    assert subprocess.run([sys.executable, "-c", code]).returncode == 0


@pytest.mark.parametrize("line,fails", [
    ("Process 0 Terminating", False),
    ("Using ASDShellQ4 - Developed by: Massimo Petracca, Guido Camata, ASDEA Software Technology", False),
    ("SSPbrick element - Written: C.McGann, P.Arduino, P.Mackenzie-Helnwein, U.Washington", False),
    ("modebridge: NOTE TenNodeTetrahedron integrates stiffness and mass over 0.166666667 times", False),
    ("modebridge: wrote 6 modes to model_os.npz", False),
    ("no warning here, errors neither", False),
    ("WANRING failed to do eigen analysis", True),  # OpenSees 3.7.1's own spelling
    ("ArpackSolver::Error with _saupd info = -9", True),
    ("WARNING DirectIntegrationAnalysis::eigen() - EigenSOE failed in solve()", True),
    ("ERROR could not add element to domain.", True),
    ("modebridge: ERROR eigen returned 3 of the 6 modes asked for", True),
    # the dense solver's notice (eigen_solver = "fullGenLapack"), printed without a newline (measured)
    ("WARNING - the 'fullGenLapack' eigen solver is VERY SLOW. Consider using the default eigen "
     "solver.modebridge: wrote 3 modes to model_os.npz", False),
    ("WARNING - the 'fullGenLapack' eigen solver is VERY SLOW. Consider using the default eigen "
     "solver.WARNING DirectIntegrationAnalysis::eigen() - EigenSOE failed in solve()", True),
])
def test_scan_log(line, fails):
    assert bool(scan_log(f"first line\n  {line}  \nlast line\n")) == fails
