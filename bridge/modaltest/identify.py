"""Modes identified from measured FRFs (UFF dataset 58) with sdypy-EMA.

modebridge fits no curves of its own: the poles come from sdypy-EMA's least-squares complex
frequency-domain estimator (LSCF) over a range of model orders, the stable pole nearest each
of the model's frequencies in the measured band is taken (the model only says where to look;
frequency and damping are the data's), and the modal constants from its LSFD fit. The
complex constants are reduced to real shapes as for any complex measured mode (``measured``:
principal axis, MPC).

Which points are the sensors: with one reference (one excitation point, responses roving)
they are the responses; with one response (a roving hammer) they are the references (by
Maxwell's reciprocity the modal constants have the shape at the excitation points). The
direction code of dataset 58 (±1, ±2, ±3 for x, y, z) is taken in the node's displacement
coordinate system.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .measured import MeasuredModes, Placement, TestDataError, real_modes
from .uff import _system, read_uff_sets, uff_geometry

__all__ = ["identify_from_uff", "identify"]

_FORM = {8: "receptance", 11: "mobility", 12: "accelerance"}


def identify(frf: np.ndarray, freq: np.ndarray, approx_hz: np.ndarray, form: str = "accelerance",
             order: int = 40) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(natural frequencies Hz, damping ratios, complex modal constants (n_frf, k)) from FRFs
    (n_frf, n_freq) by sdypy-EMA's LSCF + LSFD, with the stable poles nearest ``approx_hz``."""
    try:
        from sdypy import EMA
    except ImportError:  # pragma: no cover - it is a dependency
        raise TestDataError("identifying modes from FRFs needs the package sdypy-EMA (pip install sdypy-EMA)") from None
    lower, upper = float(freq[1] if freq[0] == 0 else freq[0]), float(freq[-1])
    approx = [float(f) for f in approx_hz if lower < f < upper]
    if not approx:
        raise TestDataError(f"none of the model's frequencies lies in the measured band {lower:.4g}–{upper:.4g} Hz")
    import contextlib
    import io

    import warnings

    with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(io.StringIO()), \
            warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the library's notes on clamped band edges and progress
        m = EMA.Model(frf=frf, freq=freq, lower=lower, upper=upper, pol_order_high=order, frf_form=form)
        m.get_poles(show_progress=False)
        m.select_closest_poles(approx, f_window=max(2.0, 0.05 * min(approx)))
        _, A = m.get_constants(whose_poles="own")
    return np.asarray(m.nat_freq, float), np.asarray(m.nat_xi, float), np.asarray(A)


def identify_from_uff(path: str | Path, result, placement: Placement | None = None,
                      length_unit: str | None = None, order: int = 40) -> MeasuredModes:
    from ..checks import rigid_body_count

    path = Path(path)
    sets = read_uff_sets(path)
    frfs = [s for s in sets if s.get("type") == 58 and int(s.get("func_type", 4)) == 4]
    if not frfs:
        raise TestDataError(f"{path}: --identify needs FRFs (dataset 58, function type 4); the file has none")
    unit, systems, nodes = uff_geometry(sets, path, length_unit)
    refs = {(int(s["ref_node"]), int(s["ref_dir"])) for s in frfs}
    rsps = {(int(s["rsp_node"]), int(s["rsp_dir"])) for s in frfs}
    if len(refs) == 1:
        dofs = [(int(s["rsp_node"]), int(s["rsp_dir"])) for s in frfs]
    elif len(rsps) == 1:
        dofs = [(int(s["ref_node"]), int(s["ref_dir"])) for s in frfs]
    else:
        raise TestDataError(f"{path}: FRFs with {len(refs)} references and {len(rsps)} responses; identification "
                            "takes one reference (roving responses) or one response (roving hammer)")
    freq = np.asarray(frfs[0]["x"], float)
    for s in frfs:
        if not np.array_equal(np.asarray(s["x"], float), freq):
            raise TestDataError(f"{path}: the FRFs do not share one frequency axis")
    H = np.array([np.asarray(s["data"], complex) for s in frfs])
    form = _FORM.get(int(frfs[0].get("ordinate_spec_data_type", 12)), "accelerance")
    rb = rigid_body_count(result.frequencies, result.eigenvalues)
    fn, xi, A = identify(H, freq, result.frequencies[rb:], form, order)
    labels, pts, dirs = [], [], []
    for n, d in dofs:
        if n not in nodes:
            raise TestDataError(f"{path}: FRF at node {n}, which has no coordinates (dataset 2411/15)")
        if abs(d) not in (1, 2, 3):
            raise TestDataError(f"{path}: FRF at node {n}: direction code {d} is not a translation (±1, ±2, ±3)")
        p, dcs = nodes[n]
        R, _ = _system(systems, dcs, path, n)
        labels.append(str(n))
        pts.append(p)
        dirs.append(np.sign(d) * R[:, abs(d) - 1])
    shapes, mpc = real_modes(A.T)
    order_ = np.argsort(fn)
    placement = placement or Placement()
    out = MeasuredModes(points=placement.point(np.array(pts)), directions=placement.direction(np.array(dirs)),
                        point_labels=labels, frequencies=fn[order_], shapes=shapes[order_], damping=xi[order_],
                        mpc=mpc[order_], source=str(path), length_unit=unit, placement=placement,
                        notes=[f"modes identified from {len(frfs)} FRFs ({form}) by sdypy-EMA (LSCF poles up to "
                               f"order {order}, stable poles nearest the model's frequencies, LSFD constants)",
                               "complex constants reduced to real along each mode's principal axis (MPC, Pappa, "
                               "Elliott and Schenk 1993)"])
    return out.check()
