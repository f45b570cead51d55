"""Units: every dimensional value in a model is a string such as ``"2 mm"``.

Values are parsed with pint and stored in SI base units (m, kg, s, Pa, Hz).
Solvers receive them converted into one consistent system, :data:`SOLVER_SYSTEM`
(mm, t, s, N, MPa), which keeps the stiffness and mass matrices well scaled for
typical mechanical parts.

Start-up cost: importing pint and building its registry takes about 0.8 s (pint's
compatibility layer also imports dask when it is installed). Most models spell their
values in a handful of SI units, so a plain number followed by a product/quotient of
the units in :data:`_FAST_UNITS` (``"210 GPa"``, ``"7850 kg/m^3"``, ``"12 kg*mm^2"``) is
converted from that table directly; anything else (``"1 inch"``, ``"2*3 mm"``, a wrong
dimension, an error message to word) goes to pint, imported on first need without dask
and with its registry built once per process. ``tests/core/test_units_fast.py`` checks that
both paths agree.
"""

from __future__ import annotations

import re
import sys
from dataclasses import dataclass
from functools import lru_cache

__all__ = ["QuantityError", "DIMENSIONS", "parse_quantity", "UnitSystem", "SOLVER_SYSTEM", "SI"]

#: Accepted physical dimensions: name -> (pint dimensionality string, SI unit, example)
DIMENSIONS: dict[str, tuple[str, str, str]] = {
    "length": ("[length]", "m", "2 mm"),
    "mass": ("[mass]", "kg", "0.2 kg"),
    "pressure": ("[mass] / [length] / [time] ** 2", "Pa", "210 GPa"),
    "density": ("[mass] / [length] ** 3", "kg/m^3", "7850 kg/m^3"),
    "inertia": ("[mass] * [length] ** 2", "kg*m^2", "12 kg*mm^2"),
    "frequency": ("1 / [time]", "Hz", "500 Hz"),
    "time": ("[time]", "s", "600 s"),
}

#: exponents of (length, mass, time) of each dimension, for the fast path
_DIM_VECTOR: dict[str, tuple[int, int, int]] = {
    "length": (1, 0, 0), "mass": (0, 1, 0), "pressure": (-1, 1, -2), "density": (-3, 1, 0),
    "inertia": (2, 1, 0), "frequency": (0, 0, -1), "time": (0, 0, 1),
}

#: unit name -> (factor to SI, (length, mass, time) exponents); the names and factors are pint's
#: (pint 0.25 default registry: t = tonne = metric_ton = 1000 kg, min = minute, h = hour)
_FAST_UNITS: dict[str, tuple[float, tuple[int, int, int]]] = {
    "m": (1.0, (1, 0, 0)), "km": (1e3, (1, 0, 0)), "cm": (1e-2, (1, 0, 0)), "mm": (1e-3, (1, 0, 0)),
    "um": (1e-6, (1, 0, 0)), "µm": (1e-6, (1, 0, 0)), "nm": (1e-9, (1, 0, 0)),
    "kg": (1.0, (0, 1, 0)), "g": (1e-3, (0, 1, 0)), "mg": (1e-6, (0, 1, 0)),
    "t": (1e3, (0, 1, 0)), "tonne": (1e3, (0, 1, 0)),
    "s": (1.0, (0, 0, 1)), "ms": (1e-3, (0, 0, 1)), "us": (1e-6, (0, 0, 1)),
    "min": (60.0, (0, 0, 1)), "h": (3600.0, (0, 0, 1)),
    "Hz": (1.0, (0, 0, -1)), "kHz": (1e3, (0, 0, -1)), "MHz": (1e6, (0, 0, -1)), "mHz": (1e-3, (0, 0, -1)),
    "N": (1.0, (1, 1, -2)), "kN": (1e3, (1, 1, -2)), "mN": (1e-3, (1, 1, -2)), "MN": (1e6, (1, 1, -2)),
    "Pa": (1.0, (-1, 1, -2)), "kPa": (1e3, (-1, 1, -2)), "MPa": (1e6, (-1, 1, -2)),
    "GPa": (1e9, (-1, 1, -2)),
}
_NUMBER = r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?"
_FACTOR = r"([A-Za-zµ]+)(?:(?:\^|\*\*)([+-]?\d))?"
_FAST_RE = re.compile(rf"^\s*({_NUMBER})\s*({_FACTOR}(?:\s*[*/]\s*{_FACTOR})*)\s*$")
_FACTOR_RE = re.compile(rf"([*/]?)\s*{_FACTOR}")


class QuantityError(ValueError):
    """A value without its unit, with an unknown unit, or with a unit of the wrong dimension."""


def _fast(text: str, dimension: str) -> float | None:
    """SI value of ``text`` from :data:`_FAST_UNITS`, or None when pint must decide."""
    m = _FAST_RE.match(text)
    if m is None:
        return None
    value = float(m.group(1))
    dims = [0, 0, 0]
    for op, name, power in _FACTOR_RE.findall(m.group(2)):
        unit = _FAST_UNITS.get(name)
        if unit is None:
            return None
        p = int(power) if power else 1
        if op == "/":  # pint's grammar: a/b*c is (a/b)*c, so "/" applies to the next factor only
            p = -p
        factor, dim = unit
        value *= factor**p
        for i in range(3):
            dims[i] += p * dim[i]
    if tuple(dims) != _DIM_VECTOR[dimension]:
        return None  # pint words the wrong-dimension message
    if value != value or value in (float("inf"), float("-inf")):
        return None
    return value


@lru_cache(maxsize=1)
def _registry():
    """pint's registry, built once per process; pint is imported without dask (its
    compatibility layer would import dask only to recognise dask arrays, which models never hold)."""
    blocked = "dask" not in sys.modules
    if blocked:
        sys.modules["dask"] = None  # type: ignore[assignment]  # makes `import dask` fail inside pint
    try:
        import pint
    finally:
        if blocked and sys.modules.get("dask", 0) is None:
            del sys.modules["dask"]
    return pint.UnitRegistry()


def parse_quantity(text: object, dimension: str) -> float:
    """Parse ``text`` (e.g. ``"210 GPa"``) and return its value in SI base units.

    Raises ``ValueError`` with a message a user can act on: no unit, an unknown
    unit, or the wrong dimension (naming the expected one and an example).
    """
    dim, si_unit, example = DIMENSIONS[dimension]
    if isinstance(text, bool) or not isinstance(text, (str, int, float)):
        raise QuantityError(f"expected a {dimension} as a string with its unit, e.g. \"{example}\"")
    if isinstance(text, (int, float)):
        raise QuantityError(f"the number {text!r} has no unit; write it as a string with its unit, "
                         f"e.g. \"{example}\"")
    fast = _fast(text, dimension)
    if fast is not None:
        return fast
    ureg = _registry()
    import pint  # already imported by _registry

    try:
        q = ureg.Quantity(text.strip())
    except Exception as exc:  # pint raises several kinds for garbage
        raise QuantityError(f"cannot read {text!r} as a {dimension}: {exc}; e.g. \"{example}\"") from None
    if not isinstance(q, pint.Quantity) or q.dimensionless:
        raise QuantityError(f"{text!r} has no unit; a {dimension} needs one, e.g. \"{example}\"")
    if q.dimensionality != ureg.Quantity(1, si_unit).dimensionality:
        raise QuantityError(f"{text!r} is a {q.dimensionality}, not a {dimension}; e.g. \"{example}\"")
    value = float(q.to(si_unit).magnitude)
    if value != value or value in (float("inf"), float("-inf")):
        raise QuantityError(f"{text!r} is not a finite {dimension}")
    return value


@dataclass(frozen=True)
class UnitSystem:
    """A consistent unit system, as factors from SI to the system's units."""

    name: str
    length: float  #: system length units per metre
    mass: float  #: system mass units per kilogram
    time: float = 1.0  #: system time units per second

    @property
    def force(self) -> float:
        return self.mass * self.length / self.time**2

    @property
    def pressure(self) -> float:
        return self.force / self.length**2

    @property
    def density(self) -> float:
        return self.mass / self.length**3

    @property
    def inertia(self) -> float:
        return self.mass * self.length**2


SI = UnitSystem("m-kg-s-N", 1.0, 1.0)
#: mm, tonne, s, N, MPa
SOLVER_SYSTEM = UnitSystem("mm-t-s-N", 1e3, 1e-3)
