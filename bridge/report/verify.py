"""A tolerant reader of ``verify.json``: verification cases against reference values.

Expected form: a list of cases (or ``{"cases": [...]}``), each with ``name`` (or ``case``),
``solver``, ``element``, ``source`` and a list of per-mode entries with ``mode``, ``target``,
``value``, ``deviation``, ``tolerance`` and ``passed`` (``target_hz``/``value_hz`` as
``modebridge verify`` writes them are read too; a case with ``error`` failed, one whose note
says "skipped" did not run). Deviations and tolerances are fractions
(0.01 = 1 %) unless their key ends in ``_percent``/``_pct``. Missing values are computed
where they can be (deviation = (value − target) / target, passed = |deviation| ≤ tolerance);
anything not understood is reported as a problem instead of failing the report.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from pathlib import Path

__all__ = ["VerifyMode", "VerifyCase", "read_verification", "parse_verification"]

_CASE_LISTS = ("cases", "verification", "results", "benchmarks")
_MODE_LISTS = ("modes", "checks", "results", "values", "frequencies")
_NAME = ("name", "case", "title", "id")
_SOLVER = ("solver",)
_ELEMENT = ("element", "element_type", "family")
_SOURCE = ("source", "reference", "ref")
_MODE = ("mode", "index", "n")
_TARGET = ("target", "expected", "reference", "target_hz", "expected_hz", "reference_hz")
_VALUE = ("value", "computed", "actual", "result", "value_hz", "computed_hz", "f_hz")
_DEV = ("deviation", "error", "rel_error", "relative_error", "dev")
_TOL = ("tolerance", "tol", "rel_tol", "allowed")
_PASSED = ("passed", "ok", "pass", "success")


@dataclass
class VerifyMode:
    mode: str  #: as written (usually a 1-based number)
    target: float | None  #: reference value (Hz for frequencies)
    value: float | None
    deviation: float | None  #: fraction
    tolerance: float | None  #: fraction
    passed: bool | None
    label: str = ""  #: what is compared, when the entry says (e.g. "f", "m_eff z")


@dataclass
class VerifyCase:
    name: str
    solver: str = ""
    element: str = ""
    source: str = ""
    modes: list[VerifyMode] = field(default_factory=list)
    passed: bool | None = None
    note: str = ""


def _num(x) -> float | None:
    if isinstance(x, bool) or x is None:
        return None
    if isinstance(x, (int, float)):
        return float(x) if math.isfinite(float(x)) else None
    if isinstance(x, str):
        t = x.strip().rstrip("%").strip()
        for unit in ("Hz", "hz"):
            if t.endswith(unit):
                t = t[: -len(unit)].strip()
        try:
            v = float(t)
        except ValueError:
            return None
        return v / 100.0 if x.strip().endswith("%") else v
    return None


def _pick(d: dict, keys, convert=None):
    """The first of ``keys`` present (also as ``KEY_percent``/``KEY_pct``, then divided by 100);
    with ``convert``, the first that converts."""
    for k in keys:
        for kk in (k, f"{k}_percent", f"{k}_pct"):
            if kk not in d or d[kk] is None or d[kk] == "":
                continue
            v = d[kk]
            if convert is None:
                return v
            v = convert(v)
            if v is None:
                continue
            return v / 100.0 if kk != k else v
    return None


def _text(x) -> str:
    if x is None:
        return ""
    if isinstance(x, (list, tuple)):
        return ", ".join(_text(v) for v in x)
    if isinstance(x, dict):
        return ", ".join(f"{k}: {_text(v)}" for k, v in x.items())
    return str(x)


def _bool(x) -> bool | None:
    if isinstance(x, bool):
        return x
    if isinstance(x, str) and x.strip().lower() in ("true", "yes", "ok", "pass", "passed"):
        return True
    if isinstance(x, str) and x.strip().lower() in ("false", "no", "fail", "failed"):
        return False
    if isinstance(x, (int, float)) and x in (0, 1):
        return bool(x)
    return None


def _mode(entry, index: int) -> VerifyMode | None:
    if isinstance(entry, (int, float)) and not isinstance(entry, bool):
        return VerifyMode(str(index + 1), None, float(entry), None, None, None)
    if not isinstance(entry, dict):
        return None
    mode = _pick(entry, _MODE)
    target = _pick(entry, _TARGET, _num)
    value = _pick(entry, _VALUE, _num)
    dev = _pick(entry, _DEV, _num)
    tol = _pick(entry, _TOL, _num)
    passed = _bool(_pick(entry, _PASSED))
    if dev is None and target not in (None, 0.0) and value is not None:
        dev = (value - target) / target
    if passed is None and dev is not None and tol is not None:
        passed = abs(dev) <= tol
    if all(v is None for v in (target, value, dev, tol, passed)):
        return None
    label = _text(entry.get("quantity") or entry.get("label") or entry.get("what") or "")
    if not label and any(str(k).endswith("_hz") for k in entry):
        label = "f [Hz]"
    if mode is not None:
        shown = _text(mode)
    else:  # "mode": null is a target mode the run did not find
        shown = "not found" if any(k in entry for k in _MODE) else str(index + 1)
    return VerifyMode(shown, target, value, dev, tol, passed, label)


def _case(raw, index: int, problems: list[str], name_hint: str = "") -> VerifyCase | None:
    if not isinstance(raw, dict):
        problems.append(f"case {index + 1}: not an object")
        return None
    name = _text(_pick(raw, _NAME)) or name_hint or f"case {index + 1}"
    case = VerifyCase(name, _text(_pick(raw, _SOLVER)), _text(_pick(raw, _ELEMENT)), _text(_pick(raw, _SOURCE)))
    entries = None
    for k in _MODE_LISTS:
        if isinstance(raw.get(k), list):
            entries = raw[k]
            break
        if isinstance(raw.get(k), dict):  # {"1": {...}, "2": {...}}
            entries = [dict(v, mode=m) if isinstance(v, dict) else {"mode": m, "value": v}
                       for m, v in raw[k].items()]
            break
    if entries is None:
        single = _mode(raw, 0)  # a case that is itself one comparison
        entries = [] if single is None else None
        if single is not None:
            case.modes.append(single)
    for j, e in enumerate(entries or []):
        m = _mode(e, j)
        if m is None:
            problems.append(f"case '{name}', entry {j + 1}: no target, value or verdict found")
        else:
            case.modes.append(m)
    case.passed = _bool(_pick(raw, _PASSED))
    verdicts = [m.passed for m in case.modes if m.passed is not None]
    if case.passed is None and verdicts:
        case.passed = all(verdicts)
    title = _text(raw.get("title") or "")
    if title and title != name:
        case.name = f"{name} — {title}"
    notes = [_text(raw.get(k)) for k in ("note", "notes", "comment", "tolerance_note") if raw.get(k)]
    error = _text(raw.get("error") or "")
    if error:
        case.passed = False
        notes.insert(0, f"error: {error}")
    elif not case.modes and any(n.lower().startswith("skipped") for n in notes):
        case.passed = None  # not run (the solver lacks the element): neither pass nor fail
    elif not case.modes:
        problems.append(f"case '{name}': no per-mode entries found")
    case.note = "; ".join(notes)
    return case


def parse_verification(data) -> tuple[list[VerifyCase], list[str]]:
    """Cases and the problems met reading them (never raises for content it does not know)."""
    problems: list[str] = []
    raw_cases = None
    hints: list[str] = []
    if isinstance(data, list):
        raw_cases = data
    elif isinstance(data, dict):
        for k in _CASE_LISTS:
            if isinstance(data.get(k), list):
                raw_cases = data[k]
                break
        if raw_cases is None and data and all(isinstance(v, dict) for v in data.values()):
            hints = [str(k) for k in data]  # {"case name": {...}, ...}
            raw_cases = list(data.values())
        if raw_cases is None:
            raw_cases = [data]
    else:
        problems.append("neither a list of cases nor an object")
        return [], problems
    cases = []
    for i, raw in enumerate(raw_cases):
        c = _case(raw, i, problems, hints[i] if i < len(hints) else "")
        if c is not None:
            cases.append(c)
    return cases, problems


def read_verification(path: str | Path) -> tuple[list[VerifyCase], list[str]]:
    """Read ``verify.json``; an unreadable file gives no cases and one problem."""
    from ..errors import BridgeError
    from ..records import read_record

    path = Path(path)
    try:
        data = read_record(path, "verify").data  # versioned and checksummed (bridge.records)
    except BridgeError as exc:
        return [], [' '.join(str(exc).split())]
    cases, problems = parse_verification(data)
    return cases, [f"{path.name}: {p}" for p in problems]
