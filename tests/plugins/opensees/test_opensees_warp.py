"""OpenSees on warped quads: ShellMITC4 gives way to ASDShellQ4 (issue 8), with a warning."""

from __future__ import annotations

import tomllib

from modebridge_opensees import deck
from modebridge_opensees.adapter import OpenSeesAdapter

from bridge.model import parse_model
from bridge.pipeline import make_job, prepare

STEEL = {"steel": {"youngs_modulus": "210 GPa", "poisson_ratio": 0.3, "density": "7850 kg/m^3"}}


def _job(geometry: dict, **mesh):
    m = parse_model({"name": "w", "geometry": geometry, "materials": STEEL,
                     "section": {"kind": "shell", "material": "steel", "thickness": "1 mm"},
                     "mesh": {"family": "quad4", **mesh}})
    return make_job(prepare(m))


BENT = {"kind": "profile", "points": [["0 mm", "20 mm"], ["0 mm", "0 mm"], ["30 mm", "0 mm"]],
        "radii": ["3 mm"], "length": "20 mm"}


def test_flat_and_patch_meshes_keep_mitc4(plate):
    flat = make_job(prepare(parse_model(tomllib.loads(plate("quad4", (4, 4), "clamped")))))
    bent = _job(BENT, size="2 mm")  # structured: the bend's quads are flat (edges on generators)
    for job in (flat, bent):
        assert deck.quad_warp(job) < 1e-9
        assert OpenSeesAdapter().element_for(job) == "ShellMITC4"
        assert OpenSeesAdapter()._warp_note(job, "ShellMITC4") == []


def test_warped_quads_take_asdshellq4_and_say_so():
    # local sizes make the mesh unstructured: quads on the bend are warped
    m = parse_model({"name": "w", "geometry": BENT, "materials": STEEL,
                     "section": {"kind": "shell", "material": "steel", "thickness": "1 mm"},
                     "regions": {"r": {"select": "named", "name": "bend_1"}},
                     "mesh": {"family": "quad4", "size": "2.5 mm", "local_sizes": {"r": "2 mm"}}})
    job = make_job(prepare(m))
    assert deck.quad_warp(job) > deck.WARP_LIMIT
    adapter = OpenSeesAdapter()
    assert adapter.element_for(job) == "ASDShellQ4"
    (note,) = adapter._warp_note(job, "ASDShellQ4")
    assert "ShellMITC4 is too stiff" in note
    # another element the user chooses (option quad_shell) is kept, with the warning
    job.options["quad_shell"] = "ShellDKGQ"
    assert adapter.element_for(job) == "ShellDKGQ"
    assert "21-22 % too stiff" in adapter._warp_note(job, "ShellDKGQ")[0]
