"""The results reader and the adapter's read step on stored real Kratos 10.4.4 outputs (no Kratos
needed). Fixtures: fixtures/kratos/*/ (see its README.md and generate.py)."""

from __future__ import annotations

import math
import shutil
from pathlib import Path

import numpy as np
import pytest

from bridge.errors import ResultCheckError, ResultParseError
from bridge.model import load_model
from bridge.pipeline import make_job, prepare
from bridge.postconditions import enforce
from bridge.solver import RunRecord
from modebridge_kratos.adapter import KratosAdapter
from modebridge_kratos.parser import read_results

FIXTURES = Path(__file__).resolve().parents[3] / "fixtures" / "kratos"
PLATE = FIXTURES / "plate_quad4_4x4_clamped" / "modes.npz"
BLOCK = FIXTURES / "block_tet10_free" / "modes.npz"

# the steel plate of the fixtures: thin-plate CCCC f per unit λ² = 49.821 Hz (Leissa, NASA SP-160 (1969), thin-plate formula, from memory)
F_PER_LAMBDA2 = 49.821


def _mdpa_nodes(path: Path) -> np.ndarray:
    lines = path.read_text().splitlines()
    i, j = lines.index("Begin Nodes"), lines.index("End Nodes")
    return np.array([[float(v) for v in ln.split()[1:]] for ln in lines[i + 1:j]])


def _record(tmp_path):
    return RunRecord(command=["python", "run_case.py"], returncode=0, wall_time=1.0,
                     log_path=tmp_path / "kratos.log")


def _plate_job(write_model, plate, modes=4, **analysis):
    text = plate("quad4", (4, 4), "clamped", modes=modes)
    for k, v in analysis.items():
        text = text.replace("[analysis]", f'[analysis]\n{k} = "{v}"')
    path = write_model(text)
    return make_job(prepare(load_model(path), path))


def _doctored(tmp_path, source=PLATE, **changes):
    with np.load(source) as data:
        arrays = {k: data[k] for k in data.files}
    for k, v in changes.items():
        if v is None:
            arrays.pop(k)
        else:
            arrays[k] = v
    folder = tmp_path / "case"
    folder.mkdir(exist_ok=True)
    with open(folder / "modes.npz", "wb") as fh:
        np.savez(fh, **arrays)
    return folder


# --------------------------------------------------------------------------------------------
# the reader
# --------------------------------------------------------------------------------------------

def test_plate_fixture():
    r = read_results(PLATE)
    assert r.translations.shape == (4, 25, 3) and r.rotations.shape == (4, 25, 3)
    assert r.node_ids.tolist() == list(range(1, 26))
    assert r.element_type == "ShellThinElementCorotational3D4N" and r.kratos_version.startswith("10.4")
    np.testing.assert_allclose(r.frequencies, np.sqrt(r.eigenvalues) / (2 * math.pi), rtol=1e-12)
    # 4 × 4 linear shells land a few per cent above CCCC λ² = 35.99 (Leissa 1969, from memory):
    # within 5 % (common practice, no source; measured +3.1 %)
    assert r.frequencies[0] == pytest.approx(35.99 * F_PER_LAMBDA2, rel=0.05)
    # the repeated pair of a square plate (symmetry, common practice, no source)
    assert r.frequencies[2] == pytest.approx(r.frequencies[1], rel=1e-6)
    # run_case.py's own checks: Spectra returned M-normalised vectors, Rayleigh quotient = λ
    np.testing.assert_allclose(r.kratos_modal_mass, 1.0, rtol=1e-9)
    np.testing.assert_allclose(r.rayleigh_quotient, r.eigenvalues, rtol=1e-9)
    # edge nodes are clamped: nothing moves there, and the interior moves
    xy = _mdpa_nodes(PLATE.parent / "model.mdpa")[:, :2]
    edge = np.any(np.isclose(xy, 0.0) | np.isclose(xy, 100.0), axis=1)
    assert edge.sum() == 16
    assert np.abs(r.translations[:, edge]).max() == 0 and np.abs(r.rotations[:, edge]).max() == 0
    assert np.all(np.abs(r.translations[:, ~edge, 2]).max(axis=1) > 0)
    assert not r.translations.flags.writeable


def test_block_fixture_has_six_rigid_modes_and_no_rotations():
    r = read_results(BLOCK)
    assert r.rotations is None and r.translations.shape == (8, 397, 3)
    # rigid-body eigenvalues are tiny against the elastic ones (the core counts them; here:
    # more than 1e6 below, common practice, no source)
    assert np.all(np.abs(r.eigenvalues[:6]) < 1e-6 * r.eigenvalues[6])
    np.testing.assert_allclose(r.rayleigh_quotient[6:], r.eigenvalues[6:], rtol=1e-9)


@pytest.mark.parametrize("cut", [0, 10, 500, -100])
def test_truncated_file_is_refused(cut, tmp_path):
    data = PLATE.read_bytes()
    p = tmp_path / "modes.npz"
    p.write_bytes(data[:cut] if cut >= 0 else data[:len(data) + cut])
    with pytest.raises(ResultParseError) as info:
        read_results(p)
    assert str(p) in str(info.value)


def test_missing_file_is_refused(tmp_path):
    with pytest.raises(ResultParseError, match="no results file"):
        read_results(tmp_path / "modes.npz")


def test_not_an_archive_is_refused(tmp_path):
    p = tmp_path / "modes.npz"
    p.write_text("Traceback (most recent call last):\n")
    with pytest.raises(ResultParseError, match="truncated or not an .npz"):
        read_results(p)


@pytest.mark.parametrize("changes, message", [
    ({"translations": None}, "lacks translations"),
    ({"rayleigh_quotient": None}, "lacks rayleigh_quotient"),
    ({"translations": np.zeros((4, 24, 3))}, "translations have shape"),
    ({"rotations": np.zeros((3, 25, 3))}, "rotations have shape"),
    ({"eigenvalues": np.zeros(0)}, "no eigenvalue"),
    ({"node_ids": np.arange(25.0)}, "not a list of integers"),
    ({"node_ids": np.ones(25, dtype=np.int64)}, "repeat"),
    ({"kratos_modal_mass": np.ones(3)}, "one value per mode"),
    ({"eigenvalues": np.array([1.0, np.nan, 2.0, 3.0])}, "NaN"),
])
def test_malformed_contents_are_refused(changes, message, tmp_path):
    folder = _doctored(tmp_path, **changes)
    with pytest.raises(ResultParseError, match=message):
        read_results(folder / "modes.npz")


# --------------------------------------------------------------------------------------------
# the adapter's read step
# --------------------------------------------------------------------------------------------

def test_adapter_reads_the_plate(write_model, plate, tmp_path):
    job = _plate_job(write_model, plate)
    folder = tmp_path / "case"
    folder.mkdir()
    shutil.copy(PLATE, folder / "modes.npz")
    raw = KratosAdapter().read_results(job, folder, _record(tmp_path))
    ref = read_results(PLATE)
    np.testing.assert_array_equal(raw.frequencies, ref.frequencies)
    np.testing.assert_array_equal(raw.shapes, ref.translations)
    np.testing.assert_array_equal(raw.rotations, ref.rotations)
    assert raw.normalisation == "mass" and raw.element_type == "ShellThinElementCorotational3D4N"
    assert raw.effective_mass is None  # modebridge computes its own
    assert raw.warnings == []


def test_adapter_refuses_an_eigenpair_whose_rayleigh_quotient_is_off(write_model, plate, tmp_path):
    job = _plate_job(write_model, plate)
    rq = read_results(PLATE).rayleigh_quotient.copy()
    rq[2] *= 1.01
    folder = _doctored(tmp_path, rayleigh_quotient=rq)
    with pytest.raises(ResultCheckError, match="mode 3: Rayleigh quotient"):
        KratosAdapter().read_results(job, folder, _record(tmp_path))


def test_fewer_modes_than_asked_break_the_core_postconditions(write_model, plate, tmp_path):
    job = _plate_job(write_model, plate, modes=5)
    folder = tmp_path / "case"
    folder.mkdir()
    shutil.copy(PLATE, folder / "modes.npz")
    raw = KratosAdapter().read_results(job, folder, _record(tmp_path))
    with pytest.raises(ResultCheckError, match="4 of the 5 modes"):
        enforce(raw, job, solver="kratos")


def test_the_core_keeps_the_requested_band(write_model, plate, tmp_path):
    job = _plate_job(write_model, plate, max_frequency="5 kHz")
    folder = tmp_path / "case"
    folder.mkdir()
    shutil.copy(PLATE, folder / "modes.npz")
    raw = enforce(KratosAdapter().read_results(job, folder, _record(tmp_path)), job, solver="kratos")
    assert raw.frequencies.size == 3 and raw.shapes.shape[0] == 3 and raw.rotations.shape[0] == 3
    job.min_frequency, job.max_frequency = 7000.0, None
    with pytest.raises(ResultCheckError, match="no mode at or above 7000 Hz"):
        enforce(KratosAdapter().read_results(job, folder, _record(tmp_path)), job, solver="kratos")


def test_adapter_notes_a_renormalisation(write_model, plate, tmp_path):
    job = _plate_job(write_model, plate)
    folder = _doctored(tmp_path, kratos_modal_mass=np.array([1.0, 1.0, 2.0, 1.0]))
    raw = KratosAdapter().read_results(job, folder, _record(tmp_path))
    assert any("renormalised" in w for w in raw.warnings)


def test_adapter_refuses_results_of_another_mesh(write_model, plate, tmp_path):
    path = write_model(plate("quad4", (5, 5), "clamped", modes=4))
    job = make_job(prepare(load_model(path), path))
    folder = tmp_path / "case"
    folder.mkdir()
    shutil.copy(PLATE, folder / "modes.npz")
    with pytest.raises(ResultParseError, match="25 nodes in the results for 36"):
        KratosAdapter().read_results(job, folder, _record(tmp_path))
