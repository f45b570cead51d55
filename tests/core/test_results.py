"""The neutral result file: exact round trip, ParaView/VTK readability, completeness."""

from __future__ import annotations

import h5py
import numpy as np
import pytest

from bridge.errors import ResultFileError
from bridge.results import ModalResult, load_result, save_result


def _result(rotations=True, seed=0):
    rng = np.random.default_rng(seed)
    n, m = 9, 4
    pts = np.column_stack([np.repeat(np.arange(3), 3), np.tile(np.arange(3), 3), np.zeros(9)]) * 0.1
    cells = np.array([[0, 1, 4, 3], [1, 2, 5, 4], [3, 4, 7, 6], [4, 5, 8, 7]])
    return ModalResult(
        frequencies=np.sort(rng.random(m)) * 1e3, eigenvalues=rng.random(m) * 1e7, points=pts,
        node_ids=np.arange(1, n + 1), cell_type=9, cells=cells, shapes=rng.normal(size=(m, n, 3)),
        rotations=rng.normal(size=(m, n, 3)) if rotations else None,
        participation=rng.normal(size=(m, 6)), effective_mass=rng.random((m, 6)),
        total_effective_mass=rng.random(6), total_mass=0.157,
        metadata={"provenance": {"solver": "x", "model_hash": "ab"}, "checks": []})


@pytest.mark.parametrize("rotations", [True, False])
def test_round_trip_is_exact(tmp_path, rotations):
    r = _result(rotations)
    save_result(r, tmp_path / "result.vtkhdf")
    back = load_result(tmp_path / "result.vtkhdf")
    for name in ("frequencies", "eigenvalues", "points", "node_ids", "cells", "shapes",
                 "participation", "effective_mass", "total_effective_mass"):
        np.testing.assert_array_equal(getattr(back, name), getattr(r, name))  # bit for bit
    if rotations:
        np.testing.assert_array_equal(back.rotations, r.rotations)
    else:
        assert back.rotations is None
    assert back.total_mass == r.total_mass and back.cell_type == 9
    assert back.metadata == r.metadata


def test_vtk_opens_it_with_one_array_per_mode(tmp_path):
    import pyvista as pv

    r = _result(False)
    save_result(r, tmp_path / "result.vtkhdf")
    grid = pv.read(tmp_path / "result.vtkhdf")
    assert grid.n_points == 9 and grid.n_cells == 4
    for i in range(4):
        np.testing.assert_array_equal(grid.point_data[f"mode_{i + 1:03d}"], r.shapes[i])
    np.testing.assert_array_equal(np.asarray(grid.field_data["frequency_hz"]), r.frequencies)


def test_a_truncated_or_foreign_file_is_refused(tmp_path):
    save_result(_result(), tmp_path / "good.vtkhdf")
    data = (tmp_path / "good.vtkhdf").read_bytes()
    (tmp_path / "cut.vtkhdf").write_bytes(data[: len(data) // 2])
    with pytest.raises(ResultFileError):
        load_result(tmp_path / "cut.vtkhdf")
    with h5py.File(tmp_path / "other.h5", "w") as f:
        f.create_group("modebridge").attrs["format"] = "something else"
    with pytest.raises(ResultFileError, match="not a modebridge result"):
        load_result(tmp_path / "other.h5")
    with pytest.raises(ResultFileError, match="no such"):
        load_result(tmp_path / "missing.vtkhdf")


def test_failed_write_leaves_the_old_file(tmp_path, monkeypatch):
    path = tmp_path / "result.vtkhdf"
    save_result(_result(seed=1), path)
    before = path.read_bytes()
    bad = _result(seed=2)
    bad.shapes = bad.shapes[:2]  # fewer shapes than modes: the writer fails half-way
    with pytest.raises(IndexError):
        save_result(bad, path)
    assert path.read_bytes() == before
    assert [p.name for p in tmp_path.iterdir()] == ["result.vtkhdf"]  # no temporary left behind
