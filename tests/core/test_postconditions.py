"""The core's post-conditions on a plugin's RawModes: one rule for every plugin."""

from __future__ import annotations

import numpy as np
import pytest

from bridge.errors import ResultCheckError
from bridge.postconditions import enforce
from bridge.solver import RawModes, RunRecord, SolverJob
from bridge.units import SOLVER_SYSTEM


def _job(modes=3, lo=None, hi=None, n=4) -> SolverJob:
    return SolverJob(title="t", model_hash="h", units=SOLVER_SYSTEM, family="quad4", is_shell=True,
                     node_ids=np.arange(1, n + 1), points=np.zeros((n, 3)), cells=np.zeros((1, 4), int),
                     fixed=np.zeros((n, 6), bool), node_sets={}, youngs_modulus=1.0, poisson_ratio=0.3,
                     density=1.0, thickness=1.0, masses=[], modes=modes, min_frequency=lo, max_frequency=hi)


def _raw(freqs, n=4, ids=None, **kw) -> RawModes:
    f = np.asarray(freqs, float)
    rng = np.random.default_rng(0)
    return RawModes(frequencies=f, eigenvalues=(2 * np.pi * f) ** 2,
                    node_ids=np.arange(1, n + 1) if ids is None else np.asarray(ids),
                    shapes=rng.normal(size=(f.size, n, 3)), **kw)


def test_band_and_count_one_rule():
    # more than asked: the lowest kept, with a note
    out = enforce(_raw([10, 20, 30, 40]), _job(3), solver="s")
    assert out.frequencies.tolist() == [10, 20, 30] and out.shapes.shape[0] == 3
    assert any("lowest 3" in w for w in out.warnings)
    # fewer than asked without an upper bound: an error
    with pytest.raises(ResultCheckError, match="2 of the 3 modes"):
        enforce(_raw([10, 20]), _job(3), solver="s")
    # with an upper bound fewer is the band's answer
    out = enforce(_raw([10, 20, 30, 40]), _job(3, lo=15, hi=35), solver="s")
    assert out.frequencies.tolist() == [20, 30]
    with pytest.raises(ResultCheckError, match="no mode in 50–60 Hz"):
        enforce(_raw([10, 20]), _job(3, lo=50, hi=60), solver="s")


def test_order_nodes_finite_normalisation_and_warnings():
    out = enforce(_raw([30, 10, 20]), _job(3), solver="s")
    assert out.frequencies.tolist() == [10, 20, 30] and any("out of order" in w for w in out.warnings)
    with pytest.raises(ResultCheckError, match="lack 1 node"):
        enforce(_raw([1, 2, 3], n=3), _job(3), solver="s")
    with pytest.raises(ResultCheckError, match="appears twice"):
        enforce(_raw([1, 2, 3], ids=[1, 2, 2, 4]), _job(3), solver="s")
    bad = _raw([1, 2, 3])
    bad.shapes[1, 2, 0] = np.nan
    with pytest.raises(ResultCheckError, match="non-finite value in the mode shapes \\(mode 2\\)"):
        enforce(bad, _job(3), solver="s")
    with pytest.raises(ResultCheckError, match="normalised 'max'"):
        enforce(_raw([1, 2, 3], normalisation="max"), _job(3), solver="s")
    rec = RunRecord(command=["x"], returncode=0, wall_time=0.0, log_path=None, warnings=["a", "b"])
    out = enforce(_raw([1, 2, 3], warnings=["b", "c"]), _job(3), rec, solver="s")
    assert out.warnings == ["a", "b", "c"]
