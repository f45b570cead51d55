"""The OpenSees results reader and the adapter's checks, on stored real outputs (no solver needed).

Fixtures: fixtures/opensees/*/ (see its README.md), made by openseespy 3.7.1.2.
"""

from __future__ import annotations

import importlib.util
import io
import shutil
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from bridge.errors import ResultCheckError, ResultParseError
from bridge.postconditions import enforce
from bridge.solver import RunRecord
from modebridge_opensees.adapter import OpenSeesAdapter
from modebridge_opensees.parser import read_npz, read_results

FIXTURES = Path(__file__).resolve().parents[3] / "fixtures" / "opensees"
PLATE = FIXTURES / "plate_quad4_4x4_clamped"
BLOCK = FIXTURES / "block_tet10_free"


def _generator():
    spec = importlib.util.spec_from_file_location("opensees_fixture_generate", FIXTURES / "generate.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def _record(folder: Path) -> RunRecord:
    return RunRecord(command=["python", "model_os.py"], returncode=0, wall_time=0.1,
                     log_path=folder / "opensees.log")


def _arrays(path: Path) -> dict:
    with np.load(path) as data:
        return {k: data[k] for k in data.files}


def _npz_bytes(arrays: dict) -> bytes:
    buf = io.BytesIO()
    np.savez(buf, **arrays)
    return buf.getvalue()


def test_plate_fixture():
    r = read_results(PLATE)
    assert r.element == "ShellMITC4" and r.opensees_version == "3.7.1"
    assert r.translations.shape == (4, 25, 3) and r.rotations.shape == (4, 25, 3)
    assert r.node_ids.tolist() == list(range(1, 26))
    # the stored run's own values (fixtures/opensees/README.md): 4 x 4 MITC4, 0.01 kg at the centre
    np.testing.assert_allclose(r.frequencies, [1703.888, 6488.643, 6488.643, 9476.142], rtol=1e-6)
    assert np.all(np.diff(r.eigenvalues) >= 0)
    # f = √λ / 2π (definition)
    np.testing.assert_allclose(r.frequencies, np.sqrt(r.eigenvalues) / (2 * np.pi), rtol=1e-15)
    # clamped edge nodes do not move (exact zeros: eliminated DOF)
    edge = [i for i in range(25) if i % 5 in (0, 4) or i // 5 in (0, 4)]
    assert np.all(r.translations[:, edge] == 0) and np.all(r.rotations[:, edge] == 0)
    # the inertia-force mass matrix passed the checks: ARPACK's vectors are M-orthonormal
    # (φᵀMφ = 1 to round-off) and the total mass is the model's (deck.py docstring)
    assert r.mass_verified and r.element_factor == 1.0
    np.testing.assert_allclose(r.generalized_mass, 1.0, rtol=1e-9)
    assert r.orthogonality < 1e-9
    np.testing.assert_allclose(r.total_mass, r.model_mass, rtol=1e-9)
    assert r.model_mass == pytest.approx(7.85e-9 * 100 * 100 * 2 + 1e-5, rel=1e-12)  # ρ a² h + probe


def test_block_fixture_free_tet10():
    r = read_results(BLOCK)
    assert r.element == "TenNodeTetrahedron" and r.rotations is None
    assert r.translations.shape == (8, 27, 3)
    # a free body: 6 rigid-body modes, below the 1e-2 (rad/s)² of bridge.checks (README)
    assert np.all(np.abs(r.eigenvalues[:6]) < 1e-2) and r.eigenvalues[6] > 1e6
    # TenNodeTetrahedron (openseespy 3.7.1.2) integrates over 1/6 of the volume (deck.py)
    assert r.element_factor == pytest.approx(1 / 6, rel=1e-9)
    assert r.mass_verified
    np.testing.assert_allclose(r.total_mass, 7.85e-9 * 20 * 10 * 5, rtol=1e-9)  # ρ V


def test_read_from_a_stream_equals_read_from_the_folder():
    a = read_results(PLATE)
    b = read_npz(io.BytesIO((PLATE / "model_os.npz").read_bytes()))
    c = read_npz((PLATE / "model_os.npz").read_bytes())
    for other in (b, c):
        np.testing.assert_array_equal(a.translations, other.translations)
        np.testing.assert_array_equal(a.eigenvalues, other.eigenvalues)
    assert not a.translations.flags.writeable


@settings(max_examples=60, deadline=None)
@given(st.floats(min_value=0.0, max_value=0.999))
def test_a_truncated_file_is_a_parse_error(fraction):
    data = (PLATE / "model_os.npz").read_bytes()
    with pytest.raises(ResultParseError):
        read_npz(data[: int(len(data) * fraction)])


def test_missing_file(tmp_path):
    with pytest.raises(ResultParseError, match="model_os.npz"):
        read_results(tmp_path)


@pytest.mark.parametrize("change,message", [
    (lambda a: a.pop("eigenvalues"), "lacks eigenvalues"),
    (lambda a: a.update(format_version=np.array(2)), "results format"),
    (lambda a: a.update(translations=a["translations"][:, :-1]), "translations have shape"),
    (lambda a: a.update(rotations=a["rotations"][:2]), "rotations have shape"),
    (lambda a: a.update(node_ids=np.ones(25, np.int64)), "twice"),
    (lambda a: a.update(node_ids=a["node_ids"].astype(float)), "integer"),
    (lambda a: a.update(eigenvalues=np.array([])), "no eigenvalue"),
    (lambda a: a["translations"].__setitem__((0, 5, 2), np.nan), "NaN"),
    (lambda a: a.update(total_mass=np.zeros(2)), "wrong shape"),
])
def test_malformed_contents(change, message):
    arrays = _arrays(PLATE / "model_os.npz")
    change(arrays)
    with pytest.raises(ResultParseError, match=message):
        read_npz(_npz_bytes(arrays))


def test_pickled_objects_are_refused():
    arrays = _arrays(PLATE / "model_os.npz")
    arrays["element"] = np.array([{"a": 1}], dtype=object)
    with pytest.raises(ResultParseError):
        read_npz(_npz_bytes(arrays))


# --- the adapter's checks on the parsed results ---------------------------------------------

def _copy(src: Path, tmp_path: Path) -> Path:
    dst = tmp_path / src.name
    shutil.copytree(src, dst)
    return dst


def test_adapter_returns_raw_modes(tmp_path):
    job = _generator().plate_quad4()
    folder = _copy(PLATE, tmp_path)
    raw = OpenSeesAdapter().read_results(job, folder, _record(folder))
    assert raw.normalisation == "mass" and raw.element_type == "ShellMITC4"
    assert raw.shapes.shape == (4, 25, 3) and raw.rotations.shape == (4, 25, 3)
    assert raw.warnings == []
    assert raw.solver_version  # the installed distribution's or the library's own


def test_adapter_reports_the_tet10_volume_factor(tmp_path):
    job = _generator().block_tet10_free()
    folder = _copy(BLOCK, tmp_path)
    raw = OpenSeesAdapter().read_results(job, folder, _record(folder))
    assert raw.rotations is None
    (w,) = raw.warnings
    assert "TenNodeTetrahedron" in w and "0.166667" in w


def test_the_core_keeps_the_frequency_range(tmp_path):
    job = _generator().plate_quad4()
    folder = _copy(PLATE, tmp_path)
    job.min_frequency, job.max_frequency = 2000.0, 7000.0
    raw = enforce(OpenSeesAdapter().read_results(job, folder, _record(folder)), job, solver="opensees")
    np.testing.assert_allclose(raw.frequencies, [6488.643, 6488.643], rtol=1e-6)
    assert raw.shapes.shape[0] == 2
    job.min_frequency, job.max_frequency = 10000.0, None
    with pytest.raises(ResultCheckError, match="no mode at or above"):
        enforce(OpenSeesAdapter().read_results(job, folder, _record(folder)), job, solver="opensees")


def test_wrong_counts_and_nodes_break_the_core_postconditions(tmp_path):
    gen = _generator()
    folder = _copy(PLATE, tmp_path)
    job = gen.plate_quad4()
    job.modes = 6
    with pytest.raises(ResultCheckError, match="4 of the 6 modes"):
        enforce(OpenSeesAdapter().read_results(job, folder, _record(folder)), job, solver="opensees")
    job = gen.plate_quad4(n=3)
    job.modes = 4
    with pytest.raises(ResultCheckError, match="not in the mesh"):
        enforce(OpenSeesAdapter().read_results(job, folder, _record(folder)), job, solver="opensees")
    (folder / "model_os.npz").write_bytes(b"")
    with pytest.raises(ResultParseError, match="wrote no results"):
        OpenSeesAdapter().read_results(gen.plate_quad4(), folder, _record(folder))


def test_adapter_warns_when_the_mass_check_failed(tmp_path):
    folder = _copy(PLATE, tmp_path)
    arrays = _arrays(folder / "model_os.npz")
    arrays["mass_verified"] = np.array(False)
    arrays["total_mass"] = arrays["total_mass"] / 6
    (folder / "model_os.npz").write_bytes(_npz_bytes(arrays))
    raw = OpenSeesAdapter().read_results(_generator().plate_quad4(), folder, _record(folder))
    (w,) = raw.warnings
    assert "do not reproduce the mass matrix" in w
