"""Units: every dimensional value in a model is a string such as ``"2 mm"``.

Values are parsed with pint and stored in SI base units (m, kg, s, Pa, Hz).
Solvers receive them converted into one consistent system, :data:`SOLVER_SYSTEM`
(mm, t, s, N, MPa), which keeps the stiffness and mass matrices well scaled for
typical mechanical parts.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import pint

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
    "stiffness": ("[mass] / [time] ** 2", "N/m", "150 N/mm"),
    "area": ("[length] ** 2", "m^2", "120 mm^2"),
    "second_moment": ("[length] ** 4", "m^4", "2.5e4 mm^4"),
    "rotational_stiffness": ("[mass] * [length] ** 2 / [time] ** 2", "N*m", "20 N*m/rad"),
}


class QuantityError(ValueError):
    """A value without its unit, with an unknown unit, or with a unit of the wrong dimension."""


@lru_cache(maxsize=1)
def _registry() -> pint.UnitRegistry:
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
    ureg = _registry()
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

    @property
    def stiffness(self) -> float:
        return self.force / self.length

    @property
    def rotational_stiffness(self) -> float:
        return self.force * self.length


SI = UnitSystem("m-kg-s-N", 1.0, 1.0)
#: mm, tonne, s, N, MPa
SOLVER_SYSTEM = UnitSystem("mm-t-s-N", 1e3, 1e-3)
