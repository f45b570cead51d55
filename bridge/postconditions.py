"""What the core demands of every plugin's :class:`~bridge.solver.RawModes`: one rule for all.

:func:`enforce` runs right after ``adapter.read_results`` (bridge/pipeline.py) and returns the
modes the rest of modebridge works with, or raises :class:`~bridge.errors.ResultCheckError`
(exit 9) naming the solver and what is wrong:

* **shapes of the arrays**: ``frequencies`` and ``eigenvalues`` (m,), ``shapes`` (m, n, 3),
  ``rotations`` None or (m, n, 3), ``node_ids`` (n,) without repeats;
* **finite values** in every array;
* **order**: modes ascending by eigenvalue (a plugin's other order is sorted, with a note);
* **the requested band**: modes below ``min_frequency`` or above ``max_frequency`` are dropped
  here (a plugin may return them);
* **the mode count**: the lowest ``modes`` modes of the band are kept; without an upper bound,
  fewer than ``modes`` is an error (the solver missed some); with one, fewer means the band
  holds no more, but none at all is an error;
* **every mesh node covered**: each node of the job has a row (rows of other nodes are an error);
* **normalisation**: ``normalisation`` must be "mass" (φᵀMφ = 1 with the solver's mass
  matrix); how well that agrees with modebridge's own consistent mass is the run's
  ``mass_normalisation`` check;
* **warnings**: the run record's and the plugin's, once each, in order, plus this module's notes.

The plugin's ``solver_version`` and ``element_type`` pass through.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from .errors import ResultCheckError
from .solver import RawModes, RunRecord, SolverJob

__all__ = ["enforce", "BAND_TOLERANCE"]

#: relative slack on the band's bounds (a frequency printed to 6 digits stays in its band)
BAND_TOLERANCE = 1e-9


def _fail(solver: str, message: str) -> ResultCheckError:
    return ResultCheckError(f"solver '{solver}': {message}")


def enforce(raw: RawModes, job: SolverJob, record: RunRecord | None = None, solver: str = "") -> RawModes:
    """Check and trim a plugin's modes to the job's request; see the module's docstring."""
    solver = solver or "?"
    f = np.asarray(raw.frequencies, float).ravel()
    lam = np.asarray(raw.eigenvalues, float).ravel()
    ids = np.asarray(raw.node_ids).ravel()
    shapes = np.asarray(raw.shapes, float)
    rot = None if raw.rotations is None else np.asarray(raw.rotations, float)
    m = f.size
    if lam.size != m:
        raise _fail(solver, f"{m} frequencies but {lam.size} eigenvalues")
    if shapes.ndim != 3 or shapes.shape[0] != m or shapes.shape[2] != 3:
        raise _fail(solver, f"mode shapes of shape {shapes.shape} for {m} modes; expected ({m}, nodes, 3)")
    if shapes.shape[1] != ids.size:
        raise _fail(solver, f"mode shapes for {shapes.shape[1]} nodes but {ids.size} node ids")
    if rot is not None and rot.shape != shapes.shape:
        raise _fail(solver, f"rotations of shape {rot.shape} beside translations of shape {shapes.shape}")
    for name, arr in (("frequencies", f), ("eigenvalues", lam), ("mode shapes", shapes), ("rotations", rot)):
        if arr is not None and not np.all(np.isfinite(arr)):
            bad = np.argwhere(~np.isfinite(arr))[0]
            raise _fail(solver, f"non-finite value in the {name} (mode {int(bad[0]) + 1})")
    if raw.normalisation != "mass":
        raise _fail(solver, f"mode shapes are normalised '{raw.normalisation}'; modebridge needs them "
                            "mass-normalised (phi^T M phi = 1)")

    # every mesh node covered, no other node
    uniq, counts = np.unique(ids, return_counts=True)
    if np.any(counts > 1):
        raise _fail(solver, f"node {int(uniq[counts > 1][0])} appears twice in the mode shapes")
    want = np.asarray(job.node_ids)
    missing = np.setdiff1d(want, ids)
    if missing.size:
        raise _fail(solver, f"the mode shapes lack {missing.size} node(s) of the mesh, the first {int(missing[0])}")
    extra = np.setdiff1d(ids, want)
    if extra.size:
        raise _fail(solver, f"the mode shapes hold {extra.size} node(s) that are not in the mesh, "
                            f"the first {int(extra[0])}")

    notes: list[str] = []
    order = np.argsort(lam, kind="stable")
    if np.any(order != np.arange(m)):
        notes.append(f"{solver}: modes came back out of order; sorted by eigenvalue")

    keep = np.ones(m, bool)
    lo, hi = job.min_frequency, job.max_frequency
    if lo is not None:
        keep &= f >= lo * (1 - BAND_TOLERANCE)
    if hi is not None:
        keep &= f <= hi * (1 + BAND_TOLERANCE)
    idx = order[keep[order]]
    band = _band_text(lo, hi)
    if idx.size == 0:
        raise _fail(solver, f"no mode {band}" if band else "no mode returned")
    if hi is None and idx.size < job.modes:
        raise _fail(solver, f"returned {idx.size} of the {job.modes} modes asked for" + (f" {band}" if band else ""))
    if idx.size > job.modes:
        notes.append(f"{solver}: returned {idx.size} modes{' ' + band if band else ''}; "
                     f"the lowest {job.modes} asked for are kept")
        idx = idx[:job.modes]

    warnings: list[str] = []
    for w in list(record.warnings if record is not None else []) + list(raw.warnings) + notes:
        if w not in warnings:
            warnings.append(w)
    return replace(raw, frequencies=f[idx], eigenvalues=lam[idx], node_ids=ids, shapes=shapes[idx],
                   rotations=None if rot is None else rot[idx],
                   participation=_rows(raw.participation, m, idx), effective_mass=_rows(raw.effective_mass, m, idx),
                   warnings=warnings)


def _rows(arr, m: int, idx: np.ndarray):
    """The solver's own per-mode table, trimmed like the modes (dropped when it does not fit them)."""
    if arr is None:
        return None
    arr = np.asarray(arr)
    return arr[idx] if arr.shape[:1] == (m,) else None


def _band_text(lo: float | None, hi: float | None) -> str:
    if lo is None and hi is None:
        return ""
    if hi is None:
        return f"at or above {lo:g} Hz"
    if lo is None:
        return f"at or below {hi:g} Hz"
    return f"in {lo:g}–{hi:g} Hz"
