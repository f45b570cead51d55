"""modebridge's cache folder: matplotlib's configuration and font cache, and solver versions.

Where: ``$MODEBRIDGE_CACHE`` (or ``$MODEBRIDGE_CACHE_DIR``) if set, else ``$XDG_CACHE_HOME/modebridge``, else
``~/.cache/modebridge``. Everything in it can be deleted at any time; it is rebuilt on demand.
``modebridge solvers --json`` prints it (``cache_dir``).

* ``matplotlib/``: ``MPLCONFIGDIR`` for the plots (matplotlib's font list), unless the user set
  ``MPLCONFIGDIR`` already.
* ``solver-versions.json``: a solver's version as probed from its executable, keyed by the
  executable's path, size and modification time, so that a study does not start the solver
  just to ask its version each time (and a hanging probe costs its timeout once).
"""

from __future__ import annotations

import contextlib
import json
import os
from collections.abc import Callable
from pathlib import Path

__all__ = ["cache_dir", "setup_caches", "cached_version"]


def cache_dir() -> Path:
    env = os.environ.get("MODEBRIDGE_CACHE") or os.environ.get("MODEBRIDGE_CACHE_DIR")
    if env:
        return Path(env).expanduser()
    xdg = os.environ.get("XDG_CACHE_HOME")
    base = Path(xdg).expanduser() if xdg else Path.home() / ".cache"
    return base / "modebridge"


def setup_caches() -> Path:
    """Point matplotlib's configuration and font cache into modebridge's cache folder (before
    matplotlib is imported); return the folder."""
    d = cache_dir()
    if "MPLCONFIGDIR" not in os.environ:
        mpl = d / "matplotlib"
        with contextlib.suppress(OSError):
            mpl.mkdir(parents=True, exist_ok=True)
        os.environ["MPLCONFIGDIR"] = str(mpl)
    return d


def cached_version(exe: str, probe: Callable[[str], str | None]) -> str | None:
    """``probe(exe)``, remembered per executable (path, size, mtime) in the cache folder. A
    failed probe (None) is not remembered: a slow moment must not fix a wrong version."""
    try:
        st = os.stat(exe)
    except OSError:
        return probe(exe)
    # the path as given, not its target: a venv's python links to a base python without its packages
    key = f"{os.path.abspath(exe)}|{st.st_size}|{st.st_mtime_ns}"
    path = cache_dir() / "solver-versions.json"
    data: dict = {}
    with contextlib.suppress(OSError, ValueError):
        loaded = json.loads(path.read_text(encoding="utf-8"))
        if isinstance(loaded, dict):
            data = loaded
    if isinstance(data.get(key), str):
        return data[key]
    value = probe(exe)
    if value is None:
        return None
    data[key] = value
    with contextlib.suppress(Exception):  # a cache that cannot be written is only slower
        from .io import atomic_write_text

        atomic_write_text(path, json.dumps(data, indent=1, sort_keys=True))
    return value
