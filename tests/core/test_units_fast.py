"""The table-driven fast path of unit parsing agrees with pint, and falls back to it."""

from __future__ import annotations

import subprocess
import sys

from pathlib import Path

import pytest

from bridge import units
from bridge.units import _FAST_UNITS, _fast, _registry, parse_quantity

ROOT = Path(__file__).resolve().parents[2]  # the worktree: `python -c` puts the cwd first on sys.path

CASES = [
    ("210 GPa", "pressure"), ("70e3 MPa", "pressure"), ("101.325 kPa", "pressure"), ("3 N/mm^2", "pressure"),
    ("7850 kg/m^3", "density"), ("7.85e-9 t/mm^3", "density"), ("2.7 g/cm^3", "density"),
    ("2.7e-6 kg/mm**3", "density"), ("2 mm", "length"), ("-0.5 m", "length"), (".5 cm", "length"),
    ("1.5mm", "length"), ("3 um", "length"), ("3 µm", "length"), ("0.2 kg", "mass"), ("150 g", "mass"),
    ("1 t", "mass"), ("12 kg*mm^2", "inertia"), ("3 t*mm^2", "inertia"), ("1 kg * m ^ 2", "inertia"),
    ("5 kHz", "frequency"), ("500 Hz", "frequency"), ("1 /s", "frequency"), ("600 s", "time"),
    ("10 min", "time"), ("2 h", "time"), ("250 ms", "time"), ("1 N*s^2/m", "mass"), ("1 kg/m/s^2", "pressure"),
    ("4 kN/m^2", "pressure"), ("1 MN/m^2*mm/mm", "pressure"),
]


@pytest.mark.parametrize("text, dim", CASES)
def test_fast_path_equals_pint(text, dim):
    # reference: pint's default registry (the SI brochure's definitions); agreement to round-off
    q = _registry().Quantity(text.strip())
    expected = float(q.to(units.DIMENSIONS[dim][1]).magnitude)
    assert parse_quantity(text, dim) == pytest.approx(expected, rel=1e-14)


def test_fast_path_takes_the_common_spellings_and_leaves_the_rest_to_pint():
    assert _fast("210 GPa", "pressure") == 210e9
    assert _fast("7850 kg/m^3", "density") == 7850.0
    # not in the table, wrong dimension, no unit, an expression: pint decides (and words the error)
    for text, dim in [("1 inch", "length"), ("2 kg", "length"), ("2", "length"), ("2*3 mm", "length"),
                      ("1 N m", "inertia"), ("inf mm", "length"), ("2 mm^x", "length")]:
        assert _fast(text, dim) is None, text


def test_every_table_unit_is_pints():
    # the factors and dimensions of the table are pint's (SI brochure prefixes and units)
    ureg = _registry()
    for name, (factor, (L, M, T)) in _FAST_UNITS.items():
        q = ureg.Quantity(1.0, name).to_base_units()
        assert float(q.magnitude) == pytest.approx(factor, rel=1e-15), name
        d = q.dimensionality
        assert (d.get("[length]", 0), d.get("[mass]", 0), d.get("[time]", 0)) == (L, M, T), name


def test_loading_a_model_imports_neither_pint_nor_dask():
    # start-up: the demo model spells its values in table units, so pint (and dask, which pint's
    # compatibility layer imports) stay out of the process
    code = ("import sys; from pathlib import Path; from bridge.model import load_model; "
            "load_model(Path('examples/cover_panel.toml')); "
            "print(sorted(m for m in ('pint', 'dask') if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True, cwd=ROOT)
    assert out.stdout.strip() == "[]"


def test_pint_fallback_does_not_import_dask():
    code = ("import sys; from bridge.units import parse_quantity; "
            "v = parse_quantity('1 inch', 'length'); "
            "print(v, 'pint' in sys.modules, 'dask' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True, cwd=ROOT)
    assert out.stdout.split() == ["0.0254", "True", "False"]  # 1 in = 25.4 mm exactly (1959 agreement)
