"""Kratos case writer: golden case, gmsh → Kratos node order, constraints, refusals.

Only the test marked ``solver`` needs Kratos (it asks Kratos's own geometry about the node
order, in a subprocess); the rest is pure.
"""

from __future__ import annotations

import json
import subprocess
import textwrap
from pathlib import Path

import numpy as np
import pytest

from bridge.errors import CapabilityError, DeckWriteError
from bridge.fem import element_nodes_natural
from bridge.mesh import FAMILY_INFO
from bridge.model import load_model
from bridge.pipeline import check_capabilities, make_job, prepare
from bridge.solver import JobMass
from modebridge_kratos.adapter import KratosAdapter
from modebridge_kratos.deck import (CONSTITUTIVE_LAWS, ELEMENT_TYPES, MAIN, MATERIALS, MDPA, NODE_ORDER,
                                    PARAMETERS, THICK_SHELL_ELEMENT_TYPES, case_files, write_deck)

GOLDEN = Path(__file__).resolve().parents[3] / "fixtures" / "kratos" / "golden" / "plate_quad4_2x2_clamped"

#: Kratos's node order as the corner pair each mid-edge node sits between: Tetrahedra3D10 and
#: Hexahedra3D20 (Kratos geometries/tetrahedra_3d_10.h, hexahedra_3d_20.h; found by evaluating
#: Kratos's own shape functions, and re-checked against them by the solver test below)
KRATOS_EDGES = {
    "tet10": [(0, 1), (1, 2), (2, 0), (0, 3), (1, 3), (2, 3)],
    "hex20": [(0, 1), (1, 2), (2, 3), (3, 0), (0, 4), (1, 5), (2, 6), (3, 7), (4, 5), (5, 6), (6, 7), (7, 4)],
}

MASS = """
[[masses]]
name = "probe"
mass = "0.01 kg"
at = ["50 mm", "50 mm", "0 mm"]
"""


def _job(write_model, text):
    path = write_model(text)
    prep = prepare(load_model(path), path)
    return prep, make_job(prep)


def _solid(plate, family: str, mesh: str, sides='["xmin"]', height="10 mm"):
    return plate("quad4", (3, 3)).replace('kind = "plate"', f'kind = "block"\nheight = "{height}"') \
        .replace('kind = "shell"', 'kind = "solid"').replace('thickness = "2 mm"', "") \
        .replace('family = "quad4"', f'family = "{family}"').replace("divisions = [3, 3]", mesh) \
        .replace('sides = ["xmin", "xmax", "ymin", "ymax"]', f"sides = {sides}")


# --------------------------------------------------------------------------------------------
# golden case
# --------------------------------------------------------------------------------------------

def test_golden_case(write_model, plate):
    """The case Kratos sees for a 2 × 2 clamped quad4 plate with a point mass; regenerate only on
    purpose (python fixtures/kratos/generate.py --golden) and review the diff."""
    _, job = _job(write_model, plate("quad4", (2, 2), "clamped", modes=4) + MASS)
    job.model_hash = "0" * 64  # the hash follows the library versions' float printing; pin it
    files = case_files(job)
    assert sorted(files) == sorted([MDPA, PARAMETERS, MATERIALS, MAIN])
    for name, text in files.items():
        assert text == (GOLDEN / name).read_text(), name


def test_write_deck_writes_the_case_and_returns_the_main(write_model, plate, tmp_path):
    _, job = _job(write_model, plate("quad4", (2, 2), "clamped", modes=4))
    out = tmp_path / "case"
    out.mkdir()
    main = write_deck(job, out)
    assert main == out / MAIN
    assert sorted(p.name for p in out.iterdir()) == sorted([MDPA, PARAMETERS, MATERIALS, MAIN])
    assert (out / MDPA).read_text() == case_files(job)[MDPA]


# --------------------------------------------------------------------------------------------
# node order
# --------------------------------------------------------------------------------------------

@pytest.mark.parametrize("family", ["tet10", "hex20"])
def test_mid_nodes_sit_where_kratos_expects_them(family, write_model, plate):
    mesh = "divisions = [3, 3, 2]" if family == "hex20" else 'size = "25 mm"'
    _, job = _job(write_model, _solid(plate, family, mesh))
    X = job.points[job.cells[:, NODE_ORDER[family]]]
    ncorner = {"tet10": 4, "hex20": 8}[family]
    for k, (a, b) in enumerate(KRATOS_EDGES[family]):
        np.testing.assert_allclose(X[:, ncorner + k], (X[:, a] + X[:, b]) / 2, atol=1e-9)
    # right-handed corners (positive volume), as Kratos's geometries expect
    c = (1, 3, 4) if family == "hex20" else (1, 2, 3)
    v = np.einsum("ij,ij->i", X[:, c[0]] - X[:, 0], np.cross(X[:, c[1]] - X[:, 0], X[:, c[2]] - X[:, 0]))
    assert np.all(v > 0)


def test_tet10_swaps_gmsh_nodes_9_and_10():
    # measured with this solver on a machine of this kind: "3D10N needs gmsh tet10 nodes 9/10 swapped" (1-based)
    assert NODE_ORDER["tet10"] == [0, 1, 2, 3, 4, 5, 6, 7, 9, 8]


def test_every_family_offered_has_an_order_and_a_law():
    for fam, etype in ELEMENT_TYPES.items():
        nper = FAMILY_INFO[fam][1]
        assert sorted(NODE_ORDER[fam]) == list(range(nper))
        assert element_nodes_natural(fam).shape[0] == nper
        assert etype in CONSTITUTIVE_LAWS
    for etype in THICK_SHELL_ELEMENT_TYPES.values():
        assert etype in CONSTITUTIVE_LAWS
    # Kratos has no 8- or 6-node shell; its only plain 8-node brick locks in bending (adapter.py)
    assert not {"quad8", "tri6", "hex8"} & set(ELEMENT_TYPES)
    assert KratosAdapter.capabilities.families == frozenset(ELEMENT_TYPES)


_KRATOS_GEOMETRY_CHECK = textwrap.dedent("""
    import json, sys
    import numpy as np
    import KratosMultiphysics as KM
    X, order, family = json.loads(sys.stdin.read())
    X = np.array(X)
    quad, lin, ncorner = {"tet10": (KM.Tetrahedra3D10, KM.Tetrahedra3D4, 4),
                          "hex20": (KM.Hexahedra3D20, KM.Hexahedra3D8, 8)}[family]
    mp = KM.Model().CreateModelPart("m")
    nodes = [mp.CreateNewNode(i + 1, *X[k]) for i, k in enumerate(order)]
    g, gl = quad(*nodes), lin(*nodes[:ncorner])
    rng = np.random.default_rng(1)
    err = 0.0
    for _ in range(40):
        xi = rng.uniform(-0.95, 0.95, 3) if family == "hex20" else rng.dirichlet([1, 1, 1, 1])[:3]
        p = KM.Array3(list(xi))
        err = max(err, float(np.abs(np.array(g.GlobalCoordinates(p)) - np.array(gl.GlobalCoordinates(p))).max()))
    print("RESULT", json.dumps({"err": err, "detj_min": min(g.DeterminantOfJacobian())}))
""")


def _ask_kratos(python, X, order, family):
    proc = subprocess.run([python, "-c", _KRATOS_GEOMETRY_CHECK], input=json.dumps([X.tolist(), order, family]),
                          capture_output=True, text=True, timeout=60)
    line = [ln for ln in proc.stdout.splitlines() if ln.startswith("RESULT ")]
    assert proc.returncode == 0 and line, proc.stdout[-2000:] + proc.stderr[-2000:]
    return json.loads(line[0][7:])


@pytest.mark.solver
@pytest.mark.parametrize("family", ["tet10", "hex20"])
def test_node_order_against_kratos_shape_functions(family, kratos):
    """On a straight-edged (affine) element in our order, Kratos's quadratic geometry must map
    every local point where its linear geometry on the corners does; a wrong mid-node order
    bends the map (checked: the unswapped tet10 and the CalculiX hex20 order both fail)."""
    import gmsh

    gmsh.initialize()
    try:
        gmsh.option.setNumber("General.Terminal", 0)
        _, dim, _, n, local, _ = gmsh.model.mesh.getElementProperties(11 if family == "tet10" else 17)
    finally:
        gmsh.finalize()
    ref = np.array(local).reshape(n, dim)
    A = np.array([[1.0, 0.3, 0.1], [0.2, 1.5, -0.2], [0.1, 0.4, 0.8]])
    X = ref @ A.T + [3.0, -1.0, 2.0]
    good = _ask_kratos(kratos, X, NODE_ORDER[family], family)
    assert good["err"] < 1e-12 and good["detj_min"] > 0
    wrong = list(range(n)) if family == "tet10" else \
        [0, 1, 2, 3, 4, 5, 6, 7, 8, 11, 13, 9, 16, 18, 19, 17, 10, 12, 14, 15]  # CalculiX's
    assert _ask_kratos(kratos, X, wrong, family)["err"] > 0.1  # the check has teeth


# --------------------------------------------------------------------------------------------
# what the case says
# --------------------------------------------------------------------------------------------

def _read_mdpa(text: str) -> dict:
    """A tiny reader for the blocks we write (nodes, elements, elemental data, sub-model parts)."""
    out = {"nodes": {}, "elements": {}, "data": {}, "parts": {}}
    lines = iter(text.splitlines())
    for line in lines:
        words = line.split()
        if words[:2] == ["Begin", "Nodes"]:
            for ln in lines:
                if ln.startswith("End"):
                    break
                i, *x = ln.split()
                out["nodes"][int(i)] = [float(v) for v in x]
        elif words[:2] == ["Begin", "Elements"]:
            block = out["elements"].setdefault(words[2], [])
            for ln in lines:
                if ln.startswith("End"):
                    break
                block.append([int(v) for v in ln.split()])
        elif words[:2] == ["Begin", "ElementalData"]:
            for ln in lines:
                if ln.startswith("End"):
                    break
                i, v = ln.split(maxsplit=1)
                value = [float(x) for x in v.split("(")[1].rstrip(")").split(",")] if "[" in v else float(v)
                out["data"].setdefault(words[2], {})[int(i)] = value
        elif words[:2] == ["Begin", "SubModelPart"]:
            part = out["parts"].setdefault(words[2], {"nodes": [], "elements": []})
            key = None
            for ln in lines:
                s = ln.split()
                if s[:1] == ["End"] and s[1:2] == ["SubModelPart"]:
                    break
                if s[:1] == ["Begin"]:
                    key = "nodes" if s[1] == "SubModelPartNodes" else "elements"
                elif s[:1] == ["End"]:
                    key = None
                elif key:
                    part[key].extend(int(v) for v in s)
    return out


def test_mdpa_holds_the_job(write_model, plate):
    _, job = _job(write_model, plate("tri3", (4, 4), "clamped", modes=3) + MASS)
    m = _read_mdpa(case_files(job)[MDPA])
    assert list(m["nodes"]) == job.node_ids.tolist()
    np.testing.assert_allclose(np.array(list(m["nodes"].values())), job.points, rtol=1e-14, atol=1e-12)
    shells = m["elements"]["ShellThinElementCorotational3D3N"]
    assert len(shells) == job.cells.shape[0]
    assert [e[2:] for e in shells] == job.node_ids[job.cells].tolist()
    (mass_el,) = m["elements"]["NodalConcentratedElement3D1N"]
    assert mass_el[2] == job.masses[0].node_id
    assert m["data"]["NODAL_MASS"] == {mass_el[0]: pytest.approx(1e-5)}  # 0.01 kg in t
    assert m["parts"]["point_masses"]["elements"] == [mass_el[0]]
    assert sorted(m["parts"]["body"]["elements"]) == [e[0] for e in shells]


def _constraints(files):
    params = json.loads(files[PARAMETERS])
    return {p["Parameters"]["variable_name"]: p["Parameters"]["model_part_name"]
            for p in params["processes"]["constraints_process_list"]}


@pytest.mark.parametrize("supports", ["clamped", "pinned", "simply_supported"])
def test_constraints_follow_the_jobs_fixed_array(supports, write_model, plate):
    _, job = _job(write_model, plate("quad4", (4, 4), supports, modes=3))
    files = case_files(job)
    parts = _read_mdpa(files[MDPA])["parts"]
    procs = _constraints(files)
    names = ("DISPLACEMENT_X", "DISPLACEMENT_Y", "DISPLACEMENT_Z", "ROTATION_X", "ROTATION_Y", "ROTATION_Z")
    for j, var in enumerate(names):
        expected = sorted(job.node_ids[job.fixed[:, j]].tolist())
        if expected:
            assert procs[var] == f"Structure.fix_{var.lower()}"
            assert sorted(parts[f"fix_{var.lower()}"]["nodes"]) == expected
        else:
            assert var not in procs and f"fix_{var.lower()}" not in parts


def test_fixed_dofs_support_writes_only_those_dofs(write_model, plate):
    text = plate("quad4", (4, 4), "fixed_dofs", modes=3).replace('kind = "fixed_dofs"',
                                                               'kind = "fixed_dofs"\ndofs = ["uz", "rx"]')
    _, job = _job(write_model, text)
    assert set(_constraints(case_files(job))) == {"DISPLACEMENT_Z", "ROTATION_X"}


def test_solids_have_no_rotation_dofs(write_model, plate):
    _, job = _job(write_model, _solid(plate, "tet4", 'size = "25 mm"'))
    files = case_files(job)
    params = json.loads(files[PARAMETERS])
    assert params["solver_settings"]["rotation_dofs"] is False
    assert set(_constraints(files)) == {"DISPLACEMENT_X", "DISPLACEMENT_Y", "DISPLACEMENT_Z"}
    mat = json.loads(files[MATERIALS])["properties"][0]["Material"]
    assert mat["constitutive_law"]["name"] == "LinearElastic3DLaw" and "THICKNESS" not in mat["Variables"]


def test_materials_are_in_job_units(write_model, plate):
    _, job = _job(write_model, plate("quad4", (2, 2), "clamped", modes=3))
    v = json.loads(case_files(job)[MATERIALS])["properties"][0]["Material"]["Variables"]
    # mm-t-s-N-MPa: 210 GPa = 210000 MPa, 7850 kg/m³ = 7.85e-9 t/mm³, 2 mm (and the MITC4 quad's
    # drilling factor, a pure number)
    assert v == pytest.approx({"YOUNG_MODULUS": 210000.0, "POISSON_RATIO": 0.3, "DENSITY": 7.85e-9,
                               "THICKNESS": 2.0, "STABILIZATION_FACTOR": 1.0}, rel=1e-12)


def test_eigensolver_settings(write_model, plate):
    _, job = _job(write_model, plate("quad4", (2, 2), "clamped", modes=7))
    files = case_files(job)
    s = json.loads(files[PARAMETERS])["solver_settings"]
    assert s["solver_type"] == "eigen_value"
    assert s["eigensolver_settings"]["solver_type"] == "spectra_sym_g_eigs_shift"
    assert s["eigensolver_settings"]["number_of_eigenvalues"] == 7
    assert s["eigensolver_settings"]["shift"] < 0  # K − σM regular for a free body too
    assert "modebridge" not in json.loads(files[PARAMETERS])  # Kratos validates every key it gets
    assert '"element_type": "ShellThickElementCorotational3D4N"' in files[MAIN]  # auto: MITC4 quads
    compile(files[MAIN], MAIN, "exec")


@pytest.mark.parametrize("family, element, law", [
    ("quad4", "ShellThickElementCorotational3D4N", "ReissnerMindlinShellElasticConstitutiveLaw"),
    ("tri3", "ShellThickElementCorotational3D3N", "LinearElasticPlaneStress2DLaw"),
])
def test_thick_shells_on_request(family, element, law, write_model, plate):
    _, job = _job(write_model, plate(family, (2, 2), "clamped", modes=3))
    job.options = {"shell_theory": "thick"}  # [solver_options.kratos]
    files = case_files(job)
    assert f"Begin Elements {element}" in files[MDPA]
    assert json.loads(files[MATERIALS])["properties"][0]["Material"]["constitutive_law"]["name"] == law
    job.options = {"shell_theory": "sandwich"}
    with pytest.raises(DeckWriteError):
        case_files(job)


@pytest.mark.parametrize("family, theory, element", [
    ("quad4", "auto", "ShellThickElementCorotational3D4N"), ("tri3", "auto", "ShellThinElementCorotational3D3N"),
    ("quad4", "thin", "ShellThinElementCorotational3D4N"), ("tri3", "thin", "ShellThinElementCorotational3D3N"),
])
def test_shell_theory_auto_takes_mitc4_quads_and_thin_triangles(family, theory, element, write_model, plate):
    _, job = _job(write_model, plate(family, (2, 2), "clamped", modes=3))
    job.options = {"shell_theory": theory}
    files = case_files(job)
    assert f"Begin Elements {element}" in files[MDPA]
    variables = json.loads(files[MATERIALS])["properties"][0]["Material"]["Variables"]
    # the MITC4 quad's drilling penalty γ = G t (Hughes and Brezzi 1989), not Kratos's 0.1 G t,
    # which left a bent bracket's twisting modes up to 1.6 % soft (measured)
    assert variables.get("STABILIZATION_FACTOR") == (1.0 if "Thick" in element else None)


def test_kirchhoff_stiffening_is_the_narrow_strips(write_model, plate):
    from modebridge_kratos.deck import kirchhoff_stiffening

    # a 100 × 100 × 2 mm plate: t/b = 0.02, 1/√(1 − 0.630 · 0.02) − 1 = 0.64 % < 1 %: nothing
    _, job = _job(write_model, plate("quad4", (4, 4), "clamped", modes=3))
    assert kirchhoff_stiffening(job) == []
    # a 100 × 20 × 2 mm strip: t/b = 0.1: 1/√(1 − 0.063) − 1 = 3.3 % (3-D torsion constant of a
    # rectangle b t³/3 (1 − 0.630 t/b), Timoshenko and Goodier — from memory)
    _, job = _job(write_model, plate("quad4", (10, 2), "clamped", modes=3, width="20 mm"))
    ((name, t, b, excess),) = kirchhoff_stiffening(job)
    assert (t, b) == pytest.approx((2.0, 20.0)) and excess == pytest.approx(0.0331, abs=5e-4)


def test_title_that_could_smuggle_text_is_refused(write_model, plate):
    _, job = _job(write_model, plate("quad4", (2, 2)))
    job.title = "plate\nBegin Nodes"
    with pytest.raises(DeckWriteError):
        case_files(job)


def test_rotary_inertia_is_refused(write_model, plate):
    _, job = _job(write_model, plate("quad4", (2, 2)) + MASS)
    job.masses = [JobMass(job.masses[0].node_id, 1e-5, (1.0, 1.0, 1.0))]
    with pytest.raises(DeckWriteError, match="rotary inertia"):
        case_files(job)
    assert KratosAdapter.capabilities.rotary_inertia is False


def test_family_without_a_kratos_element_is_refused(write_model, plate):
    _, job = _job(write_model, plate("quad8", (2, 2)))
    with pytest.raises(DeckWriteError, match="quad8"):
        case_files(job)


@pytest.mark.parametrize("family,uses,factor", [("quad8", "quad4", 0.5), ("tri6", "tri3", 0.5),
                                               ("hex8", "hex20", 1.0)])
def test_core_substitutes_families_kratos_lacks(family, uses, factor, write_model, plate):
    text = plate(family, (2, 2)) if FAMILY_INFO[family][0] == 2 else _solid(plate, family, "divisions = [2, 2, 1]")
    choice = check_capabilities(load_model(write_model(text)), KratosAdapter())
    assert (choice.family, choice.size_factor, choice.how) == (uses, factor, "substitute")
    assert family in choice.reason and uses in choice.reason
    # a pinned family the solver lacks is refused before anything runs
    with pytest.raises(CapabilityError, match=f"mesh.solver_family.kratos: solver 'kratos' has no '{family}'"):
        check_capabilities(load_model(write_model(text.replace("[mesh]", f"[mesh]\nsolver_family = {{ kratos = \"{family}\" }}"))),
                           KratosAdapter())


def test_spread_mass_becomes_one_concentrated_element_per_node(write_model, plate):
    _, job = _job(write_model, plate("quad4", (4, 4), "clamped", modes=3) + """
[regions.sheet]
select = "box"
min = ["0 mm", "0 mm", "-1 mm"]
max = ["100 mm", "100 mm", "1 mm"]
entity = "face"

[[masses]]
name = "spread"
mass = "0.04 kg"
region = "sheet"
""")
    m = _read_mdpa(case_files(job)[MDPA])
    elements = m["elements"]["NodalConcentratedElement3D1N"]
    assert len(elements) == len(job.masses) > 1
    assert [e[2] for e in elements] == [jm.node_id for jm in job.masses]
    assert sum(m["data"]["NODAL_MASS"].values()) == pytest.approx(4e-5, rel=1e-12)  # 0.04 kg in t


def test_adapter_removes_an_earlier_runs_output(write_model, plate, tmp_path):
    _, job = _job(write_model, plate("quad4", (2, 2), "clamped", modes=3))
    folder = tmp_path / "case"
    folder.mkdir()
    for stale in ("modes.npz", "kratos.log"):
        (folder / stale).write_text("from an earlier run")
    KratosAdapter().write_deck(job, folder)
    assert not (folder / "modes.npz").exists() and not (folder / "kratos.log").exists()


def test_eigen_solver_option(write_model, plate):
    """[solver_options.kratos] eigen_solver: Spectra with its shift (default) or eigen_eigensystem,
    which takes no shift and so refuses a free body."""
    _, job = _job(write_model, plate("quad4", (2, 2), "clamped", modes=3))
    es = json.loads(case_files(job)[PARAMETERS])["solver_settings"]["eigensolver_settings"]
    assert es["solver_type"] == "spectra_sym_g_eigs_shift" and "shift" in es
    job.options = {"eigen_solver": "eigen_eigensystem"}
    es = json.loads(case_files(job)[PARAMETERS])["solver_settings"]["eigensolver_settings"]
    assert es["solver_type"] == "eigen_eigensystem" and "shift" not in es  # Kratos refuses unknown keys
    _, free = _job(write_model, plate("quad4", (2, 2), "free", modes=8))
    free.options = {"eigen_solver": "eigen_eigensystem"}
    with pytest.raises(DeckWriteError, match="cannot solve a free body"):
        case_files(free)


# --------------------------------------------------------------------------------------------
# couplings, springs in their mount's axes, beams (modebridge_kratos.connections)
# --------------------------------------------------------------------------------------------

BOX = """
name = "box on two mounts"
[geometry]
kind = "points"
[reference_points]
cg = ["10 mm", "20 mm", "50 mm"]
f1 = ["-40 mm", "0 mm", "0 mm"]
f2 = ["40 mm", "0 mm", "0 mm"]
[[couplings]]
reference = "cg"
kind = "rigid"
points = ["f1", "f2"]
[[springs]]
name = "mounts"
points = ["f1", "f2"]
stiffness = ["10 N/mm", "20 N/mm", "30 N/mm"]
axes = [[0, 1, 0], [0, 0, 1]]
[[masses]]
name = "box"
mass = "1 kg"
point = "cg"
[analysis]
modes = 3
"""


def test_rigid_coupling_and_springs_become_resolved_master_slave_rows(write_model):
    from modebridge_kratos.connections import layout

    prep, job = _job(write_model, BOX)
    lay = layout(job)
    ids = {name: int(job.node_ids[i]) for name, i in prep.mesh.extra_nodes.items()}
    cg, f1 = ids["cg"], ids["f1"]
    # a tied foot moves with the reference: u = u_cg + θ × (x_f1 − x_cg), d = (−50, −20, −50) mm
    # (rigid-body kinematics; common practice, no source)
    rows = {k: {(n, d): c for n, d, c in v} for k, v in lay.constraints.items()}
    assert rows[(f1, 0)] == {(cg, 0): 1.0, (cg, 4): pytest.approx(-50.0), (cg, 5): pytest.approx(20.0)}
    assert rows[(f1, 2)] == {(cg, 2): 1.0, (cg, 3): pytest.approx(-20.0), (cg, 4): pytest.approx(50.0)}
    # each mount's auxiliary node holds its displacement in the mount's axes (x_m = global y) and is
    # expressed in the reference's DOF only: the foot in between is resolved (Kratos chains nothing)
    q = [s[0] for s in lay.springs]
    assert len(q) == 2 and all(n > job.node_ids.max() for n in q)
    assert rows[(q[0], 0)] == {(cg, 1): 1.0, (cg, 3): pytest.approx(50.0), (cg, 5): pytest.approx(-50.0)}
    assert all(n == cg for v in rows.values() for (n, _) in v)
    np.testing.assert_allclose(lay.springs[0][2][:3], [10.0, 20.0, 30.0])  # N/mm in the job's units
    # the feet's and the ground's rotations are held; the reference keeps its six DOF
    fixed = dict(zip(lay.node_ids.tolist(), lay.fixed))
    assert fixed[f1][3:].all() and not fixed[cg].any() and fixed[lay.springs[0][1]].all()
    files = case_files(job)
    settings = json.loads(files[MAIN].split('SETTINGS = json.loads(r"""')[1].split('""")')[0])
    assert len(settings["constraints"]) == len(lay.constraints) and settings["last_job_node"] == job.node_ids.max()
    m = _read_mdpa(files[MDPA])
    assert [e[2:] for e in m["elements"]["SpringDamperElement3D"]] == [[q[0], lay.springs[0][1]],
                                                                        [q[1], lay.springs[1][1]]]


def test_a_node_in_two_couplings_is_refused_by_the_deck_too(write_model):
    """The core refuses it first (a point follows one coupling only); the deck writer keeps the guard."""
    import dataclasses

    from bridge.solver import JobCoupling
    from modebridge_kratos.connections import layout

    prep, job = _job(write_model, BOX)
    ids = {name: int(job.node_ids[i]) for name, i in prep.mesh.extra_nodes.items()}
    twice = dataclasses.replace(job, couplings=job.couplings + [JobCoupling("f2", "rigid", ids["f2"], (ids["f1"],))])
    with pytest.raises(DeckWriteError, match="tied twice"):
        layout(twice)


def test_beams_get_their_section_and_orientation(write_model):
    text = """
name = "frame"
[geometry]
kind = "points"
[materials.steel]
youngs_modulus = "210 GPa"
poisson_ratio = 0.3
density = "7850 kg/m^3"
[beam_sections.bar]
shape = "rectangle"
material = "steel"
width = "10 mm"
height = "2 mm"
[reference_points]
a = ["0 mm", "0 mm", "0 mm"]
b = ["100 mm", "0 mm", "0 mm"]
[[members]]
name = "m"
start = "a"
end = "b"
section = "bar"
divisions = 4
orientation = [0, 1, 0]
[analysis]
modes = 3
"""
    _, job = _job(write_model, text)
    files = case_files(job)
    m = _read_mdpa(files[MDPA])
    assert len(m["elements"]["CrLinearBeamElement3D2N"]) == 4
    # the section's height (local z) along global y: Kratos's local 2 (y = z × x) is −global z
    np.testing.assert_allclose(list(m["data"]["LOCAL_AXIS_2"].values()), [[0, 0, -1]] * 4, atol=1e-15)
    (beam,) = [p for p in json.loads(files[MATERIALS])["properties"] if "beams" in p["model_part_name"]]
    v = beam["Material"]["Variables"]
    # I22 = ∫z² dA = w h³/12 about the local y, I33 = h w³/12 (the job's iy, iz), mm⁴
    assert v["I22"] == pytest.approx(10 * 2**3 / 12) and v["I33"] == pytest.approx(2 * 10**3 / 12)
    assert v["POISSON_RATIO"] == pytest.approx(0.3) and v["CROSS_AREA"] == pytest.approx(20.0)
    assert beam["Material"]["constitutive_law"]["name"] == "BeamConstitutiveLaw"
    assert json.loads(files[PARAMETERS])["solver_settings"]["rotation_dofs"] is True


# --------------------------------------------------------------------------------------------
# stiffeners: a beam off its nodes
# --------------------------------------------------------------------------------------------

_RIBBED = """
name = "ribbed"
[geometry]
kind = "plate"
length = "40 mm"
width = "40 mm"
[materials.steel]
youngs_modulus = "210 GPa"
poisson_ratio = 0.3
density = "7850 kg/m^3"
[section]
kind = "shell"
material = "steel"
thickness = "2 mm"
[analysis]
modes = 8
[mesh]
family = "quad4"
divisions = [4, 4]
[beam_sections.rib]
shape = "rectangle"
material = "steel"
width = "2 mm"
height = "4 mm"
[regions.rib_line]
select = "line"
start = ["0 mm", "20 mm", "0 mm"]
end = ["40 mm", "20 mm", "0 mm"]
[[members]]
name = "rib"
along = "rib_line"
section = "rib"
side = "top"
"""


def test_offset_beam_hangs_on_centroid_nodes_tied_without_torsion(write_model):
    from modebridge_kratos.deck import case_layout, parameters

    _, job = _job(write_model, _RIBBED)
    lay = case_layout(job)
    r = np.asarray(job.beam_offset, float)
    assert len(job.beams) and np.allclose(r, [0.0, 0.0, 1.0 + 2.0])  # t/2 + h/2 above the mid-surface
    last = int(job.node_ids.max())
    where = {int(n): p for n, p in zip(lay.node_ids, lay.points)}
    ends = job.node_ids[np.asarray(job.beams)]
    # the beam elements run between auxiliary nodes at node + offset, one per shell node
    assert (lay.beam_ends > last).all() and len(np.unique(lay.beam_ends)) == len(np.unique(ends))
    for (a, b), (sa, sb), rk in zip(lay.beam_ends, ends, r):
        assert np.allclose(where[int(a)], where[int(sa)] + rk) and np.allclose(where[int(b)], where[int(sb)] + rk)
    # a rigid motion (u0, ω) of the shell carries the centroid nodes rigidly (exact kinematics):
    # translations u0 + ω × x, rotations ω; the rotation about the offset is their own DOF
    rng = np.random.default_rng(3)
    u0, w = rng.normal(size=3), rng.normal(size=3)
    value = {}
    for n, p in where.items():
        if n <= last:
            value.update({(n, i): (u0 + np.cross(w, p))[i] for i in range(3)})
            value.update({(n, 3 + i): w[i] for i in range(3)})
    for b in np.unique(lay.beam_ends):
        assert (int(b), 5) not in lay.constraints  # torsion-free: θz of the centroid node is free
        value[(int(b), 5)] = w[2]
        expected = np.concatenate([u0 + np.cross(w, where[int(b)]), w])
        for d in range(5):
            got = sum(c * value[(n, dd)] for n, dd, c in lay.constraints[(int(b), d)])
            assert got == pytest.approx(expected[d], abs=1e-9)
    # the mdpa's beams use the centroid nodes; the results keep the job's nodes only
    text = case_files(job)[MDPA]
    assert f" {int(lay.beam_ends[0, 0])} {int(lay.beam_ends[0, 1])}\n" in text
    assert parameters(job)["modebridge"]["last_job_node"] == last
