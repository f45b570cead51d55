"""Run ``ccx`` in its job folder: no shell, a timeout, a thread count; no parsing."""

from __future__ import annotations

import os
import re
import shutil
from pathlib import Path

from bridge.errors import SolverNotFoundError, SolverRunError
from bridge.process import log_tail, probe_output, run_logged
from bridge.solver import RunRecord

__all__ = ["find_ccx", "ccx_version", "run_ccx", "scan_log", "INSTALL_HINT", "HARMLESS_WARNINGS"]

INSTALL_HINT = "on Debian: apt-get install -y calculix-ccx, or set MODEBRIDGE_CCX to the ccx binary"
#: warnings that mean CalculiX ignored part of the deck: the model it solved is not ours.
#: Compared with all whitespace removed: ccx 2.20 prints "Card image cannot be inter    preted".
_FATAL_WARNINGS = ("card image cannot be interpreted", "unknown keyword", "parameter not recognized")
_FATAL_KEYS = tuple(k.replace(" ", "") for k in _FATAL_WARNINGS)
#: The one list of known harmless CalculiX warnings, left out of the run's warnings (they stay
#: in the log), each with the reason it is harmless. Matched with all whitespace removed.
HARMLESS_WARNINGS = (
    ("no elastic constants were assigned to material MASS",
     "ccx 2.20 makes an internal material named MASS for every *MASS element (a point mass) and "
     "warns that it has no elastic constants; a point mass has no stiffness, so none is needed, "
     "and no card of the deck can supply one (checked: the warning follows *MASS, ELSET=… alone)"),
)
_HARMLESS_KEYS = tuple("".join(w.lower().split()) for w, _ in HARMLESS_WARNINGS)


def find_ccx() -> str | None:
    """``MODEBRIDGE_CCX`` if set (it must name an executable: a wrong setting is not silently
    replaced by another ccx), else ``ccx`` on PATH; None when there is none."""
    configured = os.environ.get("MODEBRIDGE_CCX")
    if configured:
        return shutil.which(configured)
    return shutil.which("ccx")


def ccx_version(exe: str | None = None) -> str | None:
    """CalculiX's version from ``ccx -v``: probed with a short timeout in its own process group
    (killed whole if it hangs), and remembered per executable in modebridge's cache folder."""
    from bridge.cache import cached_version
    from bridge.process import probe

    exe = exe or find_ccx()
    if exe is None:
        return None
    out = probe_output(exe, ["-v"], timeout=PROBE_TIMEOUT)  # once per executable (path, size, mtime), not before every run
    if out is None:
        return None
    m = re.search(r"Version\s+([0-9][0-9.]*)", out)
    return m.group(1) if m else None


#: seconds ``ccx -v`` may take (it answers at once; a binary that hangs is not waited for, and
#: its whole process group is killed)
PROBE_TIMEOUT = 5.0


def scan_log(text: str) -> tuple[list[str], list[str]]:
    """Errors and warnings CalculiX printed on stdout (it prints nothing to stderr)."""
    errors, warnings = [], []
    lines = text.splitlines()
    for i, line in enumerate(lines):
        s = line.strip()
        # the message often continues on the next lines; keep two of them
        context = " ".join(" ".join(x.split()) for x in lines[i:i + 3] if x.strip())
        if s.startswith("*ERROR"):
            errors.append(context)
        elif s.startswith("*WARNING"):
            squeezed = "".join(context.lower().split())
            if any(k in squeezed for k in _FATAL_KEYS):
                errors.append(context)
            elif not any(k in squeezed for k in _HARMLESS_KEYS):
                warnings.append(context)
    return errors, warnings


def run_ccx(workdir: Path, jobname: str = "job", threads: int = 1, timeout: float = 1800.0) -> RunRecord:
    """Run ``ccx -i jobname`` in ``workdir``; stdout and stderr go to ``jobname.log``."""
    exe = find_ccx()
    if exe is None:
        if os.environ.get("MODEBRIDGE_CCX"):
            raise SolverNotFoundError(f"MODEBRIDGE_CCX={os.environ['MODEBRIDGE_CCX']!r} is not an executable "
                                      f"file ({INSTALL_HINT})")
        raise SolverNotFoundError(f"CalculiX executable 'ccx' not found on PATH ({INSTALL_HINT})")
    workdir = Path(workdir)
    log = workdir / f"{jobname}.log"
    cmd = [exe, "-i", jobname]
    env = dict(os.environ)
    env["OMP_NUM_THREADS"] = str(threads)
    env["CCX_NPROC_EQUATION_SOLVER"] = str(threads)
    rc, wall, text = run_logged(cmd, workdir, log, env, timeout, "CalculiX", INSTALL_HINT)
    errors, warnings = scan_log(text)
    tail = log_tail(text)
    if errors:
        raise SolverRunError(f"CalculiX reported: {errors[0]}", returncode=rc, log_path=log, stderr_tail=tail)
    if rc != 0:
        raise SolverRunError(f"CalculiX exited with code {rc}", returncode=rc, log_path=log, stderr_tail=tail)
    return RunRecord(command=cmd, returncode=rc, wall_time=wall, log_path=log, warnings=warnings)
