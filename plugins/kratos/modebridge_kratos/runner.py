"""Run a Kratos case (``python run_case.py``) in its folder: no shell, a timeout, a thread count.

Kratos is a Python package, not an executable: the "solver executable" is the Python
interpreter that can import ``KratosMultiphysics``. It is found without importing Kratos into
the calling process (Kratos prints a banner and registers its applications on import).
"""

from __future__ import annotations

import importlib.machinery
import importlib.metadata
import importlib.util
import os
import re
import sys
from pathlib import Path

from bridge.errors import SolverNotFoundError, SolverRunError
from bridge.process import log_tail, run_logged
from bridge.solver import RunRecord

__all__ = ["find_python", "kratos_version", "run_case", "scan_log", "INSTALL_HINT", "LOG"]

INSTALL_HINT = "pip install -e plugins/kratos (brings KratosMultiphysics from PyPI)"
LOG = "kratos.log"
_DISTRIBUTIONS = ("KratosMultiphysics", "KratosStructuralMechanicsApplication", "KratosLinearSolversApplication")
_MODULES = ("KratosMultiphysics", "KratosMultiphysics.StructuralMechanicsApplication",
            "KratosMultiphysics.LinearSolversApplication")
#: warnings Kratos always prints for a modebridge case: properties declared in the .mdpa are
#: filled from StructuralMaterials.json, and StructuralMechanicsAnalysis calls a deprecated hook
_KNOWN_WARNINGS = ("is already defined in model part", "ModifyAfterSolverInitialize is deprecated")


def _importable(name: str) -> bool:
    """Whether ``name`` can be imported, found without importing anything: ``find_spec`` of a
    dotted name would import the parent package, so sub-modules are looked up in its folders."""
    top, _, rest = name.partition(".")
    try:
        spec = importlib.util.find_spec(top)
    except (ImportError, ValueError):
        return False
    for part in rest.split(".") if rest else []:
        if spec is None or not spec.submodule_search_locations:
            return False
        spec = importlib.machinery.PathFinder.find_spec(part, list(spec.submodule_search_locations))
    return spec is not None


def find_python() -> str | None:
    """The interpreter running modebridge when it can import Kratos and the two applications
    (checked with ``find_spec``: nothing of Kratos is imported); None otherwise."""
    if all(_importable(m) for m in _MODULES):
        return sys.executable
    return None


def kratos_version() -> str | None:
    """Version of the installed KratosMultiphysics distribution (from its metadata)."""
    try:
        return importlib.metadata.version(_DISTRIBUTIONS[0])
    except importlib.metadata.PackageNotFoundError:
        return None


def scan_log(text: str) -> tuple[list[str], list[str]]:
    """Errors and warnings in the case's log (Kratos's stdout and stderr)."""
    errors, warnings = [], []
    for line in text.splitlines():
        s = line.strip()
        if s.startswith("[WARNING]"):
            if not any(k in s for k in _KNOWN_WARNINGS):
                warnings.append(" ".join(s.split()))
        elif re.match(r"^(RuntimeError|Exception|[A-Za-z]*Error): ", s):
            errors.append(" ".join(s.split()))
    return errors, warnings


def run_case(workdir: Path, main: str = "run_case.py", threads: int = 1, timeout: float = 1800.0) -> RunRecord:
    """Run ``python main`` in ``workdir``; stdout and stderr go to ``kratos.log``."""
    exe = find_python()
    if exe is None:
        raise SolverNotFoundError(f"Kratos is not importable by {sys.executable} ({INSTALL_HINT})")
    workdir = Path(workdir)
    log = workdir / LOG
    cmd = [exe, main]
    env = dict(os.environ)
    env["OMP_NUM_THREADS"] = str(threads)
    env["PYTHONDONTWRITEBYTECODE"] = "1"
    env["PYTHONUNBUFFERED"] = "1"
    rc, wall, text = run_logged(cmd, workdir, log, env, timeout, "Kratos", INSTALL_HINT)
    errors, warnings = scan_log(text)
    tail = log_tail(text)
    if rc != 0:
        what = errors[-1] if errors else f"exited with code {rc}"
        raise SolverRunError(f"Kratos failed: {what}", returncode=rc, log_path=log, stderr_tail=tail)
    if errors:  # exited 0 yet printed an exception: do not trust the results
        raise SolverRunError(f"Kratos reported: {errors[0]}", returncode=rc, log_path=log, stderr_tail=tail)
    return RunRecord(command=cmd, returncode=rc, wall_time=wall, log_path=log, warnings=warnings)
