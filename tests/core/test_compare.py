"""MAC, pairing, clusters and mesh mapping."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from bridge.compare import compare_modes, find_clusters, mac_matrix, pair_modes
from bridge.compare.mapping import MappingError, map_shapes
from bridge.compare.results import DifferentModelsError, Thresholds, compare_results
from bridge.meshing.gmsh import build_mesh
from bridge.model import load_model
from bridge.results import ModalResult


def test_mac_hand_computed():
    # MAC = |aᵀb|²/((aᵀa)(bᵀb)) (Allemang & Brown 1982, from memory); by hand:
    a = np.array([[1.0, 0.0, 0.0]])
    b = np.array([[1.0, 1.0, 0.0], [0.0, 0.0, 2.0], [3.0, 4.0, 0.0]])
    # (1·1)²/(1·2) = 0.5; 0; (3)²/(1·25) = 0.36
    np.testing.assert_allclose(mac_matrix(a, b), [[0.5, 0.0, 0.36]], atol=1e-15)
    # complex vectors: |aᴴb|² with a = (1, i), b = (i, 1): aᴴb = -i·i... = (1)(i) + (-i)(1) = 0
    np.testing.assert_allclose(mac_matrix(np.array([[1, 1j]]), np.array([[1j, 1]])), [[0.0]], atol=1e-15)
    np.testing.assert_allclose(mac_matrix(np.array([[1, 1j]]), np.array([[1j, -1]])), [[1.0]], atol=1e-15)


# Entries below 1e-100 are set to zero: scaling a subnormal entry (5e-324 × 1e-3) rounds the
# input itself to zero, so the scale-invariance property would test float underflow of the
# input, not the MAC (hypothesis found such a case).
finite = st.floats(-1e3, 1e3, allow_nan=False, allow_infinity=False).map(lambda x: 0.0 if abs(x) < 1e-100 else x)


@settings(max_examples=60, deadline=None)
@given(arrays(float, (3, 6), elements=finite), arrays(float, (4, 6), elements=finite),
       st.floats(1e-3, 1e3), st.sampled_from([-1.0, 1.0]))
def test_mac_properties(a, b, scale, sign):
    m = mac_matrix(a, b)
    assert np.all(m >= 0) and np.all(m <= 1)  # Cauchy-Schwarz bound
    # invariant to scaling and sign of either vector (definition)
    np.testing.assert_allclose(mac_matrix(a * scale * sign, b), m, atol=1e-9)
    np.testing.assert_allclose(mac_matrix(a, -b / scale), m, atol=1e-9)
    np.testing.assert_allclose(mac_matrix(b, a), m.T, atol=1e-12)  # symmetric


def _modes(n=40, k=6, seed=0):
    q, _ = np.linalg.qr(np.random.default_rng(seed).normal(size=(n, k)))
    return q.T.reshape(k, -1, 1)


def test_swapped_modes_pair_by_shape():
    s = _modes()
    fa = np.array([100.0, 200.0, 205.0, 300.0, 400.0, 500.0])
    order = [0, 2, 1, 3, 4, 5]  # modes 2 and 3 change places in B
    fb = np.array([101.0, 203.0, 204.0, 302.0, 398.0, 505.0])
    c = compare_modes(fa, s, fb, s[order], cluster_tol=0.0)
    assert [(p.a, p.b) for p in c.pairs] == [(0, 0), (1, 2), (2, 1), (3, 3), (4, 4), (5, 5)]
    assert all(p.mac == pytest.approx(1.0) for p in c.pairs)


def test_repeated_pair_is_one_cluster_even_when_rotated():
    s = _modes()
    fa = np.array([100.0, 200.0, 200.0, 300.0])
    th = np.radians(40.0)
    rot = np.array([[np.cos(th), -np.sin(th)], [np.sin(th), np.cos(th)]])
    sb = s[:4].copy()
    sb[1:3] = np.einsum("ij,jnc->inc", rot, s[1:3])  # an arbitrary basis of the same subspace
    c = compare_modes(fa, s[:4], fa * 1.001, sb)
    pm = {(p.a, p.b): p.mac for p in c.pairs}
    assert max(pm[(1, 1)], pm.get((1, 2), 0)) < 0.6  # cos²40° = 0.587: single vectors look poor
    (cl,) = c.clusters
    assert cl.a == [1, 2] and cl.b == [1, 2]
    assert max(cl.angles_deg) < 1e-6  # the same subspace: principal angles 0
    assert find_clusters(np.array([1.0, 2.0, 2.01, 3.0, 3.001, 3.002])) == [[1, 2], [3, 4, 5]]


def test_pairing_skips_rigid_modes():
    s = _modes(k=8)
    f = np.array([0, 0, 1e-3, 1e-3, 0, 0, 50.0, 80.0])
    pairs = pair_modes(f, f, mac_matrix(s, s), skip_a=6, skip_b=6)
    assert [(p.a, p.b) for p in pairs] == [(6, 6), (7, 7)]


PLATE = """
name = "mapping plate"
[geometry]
kind = "{kind}"
length = "100 mm"
width = "60 mm"
{height}
[materials.steel]
youngs_modulus = "210 GPa"
poisson_ratio = 0.3
density = "7850 kg/m^3"
[section]
kind = "{section}"
material = "steel"
{thickness}
[mesh]
family = "{family}"
{sizing}
"""


def _mesh(write_model, family, sizing, name):
    solid = family[:3] in ("tet", "hex")
    text = PLATE.format(kind="block" if solid else "plate", height='height = "20 mm"' if solid else "",
                        section="solid" if solid else "shell", thickness="" if solid else 'thickness = "2 mm"',
                        family=family, sizing=sizing)
    return build_mesh(load_model(write_model(text, name)))


def _field(p, quadratic):
    x, y, z = p[:, 0], p[:, 1], p[:, 2]
    lin = 1.0 + 3 * x - 2 * y + 0.5 * z
    return lin + (4 * x * x - 3 * x * y + 2 * y * y + x * z) if quadratic else lin


@pytest.mark.parametrize("family, sizing, quadratic", [
    ("quad4", "divisions = [5, 3]", False), ("tri3", 'size = "20 mm"', False),
    ("quad8", "divisions = [5, 3]", True), ("tri6", 'size = "20 mm"', True),
    ("tet4", 'size = "20 mm"', False), ("tet10", 'size = "20 mm"', True),
    ("hex8", "divisions = [5, 3, 2]", False), ("hex20", "divisions = [5, 3, 2]", True),
])
def test_mapping_reproduces_what_the_elements_represent(write_model, family, sizing, quadratic):
    src = _mesh(write_model, family, sizing, "src.toml")
    dims = 2 if family[:3] in ("tri", "qua") else 3
    target_family = "tri3" if dims == 2 else "tet4"
    tgt = _mesh(write_model, target_family, 'size = "7 mm"', "tgt.toml")
    vtk_type, conn = src.vtk_cells()
    f = _field(src.points, quadratic)
    shapes = np.stack([f, 2 * f, -f], axis=-1)[None]  # (1, n, 3)
    mapped = map_shapes(src.points, conn, vtk_type, shapes, tgt.points)
    g = _field(tgt.points, quadratic)
    # exact up to round-off (the interpolation property of the shape functions)
    np.testing.assert_allclose(mapped[0], np.stack([g, 2 * g, -g], axis=-1), atol=1e-10, rtol=1e-10)


def test_points_outside_the_mesh_are_refused(write_model):
    src = _mesh(write_model, "quad4", "divisions = [5, 3]", "src.toml")
    vtk_type, conn = src.vtk_cells()
    with pytest.raises(MappingError, match="outside"):
        map_shapes(src.points, conn, vtk_type, np.zeros((1, src.n_nodes, 3)), np.array([[0.2, 0.0, 0.0]]))


def _result(points, shapes, freqs, physics):
    return ModalResult(frequencies=np.asarray(freqs, float), eigenvalues=(2 * np.pi * np.asarray(freqs)) ** 2,
                       points=points, node_ids=np.arange(1, len(points) + 1), cell_type=9,
                       cells=np.zeros((0, 4), int), shapes=shapes,
                       metadata={"provenance": {"physics_hash": physics}})


def test_results_of_different_models_are_refused_unless_forced():
    s = _modes(n=10, k=3).reshape(3, 10, 1).repeat(3, axis=2)
    pts = np.random.default_rng(1).random((10, 3))
    a = _result(pts, s, [10, 20, 30], "aaa")
    b = _result(pts, s, [10, 20, 30], "bbb")
    with pytest.raises(DifferentModelsError, match="--force"):
        compare_results(a, b)
    c = compare_results(a, b, force=True)
    assert c.passed and c.forced and not c.mapped


def test_verdict_thresholds():
    s = _modes(n=10, k=3).reshape(3, 10, 1).repeat(3, axis=2)
    pts = np.random.default_rng(1).random((10, 3))
    a = _result(pts, s, [100, 200, 300], "x")
    b = _result(pts, s, [100.5, 203, 300], "x")  # mode 2 is 1.5 % off
    c = compare_results(a, b)
    assert not c.passed and [v["ok"] for v in c.pair_verdicts()] == [True, False, True]
    assert compare_results(a, b, thresholds=Thresholds(max_df=0.02)).passed
    # acos(√0.9) = 18.43°: the cluster limit that matches MAC 0.9 (definition)
    assert Thresholds().max_angle_deg == pytest.approx(18.4349, abs=1e-3)


def test_a_mode_shifted_beyond_pairing_stays_unpaired():
    # B's first mode has moved far away (+468 %) and its shape is new (MAC ≈ 0 with every A
    # mode): no assignment may force a partner on it (floor PAIR_MIN_MAC, common practice, no source)
    s = _modes(k=8)
    fa = np.array([100.0, 200.0, 300.0, 400.0, 500.0, 600.0])
    sb = s[[6, 1, 2, 3, 4, 5]]  # mode 1 replaced by an orthogonal shape
    fb = np.array([568.0, 201.0, 302.0, 399.0, 503.0, 598.0])
    order = np.argsort(fb)
    c = compare_modes(fa, s[:6], fb[order], sb[order])
    assert 0 in c.unpaired_a  # A mode 1 has no partner
    assert list(order).index(0) in c.unpaired_b  # nor the moved B mode
    assert all(p.mac >= 0.5 for p in c.pairs) and len(c.pairs) == 5


def test_close_pair_with_split_macs_is_one_cluster():
    # two close modes (688 / 701 Hz, 1.9 % apart: not "repeated") whose shapes B mixes at 45°:
    # every cross-MAC ≈ 0.5, yet the two span the same subspace (principal angles 0)
    s = _modes()
    fa = np.array([300.0, 688.0, 701.0, 900.0])
    th = np.radians(45.0)
    rot = np.array([[np.cos(th), -np.sin(th)], [np.sin(th), np.cos(th)]])
    sb = s[:4].copy()
    sb[1:3] = np.einsum("ij,jnc->inc", rot, s[1:3])
    c = compare_modes(fa, s[:4], fa * 1.002, sb)
    assert c.mac[1, 1] == pytest.approx(0.5, abs=1e-9) and c.mac[1, 2] == pytest.approx(0.5, abs=1e-9)
    (cl,) = c.clusters
    assert cl.a == [1, 2] and cl.b == [1, 2] and max(cl.angles_deg) < 1e-6
    assert {(p.a, p.b, p.cluster) for p in c.pairs if p.cluster is not None} == {(1, 1, 0), (2, 2, 0)}
    assert not c.unpaired_a and not c.unpaired_b
    assert c.pairs[1].as_dict()["a"] == 2 and c.pairs[1].as_dict()["cluster"] == 1  # 1-based in JSON
