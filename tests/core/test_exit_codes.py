"""One table of exit codes: every error class uses a code from it, and the README lists it whole."""

from __future__ import annotations

import re
from pathlib import Path

import bridge.compare.mapping  # noqa: F401  (modules that define BridgeError subclasses)
import bridge.compare.results  # noqa: F401
import bridge.export  # noqa: F401
import bridge.modaltest.measured  # noqa: F401
import bridge.report.build  # noqa: F401
from bridge.errors import EXIT_CODES, BridgeError, ExitCode

README = Path(__file__).resolve().parents[2] / "README.md"


def _subclasses(cls):
    for sub in cls.__subclasses__():
        yield sub
        yield from _subclasses(sub)


def test_every_error_class_uses_a_code_of_the_table():
    for cls in _subclasses(BridgeError):
        assert cls.exit_code in EXIT_CODES, f"{cls.__name__} exits {cls.exit_code}, not in EXIT_CODES"


def test_codes_are_distinct_where_they_must_be():
    from bridge.report.build import ReportError

    assert ReportError.exit_code != ExitCode.BAD_ARGUMENT  # a report error is not a bad argument
    names = {k: v for k, v in vars(ExitCode).items() if k.isupper()}
    assert len(set(names.values())) == len(names)
    assert set(names.values()) == set(EXIT_CODES)


def test_readme_lists_every_code():
    text = README.read_text()
    listed = {int(m) for m in re.findall(r"^\| (\d+) \| ", text, flags=re.M)}
    assert listed == set(EXIT_CODES), f"README lists {sorted(listed)}, the code has {sorted(EXIT_CODES)}"
