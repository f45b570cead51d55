"""Run the generated OpenSees script in its job folder: no shell, a timeout, a log; no parsing.

OpenSees (through openseespy) may print an error and still let the script exit 0, so the
runner scans the log: any line with an upper-case ``WARNING``, ``ERROR`` or ``FATAL`` word, with
OpenSees' own misspelling ``WANRING`` (3.7.1: "WANRING failed to do eigen analysis") or with a
``Class::Error`` prefix (ARPACK's messages) is taken as a failure: OpenSees prints those only
when a command did not do what it was told. The generated script prints its own failures as
``modebridge: ERROR ...`` and exits 3. The results file and the mode count are checked by the
adapter.
"""

from __future__ import annotations

import importlib.metadata
import importlib.util
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

from bridge.errors import SolverNotFoundError, SolverRunError
from bridge.process import log_tail, run_logged
from bridge.solver import RunRecord

from .deck import SCRIPT_NAME

__all__ = ["find_python", "opensees_version", "run_script", "scan_log", "INSTALL_HINT", "LOG_NAME",
           "ENV_PYTHON"]

INSTALL_HINT = "pip install -e plugins/opensees (brings openseespy 3.7.1.2 on Python 3.11)"
LOG_NAME = "opensees.log"
#: a Python interpreter other than the running one that can import openseespy
ENV_PYTHON = "MODEBRIDGE_OPENSEES_PYTHON"

_ALARM = re.compile(r"\b(WARNING|WANRING|ERROR|FATAL)\b|::Error\b")
#: alarm-word lines known to be harmless (compared after stripping); none seen on 3.7.1.2 so far
_HARMLESS: tuple[str, ...] = ()
#: alarm-word messages known to be harmless wherever they sit on a line (OpenSees prints some
#: without a newline): the dense eigen solver's notice when the option eigen_solver asks for it
_HARMLESS_PARTS = ("WARNING - the 'fullGenLapack' eigen solver is VERY SLOW. Consider using the default eigen solver.",)
#: zeroLength between nodes that are apart: OpenSees warns and goes on with a spring on the
#: relative displacements (no moment from the length), as the core describes a spring (its run
#: carries the core's note saying so)
_HARMLESS_RE = re.compile(r"WARNING ZeroLength::setDomain\(\): Element \d+ has L= ?\S+, which is greater than the "
                          r"tolerance")
_PROBE = "import importlib.util, sys; sys.exit(0 if importlib.util.find_spec('openseespy') else 1)"


def find_python() -> str | None:
    """A Python that can import openseespy, or None.

    ``MODEBRIDGE_OPENSEES_PYTHON`` if set (it must name such an interpreter: a wrong setting is
    not silently replaced by another one), else the running interpreter when openseespy is
    installed in it. openseespy is looked up with ``importlib.util.find_spec``, never imported
    here: the solver library stays out of the modebridge process.
    """
    configured = os.environ.get(ENV_PYTHON)
    if configured:
        exe = shutil.which(configured)
        if exe is None:
            return None
        try:
            proc = subprocess.run([exe, "-c", _PROBE], capture_output=True, timeout=30,
                                  stdin=subprocess.DEVNULL)
        except (OSError, subprocess.TimeoutExpired):
            return None
        return exe if proc.returncode == 0 else None
    return sys.executable if importlib.util.find_spec("openseespy") is not None else None


def opensees_version(python: str | None = None) -> str | None:
    """openseespy's distribution version (e.g. ``3.7.1.2``), without importing it here."""
    python = python or find_python()
    if python is None:
        return None
    if python == sys.executable:
        try:
            return importlib.metadata.version("openseespy")
        except importlib.metadata.PackageNotFoundError:
            return None
    from bridge.cache import cached_version
    from bridge.process import probe

    code = "import importlib.metadata as m; print('openseespy', m.version('openseespy'))"

    def ask(exe: str) -> str | None:
        # its own process group, killed whole past the time limit; remembered per interpreter
        out = probe([exe, "-c", code], timeout=20.0) or ""
        line = next((ln for ln in out.splitlines() if ln.startswith("openseespy ")), "")
        return line.split(" ", 1)[1].strip() or None if line else None

    return cached_version(python, ask)


def scan_log(text: str) -> list[str]:
    """The log lines that mean the run failed (see the module docstring)."""
    errors = []
    for line in text.splitlines():
        s = line.strip()
        for part in _HARMLESS_PARTS:
            s = s.replace(part, "").strip()
        s = _HARMLESS_RE.sub("", s).strip()
        if _ALARM.search(s) and s not in _HARMLESS:
            errors.append(" ".join(s.split()))
    return errors


def run_script(workdir: Path, threads: int = 1, timeout: float = 1800.0) -> RunRecord:
    """Run ``python model_os.py`` in ``workdir``; stdout and stderr go to ``opensees.log``."""
    python = find_python()
    if python is None:
        raise SolverNotFoundError(f"no Python that can import openseespy ({INSTALL_HINT}; "
                                  f"or set {ENV_PYTHON})")
    workdir = Path(workdir)
    log = workdir / LOG_NAME
    cmd = [python, SCRIPT_NAME]
    env = dict(os.environ)
    for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
        env[var] = str(threads)
    env["PYTHONUNBUFFERED"] = "1"
    env.pop("PYTHONSTARTUP", None)
    rc, wall, text = run_logged(cmd, workdir, log, env, timeout, "OpenSees", INSTALL_HINT)
    errors = scan_log(text)
    tail = log_tail(text)
    if errors:
        raise SolverRunError(f"OpenSees reported: {errors[0]}", returncode=rc, log_path=log, stderr_tail=tail)
    if rc != 0:
        last = next((l.strip() for l in reversed(text.splitlines()) if l.strip()), "no output")
        raise SolverRunError(f"the OpenSees script exited with code {rc}: {last}", returncode=rc,
                             log_path=log, stderr_tail=tail)
    return RunRecord(command=cmd, returncode=rc, wall_time=wall, log_path=log, warnings=[])
