"""File helpers: atomic writes and paths kept inside a run folder."""

from __future__ import annotations

import contextlib
import os
import tempfile
from pathlib import Path

from .errors import BridgeError

__all__ = ["atomic_path", "atomic_write_text", "inside"]


@contextlib.contextmanager
def atomic_path(path: str | Path):
    """Yield a temporary path beside ``path``; on success it replaces ``path`` in one step.

    A reader never sees a half-written file: it sees the old file or the new one.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.stem}.", suffix=f".part{path.suffix}", dir=path.parent)
    os.close(fd)
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)  # mkstemp makes 0600; results and reports are for sharing
    try:
        yield Path(tmp)
        with open(tmp, "rb+") as fh:
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise


def atomic_write_text(path: str | Path, text: str) -> Path:
    with atomic_path(path) as tmp:
        Path(tmp).write_text(text, encoding="utf-8")
    return Path(path)


def inside(base: str | Path, *parts: str) -> Path:
    """Join ``parts`` to ``base`` and refuse a result that leaves ``base``."""
    base = Path(base).resolve()
    target = base.joinpath(*parts).resolve()
    if target != base and base not in target.parents:
        raise BridgeError(f"refusing to write outside the run folder {base}: {target}")
    return target
