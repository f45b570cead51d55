"""Property-based: generated and mutated model files fed to ``modebridge check`` (the real typer
app, in process) always end in a documented exit code with one line on stderr, never a
traceback, never a hang.

The documented exit codes: README "Exit codes" and bridge/errors.py (0 success, 2 a bad
argument, 3 model, 4 meshing, 5 plugin, 73 cannot write). 70 (internal error) is a bug.
"""

from __future__ import annotations

import re
import tomllib

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from typer.testing import CliRunner

from bridge.cli import app

runner = CliRunner()
_ANSI = re.compile(r"\x1b\[[0-9;?]*[A-Za-z]")
DOCUMENTED = {0, 2, 3, 4, 5, 73}

BASE = """name = "steel plate"
description = "generated"

[geometry]
kind = "plate"
length = "100 mm"
width = "80 mm"

[materials.steel]
youngs_modulus = "210 GPa"
poisson_ratio = 0.3
density = "7850 kg/m^3"

[section]
kind = "shell"
material = "steel"
thickness = "2 mm"

[regions.rim]
select = "sides"
sides = ["xmin", "xmax"]

[[supports]]
region = "rim"
kind = "clamped"

[[masses]]
name = "box"
mass = "0.1 kg"
at = ["50 mm", "40 mm", "0 mm"]

[analysis]
modes = 4

[mesh]
family = "quad4"
divisions = [4, 3]
"""

# values a user (or an attacker) might put anywhere
_values = st.one_of(
    st.integers(min_value=-10**12, max_value=10**12),
    st.floats(allow_nan=True, allow_infinity=True),
    st.booleans(),
    st.text(max_size=30),
    st.sampled_from(["1e-30 mm", "1e30 mm", "0 mm", "-5 mm", "5", "5 kg", "nan mm", "inf GPa", "2 mm",
                     "0.001 mm", "quad8", "tet4", "cad", "block", "../../etc/passwd", "\u202e", "a\x00b",
                     "[[x]]", "5 Hz", "1 s"]),
    st.lists(st.integers(min_value=-5, max_value=5000), max_size=4),
)


def _toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        return {float("inf"): "inf", float("-inf"): "-inf"}.get(v, "nan" if v != v else repr(v))
    if isinstance(v, list):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    out = "".join(c if c.isprintable() and c not in '"\\' else f"\\u{ord(c):04x}" for c in v)
    return f'"{out}"'


_LINES = [i for i, ln in enumerate(BASE.splitlines()) if "=" in ln]


@st.composite
def mutated_models(draw):
    lines = BASE.splitlines()
    for _ in range(draw(st.integers(min_value=1, max_value=4))):
        i = draw(st.sampled_from(_LINES))
        if "=" not in lines[i]:  # dropped by an earlier mutation
            continue
        key = lines[i].split("=", 1)[0].strip()
        action = draw(st.sampled_from(["value", "value", "drop", "rename", "duplicate"]))
        if action == "value":
            lines[i] = f"{key} = {_toml_value(draw(_values))}"
        elif action == "drop":
            lines[i] = ""
        elif action == "rename":
            lines[i] = f"{draw(st.from_regex(r'[a-z_]{1,12}', fullmatch=True))} = {lines[i].split('=', 1)[1]}"
        else:
            lines.insert(i, lines[i])
    text = "\n".join(lines) + "\n"
    if draw(st.booleans()):  # raw byte-level damage too: truncation, junk, a BOM
        raw = text.encode()
        cut = draw(st.integers(min_value=0, max_value=len(raw)))
        junk = draw(st.binary(max_size=8))
        raw = draw(st.sampled_from([raw[:cut], raw[:cut] + junk + raw[cut:], b"\xef\xbb\xbf" + raw]))
        return raw
    return text.encode()


def test_the_base_model_checks(tmp_path):
    (tmp_path / "m.toml").write_text(BASE)
    tomllib.loads(BASE)
    res = runner.invoke(app, ["check", str(tmp_path / "m.toml")])
    assert res.exit_code == 0, res.output


@settings(max_examples=60, deadline=20000, suppress_health_check=[HealthCheck.function_scoped_fixture,
                                                                   HealthCheck.too_slow], derandomize=True)
@given(data=mutated_models())
def test_check_on_mutated_models(data, tmp_path):
    path = tmp_path / "m.toml"
    path.write_bytes(data)
    res = runner.invoke(app, ["check", str(path)])
    assert isinstance(res.exception, SystemExit) or res.exception is None, repr(res.exception)
    assert res.exit_code in DOCUMENTED, (res.exit_code, res.stderr)
    for text in (res.stdout, res.stderr):
        assert "Traceback" not in text
    if res.exit_code != 0:
        lines = [ln for ln in _ANSI.sub("", res.stderr).splitlines() if ln.strip()]
        assert len(lines) == 1 and lines[0].startswith("error: "), res.stderr
        assert "internal error" not in lines[0]
