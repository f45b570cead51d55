"""Versioned records of studies and verification: ``convergence.json`` (``converge``),
``variants.json`` (``vary``), ``verify.json`` (``verify``).

A record is one JSON object written atomically by :func:`write_record`::

    {"format": "modebridge-record", "kind": "convergence", "version": 1,
     "sha256": "<hex digest of the canonical JSON of data>", "data": <the payload>}

:func:`read_record` checks the format, the kind, the version (a newer one is refused) and the
checksum, and returns ``data``; the report reads studies only through it. Paths inside a
record (run folders, plots) are stored relative to the record's folder when they lie inside it,
so a study folder can be moved; :func:`resolve_path` turns them back into paths.

A file without the envelope (written before records were versioned) is read as version 0,
without a checksum.
"""

from __future__ import annotations

import hashlib
import json
import os
from dataclasses import dataclass
from pathlib import Path

from .errors import ResultFileError
from .io import atomic_write_text, read_input

__all__ = ["RECORD_FORMAT", "RECORD_VERSION", "KINDS", "Record", "write_record", "read_record",
           "record_checksum", "relative_to", "resolve_path", "RecordError"]

RECORD_FORMAT = "modebridge-record"
RECORD_VERSION = 1
#: record kind → its file name in a study or verification folder
KINDS = {"convergence": "convergence.json", "variants": "variants.json", "verify": "verify.json"}


class RecordError(ResultFileError):
    """A study or verification record is missing, damaged, of another kind or too new (exit 8)."""


@dataclass
class Record:
    kind: str
    version: int  #: 0 for a file written before records were versioned
    data: object
    path: Path
    checked: bool  #: its checksum was verified


def _canonical(data) -> bytes:
    return json.dumps(data, sort_keys=True, separators=(",", ":"), allow_nan=True).encode("utf-8")


def record_checksum(data) -> str:
    return hashlib.sha256(_canonical(data)).hexdigest()


def relative_to(path: str | Path, base: str | Path) -> str:
    """``path`` relative to ``base`` when inside it (POSIX separators), else absolute."""
    p = Path(path).resolve()
    b = Path(base).resolve()
    try:
        return p.relative_to(b).as_posix()
    except ValueError:
        return str(p)


def resolve_path(value: str | None, base: str | Path) -> Path | None:
    """A path from a record: relative ones are taken from the record's folder."""
    if not value:
        return None
    p = Path(value)
    return p if p.is_absolute() else Path(base) / p


def write_record(folder: str | Path, kind: str, data) -> Path:
    """Write ``data`` as the ``kind`` record of ``folder``, atomically; return its path."""
    if kind not in KINDS:
        raise ValueError(f"unknown record kind {kind!r}")
    path = Path(folder) / KINDS[kind]
    env = {"format": RECORD_FORMAT, "kind": kind, "version": RECORD_VERSION,
           "sha256": record_checksum(data), "data": data}
    atomic_write_text(path, json.dumps(env, indent=2, allow_nan=True))
    return path


def read_record(path: str | Path, kind: str | None = None) -> Record:
    """Read a record file (or the ``kind`` record of a folder) and verify it."""
    path = Path(path)
    if path.is_dir() and kind is not None:
        path = path / KINDS[kind]
    raw = read_input(path, "record", error=_record_error)
    try:
        env = json.loads(raw.decode("utf-8"))
    except (UnicodeDecodeError, ValueError, RecursionError) as exc:
        raise RecordError(f"{path}: not a readable record ({type(exc).__name__}): damaged or not JSON") from None
    if isinstance(env, dict) and env.get("format") == RECORD_FORMAT:
        version = env.get("version")
        if not isinstance(version, int) or version < 1:
            raise RecordError(f"{path}: record version {version!r} is not a positive integer")
        if version > RECORD_VERSION:
            raise RecordError(f"{path}: written by a newer modebridge (record version {version}; "
                              f"this one reads up to {RECORD_VERSION})")
        found = env.get("kind")
        if kind is not None and found != kind:
            raise RecordError(f"{path}: a '{found}' record, not a '{kind}' record")
        if "data" not in env or env.get("sha256") != record_checksum(env["data"]):
            raise RecordError(f"{path}: checksum mismatch: the record is damaged or was edited "
                              "(run the study again to rewrite it)")
        return Record(str(found), version, env["data"], path, True)
    # an unversioned file of an earlier modebridge: its shape decides its kind
    legacy = ("convergence" if isinstance(env, list) and all(isinstance(x, dict) and "modes" in x for x in env)
              else "variants" if isinstance(env, dict) and "variants" in env
              else "verify" if isinstance(env, list) else None)
    if kind is not None and legacy != kind and not (kind == "verify" and isinstance(env, list)):
        raise RecordError(f"{path}: not a '{kind}' record")
    return Record(legacy or "unknown", 0, env, path, False)


def _record_error(message: str, source=None):
    return RecordError(f"{source}: {message}" if source is not None else message)


def record_exists(folder: str | Path, kind: str) -> bool:
    return os.path.isfile(Path(folder) / KINDS[kind])
