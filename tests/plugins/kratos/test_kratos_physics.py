"""Real Kratos runs against handbook values and against CalculiX on the same mesh (each check
names its source). Every test here runs Kratos (fixture ``kratos``), the comparison also ccx."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.linalg import subspace_angles
from scipy.optimize import brentq

from bridge.model import load_model
from bridge.pipeline import make_job, prepare, run_model
from modebridge_kratos.adapter import KratosAdapter

pytestmark = pytest.mark.solver

# f per unit λ² for the 100 × 100 × 2 mm steel plate (E 210 GPa, ν 0.3, ρ 7850 kg/m³):
# f = λ²/(2π a²)·√(D/(ρh)) = 49.821 Hz (Leissa, NASA SP-160 (1969), thin-plate formula, from memory)
E, NU, RHO, A, H = 210e9, 0.3, 7850.0, 0.1, 0.002
F_PER_LAMBDA2 = math.sqrt(E * H**3 / (12 * (1 - NU**2)) / (RHO * H)) / (2 * math.pi * A**2)
#: CCCC square plate λ² = 35.99 → 1793 Hz: Leissa, Vibration of Plates, NASA SP-160 (1969), from memory
LEISSA_CCCC_1 = 35.99 * F_PER_LAMBDA2


def _run(write_model, text, tmp_path, name="model.toml", solvers=("kratos",)):
    path = write_model(text, name)
    prep, outcomes = run_model(path, tmp_path / ("run_" + name.split(".")[0]), solvers=list(solvers))
    for o in outcomes:
        assert o.ok, o.error
    return prep, outcomes


def _solid_plate(mesh: str, family: str, modes: int = 6) -> str:
    return f"""
    name = "steel plate solid"
    [geometry]
    kind = "block"
    length = "100 mm"
    width = "100 mm"
    height = "2 mm"
    [materials.steel]
    youngs_modulus = "210 GPa"
    poisson_ratio = 0.3
    density = "7850 kg/m^3"
    [section]
    kind = "solid"
    material = "steel"
    [regions.rim]
    select = "sides"
    sides = ["xmin", "xmax", "ymin", "ymax"]
    [[supports]]
    region = "rim"
    kind = "clamped"
    [analysis]
    modes = {modes}
    [mesh]
    family = "{family}"
    {mesh}
    """


def _mac(a: np.ndarray, b: np.ndarray) -> float:
    # modal assurance criterion |a·b|²/((a·a)(b·b)): Allemang & Brown, 1st IMAC (1982), from memory
    a, b = a.ravel(), b.ravel()
    return float(abs(a @ b) ** 2 / ((a @ a) * (b @ b)))


def test_unit_frequency_matches_reference():
    # Leissa, NASA SP-160 (1969), thin-plate formula, from memory: 49.821 Hz per unit λ² for this plate, so CCCC f1 = 1793 Hz
    assert F_PER_LAMBDA2 == pytest.approx(49.821, rel=1e-4)
    assert LEISSA_CCCC_1 == pytest.approx(1793.0, rel=5e-4)


def test_clamped_plate_thin_quad4_40x40(kratos, write_model, plate, tmp_path):
    thin = '[solver_options.kratos]\nshell_theory = "thin"'  # the Kirchhoff quad (auto: MITC4)
    prep, (o,) = _run(write_model, plate("quad4", (40, 40), "clamped", modes=6, extra=thin), tmp_path)
    f = o.result.frequencies
    # Leissa 1969 (from memory) CCCC λ² = 35.99 → 1793 Hz, within 1 % (measured 1792.7 Hz;
    # measured with this solver on a machine of this kind: thin corotational shell 40 × 40 gave 1792.7 Hz)
    assert f[0] == pytest.approx(LEISSA_CCCC_1, rel=0.01)
    # Leissa 1969 λ² = 73.41 for the repeated pair 2-3 (from memory), within 1 %
    assert f[1] == pytest.approx(73.41 * F_PER_LAMBDA2, rel=0.01)
    assert f[2] == pytest.approx(f[1], rel=1e-6)  # repeated by symmetry (common practice, no source)
    checks = {c.name: c.status for c in o.checks}
    assert checks["rigid_body_modes"] == "ok" and checks["mass_normalisation"] == "ok"
    # Kratos's normalisation against modebridge's consistent mass: within 1 % (common practice, no
    # source; the thin shell's mass matrix is not modebridge's consistent one, measured 0.4 %)
    np.testing.assert_allclose(o.result.metadata["modal_mass"], 1.0, atol=0.01)
    assert o.result.metadata["provenance"]["element_type"] == "ShellThinElementCorotational3D4N"
    assert o.result.rotations is not None


def test_clamped_plate_thin_tri3(kratos, write_model, plate, tmp_path):
    _, (o,) = _run(write_model, plate("tri3", (40, 40), "clamped", modes=3), tmp_path)
    # Leissa 1969 (from memory) λ² = 35.99, within 1 % (measured 1792.9 Hz)
    assert o.result.frequencies[0] == pytest.approx(LEISSA_CCCC_1, rel=0.01)


def test_clamped_plate_thick_quad4(kratos, write_model, plate, tmp_path):
    """The Reissner–Mindlin (MITC4) shell, through the adapter, chosen by the option shell_theory."""
    path = write_model(plate("quad4", (40, 40), "clamped", modes=3))
    job = make_job(prepare(load_model(path), path))
    job.options = {"shell_theory": "thick"}
    adapter, folder = KratosAdapter(), tmp_path / "thick"
    folder.mkdir()
    adapter.write_deck(job, folder)
    raw = adapter.read_results(job, folder, adapter.run(job, folder))
    assert raw.element_type == "ShellThickElementCorotational3D4N"
    # Leissa 1969 (from memory) λ² = 35.99 for the thin plate, within 1 % (measured 1786.1 Hz;
    # measured with this solver on a machine of this kind: thick shell 1786.1 Hz)
    assert raw.frequencies[0] == pytest.approx(LEISSA_CCCC_1, rel=0.01)
    # transverse shear flexibility lowers a Mindlin plate's frequency below the Kirchhoff value,
    # here by less than 1 % at h/a = 0.02 (Mindlin plate theory, common practice, no source)
    assert 0.99 * LEISSA_CCCC_1 < raw.frequencies[0] < LEISSA_CCCC_1


def test_tet10_same_mesh_as_calculix(kratos, ccx, write_model, tmp_path):
    """One gmsh tet10 mesh (3046 elements), two independent codes: on an identical mesh and
    element they agree to ~1e-5 (measured with this solver on a machine of this kind), checked here to 0.05 %
    (measured: 2e-6 on mode 1, 2e-5 at most)."""
    prep, (c, k) = _run(write_model, _solid_plate('size = "5 mm"', "tet10"), tmp_path,
                        solvers=("calculix", "kratos"))
    assert prep.mesh.n_elements > 2000
    rc, rk = c.result, k.result
    np.testing.assert_array_equal(rc.node_ids, rk.node_ids)
    np.testing.assert_array_equal(rc.points, rk.points)  # one mesh, one job for both
    np.testing.assert_array_equal(rc.cells, rk.cells)
    np.testing.assert_allclose(rk.frequencies[:6], rc.frequencies[:6], rtol=5e-4)
    # MAC of the translations ≥ 0.99 mode by mode (Allemang & Brown 1982, from memory; threshold
    # common practice, no source) — except the repeated pair 2-3, an arbitrary mix in each code
    for i in (0, 3, 4, 5):
        assert _mac(rc.shapes[i], rk.shapes[i]) >= 0.99, i
    # the pair as a 2-D subspace: principal angles ≤ 5° (common practice, no source)
    pair_c = rc.shapes[1:3].reshape(2, -1).T
    pair_k = rk.shapes[1:3].reshape(2, -1).T
    assert np.degrees(subspace_angles(pair_c, pair_k)).max() <= 5.0
    # both normalised for modebridge's consistent mass (the same element's mass matrix), 0.1 %
    np.testing.assert_allclose(rk.metadata["modal_mass"], 1.0, atol=1e-3)


def test_hex20_clamped_plate(kratos, write_model, tmp_path):
    _, (o,) = _run(write_model, _solid_plate("divisions = [20, 20, 1]", "hex20", modes=3), tmp_path)
    # Leissa 1969 (from memory) λ² = 35.99 → 1793 Hz, within 1.5 % for one fully integrated
    # 20-node brick through the thickness (common practice, no source; measured 1807.4 Hz)
    assert o.result.frequencies[0] == pytest.approx(LEISSA_CCCC_1, rel=0.015)
    assert o.result.frequencies[2] == pytest.approx(o.result.frequencies[1], rel=1e-6)


def test_free_plate(kratos, write_model, plate, tmp_path):
    _, (o,) = _run(write_model, plate("quad4", (20, 20), "free", modes=12), tmp_path)
    r = o.result
    assert o.summary["rigid_body_modes"] == 6
    assert {c.name: c.status for c in o.checks}["rigid_body_modes"] == "ok"
    # FFFF ν = 0.3, converged Rayleigh-Ritz λ² (converged Rayleigh–Ritz of Kirchhoff plate theory; Leissa, JSV 31(3) 1973, from memory), within 2 %
    ritz = np.array([13.468, 19.596, 24.270, 34.801, 34.801, 61.093])
    np.testing.assert_allclose(r.frequencies[6:12] / F_PER_LAMBDA2, ritz, rtol=0.02)
    # a free body's effective masses sum to its mass within 0.5 % (Σ m_eff = rᵀMr, definition of effective modal mass; Chopra, Dynamics of Structures, from memory)
    np.testing.assert_allclose(r.effective_mass[:, :3].sum(axis=0), r.total_mass, rtol=0.005)
    # the first shift (−1 (rad/s)²) leaves the elastic pairs of a free body unconverged; the case
    # saw it in the Rayleigh quotients and solved again (deck.RUN_CASE)
    assert "solving again with shift" in (o.folder / "kratos.log").read_text()


# --- cantilever strip -----------------------------------------------------------

L_C, B_C, T_C = 0.2, 0.01, 0.002  # m


def _cantilever(nx=60, ny=2, modes=4, masses=""):
    # ν = 0: the strip's bending stiffness is then E·I exactly (common practice, no source)
    return f"""
    name = "steel strip cantilever"
    [geometry]
    kind = "plate"
    length = "{L_C * 1e3} mm"
    width = "{B_C * 1e3} mm"
    [materials.steel]
    youngs_modulus = "210 GPa"
    poisson_ratio = 0.0
    density = "7850 kg/m^3"
    [section]
    kind = "shell"
    material = "steel"
    thickness = "{T_C * 1e3} mm"
    [regions.root]
    select = "sides"
    sides = ["xmin"]
    [[supports]]
    region = "root"
    kind = "clamped"
    {masses}
    [analysis]
    modes = {modes}
    [mesh]
    family = "quad4"
    divisions = [{nx}, {ny}]
    """


def _beam_f(beta_l, b=B_C, t=T_C):
    EI = 210e9 * b * t**3 / 12
    m = 7850.0 * B_C * T_C
    return beta_l**2 / (2 * math.pi * L_C**2) * math.sqrt(EI / m)


def test_cantilever_point_mass_at_the_tip(kratos, write_model, tmp_path):
    beam_mass = 7850.0 * L_C * B_C * T_C
    masses = f"""
    [[masses]]
    name = "sensor"
    mass = "{0.5 * beam_mass} kg"
    at = ["200 mm", "5 mm", "0 mm"]
    """
    _, (bare,) = _run(write_model, _cantilever(), tmp_path, "bare.toml")
    _, (loaded,) = _run(write_model, _cantilever(masses=masses), tmp_path, "loaded.toml")
    # Euler-Bernoulli clamped-free βL = 1.875104 (Blevins 1979 Table 8-1, from memory), within 1 %
    assert bare.result.frequencies[0] == pytest.approx(_beam_f(1.875104), rel=0.01)
    # with a tip mass M = m/2 (no rotary inertia): 1 + cos λ cosh λ + (M/m) λ (cos λ sinh λ −
    # sin λ cosh λ) = 0 (Blevins 1979, "beam with end mass", from memory), within 1 %
    lam = brentq(lambda x: 1 + math.cos(x) * math.cosh(x)
                 + 0.5 * x * (math.cos(x) * math.sinh(x) - math.sin(x) * math.cosh(x)), 0.5, 1.875)
    assert loaded.result.frequencies[0] == pytest.approx(_beam_f(lam), rel=0.01)
    assert loaded.result.total_mass == pytest.approx(1.5 * beam_mass, rel=1e-9)


def test_in_plane_bending_of_the_strip(kratos, write_model, tmp_path):
    """Characterisation (why thin-vs-thick matters beyond plate bending): the strip's second mode
    is in-plane bending about its strong axis. The thin quad's membrane is soft on coarse meshes
    (measured −10 % on 60 × 2, −42 % on 20 × 1, −2.6 % on 120 × 4); the MITC4 thick quad is not."""
    path = write_model(_cantilever(modes=3))
    job = make_job(prepare(load_model(path), path))
    f_eb = _beam_f(1.875104, b=T_C, t=B_C)  # EI about the strong axis; Blevins 1979 (from memory)
    found = {}
    for theory in ("thin", "thick"):
        job.options = {"shell_theory": theory}
        adapter, folder = KratosAdapter(), tmp_path / theory
        folder.mkdir()
        adapter.write_deck(job, folder)
        raw = adapter.read_results(job, folder, adapter.run(job, folder))
        in_plane = np.abs(raw.shapes[:, :, 1]).max(axis=1) > np.abs(raw.shapes[:, :, 2]).max(axis=1)
        (i,) = np.flatnonzero(in_plane)
        found[theory] = raw.frequencies[i]
    # Euler-Bernoulli (Blevins 1979, from memory), within 1 % for the MITC4 shell
    assert found["thick"] == pytest.approx(f_eb, rel=0.01)
    # the thin quad: 5-15 % low on this mesh (measured 0.90; a change here means Kratos changed
    # its membrane, and adapter.py's notes need a look)
    assert 0.85 < found["thin"] / f_eb < 0.95
