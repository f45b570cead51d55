"""File helpers: atomic writes, folder locks, guarded reads of inputs and guarded outputs.

What they guarantee (README, "What is guaranteed"):

* :func:`atomic_path` writes beside the target and renames over it in one step: a reader sees
  the old file or the new one, never half a file. It never writes through a symlink: the
  rename replaces a link rather than its target, and a target that is a symlink is refused.
* :func:`folder_lock` holds an OS file lock (``filelock``) on a run or study folder for the
  whole run: a second process asking for the same folder is refused at once
  (:class:`~bridge.errors.FolderBusyError`), never interleaved. The lock dies with its process.
* Every failing write raises :class:`~bridge.errors.OutputError` naming the file (disk full,
  file-size limit, permission, a file where a folder is expected).
* :func:`read_input` reads only regular files of bounded size: a FIFO, a device or a folder
  given as a model is refused, never waited on.
"""

from __future__ import annotations

import contextlib
import errno
import os
import stat
import tempfile
import threading
from pathlib import Path

from .errors import BridgeError, FolderBusyError, ModelError, OutputError

__all__ = ["atomic_path", "atomic_write_text", "atomic_write_bytes", "inside", "folder_lock", "ensure_room",
           "write_fault", "read_input", "make_folder", "guard_output", "sha256_file", "MAX_INPUT_BYTES",
           "LOCK_NAME"]

#: model, study and case files larger than this are refused (a model is a few kB of TOML)
MAX_INPUT_BYTES = 16 * 1024 * 1024
#: the lock file inside a locked run or study folder
LOCK_NAME = ".modebridge.lock"

_FULL = (errno.ENOSPC, errno.EFBIG, getattr(errno, "EDQUOT", errno.ENOSPC))


def write_fault(path: str | Path, exc: BaseException) -> OutputError:
    """An :class:`OutputError` naming ``path`` for an OSError met while writing it."""
    code = getattr(exc, "errno", None)
    if code in _FULL:
        why = "no space left (the disk is full, or a quota or file-size limit was reached)"
    elif code in (errno.EACCES, errno.EPERM):
        why = "permission denied"
    elif code == errno.EROFS:
        why = "read-only file system"
    elif code in (errno.ENOTDIR, errno.EEXIST):
        why = "a file stands where a folder is needed"
    elif code == errno.ENOENT:
        why = "no such folder, and it cannot be made there"
    else:
        why = getattr(exc, "strerror", None) or str(exc) or type(exc).__name__
    return OutputError(f"{path}: cannot write: {why}")


def ensure_room(path: str | Path, nbytes: int) -> None:
    """Refuse, before a library that handles a full disk badly (HDF5) starts writing, a file of
    about ``nbytes`` that the file system's free space or this process's file-size limit
    (RLIMIT_FSIZE) cannot hold."""
    import resource

    path = Path(path)
    soft, _ = resource.getrlimit(resource.RLIMIT_FSIZE)
    if soft != resource.RLIM_INFINITY and nbytes > soft:
        raise OutputError(f"{path}: cannot write: no space left (about {nbytes / 1e6:.2f} MB needed, the "
                          f"file-size limit is {soft / 1e6:.2f} MB)")
    try:
        st = os.statvfs(path.parent)
    except OSError:
        return
    free = st.f_bavail * st.f_frsize
    if nbytes > free:
        raise OutputError(f"{path}: cannot write: no space left (about {nbytes / 1e6:.2f} MB needed, "
                          f"{free / 1e6:.2f} MB free)")


def _refuse_symlink(path: Path) -> None:
    if path.is_symlink():
        raise OutputError(f"{path}: is a symbolic link; modebridge never writes through a link "
                          "(remove it or choose another folder)")


@contextlib.contextmanager
def atomic_path(path: str | Path):
    """Yield a temporary path beside ``path``; on success it replaces ``path`` in one step.

    A reader never sees a half-written file: it sees the old file or the new one. An OSError
    while writing (disk full, permission) becomes an :class:`OutputError` naming ``path``; the
    temporary file is removed.
    """
    path = Path(path)
    _refuse_symlink(path)
    tmp = None
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=f".{path.stem}.", suffix=f".part{path.suffix}", dir=path.parent)
        os.close(fd)
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)  # mkstemp makes 0600; results and reports are for sharing
        yield Path(tmp)
        with open(tmp, "rb+") as fh:
            os.fsync(fh.fileno())
        os.replace(tmp, path)
        tmp = None
    except OSError as exc:
        raise write_fault(path, exc) from exc
    finally:
        if tmp is not None:
            with contextlib.suppress(OSError):
                os.unlink(tmp)


def atomic_write_bytes(path: str | Path, data: bytes) -> Path:
    with atomic_path(path) as tmp:
        Path(tmp).write_bytes(data)
    return Path(path)


def atomic_write_text(path: str | Path, text: str) -> Path:
    return atomic_write_bytes(path, text.encode("utf-8"))


def inside(base: str | Path, *parts: str) -> Path:
    """Join ``parts`` to ``base`` and refuse a result that leaves ``base``."""
    base = Path(base).resolve()
    target = base.joinpath(*parts).resolve()
    if target != base and base not in target.parents:
        raise BridgeError(f"refusing to write outside the run folder {base}: {target}")
    return target


def make_folder(path: str | Path, what: str = "output folder") -> Path:
    """Create ``path`` (and its parents) as a folder, or refuse in one line why it cannot be."""
    path = Path(path)
    if path.exists() and not path.is_dir():
        raise OutputError(f"{path}: the {what} exists and is a file, not a folder")
    try:
        path.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise write_fault(path, exc) from None
    if not os.access(path, os.W_OK | os.X_OK):
        raise OutputError(f"{path}: cannot write into the {what}: permission denied")
    return path


# --- locks -------------------------------------------------------------------------------

_held: dict[str, list] = {}  # folder → [FileLock, depth]: a process may nest its own lock
_held_guard = threading.Lock()


@contextlib.contextmanager
def folder_lock(folder: str | Path, what: str):
    """Hold the lock of ``folder`` (created if needed) for the ``with`` block.

    Another process holding it makes this raise :class:`FolderBusyError` at once. The same
    process may take it again inside (a study's CLI around the library's run). The lock is an
    ``fcntl``/``flock`` lock through ``filelock``: the kernel drops it when its process dies,
    so a ``kill -9`` leaves no stale lock.
    """
    from filelock import FileLock, Timeout

    created = not Path(folder).exists()
    folder = make_folder(folder, f"{what} folder")
    key = str(folder.resolve())
    with _held_guard:
        entry = _held.get(key)
        if entry is not None:
            entry[1] += 1
    if entry is not None:
        try:
            yield folder
        finally:
            with _held_guard:
                entry[1] -= 1
        return
    lockfile = folder / LOCK_NAME
    _refuse_symlink(lockfile)
    lock = FileLock(str(lockfile), timeout=0)
    try:
        lock.acquire()
    except Timeout:
        raise FolderBusyError(f"{folder}: another modebridge {what} is writing into this folder "
                              f"(lock {LOCK_NAME} held); wait for it to finish or choose another --out") from None
    except OSError as exc:
        raise write_fault(lockfile, exc) from None
    with _held_guard:
        _held[key] = entry = [lock, 1]
    failed = True
    try:
        yield folder
        failed = False
    finally:
        with _held_guard:
            entry[1] -= 1
            if entry[1] == 0:
                _held.pop(key, None)
                if failed and created and [p.name for p in folder.iterdir()] == [LOCK_NAME]:
                    # refused before anything was written: leave no folder behind
                    with contextlib.suppress(OSError):
                        lockfile.unlink()
                        folder.rmdir()
                lock.release()


# --- inputs ------------------------------------------------------------------------------

def read_input(path: str | Path, what: str = "model file", max_bytes: int = MAX_INPUT_BYTES,
               error=ModelError) -> bytes:
    """The bytes of an input file; refuse (``error``, naming the file) a missing file, a folder,
    a FIFO, socket or device (never waited on), and anything larger than ``max_bytes``."""
    path = Path(path)
    try:
        st = os.stat(path)
    except FileNotFoundError:
        raise error("file not found", source=path) from None
    except OSError as exc:
        raise error(f"cannot read: {exc.strerror or exc}", source=path) from None
    if stat.S_ISDIR(st.st_mode):
        raise error(f"cannot read: is a folder; give the {what} itself", source=path)
    if not stat.S_ISREG(st.st_mode):
        kind = ("a named pipe (FIFO)" if stat.S_ISFIFO(st.st_mode) else
                "a device" if stat.S_ISCHR(st.st_mode) or stat.S_ISBLK(st.st_mode) else
                "a socket" if stat.S_ISSOCK(st.st_mode) else "not a regular file")
        raise error(f"cannot read: is {kind}, not a regular file; a {what} must be a file", source=path)
    if st.st_size > max_bytes:
        raise error(f"is {st.st_size / 2**20:.1f} MiB; a {what} is at most {max_bytes / 2**20:.0f} MiB",
                    source=path)
    try:
        with open(path, "rb") as fh:
            data = fh.read(max_bytes + 1)
    except OSError as exc:
        raise error(f"cannot read: {exc.strerror or exc}", source=path) from None
    if len(data) > max_bytes:
        raise error(f"larger than {max_bytes / 2**20:.0f} MiB; not a {what}", source=path)
    return data


def sha256_file(path: str | Path) -> str:
    import hashlib

    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


# --- outputs the user names (report, export, compare --csv) ------------------------------

#: suffixes of inputs and results that a report or export never overwrites
PROTECTED_SUFFIXES = (".toml", ".vtkhdf", ".inp", ".frd", ".dat", ".step", ".stp", ".iges", ".igs", ".brep")
_HDF5_MAGIC = b"\x89HDF\r\n\x1a\n"


def _is_result_file(path: Path) -> bool:
    try:
        with open(path, "rb") as fh:
            if fh.read(8) != _HDF5_MAGIC:
                return False
    except OSError:
        return False
    try:
        import h5py

        with h5py.File(path, "r") as f:
            return "modebridge" in f
    except Exception:  # unreadable HDF5: not ours to overwrite either
        return True


def guard_output(path: str | Path, inputs=(), what: str = "output", make_parent: bool = True) -> Path:
    """Refuse to write ``path`` when it would overwrite an input or a result, or follow a link.

    Allowed: a new file in an existing folder, or an existing regular file that is none of the
    ``inputs`` and not a model, result, deck or CAD file.
    """
    path = Path(path)
    _refuse_symlink(path)
    parent = path.parent if str(path.parent) else Path(".")
    if parent.exists() and not parent.is_dir():
        raise OutputError(f"{path}: {parent} is a file, not a folder")
    if not make_parent and not parent.is_dir():
        raise OutputError(f"{path}: the folder {parent} does not exist (create it first)")
    if path.exists():
        if path.is_dir():
            raise OutputError(f"{path}: is a folder; give a file name for the {what}")
        if not path.is_file():
            raise OutputError(f"{path}: not a regular file; the {what} must be written to a file")
        for p in inputs:
            with contextlib.suppress(OSError):
                if Path(p).exists() and os.path.samefile(path, p):
                    raise OutputError(f"{path}: is an input of this command; the {what} never "
                                      "overwrites its inputs (choose another --out)")
        if path.suffix.lower() in PROTECTED_SUFFIXES or _is_result_file(path):
            raise OutputError(f"{path}: holds a model, result or solver file; the {what} never "
                              "overwrites one (choose another --out)")
    return path
