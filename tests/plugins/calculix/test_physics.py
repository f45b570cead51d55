"""Real CalculiX runs against handbook values (each check names its source)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.optimize import brentq

from bridge.pipeline import run_model

pytestmark = pytest.mark.solver

# f per unit λ² for the 100 × 100 × 2 mm steel plate (E 210 GPa, ν 0.3, ρ 7850 kg/m³):
# f = λ²/(2π a²)·√(D/(ρh)) = 49.821 Hz (Leissa, NASA SP-160 (1969), thin-plate formula, from memory)
E, NU, RHO, A, H = 210e9, 0.3, 7850.0, 0.1, 0.002
D = E * H**3 / (12 * (1 - NU**2))
F_PER_LAMBDA2 = math.sqrt(D / (RHO * H)) / (2 * math.pi * A**2)


def _run(write_model, text, tmp_path, name="model.toml"):
    path = write_model(text, name)
    prep, outcomes = run_model(path, tmp_path / ("run_" + name.split(".")[0]))
    (o,) = outcomes
    assert o.ok, o.error
    return prep, o


def test_unit_frequency_matches_reference():
    # Leissa, NASA SP-160 (1969), thin-plate formula, from memory: 49.821 Hz per unit λ² for this plate
    assert F_PER_LAMBDA2 == pytest.approx(49.821, rel=1e-4)


def test_clamped_plate_quad4_10x10(ccx, write_model, plate, tmp_path):
    prep, o = _run(write_model, plate("quad4", (10, 10), "clamped"), tmp_path)
    f = o.result.frequencies
    assert prep.mesh.n_nodes == 121 and prep.mesh.n_elements == 100
    assert prep.constraints.constrained_nodes == 40 and prep.free_dof == 486  # 81 interior nodes × 6
    # typical 10 × 10 linear-shell result 1770 Hz ± 5 % (common practice, no source)
    assert f[0] == pytest.approx(1770.0, rel=0.05)
    # modes 2 and 3 of a square plate are a repeated pair (symmetry, common practice, no source)
    assert f[2] == pytest.approx(f[1], rel=0.005)
    assert o.summary["rigid_body_modes"] == 0


def test_clamped_plate_quad8_refined(ccx, write_model, plate, tmp_path):
    _, o = _run(write_model, plate("quad8", (20, 20), "clamped", modes=6), tmp_path)
    f = o.result.frequencies
    # Leissa, Vibration of Plates, NASA SP-160 (1969): CCCC λ² = 35.99 → 1793 Hz (from memory), within 1 %
    assert f[0] == pytest.approx(35.99 * F_PER_LAMBDA2, rel=0.01)
    assert f[0] == pytest.approx(1793.0, rel=0.01)
    # repeated pair by symmetry (common practice, no source)
    assert f[2] == pytest.approx(f[1], rel=0.005)
    # Leissa 1969 λ² = 73.41 for modes 2-3 (from memory), within 1 %
    assert f[1] == pytest.approx(73.41 * F_PER_LAMBDA2, rel=0.01)


def test_free_plate(ccx, write_model, plate, tmp_path):
    _, o = _run(write_model, plate("quad8", (20, 20), "free", modes=12), tmp_path)
    r = o.result
    assert o.summary["rigid_body_modes"] == 6
    assert {c.name: c.status for c in o.checks}["rigid_body_modes"] == "ok"
    # FFFF ν = 0.3, converged Rayleigh-Ritz λ² (converged Rayleigh–Ritz of Kirchhoff plate theory; Leissa, JSV 31(3) 1973, from memory), within 2 %
    ritz = np.array([13.468, 19.596, 24.270, 34.801, 34.801, 61.093])
    np.testing.assert_allclose(r.frequencies[6:12] / F_PER_LAMBDA2, ritz, rtol=0.02)
    # Leissa, JSV 31(3) 1973 (from memory): the older table lies up to 1 % high; 2.5 % against it
    leissa = np.array([13.49, 19.79, 24.43, 35.02, 35.02, 61.53])
    np.testing.assert_allclose(r.frequencies[6:12] / F_PER_LAMBDA2, leissa, rtol=0.025)
    # a free body's effective masses sum to its mass within 0.5 % (Σ m_eff = rᵀMr, definition of effective modal mass; Chopra, Dynamics of Structures, from memory)
    np.testing.assert_allclose(r.effective_mass[:, :3].sum(axis=0), r.total_mass, rtol=0.005)
    assert r.total_mass == pytest.approx(RHO * A * A * H, rel=1e-9)  # ρ·a²·h, exact geometry


def test_simply_supported_plate(ccx, write_model, plate, tmp_path):
    _, o = _run(write_model, plate("quad8", (20, 20), "simply_supported", modes=6), tmp_path)
    r = o.result
    # exact Navier solution λ² = π²(m² + n²) (Leissa, NASA SP-160 (1969), from memory), within 1.5 %
    mn = [(1, 1), (1, 2), (2, 1), (2, 2), (1, 3), (3, 1)]
    exact = np.array([math.pi**2 * (m * m + n * n) for m, n in mn])
    np.testing.assert_allclose(r.frequencies / F_PER_LAMBDA2, exact, rtol=0.015)
    # no in-plane mode among the first 6: each is out-of-plane to 99 % of its shape (common practice, no source)
    uz_share = (r.shapes[:, :, 2] ** 2).sum(axis=1) / (r.shapes**2).sum(axis=(1, 2))
    assert np.all(uz_share > 0.99), uz_share


def test_hex20_solid_matches_quad8_shell(ccx, write_model, plate, tmp_path):
    _, shell = _run(write_model, plate("quad8", (20, 20), "clamped", modes=6), tmp_path, "shell.toml")
    solid = """
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
    modes = 6
    [mesh]
    family = "hex20"
    divisions = [20, 20, 2]
    """
    _, o = _run(write_model, solid, tmp_path, "solid.toml")
    # the acceptance: hex20 solid within 2 % of the quad8 shell (common practice, no source)
    np.testing.assert_allclose(o.result.frequencies[:3], shell.result.frequencies[:3], rtol=0.02)


# --- cantilever strip -----------------------------------------------------------

L_C, B_C, T_C = 0.2, 0.01, 0.002  # m


def _cantilever(family="quad8", nx=60, ny=2, modes=14, masses=""):
    # ν = 0: the strip's bending stiffness is then E·I exactly, with no plate effect
    # E/(1 − ν²) to argue about (common practice, no source)
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
    [regions.tip]
    select = "sides"
    sides = ["xmax"]
    [[supports]]
    region = "root"
    kind = "clamped"
    {masses}
    [analysis]
    modes = {modes}
    [mesh]
    family = "{family}"
    divisions = [{nx}, {ny}]
    """


def _beam_f(beta_l):
    EI = 210e9 * B_C * T_C**3 / 12
    m = 7850.0 * B_C * T_C
    return beta_l**2 / (2 * math.pi * L_C**2) * math.sqrt(EI / m)


def _bending_modes(r):
    """Indices of the out-of-plane bending modes: those with z effective mass above 0.1 %."""
    frac = r.effective_mass_fraction()
    return np.flatnonzero(frac[:, 2] > 1e-3)


def test_cantilever_strip_against_euler_bernoulli(ccx, write_model, tmp_path):
    _, o = _run(write_model, _cantilever(), tmp_path)
    r = o.result
    idx = _bending_modes(r)[:5]
    assert idx.size == 5
    # Blevins (1979) Table 8-1, clamped-free βL (from memory; also the roots of cos βL cosh βL = -1)
    beta = np.array([1.875104, 4.694091, 7.854757, 10.995541, 14.137168])
    roots = [brentq(lambda x: math.cos(x) * math.cosh(x) + 1, b - 0.3, b + 0.3) for b in beta]
    np.testing.assert_allclose(roots, beta, rtol=1e-6)
    np.testing.assert_allclose(r.frequencies[idx], [_beam_f(b) for b in beta], rtol=0.02)
    # cumulative effective-mass fractions of a cantilever (60 Hermite beam
    # elements; mode 1 analytic 0.6131, Chopra, from memory), within 0.02
    cum = np.cumsum(r.effective_mass_fraction()[idx, 2])
    np.testing.assert_allclose(cum, [0.613, 0.801, 0.866, 0.899, 0.919], atol=0.02)
    # five bending modes are needed to pass 90 % in z (EN 1998-1 §4.3.3.3.1 rule, clause number from memory)
    assert cum[3] < 0.90 <= cum[4]


def test_tip_mass_lowers_first_frequency_as_predicted(ccx, write_model, tmp_path):
    beam_mass = 7850.0 * L_C * B_C * T_C  # kg
    tip = 0.5 * beam_mass
    masses = f"""
    [[masses]]
    name = "sensor"
    mass = "{tip} kg"
    region = "tip"
    """
    _, bare = _run(write_model, _cantilever(modes=4), tmp_path, "bare.toml")
    _, loaded = _run(write_model, _cantilever(modes=4, masses=masses), tmp_path, "loaded.toml")
    f0 = bare.result.frequencies[_bending_modes(bare.result)[0]]
    f1 = loaded.result.frequencies[0]
    # Euler-Bernoulli cantilever with a tip mass M (no rotary inertia), frequency equation
    # 1 + cos λ cosh λ + (M/m) λ (cos λ sinh λ − sin λ cosh λ) = 0, m the beam mass
    # (Blevins 1979, Table 8-? "beam with end mass", from memory)
    mu = tip / beam_mass
    lam = brentq(lambda x: 1 + math.cos(x) * math.cosh(x)
                 + mu * x * (math.cos(x) * math.sinh(x) - math.sin(x) * math.cosh(x)), 0.5, 1.875)
    predicted_ratio = (lam / 1.875104) ** 2
    assert f1 / f0 == pytest.approx(predicted_ratio, rel=0.01)
    # and Rayleigh's estimate f = (1/2π)√(3EI/((M + 0.2357 m) L³)) (Blevins 1979, from memory), 2 %
    EI = 210e9 * B_C * T_C**3 / 12
    rayleigh = math.sqrt(3 * EI / ((tip + 0.2357 * beam_mass) * L_C**3)) / (2 * math.pi)
    assert f1 == pytest.approx(rayleigh, rel=0.02)
    # the added mass is in the model's mass and in the effective-mass bookkeeping
    assert loaded.result.total_mass == pytest.approx(beam_mass + tip, rel=1e-9)


def test_point_mass_at_a_point(ccx, write_model, tmp_path):
    beam_mass = 7850.0 * L_C * B_C * T_C
    masses = f"""
    [[masses]]
    name = "sensor"
    mass = "{0.5 * beam_mass} kg"
    at = ["200 mm", "5 mm", "0 mm"]
    """
    _, loaded = _run(write_model, _cantilever(modes=4, masses=masses), tmp_path, "point.toml")
    # same frequency equation as above, μ = 0.5 (Blevins 1979, from memory): ratio (λ/1.8751)²
    lam = brentq(lambda x: 1 + math.cos(x) * math.cosh(x)
                 + 0.5 * x * (math.cos(x) * math.sinh(x) - math.sin(x) * math.cosh(x)), 0.5, 1.875)
    assert loaded.result.frequencies[0] == pytest.approx(_beam_f(lam), rel=0.02)


def test_step_file_meshes_and_runs(ccx, write_model, tmp_path):
    from bridge.meshing.gmsh import write_step_box

    write_step_box(tmp_path / "bar.step", [0, 0, 0], [0.2, 0.02, 0.01])
    text = """
    name = "bar from STEP"
    [geometry]
    kind = "cad"
    file = "bar.step"
    [materials.steel]
    youngs_modulus = "210 GPa"
    poisson_ratio = 0.3
    density = "7850 kg/m^3"
    [section]
    kind = "solid"
    material = "steel"
    [regions.root]
    select = "plane"
    axis = "x"
    at = "0 mm"
    [[supports]]
    region = "root"
    kind = "clamped"
    [analysis]
    modes = 3
    [mesh]
    family = "tet10"
    size = "5 mm"
    """
    prep, o = _run(write_model, text, tmp_path)
    root = prep.mesh.region_nodes("root")
    assert root.size > 0 and np.allclose(prep.mesh.points[root, 0], 0.0, atol=1e-9)
    # Euler-Bernoulli cantilever, bending about the thin axis (h = 10 mm):
    # f1 = 1.8751²/(2π L²)·√(EI/m) (Blevins 1979, from memory); L/h = 20 keeps shear below 1 %
    EI = 210e9 * 0.02 * 0.01**3 / 12
    m = 7850.0 * 0.02 * 0.01
    f1 = 1.875104**2 / (2 * math.pi * 0.2**2) * math.sqrt(EI / m)
    assert o.result.frequencies[0] == pytest.approx(f1, rel=0.02)


def test_own_effective_masses_agree_with_calculix_on_a_free_solid(ccx, write_model, tmp_path):
    """modebridge's consistent-mass effective masses against CalculiX's own (.dat) on a free solid,
    where CalculiX's bookkeeping is trustworthy (see README: not so for clamped shells)."""
    text = """
    name = "free steel block"
    [geometry]
    kind = "block"
    length = "100 mm"
    width = "60 mm"
    height = "20 mm"
    [materials.steel]
    youngs_modulus = "210 GPa"
    poisson_ratio = 0.3
    density = "7850 kg/m^3"
    [section]
    kind = "solid"
    material = "steel"
    [analysis]
    modes = 12
    [mesh]
    family = "hex20"
    divisions = [5, 3, 1]
    """
    _, o = _run(write_model, text, tmp_path)
    r = o.result
    mass = 7850.0 * 0.1 * 0.06 * 0.02  # ρ·V, exact geometry
    assert r.total_mass == pytest.approx(mass, rel=1e-12)
    # Σ m_eff = rᵀMr = the mass for a free body (definition of effective modal mass; Chopra, Dynamics of Structures, from memory), within 0.5 %
    np.testing.assert_allclose(r.effective_mass[:, :3].sum(axis=0), mass, rtol=0.005)
    solver = r.metadata["solver_mass_properties"]
    np.testing.assert_allclose(solver["total_effective_mass"][:3], mass, rtol=0.005)
    # the two bookkeepings agree mode by mode on the translations (common practice, no source);
    # the rigid-body modes are an arbitrary basis of a repeated zero eigenvalue, so compare their sums
    ours = r.effective_mass[:, :3]
    theirs = np.asarray(solver["effective_mass"])[:, :3]
    np.testing.assert_allclose(ours[:6].sum(axis=0), theirs[:6].sum(axis=0), rtol=0.005)
    np.testing.assert_allclose(ours[6:], theirs[6:], atol=0.005 * mass)
    # mass-normalised shapes are normalised for our mass matrix too (within 1 %, common practice)
    np.testing.assert_allclose(r.metadata["modal_mass"], 1.0, atol=0.01)
