"""gmsh meshing: counts, regions, families, CAD, saved mesh."""

from __future__ import annotations

import numpy as np
import pytest

from bridge.errors import MeshingError
from bridge.mesh import FAMILY_INFO
from bridge.meshing.gmsh import build_mesh, write_step_box
from bridge.model import load_model
from bridge.supports import resolve_constraints

BLOCK = """
name = "block"
[geometry]
kind = "block"
length = "100 mm"
width = "50 mm"
height = "10 mm"
[materials.steel]
youngs_modulus = "210 GPa"
poisson_ratio = 0.3
density = "7850 kg/m^3"
[section]
kind = "solid"
material = "steel"
[regions.bottom]
select = "sides"
sides = ["zmin"]
[regions.end]
select = "plane"
axis = "x"
at = "100 mm"
[regions.corner]
select = "box"
min = ["-1 mm", "-1 mm", "-1 mm"]
max = ["1 mm", "1 mm", "1 mm"]
entity = "point"
[mesh]
family = "{family}"
{sizing}
"""


def _block(write_model, family, sizing='divisions = [10, 5, 2]'):
    return load_model(write_model(BLOCK.format(family=family, sizing=sizing)))


@pytest.mark.parametrize("family, nodes, elements", [
    # structured counts: (nx+1)(ny+1)(nz+1) nodes for hex8, plus mid-edge nodes for hex20 (combinatorics)
    ("hex8", 11 * 6 * 3, 100),
    ("hex20", 11 * 6 * 3 + 10 * 6 * 3 + 11 * 5 * 3 + 11 * 6 * 2, 100),
])
def test_structured_hex_counts(write_model, family, nodes, elements):
    mesh = build_mesh(_block(write_model, family))
    assert (mesh.n_nodes, mesh.n_elements) == (nodes, elements)
    # uniform structured bricks 10 × 10 × 5 mm: every element has the same quality, well above 0.5
    # (minSICN; common practice, no source)
    assert mesh.structured and np.ptp(mesh.quality) < 1e-9 and mesh.quality.min() > 0.5


@pytest.mark.parametrize("family", ["tet4", "tet10"])
def test_unstructured_tets(write_model, family):
    mesh = build_mesh(_block(write_model, family, 'size = "10 mm"'))
    assert mesh.cells.shape[1] == FAMILY_INFO[family][1]
    assert mesh.quality.min() > 0.1  # no sliver worse than minSICN 0.1 (common practice, no source)
    # the mesh fills the block exactly (straight edges): volume 100 × 50 × 10 mm³
    from bridge.meshing.gmsh import _cell_measure
    assert _cell_measure(mesh.points, mesh.cells, family).sum() == pytest.approx(5e-5, rel=1e-9)


def test_regions_select_the_right_nodes(write_model):
    mesh = build_mesh(_block(write_model, "hex8"))
    bottom = mesh.region_nodes("bottom")
    end = mesh.region_nodes("end")
    corner = mesh.region_nodes("corner")
    assert np.allclose(mesh.points[bottom, 2], 0.0) and bottom.size == 11 * 6
    assert np.allclose(mesh.points[end, 0], 0.1) and end.size == 6 * 3
    assert corner.size == 1 and np.allclose(mesh.points[corner[0]], 0.0)


@pytest.mark.parametrize("family, n", [("quad4", 121), ("quad8", 341), ("tri3", None), ("tri6", None)])
def test_plate_families(write_model, plate, family, n):
    mesh = build_mesh(load_model(write_model(plate(family, (10, 10)))))
    if n is not None:
        assert mesh.n_nodes == n  # (n+1)² and 3n² + 4n + 1 for 10 × 10 (combinatorics)
    assert mesh.dim == 2 and np.allclose(mesh.points[:, 2], 0.0)
    rim = mesh.region_nodes("rim")
    on_edge = (np.isclose(mesh.points[:, 0], 0) | np.isclose(mesh.points[:, 0], 0.1)
               | np.isclose(mesh.points[:, 1], 0) | np.isclose(mesh.points[:, 1], 0.1))
    assert set(rim) == set(np.flatnonzero(on_edge))


def test_refinement_level_multiplies_divisions(write_model, plate):
    m = load_model(write_model(plate("quad4", (5, 5))))
    assert build_mesh(m, level=1).n_elements == 100  # ratio 2 → 10 × 10
    assert build_mesh(m, level=2).n_elements == 400


def test_constraint_counts_for_the_clamped_plate(write_model, plate):
    m = load_model(write_model(plate("quad4", (10, 10))))
    mesh = build_mesh(m)
    c = resolve_constraints(m, mesh)
    # issue acceptance: 121 nodes, 100 elements, 40 constrained nodes, 486 free DOF (81 × 6)
    assert (mesh.n_nodes, mesh.n_elements, c.constrained_nodes, c.free_dof(6)) == (121, 100, 40, 486)


def test_simply_supported_holds_uz_and_the_along_edge_translation(write_model, plate):
    m = load_model(write_model(plate("quad4", (4, 4), "simply_supported")))
    mesh = build_mesh(m)
    c = resolve_constraints(m, mesh)
    p = mesh.points
    mid_x0 = np.flatnonzero(np.isclose(p[:, 0], 0) & np.isclose(p[:, 1], 0.05))[0]
    corner = np.flatnonzero(np.isclose(p[:, 0], 0) & np.isclose(p[:, 1], 0))[0]
    assert list(c.fixed[mid_x0]) == [False, True, True, False, False, False]  # uy (along x=0), uz
    assert list(c.fixed[corner]) == [True, True, True, False, False, False]


def test_selector_that_picks_nothing_is_an_error(write_model):
    text = BLOCK.format(family="hex8", sizing="divisions = [2, 2, 1]").replace('at = "100 mm"', 'at = "300 mm"')
    with pytest.raises(MeshingError, match="regions.end"):
        build_mesh(load_model(write_model(text)))


def test_step_file_is_read_in_metres(write_model, tmp_path):
    write_step_box(tmp_path / "part.step", [0, 0, 0], [0.05, 0.02, 0.01])
    text = BLOCK.format(family="tet4", sizing='size = "5 mm"')
    text = text.replace('kind = "block"\nlength = "100 mm"\nwidth = "50 mm"\nheight = "10 mm"',
                        'kind = "cad"\nfile = "part.step"')
    text = text.replace('sides = ["zmin"]', 'sides = ["zmin"]').replace(
        '[regions.bottom]\nselect = "sides"\nsides = ["zmin"]',
        '[regions.bottom]\nselect = "plane"\naxis = "z"\nat = "0 mm"').replace('at = "100 mm"', 'at = "50 mm"')
    mesh = build_mesh(load_model(write_model(text)), tmp_path)
    assert np.allclose(mesh.points.max(axis=0), [0.05, 0.02, 0.01], atol=1e-9)
    assert np.allclose(mesh.points[mesh.region_nodes("end"), 0], 0.05)


def test_saved_mesh_opens_with_region_arrays(write_model, plate, tmp_path):
    import meshio

    m = load_model(write_model(plate("quad8", (4, 4))))
    build_mesh(m, save_to=tmp_path / "mesh.vtu")
    back = meshio.read(tmp_path / "mesh.vtu")
    assert back.points.shape[0] == 3 * 16 + 16 + 1  # 3n² + 4n + 1 (combinatorics)
    assert back.point_data["region_rim"].sum() == 32  # 8 nodes per edge × 4 edges (combinatorics)
