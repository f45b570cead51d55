"""Starting solver processes: no shell, their own session, a log file, a time limit.

Shared by the solver plugins' runners so that every solver is started, timed out and
interrupted the same way: on a timeout or Ctrl-C the whole process group is killed, so no
solver (nor anything it started) is left running.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import time
from collections.abc import Mapping, Sequence
from pathlib import Path

from .errors import SolverNotFoundError, SolverTimeoutError

__all__ = ["run_logged", "log_tail", "kill_active", "probe", "available_cores", "probe_output"]

#: process groups of solvers running now in this process (killed by kill_active)
_ACTIVE: set[int] = set()


def kill_active() -> None:
    """Kill every solver process group this process started and that still runs (used when a
    study worker finds its parent gone)."""
    for pgid in list(_ACTIVE):
        try:
            os.killpg(pgid, signal.SIGKILL)
        except (ProcessLookupError, PermissionError):
            pass
        _ACTIVE.discard(pgid)


def probe(cmd: Sequence[str], timeout: float = 5.0) -> str | None:
    """Run a short query (a version probe) in its own process group; its stdout + stderr, or
    None when it cannot start, fails to finish within ``timeout`` s (the whole group is killed:
    nothing it started is left), or is not text."""
    try:
        proc = subprocess.Popen(list(cmd), stdout=subprocess.PIPE, stderr=subprocess.STDOUT,
                                stdin=subprocess.DEVNULL, start_new_session=True)
    except OSError:
        return None
    try:
        out, _ = proc.communicate(timeout=timeout)
    except subprocess.TimeoutExpired:
        _kill(proc)
        try:
            proc.communicate(timeout=1)
        except subprocess.TimeoutExpired:  # a grandchild that left the group still holds the pipe
            pass
        return None
    except BaseException:
        _kill(proc)
        raise
    return out.decode("utf-8", "replace")




_PROBES: dict[tuple, str | None] = {}


def _probe_cache_file() -> Path:
    from .cache import cache_dir

    return cache_dir() / "probes.json"


def probe_output(exe: str, args: Sequence[str], timeout: float = 20.0) -> str | None:
    """stdout + stderr of ``exe args`` (e.g. a solver's version query), run once per executable.

    Cached in the process and in ``~/.cache/modebridge/probes.json`` (``MODEBRIDGE_CACHE_DIR``
    moves it) under the executable's real path, size and modification time: replacing or
    upgrading the executable probes it again. None when it cannot be started or times out."""
    try:
        real = os.path.realpath(exe)
        st = os.stat(real)
    except OSError:
        return None
    key = (real, st.st_size, st.st_mtime_ns, tuple(args))
    if key in _PROBES:
        return _PROBES[key]
    disk_key = json.dumps(key)
    cache = _probe_cache_file()
    try:
        stored = json.loads(cache.read_text())
    except (OSError, ValueError):
        stored = {}
    if not isinstance(stored, dict):
        stored = {}
    if disk_key in stored:
        _PROBES[key] = stored[disk_key]
        return stored[disk_key]
    out = probe([exe, *args], timeout)  # its own process group, killed whole past the limit
    if out is None:
        return None  # not cached: the next call tries again
    _PROBES[key] = out
    stored[disk_key] = out
    try:
        cache.parent.mkdir(parents=True, exist_ok=True)
        tmp = cache.with_name(f".{cache.name}.{os.getpid()}.tmp")
        tmp.write_text(json.dumps(stored))
        os.replace(tmp, cache)
    except OSError:
        pass  # a read-only home only costs the probe next time
    return out


def available_cores() -> int:
    """The cores this process may run on (its CPU affinity; ``os.cpu_count()`` where there is none):
    the solver threads of a single run when the model does not set ``[run] threads``."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)


def run_logged(cmd: Sequence[str], cwd: str | Path, log: str | Path, env: Mapping[str, str],
               timeout: float, label: str, hint: str = "") -> tuple[int, float, str]:
    """Run ``cmd`` in ``cwd`` with stdout and stderr into ``log``.

    Returns (return code, wall time in s, the log's text). Raises SolverNotFoundError when the
    program cannot be started and SolverTimeoutError past ``timeout`` seconds.
    """
    log = Path(log)
    t0 = time.perf_counter()
    with open(log, "wb") as fh:
        try:
            proc = subprocess.Popen(list(cmd), cwd=cwd, stdout=fh, stderr=subprocess.STDOUT,
                                    stdin=subprocess.DEVNULL, env=dict(env), start_new_session=True)
        except OSError as exc:  # vanished, not executable, wrong architecture ...
            raise SolverNotFoundError(f"{label}: {cmd[0]!r} cannot be started: {exc.strerror or exc}"
                                      + (f" ({hint})" if hint else "")) from None
        _ACTIVE.add(proc.pid)
        try:
            rc = _wait(proc, timeout)
        except subprocess.TimeoutExpired:
            _kill(proc)
            raise SolverTimeoutError(f"{label} ran past its time limit of {timeout:g} s and was stopped",
                                     log_path=log) from None
        except BaseException:  # Ctrl-C: never leave the solver running
            _kill(proc)
            raise
        finally:
            _ACTIVE.discard(proc.pid)
    return rc, time.perf_counter() - t0, log.read_text(errors="replace")


def _wait(proc: subprocess.Popen, timeout: float) -> int:
    """``proc.wait(timeout)`` without its polling: with a time limit Python sleeps in steps of up to
    50 ms, so the run went on up to 50 ms after the solver had ended (25 ms on average). Where
    Linux gives a process file descriptor (``os.pidfd_open``), wait on it; else poll as before."""
    pidfd_open = getattr(os, "pidfd_open", None)
    ms = None if timeout is None else max(0, int(timeout * 1000))
    if pidfd_open is None or (ms is not None and ms > 2**31 - 1):  # poll takes a C int of ms
        return proc.wait(timeout=timeout)
    try:
        fd = pidfd_open(proc.pid)
    except OSError:  # an old kernel, or the process is gone already
        return proc.wait(timeout=timeout)
    try:
        import select

        poller = select.poll()
        poller.register(fd, select.POLLIN)
        if not poller.poll(ms):
            raise subprocess.TimeoutExpired(proc.args, timeout)
    finally:
        os.close(fd)
    return proc.wait()


def log_tail(text: str, lines: int = 15) -> str:
    return "\n".join(text.splitlines()[-lines:])


def _kill(proc: subprocess.Popen) -> None:
    try:
        os.killpg(proc.pid, signal.SIGKILL)
    except (ProcessLookupError, PermissionError):
        pass
    proc.wait()
