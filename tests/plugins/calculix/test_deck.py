"""CalculiX deck writer: golden deck, node order, escaping."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from bridge.errors import DeckWriteError
from bridge.fem import element_nodes_natural
from bridge.mesh import FAMILY_INFO
from bridge.model import load_model
from bridge.pipeline import make_job, prepare
from bridge.selection import solver_options
from modebridge_calculix.adapter import CalculixAdapter
from modebridge_calculix.deck import ELEMENT_TYPES, NODE_ORDER, deck_text

GOLDEN = Path(__file__).resolve().parents[3] / "fixtures" / "calculix" / "golden"

#: CalculiX / Abaqus node order, as the corner pair each mid-edge node sits between
#: (CalculiX manual, element chapter, C3D10 and C3D20 figures; from memory)
CCX_EDGES = {
    "tet10": [(0, 1), (1, 2), (2, 0), (0, 3), (1, 3), (2, 3)],
    "hex20": [(0, 1), (1, 2), (2, 3), (3, 0), (4, 5), (5, 6), (6, 7), (7, 4), (0, 4), (1, 5), (2, 6), (3, 7)],
    "quad8": [(0, 1), (1, 2), (2, 3), (3, 0)],
    "tri6": [(0, 1), (1, 2), (2, 0)],
}


def _job(write_model, text):
    path = write_model(text)
    prep = prepare(load_model(path), path)
    return prep, make_job(prep)


def test_golden_deck(write_model, plate):
    text = plate("quad4", (2, 2), "clamped", modes=4) + """
[[masses]]
name = "probe"
mass = "0.01 kg"
at = ["50 mm", "50 mm", "0 mm"]
"""
    _, job = _job(write_model, text)
    job.model_hash = "0" * 64  # the hash follows the library versions' float printing; pin it
    deck = deck_text(job)
    expected = (GOLDEN / "plate_quad4_2x2_clamped.inp").read_text()
    assert deck == expected


@pytest.mark.parametrize("family", ["tet10", "hex20", "quad8", "tri6"])
def test_mid_nodes_sit_where_calculix_expects_them(family, write_model, plate):
    if FAMILY_INFO[family][0] == 2:
        text = plate(family, (3, 3))
    else:
        text = plate("quad4", (3, 3)).replace('kind = "plate"', 'kind = "block"\nheight = "10 mm"') \
            .replace('kind = "shell"', 'kind = "solid"').replace('thickness = "2 mm"', "") \
            .replace('family = "quad4"', f'family = "{family}"') \
            .replace("divisions = [3, 3]", "divisions = [3, 3, 2]" if family == "hex20" else 'size = "25 mm"') \
            .replace('sides = ["xmin", "xmax", "ymin", "ymax"]', 'sides = ["xmin"]')
    _, job = _job(write_model, text)
    conn = job.cells[:, NODE_ORDER[family]]
    X = job.points[conn]
    ncorner = {"tet10": 4, "hex20": 8, "quad8": 4, "tri6": 3}[family]
    for k, (a, b) in enumerate(CCX_EDGES[family]):
        np.testing.assert_allclose(X[:, ncorner + k], (X[:, a] + X[:, b]) / 2, atol=1e-9)
    if family in ("tet10", "hex20"):
        # positive volume in CalculiX's corner order (right-handed), checked on the first corners
        v = np.einsum("ij,ij->i", X[:, 1] - X[:, 0], np.cross(X[:, 3 if family == "hex20" else 2] - X[:, 0],
                                                              X[:, 4 if family == "hex20" else 3] - X[:, 0]))
        assert np.all(v > 0)


def test_every_family_has_a_calculix_element_and_order():
    for fam, (_, nper, _) in FAMILY_INFO.items():
        assert fam in ELEMENT_TYPES and sorted(NODE_ORDER[fam]) == list(range(nper))
        assert element_nodes_natural(fam).shape[0] == nper
    assert "S4R" not in ELEMENT_TYPES.values()  # unusable in plate bending (measured with this solver on a machine of this kind)


def test_long_element_lines_are_continued(write_model, plate):
    text = plate("quad4", (2, 2)).replace('kind = "plate"', 'kind = "block"\nheight = "10 mm"') \
        .replace('kind = "shell"', 'kind = "solid"').replace('thickness = "2 mm"', "") \
        .replace('family = "quad4"', 'family = "hex20"').replace("divisions = [2, 2]", "divisions = [2, 2, 1]") \
        .replace('sides = ["xmin", "xmax", "ymin", "ymax"]', 'sides = ["xmin"]')
    _, job = _job(write_model, text)
    lines = deck_text(job).splitlines()
    i = lines.index("*ELEMENT, TYPE=C3D20R, ELSET=EALL")
    first, second = lines[i + 1], lines[i + 2]
    assert first.endswith(",") and len(first.split(",")) == 17  # 16 entries, then the continuation
    assert len(second.split(",")) == 5


def test_title_that_could_smuggle_a_card_is_refused(write_model, plate):
    _, job = _job(write_model, plate("quad4", (2, 2)))
    job.title = "plate\n*BOUNDARY"
    with pytest.raises(DeckWriteError):
        deck_text(job)


def test_frd_format_option_picks_the_output_card(write_model, plate):
    """Binary .frd by default (*NODE OUTPUT), ASCII (*NODE FILE) when the model asks for it."""
    _, job = _job(write_model, plate("quad4", (2, 2), "clamped"))
    assert "*NODE OUTPUT, OUTPUT=2D\nU\n" in deck_text(job) and "*NODE FILE" not in deck_text(job)
    text = plate("quad4", (2, 2), "clamped") + '\n[solver_options.calculix]\nfrd_format = "ascii"\n'
    path = write_model(text)
    model = load_model(path)
    options = solver_options(model, CalculixAdapter(), path)
    assert options["frd_format"] == "ascii"
    job = make_job(prepare(model, path), options=options)
    assert "*NODE FILE, OUTPUT=2D\nU\n" in deck_text(job) and "*NODE OUTPUT" not in deck_text(job)
