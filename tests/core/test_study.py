"""Study machinery without a solver: variants, task keys, parallelism, mode tracking."""

from __future__ import annotations

import numpy as np
import pytest

from bridge.results import ModalResult
from bridge.study.converge import analyse, track_modes
from bridge.study.executor import Task, plan_parallelism, task_key
from bridge.study.vary import apply_variant


def test_apply_variant_merges_tables_and_replaces_the_rest():
    base = {"section": {"kind": "shell", "thickness": "2 mm"}, "supports": [{"region": "rim"}], "name": "x"}
    out = apply_variant(base, {"section": {"thickness": "3 mm"}, "supports": []})
    assert out == {"section": {"kind": "shell", "thickness": "3 mm"}, "supports": [], "name": "x"}
    assert base["section"]["thickness"] == "2 mm"  # the baseline is not touched


def _raw(plate, **kw):
    import tomllib

    return tomllib.loads(plate("quad4", (4, 4), **kw))


def test_task_key_follows_what_decides_the_result(plate, tmp_path):
    a = Task("a", _raw(plate), str(tmp_path), "calculix")
    b = Task("b", _raw(plate), str(tmp_path), "calculix")
    b.raw_model["run"] = {"threads": 2, "timeout": "10 s"}  # run settings do not change the result
    c = Task("c", _raw(plate, thickness="2.5 mm"), str(tmp_path), "calculix")
    d = Task("d", _raw(plate), str(tmp_path), "calculix", level=1)
    ka, kb, kc, kd = (task_key(t, "2.20") for t in (a, b, c, d))
    assert ka == kb and len({ka, kc, kd}) == 3
    assert task_key(a, "2.21") != ka  # another solver version is another run


@pytest.mark.parametrize("n, workers, threads, cores, expect", [
    (5, None, None, 2, (2, 1)), (1, None, None, 2, (1, 2)), (5, 1, None, 2, (1, 2)), (5, None, 2, 2, (1, 2)),
])
def test_parallelism_does_not_oversubscribe(monkeypatch, n, workers, threads, cores, expect):
    monkeypatch.setattr("os.cpu_count", lambda: cores)
    w, t = plan_parallelism(n, workers, threads)
    assert (w, t) == expect and w * t <= max(cores, t)


def _fake(freqs, shapes):
    n = shapes.shape[1]
    pts = np.column_stack([np.arange(n), np.zeros(n), np.zeros(n)]).astype(float)
    return ModalResult(frequencies=np.asarray(freqs, float), eigenvalues=(2 * np.pi * np.asarray(freqs)) ** 2,
                       points=pts, node_ids=np.arange(1, n + 1), cell_type=3, cells=np.zeros((0, 2), int),
                       shapes=shapes)


def test_a_mode_that_changes_position_is_tracked_by_shape():
    q, _ = np.linalg.qr(np.random.default_rng(0).normal(size=(30, 4)))
    s = q.T.reshape(4, 30, 1) * np.ones((1, 1, 3))
    fine = _fake([100.0, 200.0, 260.0, 400.0], s)
    # on the coarse level the 2nd and 3rd modes come in the other order (too stiff a mesh)
    coarse = _fake([115.0, 280.0, 300.0, 470.0], s[[0, 2, 1, 3]])
    mid = _fake([104.0, 210.0, 270.0, 420.0], s)
    rf, table = track_modes([coarse, mid, fine])
    assert rf == 0
    assert [row[0][0] for row in table] == [0, 2, 1, 3]  # coarse partners found by shape
    _, modes = analyse([coarse, mid, fine], [4.0, 2.0, 1.0], 0.05)
    assert modes[1].f == [300.0, 210.0, 200.0] and modes[1].index == [3, 2, 2]
    assert modes[1].gci is not None and modes[1].gci.from_above
