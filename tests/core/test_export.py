"""Exports of a neutral result (no solver): VTU, XDMF + HDF5 and CSV read back by pyvista and
meshio, array by array."""

from __future__ import annotations

import csv
import json

import numpy as np
import pytest
from typer.testing import CliRunner

from bridge.errors import BridgeError
from bridge.export import CSV_COLUMNS, ExportError, export_result, write_csv, write_vtu, write_xdmf
from bridge.results import ModalResult, save_result


def _result(rotations: bool = False, seed: int = 0, quadratic: bool = False, masses: bool = True) -> ModalResult:
    """A 2 × 2 plate of quad4 (or one quad8) with random shapes; two near-zero leading modes."""
    rng = np.random.default_rng(seed)
    if quadratic:
        pts = np.array([[0, 0, 0], [2, 0, 0], [2, 2, 0], [0, 2, 0], [1, 0, 0], [2, 1, 0], [1, 2, 0], [0, 1, 0]],
                       float) * 0.05
        cells, ctype = np.arange(8)[None, :], 23
    else:
        pts = np.column_stack([np.repeat(np.arange(3), 3), np.tile(np.arange(3), 3), np.zeros(9)]) * 0.05
        cells, ctype = np.array([[0, 1, 4, 3], [1, 2, 5, 4], [3, 4, 7, 6], [4, 5, 8, 7]]), 9
    n, m = pts.shape[0], 5
    freqs = np.array([0.0, 1e-4, 120.5, 301.25, 777.125])
    return ModalResult(
        frequencies=freqs, eigenvalues=(2 * np.pi * freqs) ** 2, points=pts, node_ids=np.arange(1, n + 1),
        cell_type=ctype, cells=cells, shapes=rng.normal(size=(m, n, 3)),
        rotations=rng.normal(size=(m, n, 3)) if rotations else None,
        participation=rng.normal(size=(m, 6)) if masses else None,
        effective_mass=rng.random((m, 6)) * 0.01 if masses else None,
        total_effective_mass=rng.random(6) if masses else None, total_mass=0.157,
        metadata={"provenance": {"solver": "hand-made", "model_hash": "ab"}, "checks": []})


@pytest.mark.parametrize("quadratic", [False, True])
@pytest.mark.parametrize("rotations", [False, True])
def test_vtu_round_trip_with_pyvista_and_meshio(tmp_path, rotations, quadratic):
    import meshio
    import pyvista as pv

    r = _result(rotations, quadratic=quadratic)
    written = write_vtu(r, tmp_path / "modes.vtu")
    assert [p.name for p in written] == ["modes.vtu", "modes.vtu.json"]
    grid = pv.read(tmp_path / "modes.vtu")
    assert grid.n_points == r.points.shape[0] and grid.n_cells == r.cells.shape[0]
    assert set(np.asarray(grid.celltypes)) == {r.cell_type}
    np.testing.assert_array_equal(np.asarray(grid.points), r.points)
    np.testing.assert_array_equal(grid.cell_connectivity.reshape(r.cells.shape), r.cells)  # VTK node order kept
    for i in range(r.n_modes):
        np.testing.assert_array_equal(grid.point_data[f"mode_{i + 1:03d}"], r.shapes[i])  # float64, bit for bit
        if rotations:
            np.testing.assert_array_equal(grid.point_data[f"rotation_{i + 1:03d}"], r.rotations[i])
    assert ("rotation_001" in grid.point_data) == rotations
    # VTK's writer keeps field data (meshio's VTU writer would drop it): the frequencies travel along
    np.testing.assert_array_equal(np.asarray(grid.field_data["frequency_hz"]), r.frequencies)
    np.testing.assert_array_equal(np.asarray(grid.field_data["eigenvalue_rad2_s2"]), r.eigenvalues)
    back = meshio.read(tmp_path / "modes.vtu")
    np.testing.assert_array_equal(back.point_data["mode_003"], r.shapes[2])
    np.testing.assert_array_equal(np.asarray(back.field_data["frequency_hz"]).ravel(), r.frequencies)
    side = json.loads((tmp_path / "modes.vtu.json").read_text())
    assert side["frequencies_hz"] == r.frequencies.tolist()
    assert side["point_arrays"]["translations"][0] == "mode_001" and side["units"]["length"] == "m"


@pytest.mark.parametrize("rotations", [False, True])
def test_xdmf_round_trip_with_meshio(tmp_path, rotations):
    import meshio

    r = _result(rotations, quadratic=True)
    written = write_xdmf(r, tmp_path / "out" / "modes.xdmf")
    assert [p.name for p in written] == ["modes.xdmf", "modes.h5", "modes.xdmf.json"]
    text = (tmp_path / "out" / "modes.xdmf").read_text()
    assert "modes.h5:" in text  # the heavy data is referred to by its final name, not a temporary one
    back = meshio.read(tmp_path / "out" / "modes.xdmf")
    np.testing.assert_array_equal(back.points, r.points)
    assert back.cells[0].type == "quad8"
    np.testing.assert_array_equal(back.cells[0].data, r.cells)
    for i in range(r.n_modes):
        np.testing.assert_array_equal(back.point_data[f"mode_{i + 1:03d}"], r.shapes[i])
    assert ("rotation_001" in back.point_data) == rotations
    # XDMF through meshio carries no field data: the frequencies are in the sidecar
    side = json.loads((tmp_path / "out" / "modes.xdmf.json").read_text())
    assert side["frequencies_hz"] == r.frequencies.tolist()
    assert side["files"] == ["modes.xdmf", "modes.h5"]
    assert sorted(p.name for p in (tmp_path / "out").iterdir()) == ["modes.h5", "modes.xdmf", "modes.xdmf.json"]


def test_csv_columns_and_values(tmp_path):
    r = _result()
    write_csv(r, tmp_path / "modes.csv")
    with open(tmp_path / "modes.csv", newline="") as fh:
        rows = list(csv.reader(fh))
    assert rows[0] == CSV_COLUMNS
    assert rows[0][:4] == ["mode", "frequency_hz", "eigenvalue_rad2_s2", "rigid_body"]
    body = rows[1:]
    assert [int(x[0]) for x in body] == [1, 2, 3, 4, 5]
    col = {name: j for j, name in enumerate(CSV_COLUMNS)}
    freqs = np.array([float(x[col["frequency_hz"]]) for x in body])
    np.testing.assert_array_equal(freqs, r.frequencies)  # written with repr: exact
    # the two leading near-zero modes (|λ| < 1e-2 (rad/s)², bridge.checks) are flagged rigid
    assert [x[col["rigid_body"]] for x in body] == ["1", "1", "0", "0", "0"]
    em = np.array([[float(x[col[f"m_eff_{d}_kg"]]) for d in "xyz"] for x in body])
    np.testing.assert_array_equal(em, r.effective_mass[:, :3])
    rot = np.array([[float(x[col[f"m_eff_{d}_kgm2"]]) for d in ("rx", "ry", "rz")] for x in body])
    np.testing.assert_array_equal(rot, r.effective_mass[:, 3:])
    frac = np.array([[float(x[col[f"fraction_{d}"]]) for d in "xyz"] for x in body])
    np.testing.assert_allclose(frac, r.effective_mass[:, :3] / r.total_mass, rtol=1e-15)
    cum = np.array([[float(x[col[f"cumulative_{d}"]]) for d in "xyz"] for x in body])
    np.testing.assert_allclose(cum, np.cumsum(frac, axis=0), rtol=1e-12)


def test_csv_without_effective_masses_leaves_those_cells_empty(tmp_path):
    r = _result(masses=False)
    write_csv(r, tmp_path / "modes.csv")
    rows = list(csv.DictReader(open(tmp_path / "modes.csv", newline="")))
    assert len(rows) == r.n_modes
    assert all(row["m_eff_z_kg"] == "" and row["cumulative_z"] == "" for row in rows)
    assert float(rows[2]["frequency_hz"]) == r.frequencies[2]


def test_export_from_a_result_file_and_default_names(tmp_path):
    r = _result()
    save_result(r, tmp_path / "calculix" / "result.vtkhdf")
    files = export_result(tmp_path / "calculix", "csv")
    assert files == [tmp_path / "calculix" / "modes.csv"]
    files = export_result(tmp_path / "calculix" / "result.vtkhdf", "vtu")
    assert files[0] == tmp_path / "calculix" / "modes.vtu"
    files = export_result(tmp_path / "calculix", "xdmf")
    assert files[0].name == "modes.xdmf"
    # no temporary file or folder left behind
    assert not [p for p in (tmp_path / "calculix").iterdir() if p.name.startswith(".")]


def test_refusals_are_bridge_errors(tmp_path):
    r = _result()
    with pytest.raises(ExportError, match="unknown export format 'obj'; accepted: vtu, xdmf, csv"):
        export_result(r, "obj", tmp_path / "x.obj")
    with pytest.raises(ExportError, match="ends in .xdmf"):
        export_result(r, "xdmf", tmp_path / "x.h5")
    bad = _result()
    bad.cell_type = 42
    with pytest.raises(ExportError, match="VTK type 42"):
        export_result(bad, "vtu", tmp_path / "x.vtu")
    with pytest.raises(ExportError, match="give the output path"):
        export_result(r, "csv")
    assert issubclass(ExportError, BridgeError)
    assert not list(tmp_path.iterdir())  # nothing half-written


def test_cli_export(tmp_path):
    from bridge.cli import app

    save_result(_result(), tmp_path / "r" / "result.vtkhdf")
    runner = CliRunner()
    res = runner.invoke(app, ["export", str(tmp_path / "r"), "--format", "csv", "--out", str(tmp_path / "t.csv")])
    assert res.exit_code == 0, res.output
    assert (tmp_path / "t.csv").read_text().splitlines()[0] == ",".join(CSV_COLUMNS)
    res = runner.invoke(app, ["export", str(tmp_path / "missing"), "--format", "vtu"])
    assert res.exit_code == 8  # ResultFileError: result unreadable
    res = runner.invoke(app, ["export", str(tmp_path / "r"), "--format", "stl"])
    assert res.exit_code == 2  # a bad command-line argument
