"""Several sections without a solver: model form, meshing into sections, bad inputs (one clear
line each), `check` listing sections and regions, and the decks of a two-section job."""

from __future__ import annotations

import json
import re

import numpy as np
import pytest
from typer.testing import CliRunner

from bridge.cli import app
from bridge.errors import ModelError
from bridge.model import parse_model
from bridge.pipeline import make_job, model_mass, prepare

_ANSI = re.compile(r"\x1b\[[0-9;]*m")

DOUBLER = """
name = "plate with doubler"
[geometry]
kind = "plate"
length = "100 mm"
width = "60 mm"
patches = [{ min = ["30 mm", "15 mm"], max = ["70 mm", "45 mm"] }]
[materials.steel]
youngs_modulus = "210 GPa"
poisson_ratio = 0.3
density = "7850 kg/m^3"
[materials.alu]
youngs_modulus = "70 GPa"
poisson_ratio = 0.33
density = "2700 kg/m^3"
[sections.sheet]
kind = "shell"
material = "steel"
thickness = "1 mm"
[sections.doubler]
kind = "shell"
material = "alu"
thickness = "2 mm"
region = "doubler"
[regions.doubler]
select = "box"
entity = "face"
min = ["30 mm", "15 mm", "-1 mm"]
max = ["70 mm", "45 mm", "1 mm"]
[regions.left]
select = "sides"
sides = ["xmin"]
[analysis]
modes = 12
[mesh]
family = "quad8"
divisions = [20, 12]
"""
#: ρ t A of the sheet outside the doubler plus the doubler (analytic)
DOUBLER_MASS = 7850 * 0.001 * (0.1 * 0.06 - 0.04 * 0.03) + 2700 * 0.002 * 0.04 * 0.03


def _line(result, code: int) -> str:
    assert result.exit_code == code, result.output
    assert isinstance(result.exception, SystemExit), repr(result.exception)
    assert "Traceback" not in result.output
    lines = _ANSI.sub("", result.stderr).splitlines()
    assert len(lines) == 1, result.stderr
    return lines[0]


def _check(write_model, text: str):
    return CliRunner().invoke(app, ["check", str(write_model(text)), "--json"])


def test_check_lists_sections_regions_and_the_analytic_mass(write_model):
    res = _check(write_model, DOUBLER)
    assert res.exit_code == 0, res.output
    info = json.loads(res.stdout)
    # mass of the two thicknesses and materials: analytic to 0.1 % (issue 8 acceptance)
    assert info["total_mass_kg"] == pytest.approx(DOUBLER_MASS, rel=1e-3)
    sheet, doubler = info["sections"]
    assert (sheet["name"], sheet["region"], sheet["kind"], sheet["material"]) == ("sheet", None, "shell", "steel")
    assert sheet["thickness_m"] == pytest.approx(0.001) and doubler["thickness_m"] == pytest.approx(0.002)
    assert doubler["region"] == "doubler" and doubler["material"] == "alu"
    # 20 x 12 quads of 5 mm: the doubler 40 x 30 mm holds 8 x 6 (geometry implies it)
    assert doubler["elements"] == 48 and sheet["elements"] == 240 - 48
    assert doubler["mass_kg"] == pytest.approx(2700 * 0.002 * 0.04 * 0.03, rel=1e-9)
    # regions by node count: quad8 doubler 8 x 6 elements: (2·8+1)(2·6+1) − 8·6 centre-less = 173;
    # the left edge: 2·12 + 1 = 25 nodes
    assert info["regions"] == {"doubler": 173, "left": 25}
    table = CliRunner().invoke(app, ["check", str(write_model(DOUBLER, "t.toml"))])
    assert table.exit_code == 0
    for word in ("Sections", "the rest", "doubler", "2 mm", "Regions", "173"):
        assert word in table.stdout


def test_one_section_model_keeps_its_hash_and_form(write_model, plate):
    m = parse_model(__import__("tomllib").loads(plate("quad4", (2, 2), "clamped")))
    d = m.canonical_dict()
    assert "sections" not in d and "patches" not in d["geometry"] and d["section"]["kind"] == "shell"
    prep = prepare(m)
    assert prep.mesh.section_names == ["section"] and not prep.mesh.cell_sections().any()
    res = _check(write_model, plate("quad4", (2, 2), "clamped"))
    (s,) = json.loads(res.stdout)["sections"]
    assert s["region"] is None and s["name"] == "section"


BAD = {
    # a face without a section: both sections have regions and the sheet outside the doubler has none
    "face without a section": (("[sections.sheet]\nkind = \"shell\"\nmaterial = \"steel\"\nthickness = \"1 mm\"\n",
                                "[sections.sheet]\nkind = \"shell\"\nmaterial = \"steel\"\nthickness = \"1 mm\"\n"
                                "region = \"left_half\"\n[regions.left_half]\nselect = \"box\"\nentity = \"face\"\n"
                                "min = [\"0 mm\", \"0 mm\", \"-1 mm\"]\nmax = [\"30 mm\", \"60 mm\", \"1 mm\"]\n"),
                               "sections: face", "belongs to no section"),
    # two sections on one face: the sheet's region takes the whole plate, doubler included
    "two sections on one face": (("[sections.sheet]\nkind = \"shell\"\nmaterial = \"steel\"\nthickness = \"1 mm\"\n",
                                  "[sections.sheet]\nkind = \"shell\"\nmaterial = \"steel\"\nthickness = \"1 mm\"\n"
                                  "region = \"all\"\n[regions.all]\nselect = \"plane\"\naxis = \"z\"\nat = \"0 mm\"\n"
                                  "entity = \"face\"\n"),
                                 "sections.doubler.region", "lies in two sections, 'sheet' and 'doubler'"),
    "unknown material": (('material = "alu"', 'material = "titanium"'),
                         "sections.doubler.material", "material 'titanium' is not defined; defined: steel, alu"),
    "unknown region": (('region = "doubler"', 'region = "patch"'),
                       "sections.doubler.region", "region 'patch' is not defined"),
    "region of edges": (('region = "doubler"', 'region = "left"'),
                        "sections.doubler.region", "a shell section needs a region of faces"),
    "two sections without a region": (('region = "doubler"\n', ''),
                                      "sections.doubler.region", "both lack 'region'"),
    "section and sections": (("[sections.sheet]", "[section]\nkind = \"shell\"\nmaterial = \"steel\"\n"
                                                   "thickness = \"1 mm\"\n[sections.sheet]"),
                             "section", "give exactly one of [section]"),
    "patch outside the plate": (('max = ["70 mm", "45 mm"]', 'max = ["170 mm", "45 mm"]'),
                                "geometry", "patches[0] reaches outside the plate"),
}


@pytest.mark.parametrize("case", list(BAD), ids=list(BAD))
def test_bad_sections_give_one_clear_line(write_model, case):
    (old, new), field, message = BAD[case]
    assert old in DOUBLER
    line = _line(_check(write_model, DOUBLER.replace(old, new, 1)), ModelError.exit_code)
    assert "model.toml" in line and field in line and message in line, line


def test_decks_of_a_two_section_job(write_model):
    from modebridge_calculix.deck import deck_text as ccx_deck
    from modebridge_kratos.deck import case_files
    from modebridge_opensees.deck import deck_text as os_deck, structure_mass

    text = DOUBLER.replace('family = "quad8"', 'family = "quad4"')
    path = write_model(text)
    prep = prepare(parse_model(__import__("tomllib").loads(text)), path)
    job = make_job(prep)
    assert [s.name for s in job.section_list()] == ["sheet", "doubler"]
    owner = job.cell_sections()
    assert np.bincount(owner).tolist() == [192, 48]
    # the job's mass per element equals the model's (system units t: kg / 1000)
    assert structure_mass(job) * 1e3 == pytest.approx(model_mass(prep.model, prep.mesh), rel=1e-12)
    ccx = ccx_deck(job)
    assert ccx.count("*MATERIAL") == 2 and "*ELSET, ELSET=S1_SHEET" in ccx and "*ELSET, ELSET=S2_DOUBLER" in ccx
    assert "*SHELL SECTION, ELSET=S1_SHEET, MATERIAL=MAT1\n1\n" in ccx
    assert "*SHELL SECTION, ELSET=S2_DOUBLER, MATERIAL=MAT2\n2\n" in ccx
    # every element in exactly one element set
    sets = re.findall(r"\*ELSET, ELSET=\S+\n((?:[\d, ]+\n)+)", ccx)
    ids = sorted(int(x) for block in sets for x in block.replace("\n", ",").split(",") if x.strip())
    assert ids == list(range(1, 241))
    files = case_files(job)
    mats = json.loads(files["StructuralMaterials.json"])["properties"]
    assert [(p["model_part_name"], p["properties_id"], p["Material"]["Variables"]["THICKNESS"]) for p in mats] == \
        [("Structure.section_1_sheet", 1, 1.0), ("Structure.section_2_doubler", 2, 2.0)]
    assert "Begin SubModelPart section_2_doubler" in files["model.mdpa"]
    script = os_deck(job)
    assert "SECTIONS = table" in script and "ELEMENT_SECTION = table" in script
    compile(script, "model_os.py", "exec")


def test_mesh_file_carries_each_elements_section(write_model, tmp_path):
    import meshio

    path = write_model(DOUBLER)
    prepare(parse_model(__import__("tomllib").loads(DOUBLER)), path, save_mesh_to=tmp_path / "mesh.vtu")
    sec = meshio.read(tmp_path / "mesh.vtu").cell_data["section"][0]
    # 20 x 12 quads, the doubler 8 x 6 of them (geometry implies it), index in the model's order
    assert np.bincount(sec).tolist() == [240 - 48, 48]
