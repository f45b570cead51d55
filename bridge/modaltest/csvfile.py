"""modebridge's plain CSV of measured modes.

One row per sensor (a point and a direction), one column per mode, and a frequency row::

    # modebridge measured modes
    # length_unit = mm
    point,x,y,z,dx,dy,dz,mode_1,mode_2
    frequency_hz,,,,,,,131.2,244.9
    damping_ratio,,,,,,,0.012,0.008
    P01,20,20,0,0,0,1,0.113,-0.402
    P01,20,20,0,1,0,0,0.002,0.010
    P02,60,20,0,0,0,1,0.310,-0.215+0.03j

* Lines starting with ``#`` are comments; ``# length_unit = UNIT`` (any pint length unit) is
  required: coordinates without a unit are refused.
* ``point`` is any name; a point measured in several directions has one row per direction.
  ``dx, dy, dz`` is the sensor's direction (normalised on reading), in the same frame as x, y, z.
* Mode columns may have any header; values are real numbers or complex ones written as
  ``a+bj`` (complex shapes are reduced to real ones, see ``measured``).
* ``frequency_hz`` is required; ``damping_ratio`` is optional.
"""

from __future__ import annotations

import csv
import re
from pathlib import Path

import numpy as np

from .measured import MeasuredModes, Placement, TestDataError, length_factor, real_modes

__all__ = ["read_csv", "write_csv"]

_HEAD = ["point", "x", "y", "z", "dx", "dy", "dz"]
_UNIT = re.compile(r"^#\s*length_unit\s*[=:]\s*(\S+)\s*$")


def _number(text: str, where: str, complex_ok: bool = True):
    t = text.strip().replace(" ", "")
    try:
        if complex_ok and "j" in t:
            return complex(t)
        return float(t)
    except ValueError:
        raise TestDataError(f"{where}: {text!r} is not a number") from None


def read_csv(path: str | Path, placement: Placement | None = None, length_unit: str | None = None) -> MeasuredModes:
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise TestDataError(f"{path}: cannot read: {exc}") from None
    unit = length_unit
    rows = []
    for n, line in enumerate(text.splitlines(), 1):
        s = line.strip()
        if not s:
            continue
        if s.startswith("#"):
            m = _UNIT.match(s)
            if m and unit is None:
                unit = m.group(1)
            continue
        rows.append((n, line))
    if unit is None:
        raise TestDataError(f"{path}: units missing: add a line '# length_unit = mm' (or m, in, …) "
                            "or give --length-unit")
    scale = length_factor(unit, str(path))
    if not rows:
        raise TestDataError(f"{path}: the file holds no modes (no header row)")
    table = list(csv.reader([r[1] for r in rows]))
    lines = [r[0] for r in rows]
    head = [h.strip() for h in table[0]]
    if [h.lower() for h in head[:7]] != _HEAD:
        raise TestDataError(f"{path}:{lines[0]}: the header must start with {','.join(_HEAD)}; got {','.join(head[:7])}")
    names = head[7:]
    if not names:
        raise TestDataError(f"{path}: the file holds no modes (no column after dz)")
    freq = damp = None
    labels, pts, dirs, vals = [], [], [], []
    for ln, row in zip(lines[1:], table[1:]):
        where = f"{path}:{ln}"
        if len(row) != len(head):
            raise TestDataError(f"{where}: {len(row)} fields, the header has {len(head)}")
        key = row[0].strip()
        if key.lower() in ("frequency_hz", "damping_ratio"):
            v = np.array([_number(x, where, complex_ok=False) for x in row[7:]], float)
            if key.lower() == "frequency_hz":
                freq = v
            else:
                damp = v
            continue
        if not key:
            raise TestDataError(f"{where}: a sensor row needs a point name in the first column")
        labels.append(key)
        pts.append([_number(x, where, complex_ok=False) for x in row[1:4]])
        d = np.array([_number(x, where, complex_ok=False) for x in row[4:7]], float)
        nd = np.linalg.norm(d)
        if not np.isfinite(nd) or nd == 0:
            raise TestDataError(f"{where}: point {key}: the direction (dx, dy, dz) is zero")
        dirs.append(d / nd)
        vals.append([_number(x, where) for x in row[7:]])
    if freq is None:
        raise TestDataError(f"{path}: the file has no 'frequency_hz' row")
    if not labels:
        raise TestDataError(f"{path}: the file holds no measured point")
    placement = placement or Placement()
    shapes = np.array(vals, dtype=complex).T  # (k, s)
    notes = []
    mpc = None
    if np.any(shapes.imag != 0):
        real, mpc = real_modes(shapes)
        notes.append("complex shapes reduced to real along each mode's principal axis in the complex plane "
                     "(MPC per mode, Pappa, Elliott and Schenk 1993)")
    else:
        real = shapes.real.copy()
    out = MeasuredModes(points=placement.point(np.array(pts, float) * scale),
                        directions=placement.direction(np.array(dirs)), point_labels=labels,
                        frequencies=freq, shapes=real, damping=damp, mpc=mpc, source=str(path),
                        length_unit=unit, placement=placement, notes=notes)
    return out.check()


def write_csv(m: MeasuredModes, path: str | Path, length_unit: str | None = None, comment: str = "") -> Path:
    """Write ``m`` in its own test frame and length unit (or ``length_unit``)."""
    from ..io import atomic_path

    unit = length_unit or m.length_unit
    scale = length_factor(unit, str(path))
    R, o = m.placement.rotation, m.placement.origin
    pts = (m.points - o) @ R / scale
    dirs = m.directions_in_file()
    path = Path(path)
    with atomic_path(path) as tmp:
        with open(tmp, "w", newline="", encoding="utf-8") as fh:
            fh.write("# modebridge measured modes\n")
            for c in comment.splitlines():
                fh.write(f"# {c}\n")
            fh.write(f"# length_unit = {unit}\n")
            w = csv.writer(fh)
            w.writerow(_HEAD + [f"mode_{i + 1}" for i in range(m.n_modes)])
            w.writerow(["frequency_hz"] + [""] * 6 + [repr(float(f)) for f in m.frequencies])
            if m.damping is not None:
                w.writerow(["damping_ratio"] + [""] * 6 + [repr(float(f)) for f in m.damping])
            for s in range(m.n_sensors):
                w.writerow([m.point_labels[s]] + [repr(float(v)) for v in pts[s]] + [repr(float(v)) for v in dirs[s]]
                           + [repr(float(v)) for v in m.shapes[:, s]])
    return path
