"""Measured modes in one neutral form, their placement in the part's frame, and the reduction
of complex mode shapes to real ones.

A *sensor* is one measured degree of freedom: a point and a unit direction. A measured set
holds, per sensor, the point's label, its coordinates and the direction, both in the part's
(the model's) frame in metres, and per mode a frequency and one real value per sensor.

Complex shapes are reduced to real ones by a rotation in the complex plane: each mode's
values are taken as points (Re, Im); the principal axis of that cloud (the eigenvector of
the 2 × 2 matrix [[ΣRe², ΣReIm], [ΣReIm, ΣIm²]] with the larger eigenvalue) is the best-fit
line through the origin, and the real shape is each value's component along it. How well
one line fits is the Modal Phase Collinearity, MPC = ((λ₁ − λ₂)/(λ₁ + λ₂))² (Pappa, Elliott
and Schenk, J. Guidance Control Dyn. 16(5), 1993, in its eigenvalue form): 1 for a normal
(monophase) mode, 0 for a mode whose values point every way.
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import BridgeError, ExitCode

__all__ = ["MeasuredModes", "Placement", "TestDataError", "real_modes", "mpc", "MPC_WARN",
           "direction_label", "length_factor"]

#: below this MPC a complex mode is far from a normal mode and its real reduction is doubtful
#: (common practice, no source)
MPC_WARN = 0.9


class TestDataError(BridgeError):
    """A measured-modes file (or a test plan's input) is unreadable or unusable."""

    __test__ = False  # not a pytest class
    exit_code = ExitCode.TEST_DATA


def length_factor(unit: str, where: str) -> float:
    """Metres per ``unit`` (e.g. "mm" → 0.001), or a one-line error naming ``where``."""
    from ..units import parse_quantity

    try:
        return parse_quantity(f"1 {unit.strip()}", "length")
    except ValueError as exc:
        raise TestDataError(f"{where}: length unit {unit!r} not understood ({exc}); e.g. \"mm\" or \"m\"") from None


def mpc(shape: np.ndarray) -> float:
    """Modal Phase Collinearity of one complex shape (Pappa, Elliott and Schenk 1993, eigenvalue form)."""
    z = np.asarray(shape, complex).ravel()
    lam, _ = _principal(z)
    s = lam[0] + lam[1]
    return float(((lam[1] - lam[0]) / s) ** 2) if s > 0 else 0.0


def _principal(z: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    x, y = z.real, z.imag
    S = np.array([[x @ x, x @ y], [x @ y, y @ y]])
    lam, vec = np.linalg.eigh(S)  # ascending
    return lam, vec[:, 1]


def real_modes(shapes: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Real shapes (k, s) and MPC (k,) of complex shapes (k, s): each mode's component along the
    principal axis of its values in the complex plane, signed so that its largest entry is positive."""
    z = np.asarray(shapes, complex)
    out = np.empty(z.shape, float)
    m = np.empty(z.shape[0])
    for i, zi in enumerate(z):
        lam, v = _principal(zi)
        r = zi.real * v[0] + zi.imag * v[1]
        k = int(np.argmax(np.abs(r))) if r.size else 0
        out[i] = -r if r.size and r[k] < 0 else r
        s = lam[0] + lam[1]
        m[i] = ((lam[1] - lam[0]) / s) ** 2 if s > 0 else 0.0
    return out, m


_AXES = {(1, 0, 0): "+x", (-1, 0, 0): "-x", (0, 1, 0): "+y", (0, -1, 0): "-y", (0, 0, 1): "+z", (0, 0, -1): "-z"}


def direction_label(d: np.ndarray) -> str:
    """"+z" for an axis, else the vector rounded to 3 decimals."""
    r = tuple(int(v) for v in np.round(d)) if np.allclose(d, np.round(d), atol=1e-9) else None
    if r in _AXES:
        return _AXES[r]
    return "(" + ", ".join(f"{v:.3f}" for v in d) + ")"


@dataclass
class Placement:
    """Where the test frame sits in the part's frame: p_part = origin + R · (scale · p_test),
    d_part = R · d_test. R's columns are the test frame's x, y, z axes written in the part's frame."""

    rotation: np.ndarray = field(default_factory=lambda: np.eye(3))  #: (3, 3), orthonormal
    origin: np.ndarray = field(default_factory=lambda: np.zeros(3))  #: m, in the part's frame
    source: str = ""  #: where it was read from

    def point(self, p_m: np.ndarray) -> np.ndarray:
        return self.origin + np.asarray(p_m, float) @ self.rotation.T

    def direction(self, d: np.ndarray) -> np.ndarray:
        return np.asarray(d, float) @ self.rotation.T

    @property
    def is_identity(self) -> bool:
        return bool(np.allclose(self.rotation, np.eye(3)) and not np.any(self.origin))

    def describe(self) -> str:
        if self.is_identity:
            return "test frame = part frame"
        ax = ", ".join(f"{n}→({', '.join(f'{v:.4g}' for v in self.rotation[:, i])})" for i, n in enumerate("xyz"))
        o = ", ".join(f"{v * 1e3:.4g}" for v in self.origin)
        return f"p_part = origin + R·p_test with origin ({o}) mm and test axes {ax}" + (
            f" (from {self.source})" if self.source else "")

    @classmethod
    def from_toml(cls, path: str | Path) -> "Placement":
        """A placement file::

            origin = ["120 mm", "80 mm", "0 mm"]   # the test frame's origin in the part's frame
            x_axis = [0, 1, 0]                     # the test frame's x axis in the part's frame
            y_axis = [-1, 0, 0]                    # its y axis (z = x × y)
        """
        from ..units import parse_quantity

        path = Path(path)
        try:
            data = tomllib.loads(path.read_text(encoding="utf-8"))
        except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
            raise TestDataError(f"{path}: cannot read the placement file: {exc}") from None
        unknown = set(data) - {"origin", "x_axis", "y_axis"}
        if unknown:
            raise TestDataError(f"{path}: unknown key(s) {sorted(unknown)}; accepted: origin, x_axis, y_axis")
        origin = np.zeros(3)
        if "origin" in data:
            o = data["origin"]
            if not isinstance(o, list) or len(o) != 3:
                raise TestDataError(f"{path}: origin: give three lengths with units, e.g. [\"0 mm\", \"0 mm\", \"0 mm\"]")
            try:
                origin = np.array([parse_quantity(v, "length") for v in o])
            except ValueError as exc:
                raise TestDataError(f"{path}: origin: {exc}") from None
        axes = []
        for key, default in (("x_axis", [1, 0, 0]), ("y_axis", [0, 1, 0])):
            v = data.get(key, default)
            if (not isinstance(v, list) or len(v) != 3
                    or not all(isinstance(c, (int, float)) and not isinstance(c, bool) for c in v)):
                raise TestDataError(f"{path}: {key}: give three numbers (a direction), e.g. [1, 0, 0]")
            v = np.array(v, float)
            n = np.linalg.norm(v)
            if not np.isfinite(n) or n == 0:
                raise TestDataError(f"{path}: {key}: a zero or non-finite vector")
            axes.append(v / n)
        x, y = axes
        if abs(x @ y) > 1e-6:
            raise TestDataError(f"{path}: x_axis and y_axis are not perpendicular (cos = {x @ y:.3g})")
        R = np.column_stack([x, y, np.cross(x, y)])
        return cls(R, origin, str(path))


@dataclass
class MeasuredModes:
    """Measured (or test-planned) modes at sensors, in the part's frame, SI."""

    points: np.ndarray  #: (s, 3) m, each sensor's point, in the part's frame
    directions: np.ndarray  #: (s, 3) unit vectors in the part's frame
    point_labels: list[str]  #: (s,) the point's name in the file (node number or id)
    frequencies: np.ndarray  #: (k,) Hz
    shapes: np.ndarray  #: (k, s) real values along each sensor direction (any scale)
    damping: np.ndarray | None = None  #: (k,) viscous damping ratio, when given
    mpc: np.ndarray | None = None  #: (k,) MPC of complex shapes before reduction (None: real input)
    source: str = ""  #: file
    length_unit: str = "m"  #: the file's length unit
    placement: Placement = field(default_factory=Placement)
    notes: list[str] = field(default_factory=list)  #: what was done on reading (reductions, skipped data)

    @property
    def n_sensors(self) -> int:
        return int(self.points.shape[0])

    @property
    def n_modes(self) -> int:
        return int(self.frequencies.size)

    def sensor_labels(self) -> list[str]:
        return [f"{p}{direction_label(d)}" for p, d in zip(self.point_labels, self.directions_in_file())]

    def directions_in_file(self) -> np.ndarray:
        """Sensor directions in the test frame (as the file gave them)."""
        return self.directions @ self.placement.rotation

    def check(self) -> "MeasuredModes":
        """Refuse a set that cannot be correlated, with one line naming the file."""
        src = self.source or "measured set"
        if self.n_modes == 0:
            raise TestDataError(f"{src}: the file holds no modes (no mode shapes at nodes)")
        if self.n_sensors == 0:
            raise TestDataError(f"{src}: the file holds no measured point")
        if self.shapes.shape != (self.n_modes, self.n_sensors):
            raise TestDataError(f"{src}: {self.shapes.shape[0]} shapes of {self.shapes.shape[1]} values for "
                                f"{self.n_modes} modes at {self.n_sensors} sensors")
        if not (np.all(np.isfinite(self.frequencies)) and np.all(self.frequencies > 0)):
            raise TestDataError(f"{src}: every mode needs a positive frequency; got {self.frequencies.tolist()}")
        if not np.all(np.isfinite(self.shapes)):
            raise TestDataError(f"{src}: a mode shape holds a value that is not a finite number")
        n = np.linalg.norm(self.directions, axis=1)
        if np.any(np.abs(n - 1) > 1e-6):
            bad = int(np.argmax(np.abs(n - 1)))
            raise TestDataError(f"{src}: sensor {self.point_labels[bad]}: its direction is not a unit vector")
        return self
