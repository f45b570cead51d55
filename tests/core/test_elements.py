"""The element-family registry: the old tables derive from it, and a new family added through it
alone (inside a test) is meshed, gets its mass matrix and has a field mapped on it."""

from __future__ import annotations

import functools

import numpy as np
import pytest

from bridge import elements
from bridge.compare.mapping import FAMILY_OF_VTK, map_shapes
from bridge.export import MESHIO_CELL_TYPES
from bridge.fem import MASS_POINTS, scalar_mass_matrix
from bridge.mesh import FAMILY_INFO, VTK_CELL_TYPES
from bridge.model import SHELL_FAMILIES, SOLID_FAMILIES, json_schema, parse_model

BUILTIN = ["tri3", "tri6", "quad4", "quad8", "tet4", "tet10", "hex8", "hex20"]


def test_old_tables_derive_from_the_registry():
    assert list(FAMILY_INFO) == BUILTIN
    # (dimension, nodes, order) as the tables held them before the registry
    assert FAMILY_INFO["quad8"] == (2, 8, 2) and FAMILY_INFO["hex20"] == (3, 20, 2)
    # VTK cell types: VTK's vtkCellType.h (VTK_QUADRATIC_HEXAHEDRON = 25 …)
    assert dict(VTK_CELL_TYPES) == {"tri3": 5, "tri6": 22, "quad4": 9, "quad8": 23,
                                    "tet4": 10, "tet10": 24, "hex8": 12, "hex20": 25}
    assert FAMILY_OF_VTK[25] == "hex20" and MESHIO_CELL_TYPES[24] == "tetra10"
    assert SHELL_FAMILIES == ("tri3", "tri6", "quad4", "quad8") and SOLID_FAMILIES == ("tet4", "tet10", "hex8", "hex20")
    assert MASS_POINTS["tet10"] == 4
    # the report's (corner, corner, mid-edge node) table in VTK numbering, as it was written out by
    # hand from VTK's cell documentation (vtkQuadraticTetra, vtkQuadraticHexahedron …)
    by_hand = {
        22: [(0, 1, 3), (1, 2, 4), (2, 0, 5)],
        23: [(0, 1, 4), (1, 2, 5), (2, 3, 6), (3, 0, 7)],
        24: [(0, 1, 4), (1, 2, 5), (2, 0, 6), (0, 3, 7), (1, 3, 8), (2, 3, 9)],
        25: [(0, 1, 8), (1, 2, 9), (2, 3, 10), (3, 0, 11), (4, 5, 12), (5, 6, 13), (6, 7, 14), (7, 4, 15),
             (0, 4, 16), (1, 5, 17), (2, 6, 18), (3, 7, 19)],
    }
    for vtk, table in by_hand.items():
        derived = elements.family_of_vtk(vtk).vtk_edges()
        assert {(min(a, b), max(a, b), m) for a, b, m in derived} == {(min(a, b), max(a, b), m) for a, b, m in table}


def test_registry_refuses_a_clash():
    rec = elements.get_family("quad4")
    with pytest.raises(ValueError, match="registered already"):
        elements.register_family(rec)
    with pytest.raises(ValueError, match="not a permutation"):
        elements.register_node_order("quad4", "dummy", [0, 1, 1, 3])


# --- a 9-node Lagrange quadrilateral, added in the test only ----------------------------------

_Q9_NODES = np.array([[-1, -1], [1, -1], [1, 1], [-1, 1], [0, -1], [1, 0], [0, 1], [-1, 0], [0, 0]], float)


def _lagrange_1d(t):
    """Quadratic Lagrange polynomials on the nodes -1, 0, 1 and their derivatives."""
    return (np.stack([t * (t - 1) / 2, 1 - t * t, t * (t + 1) / 2], axis=-1),
            np.stack([t - 0.5, -2 * t, t + 0.5], axis=-1))


def _q9_shape_functions(xi):
    xi = np.atleast_2d(xi)
    lx, dlx = _lagrange_1d(xi[:, 0])
    ly, dly = _lagrange_1d(xi[:, 1])
    idx = ((_Q9_NODES + 1)).astype(int)  # -1, 0, 1 -> 0, 1, 2
    N = lx[:, idx[:, 0]] * ly[:, idx[:, 1]]
    dN = np.stack([dlx[:, idx[:, 0]] * ly[:, idx[:, 1]], lx[:, idx[:, 0]] * dly[:, idx[:, 1]]], axis=-1)
    return N, dN


def _quad9() -> elements.ElementFamily:
    return elements.ElementFamily(
        name="quad9", shape="quad", dim=2, order=2, corners=4, reference_nodes=_Q9_NODES,
        shape_functions=_q9_shape_functions,
        quadrature=functools.partial(elements.builtin_quadrature, "quad"),
        mass_points=3,  # N Nᵀ is biquartic: 3 Gauss points per direction are exact to degree 5
        gmsh_type=10, vtk_type=28, meshio_type="quad9",  # gmsh: MSH_QUA_9; VTK: VTK_BIQUADRATIC_QUAD
        label="biquadratic quadrilateral (quad9)",
        edges=((0, 1), (1, 2), (2, 3), (3, 0)), linear="quad4", structured=True, incomplete=False)


def _plate(family: str) -> dict:
    return {"name": "nine node plate", "geometry": {"kind": "plate", "length": "120 mm", "width": "80 mm"},
            "materials": {"steel": {"youngs_modulus": "210 GPa", "poisson_ratio": 0.3, "density": "7850 kg/m^3"}},
            "section": {"kind": "shell", "material": "steel", "thickness": "2 mm"},
            "mesh": {"family": family, "divisions": [3, 2]}}


def test_a_family_added_through_the_registry_alone_meshes_weighs_and_maps():
    from bridge.meshing.gmsh import build_mesh

    with elements.registered(_quad9()):
        assert "quad9" in FAMILY_INFO and FAMILY_OF_VTK[28] == "quad9"
        assert "quad9" in json_schema()["$defs"]["MeshSpec"]["properties"]["family"]["enum"]
        model = parse_model(_plate("quad9"))
        mesh = build_mesh(model)
        assert mesh.cells.shape == (6, 9) and mesh.is_shell
        # a 3 x 2 structured Lagrange mesh has (2·3 + 1)(2·2 + 1) = 35 nodes (counting, exact)
        assert mesh.n_nodes == 35
        # the centre node sits at the mean of the corners (gmsh's quad9 node 9 is the centre)
        np.testing.assert_allclose(mesh.points[mesh.cells[:, 8]], mesh.points[mesh.cells[:, :4]].mean(axis=1),
                                   atol=1e-12)

        # mass: ρ t A (exact for a flat plate)
        M = scalar_mass_matrix(mesh.points, mesh.cells, "quad9", 7850.0, thickness=0.002)
        assert M.sum() == pytest.approx(7850.0 * 0.002 * 0.12 * 0.08, rel=1e-12)

        # mapping: a biquadratic field is reproduced exactly by the quad9 shape functions
        def field(p):
            x, y = p[:, 0], p[:, 1]
            return 1.0 + 3 * x - 2 * y + 40 * x * y + 25 * x * x * y * y * 1e3

        vtk_type, conn = mesh.vtk_cells()
        assert vtk_type == 28
        shapes = np.stack([field(mesh.points)[:, None] * np.ones((1, 3))])  # (1, n, 3)
        rng = np.random.default_rng(5)
        targets = np.column_stack([rng.uniform(0, 0.12, 40), rng.uniform(0, 0.08, 40), np.zeros(40)])
        mapped = map_shapes(mesh.points, conn, vtk_type, shapes, targets)
        np.testing.assert_allclose(mapped[0, :, 0], field(targets), rtol=1e-10, atol=1e-12)
    assert "quad9" not in FAMILY_INFO
    assert "quad9" not in json_schema()["$defs"]["MeshSpec"]["properties"]["family"]["enum"]


def test_the_registry_holds_line_families():
    """1-D families (for beams later) fit the same record: shape functions, quadrature, mass."""
    line3 = elements.ElementFamily(
        name="line3", shape="line", dim=1, order=2, corners=2, reference_nodes=np.array([[-1.0], [1.0], [0.0]]),
        shape_functions=functools.partial(elements.builtin_shape_functions, np.array([[-1.0], [1.0]]), ((0, 1),),
                                          True, False),
        quadrature=functools.partial(elements.builtin_quadrature, "line"), mass_points=3,
        gmsh_type=8, vtk_type=21, meshio_type="line3", label="quadratic line (line3)",  # gmsh MSH_LIN_3, VTK_QUADRATIC_EDGE
        edges=((0, 1),), linear=None)
    with elements.registered(line3):
        assert elements.section_kind_of("line3") == "beam" and elements.families_for_section("beam") == ("line3",)
        N, dN = line3.shape_functions(np.array([[-1.0], [1.0], [0.0], [0.3]]))
        np.testing.assert_allclose(N[:3], np.eye(3), atol=1e-15)  # Kronecker property (definition)
        # quadratic Lagrange on -1, 0, 1 (definition): N_mid = 1 - ξ², N_1 = ξ(ξ - 1)/2
        np.testing.assert_allclose(N[3], [0.3 * -0.7 / 2, 0.3 * 1.3 / 2, 1 - 0.09], atol=1e-15)
        # a straight 1 m bar of two 3-node elements: mass ρ A L (exact for straight elements)
        pts = np.array([[0.0, 0, 0], [0.5, 0, 0], [0.25, 0, 0], [1.0, 0, 0], [0.75, 0, 0]])
        cells = np.array([[0, 1, 2], [1, 3, 4]])
        M = scalar_mass_matrix(pts, cells, "line3", 7850.0, thickness=1e-4)  # thickness = cross-section area
        assert M.sum() == pytest.approx(7850.0 * 1e-4 * 1.0, rel=1e-12)
        assert elements.cell_measure(pts, cells, "line3").sum() == pytest.approx(1.0, rel=1e-12)
