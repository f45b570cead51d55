"""Exception hierarchy of modebridge.

Every error a user can cause derives from :class:`BridgeError`. The CLI turns
one into a single line on stderr and exits with :attr:`BridgeError.exit_code`;
library code only raises.
"""

from __future__ import annotations

from pathlib import Path

__all__ = [
    "EXIT_CODES",
    "ExitCode",
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


class ExitCode:
    """Every exit code of the ``modebridge`` command, by name (the README lists the same table)."""

    OK = 0
    ERROR = 1  #: an error of modebridge's own kind not named below
    BAD_ARGUMENT = 2  #: a bad command-line argument (typer/click)
    MODEL = 3  #: the model file is malformed, inconsistent, a unit is wrong, or a solver option is bad
    MESHING = 4  #: gmsh could not mesh the geometry, or a region selects nothing
    PLUGIN = 5  #: a solver plugin is unknown or broken, lacks a capability, or its solver is not installed
    DECK = 6  #: a solver input deck could not be written
    SOLVER = 7  #: the solver failed, timed out, or a study had failed runs
    RESULT_UNREADABLE = 8  #: a solver's result file or a stored neutral result cannot be read
    RESULT_CHECK = 9  #: a solver's results break the core's post-conditions (missing modes, nodes, NaN)
    CHECK_FAILED = 10  #: the run finished but a check failed (band, mechanism, mass, compare, verify)
    MAPPING = 11  #: shapes cannot be mapped between two meshes (they do not cover the same part)
    DIFFERENT_MODELS = 12  #: results of different models compared without --force
    REPORT = 13  #: a path holds nothing a report can be made of
    EXPORT = 14  #: a result cannot be written in the asked format
    TEST_DATA = 15  #: measured modes (or a test plan's input) unusable: no modes, no units, all points off
    INTERNAL = 70  #: a bug in modebridge (please report it; --debug shows the traceback)
    CANNOT_WRITE = 73  #: a file cannot be written (disk full, permission, would overwrite an input or result)
    FOLDER_BUSY = 75  #: another modebridge process holds the run or study folder's lock
    INTERRUPTED = 130  #: Ctrl-C; results already written are kept


#: exit code -> what it means (one table for the CLI, the README and the tests)
EXIT_CODES: dict[int, str] = {
    ExitCode.OK: "success",
    ExitCode.ERROR: "an error not listed below",
    ExitCode.BAD_ARGUMENT: "a bad command-line argument",
    ExitCode.MODEL: "model error (malformed, inconsistent, a wrong unit, or a bad solver option)",
    ExitCode.MESHING: "meshing error",
    ExitCode.PLUGIN: "plugin or capability error, or a solver not installed",
    ExitCode.DECK: "deck error",
    ExitCode.SOLVER: "the solver failed or timed out (studies: some runs failed)",
    ExitCode.RESULT_UNREADABLE: "a result file cannot be read",
    ExitCode.RESULT_CHECK: "the solver's results break the core's post-conditions",
    ExitCode.CHECK_FAILED: "the run finished but a check failed",
    ExitCode.MAPPING: "shapes cannot be mapped between the meshes",
    ExitCode.DIFFERENT_MODELS: "results of different models compared without --force",
    ExitCode.REPORT: "nothing to make a report of",
    ExitCode.EXPORT: "the result cannot be exported in that format",
    ExitCode.TEST_DATA: "measured modes or a test plan's input unusable",
    ExitCode.INTERNAL: "internal error (a bug)",
    ExitCode.CANNOT_WRITE: "a file or folder cannot be written (named in the line)",
    ExitCode.FOLDER_BUSY: "the run or study folder is in use by another modebridge process",
    ExitCode.INTERRUPTED: "interrupted (Ctrl-C)",
}


class BridgeError(Exception):
    """Base of every error modebridge reports to a user."""

    exit_code: int = ExitCode.ERROR


class ModelError(BridgeError, ValueError):
    """The model file is malformed or inconsistent.

    ``source`` is the file, ``field`` the dotted path inside it (may be empty).
    """

    exit_code = ExitCode.MODEL

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

    exit_code = ExitCode.MESHING


class PluginError(BridgeError):
    """A solver plugin is unknown, broken or not installed."""

    exit_code = ExitCode.PLUGIN


class CapabilityError(PluginError):
    """The model asks a solver for something it does not support."""


class DeckWriteError(BridgeError):
    """A solver input deck could not be written."""

    exit_code = ExitCode.DECK


class SolverNotFoundError(PluginError):
    """The solver executable is not on PATH (or where configured)."""


class SolverRunError(BridgeError):
    """The solver ran but failed, or reported an error while exiting 0."""

    exit_code = ExitCode.SOLVER

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

    exit_code = ExitCode.RESULT_UNREADABLE

    def __init__(self, message: str, *, path: str | Path | None = None, line: int | None = None):
        self.path = str(path) if path is not None else None
        self.line = line
        where = self.path or "<stream>"
        if line is not None:
            where += f":{line}"
        super().__init__(f"{where}: {message}")


class ResultCheckError(BridgeError):
    """A parsed result fails a sanity check that makes it unusable."""

    exit_code = ExitCode.RESULT_CHECK


class ResultFileError(BridgeError):
    """A stored neutral result cannot be read."""

    exit_code = ExitCode.RESULT_UNREADABLE


class OutputError(BridgeError):
    """A file or folder cannot be written: the disk is full or a file-size limit was reached, no
    permission, a path that is not a folder, or a write that would overwrite one of the user's
    inputs or results or follow a symlink. The message names the file.

    Exit code 73 (``EX_CANTCREAT`` of sysexits.h: cannot create an output file).
    """

    exit_code = ExitCode.CANNOT_WRITE


class FolderBusyError(BridgeError):
    """Another modebridge process holds the lock of the run or study folder: two runs never write
    into one folder at once. Retry when it has finished, or choose another ``--out``.

    Exit code 75 (``EX_TEMPFAIL`` of sysexits.h: a temporary failure, try again later).
    """

    exit_code = ExitCode.FOLDER_BUSY
