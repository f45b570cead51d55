"""Exception hierarchy of modebridge.

Every error a user can cause derives from :class:`BridgeError`. The CLI turns
one into a single line on stderr and exits with :attr:`BridgeError.exit_code`;
library code only raises.
"""

from __future__ import annotations

from pathlib import Path

__all__ = [
    "BridgeError",
    "ModelError",
    "UnitError",
    "MeshingError",
    "PluginError",
    "CapabilityError",
    "DeckWriteError",
    "SolverNotFoundError",
    "SolverRunError",
    "SolverTimeoutError",
    "ResultParseError",
    "ResultCheckError",
    "ResultFileError",
    "OutputError",
    "FolderBusyError",
]


class BridgeError(Exception):
    """Base of every error modebridge reports to a user."""

    exit_code: int = 1


class ModelError(BridgeError, ValueError):
    """The model file is malformed or inconsistent.

    ``source`` is the file, ``field`` the dotted path inside it (may be empty).
    """

    exit_code = 3

    def __init__(self, message: str, *, source: str | Path | None = None, field: str = ""):
        self.source = str(source) if source is not None else None
        self.field = field
        self.detail = message
        where = []
        if self.source:
            where.append(self.source)
        if field:
            where.append(field)
        prefix = ": ".join(where)
        super().__init__(f"{prefix}: {message}" if prefix else message)


class UnitError(ModelError):
    """A value has no unit, an unknown unit, or a unit of the wrong dimension."""


class MeshingError(BridgeError):
    """gmsh could not build or mesh the geometry, or a region selected nothing."""

    exit_code = 4


class PluginError(BridgeError):
    """A solver plugin is unknown, broken or not installed."""

    exit_code = 5


class CapabilityError(PluginError):
    """The model asks a solver for something it does not support."""


class DeckWriteError(BridgeError):
    """A solver input deck could not be written."""

    exit_code = 6


class SolverNotFoundError(PluginError):
    """The solver executable is not on PATH (or where configured)."""


class SolverRunError(BridgeError):
    """The solver ran but failed, or reported an error while exiting 0."""

    exit_code = 7

    def __init__(self, message: str, *, returncode: int | None = None,
                 log_path: str | Path | None = None, stderr_tail: str = ""):
        self.returncode = returncode
        self.log_path = str(log_path) if log_path is not None else None
        self.stderr_tail = stderr_tail
        text = message
        if log_path is not None:
            text += f" (log: {log_path})"
        super().__init__(text)


class SolverTimeoutError(SolverRunError):
    """The solver ran past its time limit and was stopped."""


class ResultParseError(BridgeError):
    """A solver result file is truncated, empty or not of the expected form."""

    exit_code = 8

    def __init__(self, message: str, *, path: str | Path | None = None, line: int | None = None):
        self.path = str(path) if path is not None else None
        self.line = line
        where = self.path or "<stream>"
        if line is not None:
            where += f":{line}"
        super().__init__(f"{where}: {message}")


class ResultCheckError(BridgeError):
    """A parsed result fails a sanity check that makes it unusable."""

    exit_code = 9


class ResultFileError(BridgeError):
    """A stored neutral result cannot be read."""

    exit_code = 8


class OutputError(BridgeError):
    """A file or folder cannot be written: the disk is full or a file-size limit was reached, no
    permission, a path that is not a folder, or a write that would overwrite one of the user's
    inputs or results or follow a symlink. The message names the file.

    Exit code 73 (``EX_CANTCREAT`` of sysexits.h: cannot create an output file).
    """

    exit_code = 73


class FolderBusyError(BridgeError):
    """Another modebridge process holds the lock of the run or study folder: two runs never write
    into one folder at once. Retry when it has finished, or choose another ``--out``.

    Exit code 75 (``EX_TEMPFAIL`` of sysexits.h: a temporary failure, try again later).
    """

    exit_code = 75
