"""Reference points, couplings, springs, masses with inertia: schema, resolution, refusals (no solver)."""

from __future__ import annotations

import textwrap
import tomllib

import numpy as np
import pytest
from typer.testing import CliRunner

from bridge.cli import app
from bridge.connections import satellite_offsets
from bridge.errors import CapabilityError, ModelError
from bridge.model import inertia_tensor, parse_model
from bridge.pipeline import check_capabilities, make_job, model_mass, prepare

BOX = """
name = "box on mounts"
[geometry]
kind = "points"
[reference_points]
box = ["0 mm", "0 mm", "50 mm"]
f1 = ["-100 mm", "-60 mm", "0 mm"]
f2 = ["100 mm", "-60 mm", "0 mm"]
f3 = ["100 mm", "60 mm", "0 mm"]
[[couplings]]
reference = "box"
kind = "rigid"
points = ["f1", "f2", "f3"]
[[springs]]
name = "iso"
points = ["f1", "f2", "f3"]
stiffness = ["100 N/mm", "150 N/mm", "300 N/mm"]
[[masses]]
name = "box"
mass = "6 kg"
point = "box"
inertia = ["12e-3 kg*m^2", "20e-3 kg*m^2", "25e-3 kg*m^2", "1e-3 kg*m^2", "0 kg*m^2", "2e-3 kg*m^2"]
[analysis]
modes = 6
"""


def _parse(text: str):
    return parse_model(tomllib.loads(textwrap.dedent(text)))


def test_six_point_masses_reproduce_mass_centre_and_inertia_tensor():
    J = [12e-3, 20e-3, 25e-3, 1e-3, -0.5e-3, 2e-3]
    off = satellite_offsets(6.0, J)
    m = np.full(6, 1.0)
    # centre of gravity unchanged, and Σ m (|r|² I − r rᵀ) = J exactly (definition of the inertia tensor)
    np.testing.assert_allclose(off.sum(axis=0), 0.0, atol=1e-15)
    Jsat = sum(mi * (r @ r * np.eye(3) - np.outer(r, r)) for mi, r in zip(m, off))
    np.testing.assert_allclose(Jsat, inertia_tensor(J), rtol=1e-12, atol=1e-15)
    # a flat body (Izz = Ixx + Iyy) keeps its satellites in its plane
    flat = satellite_offsets(2.0, [1e-3, 2e-3, 3e-3])
    np.testing.assert_allclose(flat[:, 2], 0.0, atol=1e-15)


def test_points_model_resolves_to_nodes_couplings_springs_and_masses():
    prep = prepare(_parse(BOX))
    mesh = prep.mesh
    assert mesh.family == "vertex" and mesh.n_elements == 0
    assert mesh.n_nodes == 4 + 6  # three feet, the box and six inertia nodes
    job = make_job(prep)
    assert [c.kind for c in job.couplings] == ["rigid"]
    assert len(job.couplings[0].nodes) == 3 + 6  # feet plus the inertia nodes
    assert len(job.springs) == 3 and all(s.node_b is None for s in job.springs)
    assert job.springs[0].stiffness[:3] == pytest.approx((100.0, 150.0, 300.0))  # N/mm in the job
    assert sum(m.mass for m in job.masses) == pytest.approx(6e-3)  # tonnes
    assert model_mass(prep.model, mesh) == pytest.approx(6.0)
    assert prep.model.grounded and any("six point masses" in n for n in prep.connections.notes)


def test_region_spring_shares_its_stiffness_and_rotational_springs_need_rigid_references(plate):
    text = plate("quad4", (4, 4), "free", modes=8) + """
[regions.edge]
select = "sides"
sides = ["xmin"]
[[springs]]
name = "bed"
region = "edge"
stiffness = ["1 N/mm", "2 N/mm", "40 N/mm"]
"""
    prep = prepare(_parse(text))
    ks = np.array([s.stiffness for s in prep.connections.springs])
    assert len(ks) == 5
    np.testing.assert_allclose(ks.sum(axis=0)[:3], [1e3, 2e3, 40e3], rtol=1e-12)  # the total is kept
    with pytest.raises(ModelError, match="rotations exist only at reference points"):
        _parse(text.replace('stiffness = ["1 N/mm", "2 N/mm", "40 N/mm"]',
                            'stiffness = ["1 N/mm", "2 N/mm", "40 N/mm"]\nrotational_stiffness = ["1 N*m/rad", "0 N*m/rad", "0 N*m/rad"]'))


BAD = [
    # (replace, by, field, message fragment)
    ('stiffness = ["100 N/mm", "150 N/mm", "300 N/mm"]', 'stiffness = ["100 N/mm", "-150 N/mm", "300 N/mm"]',
     "springs[0].stiffness[1]", "greater than or equal to 0"),
    ('stiffness = ["100 N/mm", "150 N/mm", "300 N/mm"]', 'stiffness = ["0 N/mm", "0 N/mm", "0 N/mm"]',
     "springs[0]", "every stiffness is zero"),
    ('stiffness = ["100 N/mm", "150 N/mm", "300 N/mm"]', 'stiffness = ["100 kg", "150 N/mm", "300 N/mm"]',
     "springs[0].stiffness[0]", "not a stiffness"),
    ('points = ["f1", "f2", "f3"]\n[[springs]]', '[[springs]]', "couplings[0]", "needs the nodes it ties"),
    ('"1e-3 kg*m^2", "0 kg*m^2", "2e-3 kg*m^2"]', '"30e-3 kg*m^2", "0 kg*m^2", "2e-3 kg*m^2"]',
     "masses[0]", "not positive definite"),
    ('inertia = ["12e-3 kg*m^2", "20e-3 kg*m^2", "25e-3 kg*m^2", "1e-3 kg*m^2", "0 kg*m^2", "2e-3 kg*m^2"]',
     'inertia = ["1e-3 kg*m^2", "1e-3 kg*m^2", "5e-3 kg*m^2"]', "masses[0]", "triangle"),
    ('reference = "box"', 'reference = "lid"', "couplings[0].reference", "reference point 'lid' is not defined"),
    ('name = "iso"\npoints = ["f1", "f2", "f3"]', 'name = "iso"\npoints = ["f1", "f2", "f3"]\naxes = [[1, 0, 0], [2, 0, 0]]',
     "springs[0]", "parallel"),
]


@pytest.mark.parametrize("old,new,field,fragment", BAD)
def test_bad_connections_give_one_clear_line(old, new, field, fragment, tmp_path):
    assert old in BOX
    path = tmp_path / "bad.toml"
    path.write_text(textwrap.dedent(BOX.replace(old, new, 1)))
    res = CliRunner().invoke(app, ["check", str(path)])
    assert res.exit_code == 3, res.output
    text = res.output.strip()
    assert len(text.splitlines()) == 1, text  # one line: file, field, what is wrong
    assert str(path) in text and field in text and fragment in text, text


def test_coupling_on_a_region_without_nodes_is_refused(plate):
    text = plate("quad4", (4, 4), "free") + """
[regions.nothing]
select = "box"
min = ["-5 mm", "-5 mm", "-5 mm"]
max = ["-1 mm", "-1 mm", "5 mm"]
entity = "point"
[reference_points]
c = ["0 mm", "0 mm", "10 mm"]
[[couplings]]
reference = "c"
kind = "distributing"
region = "nothing"
"""
    with pytest.raises(Exception, match="picks no geometric entity|holds no mesh node"):
        prepare(_parse(text))


def test_a_solver_without_couplings_or_springs_is_refused_before_running(pm):
    from bridge.plugins import get_solver

    model = _parse(BOX)
    check_capabilities(model, get_solver(pm, "kratos"))  # rigid and distributing couplings, springs, no continuum
    opensees = get_solver(pm, "opensees")
    check_capabilities(model, opensees)  # rigid couplings, springs, no continuum: offered
    distributing = _parse(BOX.replace('kind = "rigid"', 'kind = "distributing"').replace(
        'inertia = ["12e-3 kg*m^2", "20e-3 kg*m^2", "25e-3 kg*m^2", "1e-3 kg*m^2", "0 kg*m^2", "2e-3 kg*m^2"]', ""))
    with pytest.raises(CapabilityError, match="couplings\\[0\\].kind: solver 'opensees' has no distributing coupling"):
        check_capabilities(distributing, opensees)
    check_capabilities(distributing, get_solver(pm, "kratos"))


def test_supports_and_springs_to_ground_decide_the_expected_rigid_body_modes(plate):
    free = _parse(plate("quad4", (4, 4), "free"))
    assert not free.grounded
    on_springs = _parse(BOX)
    assert on_springs.grounded and not on_springs.supports


def test_expected_rigid_body_modes_count_springs_to_the_ground():
    # the example's box on four inclined mounts: the springs to the ground hold all six rigid
    # motions; mounts stiff only along global z (no axes) leave x, y and the turn about z free
    # (statics of a body on vertical supports: common practice, no source)
    from pathlib import Path

    from bridge.checks import free_rigid_motions
    from bridge.connections import rigid_motion_rows
    from bridge.pipeline import prepare

    path = Path(__file__).resolve().parents[2] / "examples" / "isolated_instrument_box.toml"
    raw = tomllib.loads(path.read_text(encoding="utf-8"))
    prep = prepare(parse_model(raw))
    rows = rigid_motion_rows(prep.mesh, prep.connections, prep.constraints.equations)
    assert free_rigid_motions(prep.mesh.points, prep.constraints.fixed, 6, rows).count == 0
    assert free_rigid_motions(prep.mesh.points, prep.constraints.fixed, 6, None).count == 6
    for s in raw["springs"]:
        s.pop("axes", None)
        s["stiffness"] = ["0 N/mm", "0 N/mm", "18 N/mm"]
    prep = prepare(parse_model(raw))
    rows = rigid_motion_rows(prep.mesh, prep.connections, prep.constraints.equations)
    motions = free_rigid_motions(prep.mesh.points, prep.constraints.fixed, 6, rows)
    assert motions.count == 3
    assert motions.names == ["translation along x", "translation along y", "rotation about z"]
