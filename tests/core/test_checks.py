"""The checks reported with every run, on synthetic results."""

from __future__ import annotations

import numpy as np
import pytest

from bridge.checks import free_rigid_motions, rigid_body_count, run_checks
from bridge.model import load_model
from bridge.pipeline import prepare
from bridge.results import ModalResult


def test_rigid_body_count_on_solver_like_values():
    # CalculiX prints slightly negative eigenvalues as 0 Hz for a free plate (measured with this solver on a machine of this kind)
    lam = np.array([-2e-3, -1e-3, 1e-4, 3e-4, 5e-4, 2e-4, (2 * np.pi * 671) ** 2, (2 * np.pi * 980) ** 2])
    f = np.sqrt(np.clip(lam, 0, None)) / (2 * np.pi)
    assert rigid_body_count(f, lam) == 6
    # a supported part: none (common practice, no source)
    lam2 = (2 * np.pi * np.array([100.0, 240.0, 260.0, 400.0])) ** 2
    assert rigid_body_count(np.sqrt(lam2) / (2 * np.pi), lam2) == 0
    # a large soft structure: rigid modes well above the absolute floor still count, by the gap
    lam3 = np.array([0.05, 0.08, (2 * np.pi * 100.0) ** 2, (2 * np.pi * 145.0) ** 2])
    assert rigid_body_count(np.sqrt(lam3) / (2 * np.pi), lam3) == 2


def _synthetic(model, freqs, meff, total_mass=1.0, points=None):
    m = len(freqs)
    lam = (2 * np.pi * np.asarray(freqs)) ** 2
    points = np.zeros((1, 3)) if points is None else points
    return ModalResult(frequencies=np.asarray(freqs, float), eigenvalues=lam, points=points,
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
    meff[:, 2] = [0.613, 0.188, 0.065, 0.033, 0.020]  # cantilever fractions (Chopra, Dynamics of Structures, from memory)
    r = _synthetic(model, [50.0, 112.0, 300.0, 600.0, 900.0], meff)
    checks = {c.name: c for c in run_checks(model, r)}
    assert "z: 90% reached at mode 5" in checks["mass_rule_90"].message
    assert checks["mass_rule_90"].status == "warn"  # x and y carry nothing
    # 112 Hz lies inside 95–105 Hz widened by 10 % (85.5–115.5 Hz)
    assert checks["excitation:motor"].status == "fail" and "mode(s) 2" in checks["excitation:motor"].message
    r2 = _synthetic(model, [50.0, 130.0, 300.0, 600.0, 900.0], meff)
    c2 = {c.name: c for c in run_checks(model, r2)}["excitation:motor"]
    assert c2.status == "ok" and "nearest below 50.0 Hz" in c2.message and "above 130.0 Hz" in c2.message


def _prepared(write_model, text):
    path = write_model(text)
    model = load_model(path)
    return model, prepare(model, path)


def test_mechanism_is_flagged(write_model, plate):
    model, prep = _prepared(write_model, plate("quad4", (4, 4)))
    r = _synthetic(model, [0.0, 0.0, 200.0], np.zeros((3, 6)), points=prep.mesh.points)
    r.eigenvalues[:2] = [1e-4, -1e-4]
    c = {c.name: c for c in run_checks(model, r, prep.constraints.fixed)}["rigid_body_modes"]
    assert c.status == "fail" and "mechanism" in c.message
    assert c.figures["expected"] == 0 and c.figures["found"] == 2


def test_free_body_mass_mismatch_fails(write_model, plate):
    model = load_model(write_model(plate("quad4", (4, 4), "free")))
    meff = np.zeros((7, 6))
    meff[:6, :3] = np.eye(6)[:, :3] * 0.97  # 3 % short of the mass
    freqs = [0, 0, 0, 0, 0, 0, 500.0]
    r = _synthetic(model, freqs, meff)
    r.eigenvalues[:6] = 0.0
    r.total_effective_mass = np.array([1.0, 1.0, 1.0, 0, 0, 0])  # rᵀMr of a free body: its mass
    c = {c.name: c for c in run_checks(model, r)}
    assert c["rigid_body_modes"].status == "ok"
    assert c["mass_sum"].status == "fail"
    r.effective_mass = meff / 0.97
    assert {c.name: c for c in run_checks(model, r)}["mass_sum"].status == "ok"


# --- expected rigid-body modes from the constraints (null space of the rigid motions on the
# fixed DOF; counts are kinematics, common practice, no source) ------------------------------

_STEEL = """
[materials.steel]
youngs_modulus = "210 GPa"
poisson_ratio = 0.3
density = "7850 kg/m^3"
"""


def _block(extra: str, family: str = "hex8", divisions=(4, 2, 2)) -> str:
    return f"""
name = "block"
[geometry]
kind = "block"
length = "100 mm"
width = "40 mm"
height = "20 mm"
{_STEEL}
[section]
kind = "solid"
material = "steel"
{extra}
[analysis]
modes = 8
[mesh]
family = "{family}"
divisions = [{divisions[0]}, {divisions[1]}, {divisions[2]}]
"""


def _motions(write_model, text):
    model, prep = _prepared(write_model, text)
    return model, prep, free_rigid_motions(prep.mesh.points, prep.constraints.fixed,
                                           prep.mesh.dofs_per_node)


def test_symmetry_half_model_holds_everything(write_model, plate):
    # half of a plate: clamped at x = 0, mirror plane y = 0 (uy, rx, rz held there)
    text = plate("quad4", (4, 4), "free") + """
[regions.root]
select = "sides"
sides = ["xmin"]
[regions.mirror]
select = "sides"
sides = ["ymin"]
[[supports]]
region = "root"
kind = "clamped"
[[supports]]
region = "mirror"
kind = "symmetry"
normal = "y"
"""
    model, prep, m = _motions(write_model, text)
    assert m.count == 0
    r = _synthetic(model, [120.0, 300.0], np.zeros((2, 6)), points=prep.mesh.points)
    c = {c.name: c for c in run_checks(model, r, prep.constraints.fixed)}["rigid_body_modes"]
    assert c.status == "ok", c.message
    # held by the mirror plane alone: x, z translations and rotation about y stay free
    text2 = plate("quad4", (4, 4), "free") + """
[regions.mirror]
select = "sides"
sides = ["ymin"]
[[supports]]
region = "mirror"
kind = "symmetry"
normal = "y"
"""
    _, _, m2 = _motions(write_model, text2)
    assert m2.count == 3
    assert m2.names == ["translation along x", "translation along z", "rotation about y"]


def test_fv52_type_edge_support_leaves_three_in_plane_motions(write_model):
    # NAFEMS FV52 support: w = 0 along the bottom edges of a solid (NAFEMS R0015, 1987):
    # three in-plane rigid-body modes by design
    text = _block("""
[regions.bottom_edges]
select = "plane"
axis = "z"
at = "0 mm"
entity = "edge"
[[supports]]
region = "bottom_edges"
kind = "fixed_dofs"
dofs = ["uz"]
""")
    model, prep, m = _motions(write_model, text)
    assert m.count == 3
    assert m.names == ["translation along x", "translation along y", "rotation about z"]
    lam = np.array([1e-5, -2e-5, 3e-5, (2 * np.pi * 900.0) ** 2, (2 * np.pi * 1400.0) ** 2])
    r = _synthetic(model, np.sqrt(np.abs(lam)) / (2 * np.pi), np.zeros((5, 6)), points=prep.mesh.points)
    r.eigenvalues = lam
    c = {c.name: c for c in run_checks(model, r, prep.constraints.fixed)}["rigid_body_modes"]
    assert c.status == "ok" and "rotation about z" in c.message, c.message


def test_free_body_expects_six(write_model):
    model, prep, m = _motions(write_model, _block(""))
    assert m.count == 6
    lam = np.r_[np.full(6, 1e-6), (2 * np.pi * np.array([900.0, 1300.0])) ** 2]
    r = _synthetic(model, np.sqrt(lam) / (2 * np.pi), np.zeros((8, 6)), points=prep.mesh.points)
    r.eigenvalues = lam
    assert {c.name: c for c in run_checks(model, r, prep.constraints.fixed)}["rigid_body_modes"].status == "ok"


def test_plate_held_only_in_z_names_the_free_motions(write_model, plate):
    # uz held on the whole rim: the plate may still slide in x and y and turn about z. A result
    # with no near-zero mode held what the model does not: the check fails naming each motion.
    model, prep = _prepared(write_model, plate("quad4", (4, 4), "fixed_dofs").replace(
        'kind = "fixed_dofs"', 'kind = "fixed_dofs"\ndofs = ["uz"]'))
    r = _synthetic(model, [100.0, 250.0, 250.0], np.zeros((3, 6)), points=prep.mesh.points)
    c = {c.name: c for c in run_checks(model, r, prep.constraints.fixed)}["rigid_body_modes"]
    assert c.status == "fail"
    for motion in ("translation along x is not held", "translation along y is not held",
                   "rotation about z is not held"):
        assert motion in c.message
    assert c.figures["expected"] == 3 and c.figures["found"] == 0


def test_constraint_rows_reduce_the_free_motions():
    # a spring or coupling adds rows C·R on the rigid motions (issue 9 hook): a row on the
    # x translation of an otherwise free body leaves 5 (kinematics, no source)
    pts = np.array([[0, 0, 0], [1, 0, 0], [0, 1, 0], [0, 0, 1.0]])
    fixed = np.zeros((4, 3), bool)
    assert free_rigid_motions(pts, fixed, 3).count == 6
    row = np.array([[1.0, 0, 0, 0, 0, 0]])
    m = free_rigid_motions(pts, fixed, 3, constraint_rows=row)
    assert m.count == 5 and "translation along x" not in m.names


def test_work_done_while_the_solver_runs_hands_back_its_result_and_its_error():
    # the run assembles the mass matrix on a thread during the solve (bridge.pipeline._Ahead):
    # its value comes back after the solve, and an error in it is raised there, not lost
    from bridge.pipeline import _Ahead

    assert _Ahead(lambda a, b: a + b, 2, 3).result() == 5

    def broken():
        raise ValueError("no mass matrix")

    with pytest.raises(ValueError, match="no mass matrix"):
        _Ahead(broken).result()
