"""Curved and folded shells on the three solvers (issue 8): ring modes of a free cylinder, a bent
sheet bracket from STEP and from the built-in profile against a tet10 solid, a plate with a hole
against a solid, a skew simply supported plate."""

from __future__ import annotations

import math

import numpy as np
import pytest

from bridge.compare.pairing import compare_modes, find_clusters
from bridge.compare.results import Thresholds, compare_results
from bridge.errors import CapabilityError
from bridge.meshing.gmsh import profile_faces, profile_solid, write_step
from bridge.pipeline import run_model

pytestmark = pytest.mark.solver

E, NU, RHO = 210e9, 0.3, 7850.0
STEEL = """
[materials.steel]
youngs_modulus = "210 GPa"
poisson_ratio = 0.3
density = "7850 kg/m^3"
"""


def _model(name: str, geometry: str, section: str, mesh: str, modes: int, extra: str = "") -> str:
    return f"""
name = "{name}"
[geometry]
{geometry}
{STEEL}
[section]
{section}
[mesh]
{mesh}
[analysis]
modes = {modes}
{extra}
"""


SHELL = 'kind = "shell"\nmaterial = "steel"\nthickness = "{t}"'
SOLID = 'kind = "solid"\nmaterial = "steel"'


def ring_modes(result, n: int, axis_len: float) -> list[int]:
    """Modes whose radial motion is cos nθ / sin nθ with no axial variation (shares ≥ 0.95)."""
    p = result.points
    th = np.arctan2(p[:, 1], p[:, 0])
    out = []
    for k in range(result.n_modes):
        if result.frequencies[k] < 1.0:
            continue
        u = result.shapes[k]
        w = u[:, 0] * np.cos(th) + u[:, 1] * np.sin(th)
        basis = np.c_[np.cos(n * th), np.sin(n * th)]
        c, *_ = np.linalg.lstsq(basis, w, rcond=None)
        share = 1 - np.sum((w - basis @ c) ** 2) / np.sum(w**2)
        if share >= 0.95:
            out.append(k)
    return out


def test_free_cylinder_ring_modes_on_three_solvers(three_solvers, write_model, tmp_path):
    R, h, L = 0.05, 1e-3, 0.06
    path = write_model(_model("free thin cylinder", 'kind = "cylinder"\nradius = "50 mm"\nlength = "60 mm"',
                              SHELL.format(t="1 mm"), 'family = "quad4"\nsize = "5 mm"', 16))
    _, outs = run_model(path, tmp_path / "out", solvers=three_solvers)
    assert all(o.ok for o in outs), [str(o.error) for o in outs]
    D = E * h**3 / (12 * (1 - NU**2))
    for o in outs:
        r = o.result
        assert o.summary["rigid_body_modes"] == 6
        clusters = find_clusters(r.frequencies)
        for n in (2, 3, 4):
            # Rayleigh's inextensional ring modes of a thin cylinder, as tabulated by Blevins,
            # Formulas for Natural Frequency and Mode Shape (1979) — from memory:
            # ω² = D / (ρ h R⁴) · n² (n² − 1)² / (n² + 1); within 2 % (issue 8)
            f = math.sqrt(D / (RHO * h * R**4) * n**2 * (n**2 - 1) ** 2 / (n**2 + 1)) / (2 * math.pi)
            ks = ring_modes(r, n, L)
            assert len(ks) == 2, (o.solver, n, ks)  # the cos nθ / sin nθ pair, nothing else
            np.testing.assert_allclose(r.frequencies[ks], f, rtol=0.02, err_msg=f"{o.solver} n={n}")
            assert ks in clusters, (o.solver, n, clusters)  # the pair is reported as one cluster
    # the solvers' pairs span the same subspaces (same mesh: no mapping)
    ref = outs[0].result
    for o in outs[1:]:
        cmp = compare_modes(ref.frequencies, ref.shapes, o.result.frequencies, o.result.shapes, 6, 6)
        for cl in cmp.clusters:
            assert max(cl.angles_deg) < 5.0  # principal angles (common practice, no source)


BRACKET = [[0.0, 0.03], [0.0, 0.0], [0.04, 0.0]]  # mid-line (y, z), m: a 30 mm and a 40 mm leg
BRACKET_TOML = ('kind = "profile"\npoints = [["0 mm", "30 mm"], ["0 mm", "0 mm"], ["40 mm", "0 mm"]]\n'
                'radii = ["4 mm"]\nlength = "20 mm"')


def test_bent_bracket_shells_from_step_and_profile_against_a_tet10_solid(three_solvers, write_model, tmp_path):
    """A 2 mm steel bracket, 20 mm wide, bent 90° on a 4 mm mid-surface radius, free.

    Its 20 mm wide leg is not a thin strip (t/b = 0.1): its twisting modes tell Reissner–Mindlin
    shells (CalculiX S4, OpenSees ShellMITC4, Kratos's MITC4 quad, which the Kratos plugin takes for
    quads by default) from Kirchhoff ones, which the Kratos plugin warns of when asked for one."""
    write_step(tmp_path / "bracket_faces.step", lambda g: profile_faces(g, BRACKET, 0.02, [0.004]))
    write_step(tmp_path / "bracket_solid.step", lambda g: profile_solid(g, BRACKET, 0.02, 0.002, [0.004]))
    prof = write_model(_model("bracket", BRACKET_TOML, SHELL.format(t="2 mm"),
                              'family = "quad4"\nsize = "1 mm"', 12), "profile.toml")
    step = write_model(_model("bracket", 'kind = "cad"\nfile = "bracket_faces.step"', SHELL.format(t="2 mm"),
                              'family = "quad4"\nsize = "1 mm"', 12), "step.toml")
    solid = write_model(_model("bracket", 'kind = "cad"\nfile = "bracket_solid.step"', SOLID,
                               'family = "tet10"\nsize = "1.5 mm"', 12), "solid.toml")
    thin = write_model(_model("bracket", BRACKET_TOML, SHELL.format(t="2 mm"), 'family = "quad4"\nsize = "1 mm"', 12,
                              '[solver_options.kratos]\nshell_theory = "thin"'), "thin.toml")
    _, outs = run_model(prof, tmp_path / "profile", solvers=three_solvers)
    _, (s_step,) = run_model(step, tmp_path / "step", solvers=["calculix"])
    _, (s_solid,) = run_model(solid, tmp_path / "solid", solvers=["calculix"])
    _, (k_thin,) = run_model(thin, tmp_path / "thin", solvers=["kratos"])
    runs = outs + [s_step, s_solid, k_thin]
    assert all(o.ok for o in runs), [str(o.error) for o in runs]
    shells = {o.solver: o.result.frequencies[6:12] for o in outs}  # modes 7-12: the first six elastic
    assert {o.solver: o.summary["element_type"] for o in outs} == {
        "calculix": "S4", "opensees": "ShellMITC4", "kratos": "ShellThickElementCorotational3D4N"}
    ref = s_solid.result.frequencies[6:12]
    # STEP surface model and built-in profile: within 0.5 % (issue 8)
    np.testing.assert_allclose(s_step.result.frequencies[6:12], shells["calculix"], rtol=0.005)
    # the three solvers' shells within 1 % of each other, every pair (issue 8; measured: Kratos's
    # MITC4 0.0-0.8 % below the others, CalculiX S4 and OpenSees within 0.4 %)
    for a, b in (("calculix", "opensees"), ("calculix", "kratos"), ("opensees", "kratos")):
        np.testing.assert_allclose(shells[b], shells[a], rtol=0.01, err_msg=f"{a} / {b}")
    # against the tet10 solid (converged: at 1 mm, 79k DOF, its six frequencies moved by at most
    # 0.5 %, measured): within 2 % on the first six elastic modes (issue 8), every solver
    for name, f in shells.items():
        np.testing.assert_allclose(f, ref, rtol=0.02, err_msg=name)
    # the shell and the solid are the same part: by shape too (mapped solid modes, MAC ≥ 0.9;
    # common practice, no source)
    cmp = compare_results(outs[0].result, s_solid.result, "shell", "solid",
                          Thresholds(min_mac=0.9, max_df=0.02), force=True)
    paired = [p for p in cmp.comparison.pairs if 6 <= p.a < 12]
    assert len(paired) == 6 and all(p.mac >= 0.9 and p.b == p.a for p in paired)
    # Kirchhoff shells on this leg: thin-plate theory gives a strip the torsion constant b t³/3, the
    # 3-D solid b t³/3 · (1 − 0.630 t/b) (Timoshenko & Goodier, Theory of Elasticity, torsion of a
    # rectangular bar — from memory), 1/√(1 − 0.063) − 1 = 3.3 % in frequency at t/b = 0.1. The
    # thin quad is that much too stiff on the twisting modes (measured +3.1 … +3.7 %), beyond the
    # 2 % gate, and the run says so with the figure; the Mindlin runs carry no such warning
    excess = k_thin.result.frequencies[6:12] / ref - 1
    assert excess.max() > 0.02
    (warning,) = [w for c in k_thin.checks if c.name == "solver_warnings" for w in c.figures["warnings"]
                  if "thin (Kirchhoff) shell" in w]
    assert "t/b = 0.100" in warning and "about 3.3 % higher in frequency" in warning
    assert not [c for o in outs for c in o.checks if c.name == "solver_warnings" and "Kirchhoff" in c.message]


def _hole_plate_solid(gmsh):
    occ = gmsh.model.occ
    box = occ.addBox(0, 0, -0.001, 0.06, 0.04, 0.002)
    hole = occ.addCylinder(0.03, 0.02, -0.002, 0, 0, 0.004, 0.0075)
    occ.cut([(3, box)], [(3, hole)])


def test_plate_with_a_central_hole_shell_against_solid(three_solvers, write_model, tmp_path):
    """Free steel plate 60 x 40 x 2 mm with a 15 mm central hole: shells on three solvers (CalculiX
    S8R; Kratos and OpenSees take quad4 at half the size, their substitute) against C3D10."""
    write_step(tmp_path / "hole_solid.step", _hole_plate_solid)
    geo = ('kind = "plate"\nlength = "60 mm"\nwidth = "40 mm"\norigin = ["0 mm", "0 mm", "0 mm"]\n'
           'cutouts = [{ shape = "circle", center = ["30 mm", "20 mm"], diameter = "15 mm" }]')
    shell = write_model(_model("plate with a hole", geo, SHELL.format(t="2 mm"),
                               'family = "quad8"\nsize = "2 mm"', 12), "shell.toml")
    solid = write_model(_model("plate with a hole", 'kind = "cad"\nfile = "hole_solid.step"', SOLID,
                               'family = "tet10"\nsize = "2 mm"', 12), "solid.toml")
    prep, shells = run_model(shell, tmp_path / "shell", solvers=three_solvers)
    _, (v,) = run_model(solid, tmp_path / "solid", solvers=["calculix"])
    assert v.ok and all(s.ok for s in shells), (v.error, [str(s.error) for s in shells])
    # the mass of the solid against ρ t (L W − π d²/4), 0.1 % (issue 8; exact geometry)
    analytic = RHO * 0.002 * (0.06 * 0.04 - math.pi * 0.015**2 / 4)
    assert v.result.total_mass == pytest.approx(analytic, rel=1e-3)
    for s in shells:
        # shells against the tet10 solid (at 1.5 mm it moved by at most 0.3 %, measured): 2 % on
        # the first six elastic modes (issue 8)
        np.testing.assert_allclose(s.result.frequencies[6:12], v.result.frequencies[6:12], rtol=0.02,
                                   err_msg=s.solver)
        # the mass of each shell model against the same analytic mass, 0.1 % (issue 8)
        assert s.result.total_mass == pytest.approx(analytic, rel=1e-3), s.solver


SKEW_SQUARE = [[0.0, 0.0], [0.1, 0.0], [0.1, 0.1], [0.0, 0.1]]


def _turned(deg: float) -> str:
    c, s = math.cos(math.radians(deg)), math.sin(math.radians(deg))
    verts = [f'["{(c * x - s * y) * 1e3:.12g} mm", "{(s * x + c * y) * 1e3:.12g} mm"]' for x, y in SKEW_SQUARE]
    return 'kind = "polygon"\nvertices = [' + ", ".join(verts) + "]"


SKEW_SUPPORT = """
[regions.rim]
select = "sides"
sides = [1, 2, 3, 4]
[[supports]]
region = "rim"
kind = "simply_supported"
"""


@pytest.mark.parametrize("solver", ["calculix", "kratos"])  # OpenSees takes no constraint equations
def test_simply_supported_skew_edges_reproduce_navier(solver, three_solvers, write_model, tmp_path):
    """A 100 mm square steel plate, 2 mm, turned by 30° so that every edge is skew. CalculiX writes the
    equations as *EQUATION, Kratos's run script applies them as master-slave relations (quad4 at 2.5 mm)."""
    path = write_model(_model("turned plate", _turned(30), SHELL.format(t="2 mm"),
                              'family = "quad8"\nsize = "5 mm"', 6, SKEW_SUPPORT))
    prep, (o,) = run_model(path, tmp_path / "out", solvers=[solver])
    assert o.ok, o.error
    assert prep.constraints.equations  # the skew edges are held through equations
    D = E * 0.002**3 / (12 * (1 - NU**2))
    # exact Navier solution for a simply supported plate: ω = π² (m² + n²) / a² · √(D / ρh);
    # bending modes (1,1), (1,2), (2,1), (2,2) within 1.5 % (as the plate_simply_supported case)
    target = [math.pi**2 * (m * m + n * n) / 0.1**2 * math.sqrt(D / (RHO * 0.002)) / (2 * math.pi)
              for m, n in ((1, 1), (1, 2), (2, 1), (2, 2))]
    np.testing.assert_allclose(o.result.frequencies[:4], target, rtol=0.015)
    # the edge nodes hold w and the along-edge translation in every mode, and move across the edge
    r = o.result
    rim = prep.mesh.region_nodes("rim")
    assert np.abs(r.shapes[:, rim, 2]).max() <= 1e-9 * np.abs(r.shapes[:, :, 2]).max()
    c, s = math.cos(math.radians(30)), math.sin(math.radians(30))
    t = np.array([c, s, 0.0])  # edge 1 runs along the turned x axis
    e1 = [n for n in rim if abs(prep.mesh.points[n] @ np.array([-s, c, 0.0])) < 1e-9]
    assert len(e1) > 5
    along = np.abs(r.shapes[:, e1, :] @ t)
    assert along.max() <= 1e-8 * np.abs(r.shapes).max()


def test_skew_supports_are_refused_before_running_where_a_solver_takes_no_equations(three_solvers, write_model,
                                                                                  tmp_path):
    path = write_model(_model("turned plate", _turned(30), SHELL.format(t="2 mm"),
                              'family = "quad4"\nsize = "10 mm"', 4, SKEW_SUPPORT))
    for name in ("opensees",):
        with pytest.raises(CapabilityError, match=f"solver '{name}' takes no constraint equations"):
            run_model(path, tmp_path / name, solvers=[name])
        assert not (tmp_path / name / name).exists()  # nothing ran, no deck was written


EXAMPLES = __import__("pathlib").Path(__file__).resolve().parents[2] / "examples"


def test_sensor_bracket_example_on_three_solvers_compare_passes(three_solvers, tmp_path):
    from typer.testing import CliRunner

    from bridge.cli import app

    prep, outs = run_model(EXAMPLES / "sensor_bracket.toml", tmp_path / "run", solvers=three_solvers)
    assert all(o.ok for o in outs), [str(o.error) for o in outs]
    # the sensor's 60 g lands inside its 20 mm footprint, the screws hold the washers' nodes
    placed = [m for m in prep.masses if m.source == "accelerometer"]
    assert sum(m.mass for m in placed) == pytest.approx(0.06)
    xyz = prep.mesh.points[[m.node for m in placed]]
    assert np.all(np.hypot(xyz[:, 0] - 0.03, xyz[:, 2] - 0.045) <= 0.01 + 1e-9) and np.allclose(xyz[:, 1], 0)
    res = CliRunner().invoke(app, ["compare", *(str(tmp_path / "run" / s) for s in three_solvers)])
    # paired MAC ≥ 0.9 and |Δf| ≤ 1 % on every mode (compare's defaults; common practice, no source)
    assert res.exit_code == 0, res.stdout
    assert res.stdout.count("verdict: pass") == 2


def test_examples_mesh_and_the_shipped_step_is_the_scripts(tmp_path):
    import runpy

    from bridge.model import load_model
    from bridge.pipeline import prepare

    for name in ("sensor_bracket.toml", "telemetry_enclosure.toml"):
        path = EXAMPLES / name
        prep = prepare(load_model(path), path)
        assert prep.constraints.constrained_nodes > 0 and prep.masses
    script = runpy.run_path(str(EXAMPLES / "make_sensor_bracket_step.py"))
    write_step(tmp_path / "sensor_bracket.step", lambda g: profile_faces(g, script["POINTS"], script["WIDTH"],
                                                                         script["RADII"]),
               labels=["mount_leg", "bend", "upright"])
    (tmp_path / "sensor_bracket.toml").write_text((EXAMPLES / "sensor_bracket.toml").read_text())
    a = prepare(load_model(EXAMPLES / "sensor_bracket.toml"), EXAMPLES / "sensor_bracket.toml").mesh
    b = prepare(load_model(tmp_path / "sensor_bracket.toml"), tmp_path / "sensor_bracket.toml").mesh
    assert a.n_nodes == b.n_nodes and np.allclose(a.points, b.points)
