"""Springs, couplings and masses with inertia on real solvers (issue 9, part A), with sources.

CalculiX writes *RIGID BODY / *EQUATION / SPRING1-2, OpenSees rigidLink / zeroLength, Kratos
LinearMasterSlaveConstraint and SpringDamperElement3D on auxiliary nodes in the mount's axes
(modebridge_kratos.connections), its constrained eigen-problem solved by its run script.
"""

from __future__ import annotations

import textwrap

import numpy as np
import pytest
import scipy.linalg as sl
from scipy.optimize import brentq

from bridge.model import inertia_tensor, spring_axes
from bridge.pipeline import model_mass, run_model

pytestmark = pytest.mark.solver

SOLVERS = ["calculix", "kratos", "opensees"]


def _run(write_model, tmp_path, text, solver, name="model.toml"):
    path = write_model(textwrap.dedent(text), name)
    prep, (out,) = run_model(path, tmp_path / f"{path.stem}-{solver}", solvers=[solver])
    assert out.ok, str(out.error)
    return prep, out.result


# --- a rigid box on four isolators ------------------------------------------------------------

BOX_MASS = 6.0  # kg
BOX_CG = np.array([0.010, -0.005, 0.050])  # m
BOX_J = [12e-3, 20e-3, 25e-3, 1e-3, -0.5e-3, 2e-3]  # Ixx Iyy Izz Ixy Iyz Ixz, kg m^2
FEET = np.array([[-0.1, -0.06, 0.0], [0.1, -0.06, 0.0], [0.1, 0.06, 0.0], [-0.1, 0.06, 0.0]])
MOUNT_K = np.array([100e3, 150e3, 300e3])  # N/m along each mount's x, y, z


def _mount_axes(foot):
    """Each mount inclined by 25° towards the box's centre line (a 'focalised' layout), its x axis
    horizontal: the mounts' stiffness matrices are then full in global axes."""
    r = np.array([foot[0], foot[1], 0.0])
    x = np.cross([0.0, 0.0, 1.0], r)
    x /= np.linalg.norm(x)
    inward = -r / np.linalg.norm(r)
    c, s = np.cos(np.radians(25)), np.sin(np.radians(25))
    z = c * np.array([0.0, 0.0, 1.0]) + s * inward
    return x, np.cross(z, x)


def _box_model() -> str:
    feet = "\n".join(f'f{i + 1} = ["{p[0]} m", "{p[1]} m", "{p[2]} m"]' for i, p in enumerate(FEET))
    springs = ""
    for i, p in enumerate(FEET):
        x, y = _mount_axes(p)
        springs += f"""
[[springs]]
name = "mount{i + 1}"
points = ["f{i + 1}"]
stiffness = ["{MOUNT_K[0]} N/m", "{MOUNT_K[1]} N/m", "{MOUNT_K[2]} N/m"]
axes = [[{", ".join(f"{v:.17g}" for v in x)}], [{", ".join(f"{v:.17g}" for v in y)}]]
"""
    return f"""
name = "box on four isolators"
[geometry]
kind = "points"
[reference_points]
box = ["{BOX_CG[0]} m", "{BOX_CG[1]} m", "{BOX_CG[2]} m"]
{feet}
[[couplings]]
reference = "box"
kind = "rigid"
points = ["f1", "f2", "f3", "f4"]
{springs}
[[masses]]
name = "box"
mass = "{BOX_MASS} kg"
point = "box"
inertia = [{", ".join(f'"{v} kg*m^2"' for v in BOX_J)}]
[analysis]
modes = 6
"""


def _skew(r):
    return np.array([[0, -r[2], r[1]], [r[2], 0, -r[0]], [-r[1], r[0], 0]])


def rigid_body_on_mounts():
    """Eigenvalues (rad/s)^2 of the 6 × 6 rigid-body model, assembled here: M = diag(m I, J) about the
    centre of gravity; K = Σ Tᵀ (Rᵀ k R) T with T = [I, −[r]×] mapping the body's translation and
    rotation at the centre of gravity to the mount's displacement at r (Harris' Shock and Vibration
    Handbook, the chapter on vibration isolation: rigid body on resilient supports, from memory)."""
    M = np.zeros((6, 6))
    M[:3, :3] = BOX_MASS * np.eye(3)
    M[3:, 3:] = inertia_tensor(BOX_J)
    K = np.zeros((6, 6))
    for p in FEET:
        R = spring_axes(_mount_axes(p))
        T = np.hstack([np.eye(3), -_skew(p - BOX_CG)])
        K += T.T @ (R.T @ np.diag(MOUNT_K) @ R) @ T
    return np.sort(sl.eigh(K, M, eigvals_only=True))


@pytest.mark.parametrize("solver", SOLVERS)
def test_rigid_box_on_four_isolators_matches_the_rigid_body_model(solver, three_solvers, write_model, tmp_path):
    prep, r = _run(write_model, tmp_path, _box_model(), solver)
    expected = rigid_body_on_mounts()
    assert np.ptp(expected) > 1.5 * expected.min()  # six distinct, coupled mounting modes
    # all six mounting modes within 0.5 % (issue acceptance) of the 6 × 6 model's eigenvalues
    np.testing.assert_allclose(r.eigenvalues, expected, rtol=0.005)
    # the model's mass is the box alone, and modebridge's own mass matrix holds its inertia: the
    # mass on free DOF equals it in every direction, and rotationally J + m(|c|² I − c cᵀ) about
    # the origin (parallel axes; the diagonal is what r_rotᵀ M r_rot gives)
    assert r.total_mass == pytest.approx(BOX_MASS, rel=1e-12)
    c = BOX_CG
    J0 = inertia_tensor(BOX_J) + BOX_MASS * (c @ c * np.eye(3) - np.outer(c, c))
    np.testing.assert_allclose(r.total_effective_mass[:3], BOX_MASS, rtol=1e-9)
    np.testing.assert_allclose(r.total_effective_mass[3:], np.diag(J0), rtol=1e-9)
    # the six modes carry the whole mass (common practice, no source: a rigid body's modes span it)
    np.testing.assert_allclose(r.effective_mass[:, :3].sum(axis=0), BOX_MASS, rtol=1e-3)
    warnings = r.metadata["provenance"]["solver_warnings"]
    assert any("six point masses" in w and "'box'" in w for w in warnings)
    assert {c["name"]: c["status"] for c in r.metadata["checks"]}["rigid_body_modes"] == "ok"  # held by the mounts


# --- couplings on plates ---------------------------------------------------------------------------

STEEL = """
[materials.steel]
youngs_modulus = "210 GPa"
poisson_ratio = {nu}
density = "7850 kg/m^3"
"""


def _strip(solver: str, extra: str, modes: int = 6, nu: float = 0.0) -> str:
    """A 200 × 10 × 2 mm steel strip: shells (quad4 80 × 4) for OpenSees; a solid (hex20, C3D20R,
    40 × 2 × 1) for CalculiX, whose *RIGID BODY holds shell nodes' translations only (see
    modebridge_calculix.adapter.shell_coupling_warnings), so a coupling on a shell edge is a hinge there."""
    if solver == "calculix":
        body = """[geometry]
kind = "block"
length = "200 mm"
width = "10 mm"
height = "2 mm"
""" + STEEL.format(nu=nu) + """
[section]
kind = "solid"
material = "steel"
"""
        mesh = 'family = "hex20"\ndivisions = [40, 2, 1]'
    else:
        body = """[geometry]
kind = "plate"
length = "200 mm"
width = "10 mm"
""" + STEEL.format(nu=nu) + """
[section]
kind = "shell"
material = "steel"
thickness = "2 mm"
"""
        mesh = 'family = "quad4"\ndivisions = [80, 4]'
    return f"""
name = "steel strip"
{body}[regions.root]
select = "sides"
sides = ["xmin"]
[regions.tip]
select = "sides"
sides = ["xmax"]
[analysis]
modes = {modes}
[mesh]
{mesh}
{extra}
"""


#: the reference point at the middle of the strip's end section
_MID_Z = {"calculix": "1 mm", "kratos": "0 mm", "opensees": "0 mm"}


@pytest.mark.parametrize("solver", SOLVERS)
def test_a_clamped_reference_point_of_a_rigid_coupling_clamps_its_region(solver, three_solvers, write_model,
                                                                         tmp_path):
    clamped = _strip(solver, '[[supports]]\nregion = "root"\nkind = "clamped"\n', nu=0.3)
    coupled = _strip(solver, f"""
[reference_points]
root_ref = ["0 mm", "5 mm", "{_MID_Z[solver]}"]
[[couplings]]
reference = "root_ref"
kind = "rigid"
region = "root"
[[supports]]
point = "root_ref"
kind = "clamped"
""", nu=0.3)
    _, a = _run(write_model, tmp_path, clamped, solver, "clamped.toml")
    _, b = _run(write_model, tmp_path, coupled, solver, "coupled.toml")
    # a rigid coupling whose reference point is clamped holds every DOF of its nodes, rotations
    # included: the same modes as the clamped edge (common practice, no source), within 0.5 %
    np.testing.assert_allclose(b.frequencies, a.frequencies, rtol=0.005)
    assert b.frequencies[0] > 1.0  # held: no rigid-body mode


@pytest.mark.parametrize("solver", ["calculix", "kratos"])  # OpenSees has no distributing coupling
def test_a_distributing_coupling_adds_no_stiffness(solver, three_solvers, write_model, tmp_path, plate):
    free = plate({"calculix": "quad8", "kratos": "quad4"}[solver], (8, 8) if solver == "calculix" else (16, 16),
                 "free", modes=14)
    coupled = free + """
[regions.edge]
select = "sides"
sides = ["xmax", "ymax"]
[reference_points]
probe = ["60 mm", "70 mm", "30 mm"]
[[couplings]]
reference = "probe"
kind = "distributing"
region = "edge"
"""
    _, a = _run(write_model, tmp_path, free, solver, "free.toml")
    prep, b = _run(write_model, tmp_path, coupled, solver, "coupled.toml")
    # the reference point only follows the edges' weighted mean: the free plate keeps its free
    # frequencies to 0.1 % (issue acceptance); modes 7..14 are the elastic ones
    np.testing.assert_allclose(b.frequencies[6:], a.frequencies[6:], rtol=0.001)
    assert a.frequencies[6] > 100.0 and b.n_modes == 14
    # and it does follow: its translation is the weighted mean of the edge nodes' (tributary lengths
    # as weights), to 2e-4 of the largest edge displacement (measured 1.2e-4: CalculiX prints reference
    # points with six digits and applies the equations to its expanded shell nodes)
    probe = prep.mesh.extra_nodes["probe"]
    nodes, w = prep.mesh.region_weights("edge")
    mean = np.einsum("n,mnc->mc", w, b.shapes[:, nodes, :])
    scale = np.abs(b.shapes[:, nodes, :]).max()
    np.testing.assert_allclose(b.shapes[:, probe, :], mean, atol=2e-4 * scale)


# --- a cantilever with a tip mass that has rotary inertia -------------------------------------------

def tip_mass_frequency_parameters(mu: float, j: float, count: int = 2) -> np.ndarray:
    """λ = βL of a clamped–free Euler–Bernoulli beam carrying at its free end a mass μ·ρAL with
    rotary inertia j·ρAL³ (Laura, Pombo & Susemihl, J. Sound Vib. 37 (1974) 161–168; the boundary
    conditions EI W''(L) = ω² J W'(L) and EI W'''(L) = −ω² M W(L) follow from Hamilton's principle).
    W = A (cosh βx − cos βx) + B (sinh βx − sin βx); λ solves det = 0 (scipy brentq)."""

    def det(lam):
        ch, c, sh, s = np.cosh(lam), np.cos(lam), np.sinh(lam), np.sin(lam)
        # derivatives at x = L of the two functions, times L^k / λ^k
        f = [ch - c, sh - s]
        f1 = [sh + s, ch - c]
        f2 = [ch + c, sh + s]
        f3 = [sh - s, ch + c]
        row1 = [f2[i] - j * lam**3 * f1[i] for i in range(2)]  # W'' − (J ω²/EI) W' with L = 1
        row2 = [f3[i] + mu * lam * f[i] for i in range(2)]  # W''' + (M ω²/EI) W
        return (row1[0] * row2[1] - row1[1] * row2[0]) / np.cosh(lam) ** 2

    grid = np.linspace(0.3, 12.0, 4000)
    vals = [det(x) for x in grid]
    roots = [brentq(det, a, b) for a, b, fa, fb in zip(grid, grid[1:], vals, vals[1:]) if fa * fb < 0]
    return np.array(roots[:count])


def test_frequency_equation_reduces_to_the_known_cases():
    # bare cantilever: βL = 1.87510, 4.69409 (Blevins 1979, Table 8-1, from memory)
    np.testing.assert_allclose(tip_mass_frequency_parameters(0.0, 0.0), [1.87510, 4.69409], rtol=1e-5)
    # tip mass only, μ = 1: βL = 1.24792 (Blevins 1979, Table 8-8, from memory)
    assert tip_mass_frequency_parameters(1.0, 0.0, 1)[0] == pytest.approx(1.24792, rel=1e-4)
    # a heavy tip mass: ω² ≈ 3EI/((M + 33/140 m)L³), i.e. λ⁴ ≈ 3/(μ + 0.2357) (tip stiffness of a
    # cantilever with Rayleigh's effective beam mass; Rayleigh, Theory of Sound, from memory)
    assert tip_mass_frequency_parameters(100.0, 0.0, 1)[0] ** 4 == pytest.approx(3 / (100 + 33 / 140), rel=1e-4)
    # a heavy rotary inertia alone lowers the first mode below the bare cantilever's
    assert tip_mass_frequency_parameters(0.0, 1.0, 1)[0] < 1.87510


@pytest.mark.parametrize("solver", SOLVERS)
def test_cantilever_with_tip_mass_and_rotary_inertia_through_a_coupling(solver, three_solvers, write_model,
                                                                         tmp_path):
    L, b, t, rho, E = 0.2, 0.01, 0.002, 7850.0, 210e9
    m_beam = rho * b * t * L
    mu, j = 0.5, 0.05
    M, J = mu * m_beam, j * m_beam * L**2
    model = _strip(solver, f"""
[[supports]]
region = "root"
kind = "clamped"
[reference_points]
tip_cg = ["200 mm", "5 mm", "{_MID_Z[solver]}"]
[[couplings]]
reference = "tip_cg"
kind = "rigid"
region = "tip"
[[masses]]
name = "tip"
mass = "{M!r} kg"
point = "tip_cg"
inertia = ["{J!r} kg*m^2", "{J!r} kg*m^2", "{J!r} kg*m^2"]
""", modes=8)
    prep, r = _run(write_model, tmp_path, model, solver)
    # the bending modes out of the strip's plane: z translations dominate, both long edges alike
    body = np.arange(len(r.node_ids) - 7)  # continuum nodes (the reference point and six inertia nodes follow)
    on_z0 = np.isclose(r.points[body, 2], 0.0)
    edge0 = body[np.isclose(r.points[body, 1], 0.0) & on_z0]
    edge1 = body[np.isclose(r.points[body, 1], b) & on_z0]
    edge0 = edge0[np.argsort(r.points[edge0, 0])]
    edge1 = edge1[np.argsort(r.points[edge1, 0])]
    bending = [k for k in range(r.n_modes)
               if np.abs(r.shapes[k, body, 2]).sum() > 0.9 * np.abs(r.shapes[k, body]).sum()
               and np.dot(r.shapes[k, edge0, 2], r.shapes[k, edge1, 2]) > 0.9 * np.linalg.norm(
                   r.shapes[k, edge0, 2]) * np.linalg.norm(r.shapes[k, edge1, 2])]
    assert len(bending) >= 2
    lam = tip_mass_frequency_parameters(mu, j)
    I = b * t**3 / 12
    exact = lam**2 / (2 * np.pi * L**2) * np.sqrt(E * I / (rho * b * t))
    # ν = 0 makes the strip a beam (no plate or anticlastic stiffening); within 1 % (issue acceptance) of the exact
    # frequency equation with tip mass and rotary inertia (Laura, Pombo & Susemihl 1974)
    np.testing.assert_allclose(r.frequencies[bending[:2]], exact, rtol=0.01)
    # without the rotary inertia the first frequency would be clearly higher: J matters here
    lam0 = tip_mass_frequency_parameters(mu, 0.0, 1)[0]
    assert lam0**2 / lam[0] ** 2 > 1.03
    assert model_mass(prep.model, prep.mesh) == pytest.approx(m_beam + M, rel=1e-9)


# --- effective masses with springs, point masses and coupled masses --------------------------------

def _mounted_plate(grounded: bool) -> str:
    springs = """
[[springs]]
name = "corner_mounts"
region = "corners"
stiffness = ["8 N/mm", "8 N/mm", "20 N/mm"]
""" if grounded else ""
    return f"""
name = "plate with equipment"
[geometry]
kind = "plate"
length = "100 mm"
width = "100 mm"
{STEEL.format(nu=0.3)}
[section]
kind = "shell"
material = "steel"
thickness = "2 mm"
[regions.corners]
select = "box"
min = ["-1 mm", "-1 mm", "-1 mm"]
max = ["101 mm", "101 mm", "1 mm"]
entity = "point"
[regions.far_edge]
select = "sides"
sides = ["ymax", "xmax"]
[reference_points]
box = ["50 mm", "80 mm", "25 mm"]
[[couplings]]
reference = "box"
kind = "rigid"
region = "far_edge"
[[masses]]
name = "box"
mass = "0.2 kg"
point = "box"
inertia = ["1.5e-4 kg*m^2", "1.0e-4 kg*m^2", "2.0e-4 kg*m^2", "0.2e-4 kg*m^2", "0 kg*m^2", "0 kg*m^2"]
[[masses]]
name = "connector"
mass = "0.05 kg"
at = ["30 mm", "30 mm", "0 mm"]
{springs}
[analysis]
modes = 12
[mesh]
family = "{{family}}"
divisions = [8, 8]
"""


@pytest.mark.parametrize("solver,grounded", [("calculix", True), ("kratos", True), ("opensees", True),
                                             ("calculix", False), ("kratos", False)])
def test_effective_masses_include_springs_point_and_coupled_masses(solver, grounded, three_solvers,
                                                                   write_model, tmp_path):
    fam = {"calculix": "quad8", "kratos": "quad4", "opensees": "quad4"}[solver]
    prep, r = _run(write_model, tmp_path, _mounted_plate(grounded).replace("{family}", fam), solver)
    total = model_mass(prep.model, prep.mesh)
    plate_mass = 7850 * 0.1 * 0.1 * 0.002
    assert total == pytest.approx(plate_mass + 0.25, rel=1e-9)
    # nothing is fixed: the mass on free DOF (rᵀMr) is the model's mass, every added mass included
    np.testing.assert_allclose(r.total_effective_mass[:3], total, rtol=1e-9)
    # the 12 modes (six mounting or rigid-body modes far below the plate's first elastic mode, then
    # elastic ones) carry the mass on free DOF: Σ m_eff within 0.5 % of it (issue acceptance)
    np.testing.assert_allclose(r.effective_mass[:, :3].sum(axis=0), r.total_effective_mass[:3], rtol=0.005)
    checks = {c["name"]: c["status"] for c in r.metadata["checks"]}
    assert checks["rigid_body_modes"] == "ok" and checks["mass_sum"] == "ok"
    assert (r.frequencies[0] > 1.0) == grounded


# --- a spring between two points, in its own inclined axes -------------------------------------

def _two_masses(b_height: str = "10 mm") -> tuple[str, np.ndarray]:
    """Mass a on a spring to the ground, mass b on a spring to a (a bushing: b sits where a is, or
    ``b_height`` away: a spring acts on the relative translations whatever its length), each in its own inclined axes; the
    6 × 6 K = Σ over springs of Rᵀ diag(k) R on the relative displacement (a spring's stiffness
    matrix turned into global axes: common practice, no source) and M = diag(m_a I, m_b I)."""
    ma, mb = 0.5, 0.3  # kg
    ka, kb = np.array([40e3, 70e3, 100e3]), np.array([25e3, 50e3, 90e3])  # N/m
    xa, ya = np.array([1.0, 1.0, 0.0]), np.array([-1.0, 1.0, 1.0])
    xb, yb = np.array([0.0, 1.0, 2.0]), np.array([1.0, 0.0, 0.0])
    Ra, Rb = spring_axes([xa, ya]), spring_axes([xb, yb])
    Ka, Kb = Ra.T @ np.diag(ka) @ Ra, Rb.T @ np.diag(kb) @ Rb
    K = np.zeros((6, 6))
    K[:3, :3] = Ka + Kb
    K[3:, 3:] = Kb
    K[:3, 3:] = K[3:, :3] = -Kb
    M = np.diag([ma] * 3 + [mb] * 3)

    def vec(v):
        return "[" + ", ".join(f"{x:g}" for x in v) + "]"

    text = f"""
name = "two masses on inclined springs"
[geometry]
kind = "points"
[reference_points]
a = ["0 mm", "0 mm", "10 mm"]
b = ["0 mm", "0 mm", "{b_height}"]
[[springs]]
name = "base"
points = ["a"]
stiffness = ["{ka[0]} N/m", "{ka[1]} N/m", "{ka[2]} N/m"]
axes = [{vec(xa)}, {vec(ya)}]
[[springs]]
name = "link"
points = ["b"]
to = "a"
stiffness = ["{kb[0]} N/m", "{kb[1]} N/m", "{kb[2]} N/m"]
axes = [{vec(xb)}, {vec(yb)}]
[[masses]]
name = "ma"
mass = "{ma} kg"
point = "a"
[[masses]]
name = "mb"
mass = "{mb} kg"
point = "b"
[analysis]
modes = 6
"""
    return text, np.sort(sl.eigh(K, M, eigvals_only=True))


@pytest.mark.parametrize("solver", SOLVERS)
def test_a_spring_between_two_points_acts_in_its_own_axes(solver, three_solvers, write_model, tmp_path):
    text, expected = _two_masses()
    _, r = _run(write_model, tmp_path, text, solver)
    assert np.ptp(expected) > expected.min()  # six distinct, coupled modes
    # the six eigenvalues of the 6 × 6 model assembled above, within 0.5 % (as the isolators)
    np.testing.assert_allclose(r.eigenvalues, expected, rtol=0.005)


@pytest.mark.parametrize("solver", SOLVERS)
def test_a_spring_whose_ends_are_apart_acts_on_their_relative_translations(solver, three_solvers, write_model,
                                                                          tmp_path):
    """The same two masses with b 20 mm above a: the spring acts on the relative translations along
    its own axes (no moment from its length) on every solver, and the run says so."""
    text, expected = _two_masses(b_height="30 mm")
    _, r = _run(write_model, tmp_path, text, solver)
    # the 6 × 6 model above, within 0.5 % (as the isolators; textbook springs, from memory)
    np.testing.assert_allclose(r.eigenvalues, expected, rtol=0.005)
    warnings = " ".join(r.metadata["provenance"].get("solver_warnings") or [])
    assert "spring 'link': its ends are 20 mm apart" in warnings
