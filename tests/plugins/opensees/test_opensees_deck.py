"""OpenSees deck (script) writer: golden script, node order, element choice, escaping. No solver."""

from __future__ import annotations

import ast
from pathlib import Path

import numpy as np
import pytest

from bridge.errors import DeckWriteError
from bridge.fem import element_nodes_natural
from bridge.mesh import FAMILY_INFO
from bridge.model import load_model
from bridge.pipeline import make_job, prepare
from bridge.solver import JobMass
from modebridge_opensees.adapter import OpenSeesAdapter
from modebridge_opensees.deck import (ELEMENT_TYPES, NODE_ORDER, SHELL_ELEMENTS,
                                      choose_element, deck_text, structure_mass, write_deck)

GOLDEN = Path(__file__).resolve().parents[3] / "fixtures" / "opensees" / "golden"

#: the node order OpenSees expects, as the corner pair each mid-edge node sits between.
#: tet10, TenNodeTetrahedron of openseespy 3.7.1.2: 5..10 on edges 1-2 2-3 3-1 1-4 3-4 2-4 (gmsh's
#: order). Measured: on one gmsh mesh its frequencies equal CalculiX's C3D10 to 1e-7 in this
#: order, and are wrong in the other; the OpenSees source after 3.7 (TenNodeTetrahedron::shp3d,
#: "switching N9 with N10") swaps the last two, which is why the plugin pins openseespy < 3.8.
#: hex20, 20NodeBrick: bottom ring, top ring, then the vertical edges (as Abaqus/CalculiX);
#: measured: its consistent mass equals modebridge's exact one to 1e-15 in this order.
OS_EDGES = {
    "tet10": [(0, 1), (1, 2), (2, 0), (0, 3), (2, 3), (1, 3)],
    "hex20": [(0, 1), (1, 2), (2, 3), (3, 0), (4, 5), (5, 6), (6, 7), (7, 4),
              (0, 4), (1, 5), (2, 6), (3, 7)],
}


def _job(write_model, text):
    path = write_model(text)
    prep = prepare(load_model(path), path)
    return prep, make_job(prep)


def _solid(plate, family, mesh):
    return plate("quad4", (3, 3)).replace('kind = "plate"', 'kind = "block"\nheight = "10 mm"') \
        .replace('kind = "shell"', 'kind = "solid"').replace('thickness = "2 mm"', "") \
        .replace('family = "quad4"', f'family = "{family}"').replace("divisions = [3, 3]", mesh) \
        .replace('sides = ["xmin", "xmax", "ymin", "ymax"]', 'sides = ["xmin"]')


def _script_tables(text: str) -> dict[str, list[list[float]]]:
    """The data tables of a generated script, parsed back (the script's own layout)."""
    tree = ast.parse(text)
    out = {}
    for node in tree.body:
        if isinstance(node, ast.Assign) and isinstance(node.value, ast.Call) \
                and getattr(node.value.func, "id", "") == "table":
            body = node.value.args[0].value
            out[node.targets[0].id] = [[float(v) for v in line.split()] for line in body.splitlines()
                                       if line.strip()]
    return out


def test_golden_script(write_model, plate):
    text = plate("quad4", (2, 2), "clamped", modes=4) + """
[[masses]]
name = "probe"
mass = "0.01 kg"
at = ["50 mm", "50 mm", "0 mm"]
"""
    _, job = _job(write_model, text)
    job.model_hash = "0" * 64  # the hash follows the library versions' float printing; pin it
    script = deck_text(job)
    expected = (GOLDEN / "plate_quad4_2x2_clamped.py").read_text()
    assert script == expected


@pytest.mark.parametrize("family,mesh", [("tet10", 'size = "25 mm"'), ("hex20", "divisions = [3, 3, 2]")])
def test_mid_nodes_sit_where_opensees_expects_them(family, mesh, write_model, plate):
    _, job = _job(write_model, _solid(plate, family, mesh))
    X = job.points[job.cells[:, NODE_ORDER[family]]]
    ncorner = {"tet10": 4, "hex20": 8}[family]
    for k, (a, b) in enumerate(OS_EDGES[family]):
        np.testing.assert_allclose(X[:, ncorner + k], (X[:, a] + X[:, b]) / 2, atol=1e-9)
    # positive volume in the corner order (right-handed): tets 0-1-2 seen from 3 counter-clockwise,
    # bricks' bottom face 0-1-2-3 seen from the top face
    top = 3 if family == "tet10" else 4
    second = 2 if family == "tet10" else 3
    v = np.einsum("ij,ij->i", X[:, 1] - X[:, 0], np.cross(X[:, second] - X[:, 0], X[:, top] - X[:, 0]))
    assert np.all(v > 0)


def test_the_script_carries_the_mapped_connectivity(write_model, plate):
    _, job = _job(write_model, _solid(plate, "tet10", 'size = "25 mm"'))
    tables = _script_tables(deck_text(job))
    elements = np.array(tables["ELEMENTS"], dtype=np.int64)
    np.testing.assert_array_equal(elements[:, 0], np.arange(1, job.cells.shape[0] + 1))
    np.testing.assert_array_equal(elements[:, 1:], job.node_ids[job.cells[:, NODE_ORDER["tet10"]]])
    nodes = np.array(tables["NODES"])
    np.testing.assert_array_equal(nodes[:, 0], job.node_ids)
    np.testing.assert_allclose(nodes[:, 1:], job.points, rtol=1e-14, atol=1e-12)  # %.15g


def test_every_family_has_an_element_and_an_order():
    for fam, (_, nper, _) in FAMILY_INFO.items():
        if fam in ("tri6", "quad8"):  # no 6- or 8-node shell in OpenSees 3.7
            assert fam not in ELEMENT_TYPES
            continue
        assert fam in ELEMENT_TYPES and sorted(NODE_ORDER[fam]) == list(range(nper))
        assert element_nodes_natural(fam).shape[0] == nper
    # full-integration 8-node bricks lock in bending (measured with this solver on a machine of this kind): never used
    assert ELEMENT_TYPES["hex8"] == "SSPbrick"
    assert OpenSeesAdapter.capabilities.families == frozenset(ELEMENT_TYPES)
    assert not OpenSeesAdapter.capabilities.rotary_inertia


def test_supports_and_masses(write_model, plate):
    text = plate("quad4", (2, 2), "simply_supported") + """
[[masses]]
name = "a"
mass = "0.01 kg"
at = ["50 mm", "50 mm", "0 mm"]
[[masses]]
name = "b"
mass = "0.02 kg"
at = ["50 mm", "50 mm", "0 mm"]
"""
    _, job = _job(write_model, text)
    tables = _script_tables(deck_text(job))
    sup = np.array(tables["SUPPORTS"], dtype=np.int64)
    rows = np.flatnonzero(job.fixed.any(axis=1))
    np.testing.assert_array_equal(sup[:, 0], job.node_ids[rows])
    np.testing.assert_array_equal(sup[:, 1:].astype(bool), job.fixed[rows])
    # OpenSees' `mass` sets a node's mass, it does not add: two masses on one node are summed
    (row,) = tables["MASSES"]
    assert row[0] == job.masses[0].node_id == job.masses[1].node_id
    assert row[1] == pytest.approx(3e-5, rel=1e-12)  # 0.03 kg in t


def test_solid_script_has_three_dofs_and_the_model_mass(write_model, plate):
    _, job = _job(write_model, _solid(plate, "hex8", "divisions = [3, 3, 2]"))
    text = deck_text(job)
    assert 'ELEMENT = "SSPbrick"' in text and "NDF = 3" in text and "THICKNESS = None" in text
    # the block is 100 x 100 x 10 mm of steel: 7.85e-9 t/mm^3 x 1e5 mm^3 (exact geometry)
    assert structure_mass(job) == pytest.approx(7.85e-4, rel=1e-12)
    assert f"STRUCTURE_MASS = {structure_mass(job):.15g}" in text
    sup = np.array(_script_tables(text)["SUPPORTS"])
    assert sup.shape[1] == 4  # node + 3 translations


def test_generated_scripts_are_valid_python(write_model, plate):
    for family, mesh in [("tet4", 'size = "25 mm"'), ("hex20", "divisions = [2, 2, 1]")]:
        _, job = _job(write_model, _solid(plate, family, mesh))
        compile(deck_text(job), "model_os.py", "exec")
    _, job = _job(write_model, plate("tri3", (2, 2)))
    compile(deck_text(job), "model_os.py", "exec")


def test_shell_choice():
    assert choose_element("quad4") == "ShellMITC4" and choose_element("tri3") == "ASDShellT3"
    assert choose_element("quad4", "dkgq") == "ShellDKGQ"
    assert choose_element("quad4", "ShellDKGQ, ShellDKGT") == "ShellDKGQ"
    assert choose_element("tri3", "ShellDKGQ, ShellDKGT") == "ShellDKGT"
    assert choose_element("quad4", "asdshellq4") == "ASDShellQ4"
    assert choose_element("tet10", "ShellDKGQ") == "TenNodeTetrahedron"  # solids ignore it
    with pytest.raises(DeckWriteError, match="unknown shell element 'S4R'"):
        choose_element("quad4", "S4R")
    with pytest.raises(DeckWriteError, match="names no element for tri3"):
        choose_element("tri3", "MITC4")  # an explicit choice is never replaced silently
    with pytest.raises(DeckWriteError, match="two elements"):
        choose_element("quad4", "MITC4,DKGQ")
    with pytest.raises(DeckWriteError, match="no element for family 'quad8'"):
        choose_element("quad8")
    assert set(SHELL_ELEMENTS) == {"quad4", "tri3"}


def test_adapter_takes_the_shell_from_the_options_not_the_environment(monkeypatch, write_model, plate, tmp_path):
    _, job = _job(write_model, plate("quad4", (2, 2)))
    a = OpenSeesAdapter()
    monkeypatch.setenv("MODEBRIDGE_OPENSEES_SHELL", "DKGQ")  # the old variable changes nothing now
    a.write_deck(job, tmp_path)
    assert 'ELEMENT = "ShellMITC4"' in (tmp_path / "model_os.py").read_text()
    job.options = {"quad_shell": "ShellDKGQ"}
    a.write_deck(job, tmp_path)
    assert 'ELEMENT = "ShellDKGQ"' in (tmp_path / "model_os.py").read_text()


def test_write_deck_removes_earlier_results(write_model, plate, tmp_path):
    _, job = _job(write_model, plate("quad4", (2, 2)))
    folder = tmp_path / "opensees"
    folder.mkdir()
    for name in ("model_os.npz", "model_os.npz.part", "opensees.log"):
        (folder / name).write_text("old")
    path = OpenSeesAdapter().write_deck(job, folder)
    assert path == folder / "model_os.py" and path.is_file()
    assert sorted(p.name for p in folder.iterdir()) == ["model_os.py"]


def test_refusals(write_model, plate, tmp_path):
    _, job = _job(write_model, plate("quad4", (2, 2)))
    job.title = 'plate"""\nimport os'
    with pytest.raises(DeckWriteError, match="model name"):
        deck_text(job)
    _, job = _job(write_model, plate("quad4", (2, 2)))
    with pytest.raises(DeckWriteError, match="does not fit"):
        deck_text(job, "ShellDKGT")
    job.masses = [JobMass(5, 1e-5, (1.0, 1.0, 1.0))]
    with pytest.raises(DeckWriteError, match="rotary inertia"):
        deck_text(job)
    job.masses = []
    job.thickness = None
    with pytest.raises(DeckWriteError, match="thickness"):
        write_deck(job, tmp_path)
    assert not (tmp_path / "model_os.py").exists()


def test_stored_real_runs_come_from_this_deck_writer():
    """fixtures/opensees/*/model_os.py are what the writer writes today (regenerate them with
    fixtures/opensees/generate.py when the script changes on purpose)."""
    import importlib.util

    fixtures = GOLDEN.parent
    spec = importlib.util.spec_from_file_location("opensees_fixture_generate", fixtures / "generate.py")
    gen = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(gen)
    for name, make in gen.CASES.items():
        assert deck_text(make()) == (fixtures / name / "model_os.py").read_text(), name


def test_eigen_solver_option(write_model, plate, tmp_path):
    """[solver_options.opensees] eigen_solver picks the eigen command's solver; the dense one is
    refused on a model too large for it, with the field and the way out."""
    _, job = _job(write_model, plate("quad4", (2, 2)))
    assert 'EIGEN_SOLVER = "-genBandArpack"' in deck_text(job)  # the default (ops.eigen(EIGEN_SOLVER, MODES))
    job.options = {"eigen_solver": "fullGenLapack"}
    assert 'EIGEN_SOLVER = "-fullGenLapack"' in deck_text(job)
    _, big = _job(write_model, plate("quad4", (30, 30)))  # 961 nodes x 6 DOF, 5766 free with clamped edges
    big.options = {"eigen_solver": "fullGenLapack"}
    with pytest.raises(DeckWriteError, match="solver_options.opensees.eigen_solver: fullGenLapack .* this model has"):
        deck_text(big)
    job.options = {"eigen_solver": "symmBandLapack"}  # fails on shells (measured), so not offered
    with pytest.raises(DeckWriteError):
        deck_text(job)


def test_linear_solver_option(write_model, plate):
    """[solver_options.opensees] linear_solver names the system that factorises K for ARPACK's
    shift-invert (SuperLU by default, the fastest exact one in benchmarks/bench_solver_paths.py);
    a name the plugin does not offer is refused."""
    from modebridge_opensees.deck import LINEAR_SOLVERS

    _, job = _job(write_model, plate("quad4", (2, 2)))
    text = deck_text(job)
    assert f'LINEAR_SOLVER = "{LINEAR_SOLVERS[0]}"' in text and 'NUMBERER = "RCM"' in text
    assert "ops.system(LINEAR_SOLVER)" in text.split("ops.eigen(EIGEN_SOLVER, MODES)")[0]
    job.options = {"linear_solver": "ProfileSPD"}
    assert 'LINEAR_SOLVER = "ProfileSPD"' in deck_text(job)
    # SparseSYM exits 3 on a shell plate; Mumps lost one mode of a double pair; BandSPD stops on a
    # free body (all measured)
    for name in ("SparseSYM", "Mumps", "BandSPD"):
        job.options = {"linear_solver": name}
        with pytest.raises(DeckWriteError, match=f"linear solver '{name}'"):
            deck_text(job)
