"""Stiffeners and beam sections on real solvers (issue 9).

A free steel plate with one rib seated on its top face (a beam offset from the shell's
mid-surface) against a solid model of the same ribbed plate (plate and rib fused into one body
with gmsh's OpenCASCADE kernel, tet10, CalculiX C3D10), on every solver whose plugin offers beams
off their nodes; its effective masses; and CalculiX's I, channel and angle sections (drawn as their
walls) and round bars against Euler–Bernoulli."""

from __future__ import annotations

import textwrap
from pathlib import Path

import numpy as np
import pytest

from bridge.meshing.gmsh import write_step
from bridge.pipeline import model_mass, run_model
from bridge.plugins import get_plugin_manager, get_solvers
from bridge.sections import section_properties

STEEL = """
[materials.steel]
youngs_modulus = "210 GPa"
poisson_ratio = 0.3
density = "7850 kg/m^3"
"""
#: the ribbed plate, mm: plate L × W × T, rib w × h along x on the centre line, on the top face
L, W, T, RIB_W, RIB_H = 80.0, 80.0, 2.0, 2.0, 4.0


def _offset_solvers() -> list[str]:
    return sorted(n for n, a in get_solvers(get_plugin_manager()).items()
                  if getattr(a.capabilities, "beam_offsets", False))


def _shell_model(rib: bool = True) -> str:
    text = f"""
name = "ribbed plate"
[geometry]
kind = "plate"
length = "{L} mm"
width = "{W} mm"
{STEEL}
[section]
kind = "shell"
material = "steel"
thickness = "{T} mm"
[analysis]
modes = 10
[mesh]
family = "quad8"
divisions = [16, 16]
"""
    if rib:
        text += f"""
[beam_sections.rib]
shape = "rectangle"
material = "steel"
width = "{RIB_W} mm"
height = "{RIB_H} mm"
[regions.rib_line]
select = "line"
start = ["0 mm", "{W / 2} mm", "0 mm"]
end = ["{L} mm", "{W / 2} mm", "0 mm"]
[[members]]
name = "rib"
along = "rib_line"
section = "rib"
side = "top"
"""
    return text


def _solid_model(size: float) -> str:
    return f"""
name = "ribbed plate solid"
[geometry]
kind = "cad"
file = "ribbed.step"
{STEEL}
[section]
kind = "solid"
material = "steel"
[analysis]
modes = 10
[mesh]
family = "tet10"
size = "{size} mm"
"""


def _ribbed_step(path: Path) -> Path:
    def build(gmsh):
        occ = gmsh.model.occ
        plate = occ.addBox(0, 0, -T / 2e3, L / 1e3, W / 1e3, T / 1e3)
        rib = occ.addBox(0, (W - RIB_W) / 2e3, T / 2e3, L / 1e3, RIB_W / 1e3, RIB_H / 1e3)
        occ.fuse([(3, plate)], [(3, rib)])  # one body: the rib's base shares the plate's nodes

    return write_step(path, build)


@pytest.fixture(scope="module")
def solid_reference(tmp_path_factory):
    """The converged solid model's first four elastic modes (CalculiX C3D10 at 3 mm) and the
    change from 4 mm."""
    import os
    import shutil

    if shutil.which("ccx") is None:  # as tests/conftest.py's ccx fixture: skip locally, fail in CI
        if os.environ.get("CI"):
            pytest.fail("solver executable 'ccx' missing in CI")
        pytest.skip("'ccx' not installed")
    d = tmp_path_factory.mktemp("solid")
    _ribbed_step(d / "ribbed.step")
    out = {}
    for size in (4.0, 3.0):
        p = d / f"solid_{size:g}.toml"
        p.write_text(textwrap.dedent(_solid_model(size)), encoding="utf-8")
        _, (o,) = run_model(p, d / f"s{size:g}", solvers=["calculix"])
        assert o.ok, str(o.error)
        out[size] = o.result.frequencies[6:10]
    return out


@pytest.mark.solver
@pytest.mark.parametrize("solver", _offset_solvers())
def test_ribbed_plate_matches_a_solid_model(solver, solid_reference, ccx_and_opensees, write_model, tmp_path):
    coarse, fine = solid_reference[4.0], solid_reference[3.0]
    # the solid reference is converged: 4 → 3 mm moved its first four modes by at most 0.2 %
    # (measured 2026-12-02: 0.18, 0.11, 0.09, 0.20 %; 1080.8, 1655.8, 2326.6, 2610.1 Hz at 3 mm);
    # a converged solid model as reference (common practice, no source)
    assert np.abs(coarse / fine - 1).max() < 0.005
    _, (o,) = run_model(write_model(_shell_model()), tmp_path / "shell", solvers=[solver])
    assert o.ok, str(o.error)
    f = o.result.frequencies[6:10]
    _, (b,) = run_model(write_model(_shell_model(rib=False), "bare.toml"), tmp_path / "bare", solvers=[solver])
    bare = b.result.frequencies[6:10]
    # the rib matters: it moves the third mode (bending along the rib) up by more than 20 %
    # (measured: bare 1038, 1522, 1884, 2678 Hz; ribbed 1069, 1645, 2321, 2598 Hz on CalculiX)
    assert f[2] / bare[2] - 1 > 0.2 and np.abs(f / bare - 1).max() > 0.2
    # shell + offset beam within 3 % of the solid on the first four elastic modes (issue 9's
    # acceptance; measured: CalculiX −1.1, −0.6, −0.2, −0.5 %, OpenSees −1.7, −1.1, −0.1, −0.4 %,
    # Kratos −1.9, −1.2, −0.3, −0.6 %, 1060.6, 1635.6, 2320.4, 2593.4 Hz, 2026-12-02)
    np.testing.assert_allclose(f, fine, rtol=0.03)


@pytest.mark.solver
@pytest.mark.parametrize("solver", _offset_solvers())
def test_effective_masses_of_a_free_ribbed_plate_hold_the_ribs_mass(solver, ccx_and_opensees, write_model, tmp_path):
    prep, (o,) = run_model(write_model(_shell_model()), tmp_path / "m", solvers=[solver])
    assert o.ok, str(o.error)
    r = o.result
    total = model_mass(prep.model, prep.mesh)
    # plate ρ L W T plus rib ρ w h L: exact arithmetic
    assert total == pytest.approx(7850e-9 * (L * W * T + RIB_W * RIB_H * L), rel=1e-9)
    # a free body: its effective masses sum to the whole mass, the rib's included, within 0.5 %
    # (issue 9's acceptance; Σ m_eff = rᵀ M r for M-orthonormal modes, e.g. Chopra, Dynamics of
    # Structures, §13.2, from memory)
    np.testing.assert_allclose(r.effective_mass[:, :3].sum(axis=0), total, rtol=0.005)
    checks = {c["name"]: c["status"] for c in r.metadata["checks"]}
    assert checks["mass_sum"] == "ok" and checks["rigid_body_modes"] == "ok"


def _cantilever(shape: str, dims: dict[str, float]) -> str:
    lines = "\n".join(f'{k} = "{v} mm"' for k, v in dims.items())
    return f"""
name = "cantilever {shape}"
[geometry]
kind = "points"
{STEEL}
[beam_sections.s]
shape = "{shape}"
material = "steel"
{lines}
[reference_points]
root = ["0 mm", "0 mm", "0 mm"]
tip = ["600 mm", "0 mm", "0 mm"]
[[members]]
name = "beam"
start = "root"
end = "tip"
section = "s"
divisions = 40
[[supports]]
point = "root"
kind = "clamped"
[analysis]
modes = 8
"""


SHAPES = [
    ("i_section", {"height": 20, "width": 12, "web": 1.5, "flange": 2}),
    ("channel", {"height": 20, "width": 10, "web": 2, "flange": 2}),
    ("angle", {"height": 20, "width": 15, "thickness": 2}),
    ("round", {"diameter": 6}),
]


@pytest.mark.solver
@pytest.mark.parametrize("shape,dims", SHAPES, ids=[s for s, _ in SHAPES])
@pytest.mark.parametrize("solver", ["calculix", "opensees"])
def test_section_shapes_on_a_cantilever_match_euler_bernoulli(solver, shape, dims, ccx_and_opensees,
                                                               write_model, tmp_path):
    _, (o,) = run_model(write_model(_cantilever(shape, dims)), tmp_path / "c", solvers=[solver])
    assert o.ok, str(o.error)
    sp = section_properties(shape, {k: v / 1e3 for k, v in dims.items()})
    principal = np.linalg.eigvalsh([[sp.iy, -sp.iyz], [-sp.iyz, sp.iz]])  # an angle bends about these
    beta = np.array([1.875104, 4.694091])  # βL of a cantilever (Blevins 1979, Table 8-1, from memory)
    eb = np.sort(np.concatenate([beta**2 / (2 * np.pi * 0.6**2) * np.sqrt(210e9 * i / (7850 * sp.area))
                                 for i in principal]))
    # the first three bending modes within 1 % of Euler–Bernoulli (L/h = 30; the fourth carries
    # shear deformation: measured −0.8 … −1.0 % on CalculiX). Measured on CalculiX's walls:
    # I +0.0, −0.1, −0.1 %; channel 0.0, −0.1, −0.1 %; angle 0.0, −0.1, −0.2 %; round bar −0.6 %
    np.testing.assert_allclose(o.result.frequencies[:3], eb[:3], rtol=0.01)
