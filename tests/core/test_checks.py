"""The checks reported with every run, on synthetic results."""

from __future__ import annotations

import numpy as np

from bridge.checks import rigid_body_count, run_checks
from bridge.model import load_model
from bridge.results import ModalResult


def test_rigid_body_count_on_solver_like_values():
    # CalculiX prints slightly negative eigenvalues as 0 Hz for a free plate (shared/solver-notes.md)
    lam = np.array([-2e-3, -1e-3, 1e-4, 3e-4, 5e-4, 2e-4, (2 * np.pi * 671) ** 2, (2 * np.pi * 980) ** 2])
    f = np.sqrt(np.clip(lam, 0, None)) / (2 * np.pi)
    assert rigid_body_count(f, lam) == 6
    # a supported part: none (common practice, no source)
    lam2 = (2 * np.pi * np.array([100.0, 240.0, 260.0, 400.0])) ** 2
    assert rigid_body_count(np.sqrt(lam2) / (2 * np.pi), lam2) == 0
    # a large soft structure: rigid modes well above the absolute floor still count, by the gap
    lam3 = np.array([0.05, 0.08, (2 * np.pi * 100.0) ** 2, (2 * np.pi * 145.0) ** 2])
    assert rigid_body_count(np.sqrt(lam3) / (2 * np.pi), lam3) == 2


def _synthetic(model, freqs, meff, total_mass=1.0):
    m = len(freqs)
    lam = (2 * np.pi * np.asarray(freqs)) ** 2
    return ModalResult(frequencies=np.asarray(freqs, float), eigenvalues=lam, points=np.zeros((1, 3)),
                       node_ids=np.array([1]), cell_type=1, cells=np.zeros((1, 1), int),
                       shapes=np.zeros((m, 1, 3)), effective_mass=np.asarray(meff, float),
                       total_effective_mass=np.asarray(meff, float).sum(axis=0), total_mass=total_mass)


def test_mass_rule_and_bands(write_model, plate):
    text = plate("quad4", (4, 4)) + """
[[excitation]]
name = "motor"
low = "95 Hz"
high = "105 Hz"
margin = 0.1
"""
    model = load_model(write_model(text))
    meff = np.zeros((5, 6))
    meff[:, 2] = [0.613, 0.188, 0.065, 0.033, 0.020]  # cantilever fractions (shared/references.md)
    r = _synthetic(model, [50.0, 112.0, 300.0, 600.0, 900.0], meff)
    checks = {c.name: c for c in run_checks(model, r)}
    assert "z: 90% reached at mode 5" in checks["mass_rule_90"].message
    assert checks["mass_rule_90"].status == "warn"  # x and y carry nothing
    # 112 Hz lies inside 95–105 Hz widened by 10 % (85.5–115.5 Hz)
    assert checks["excitation:motor"].status == "fail" and "mode(s) 2" in checks["excitation:motor"].message
    r2 = _synthetic(model, [50.0, 130.0, 300.0, 600.0, 900.0], meff)
    c2 = {c.name: c for c in run_checks(model, r2)}["excitation:motor"]
    assert c2.status == "ok" and "nearest below 50.0 Hz" in c2.message and "above 130.0 Hz" in c2.message


def test_mechanism_is_flagged(write_model, plate):
    model = load_model(write_model(plate("quad4", (4, 4))))
    r = _synthetic(model, [0.0, 0.0, 200.0], np.zeros((3, 6)))
    r.eigenvalues[:2] = [1e-4, -1e-4]
    c = {c.name: c for c in run_checks(model, r)}["rigid_body_modes"]
    assert c.status == "fail" and "mechanism" in c.message


def test_free_body_mass_mismatch_fails(write_model, plate):
    model = load_model(write_model(plate("quad4", (4, 4), "free")))
    meff = np.zeros((7, 6))
    meff[:6, :3] = np.eye(6)[:, :3] * 0.97  # 3 % short of the mass
    freqs = [0, 0, 0, 0, 0, 0, 500.0]
    r = _synthetic(model, freqs, meff)
    r.eigenvalues[:6] = 0.0
    c = {c.name: c for c in run_checks(model, r)}
    assert c["rigid_body_modes"].status == "ok"
    assert c["mass_sum"].status == "fail"
    r.effective_mass = meff / 0.97
    r.total_effective_mass = r.effective_mass.sum(axis=0)
    assert {c.name: c for c in run_checks(model, r)}["mass_sum"].status == "ok"
