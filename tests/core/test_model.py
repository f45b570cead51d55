"""Model parsing, units and schema (no solver, no gmsh)."""

from __future__ import annotations

import json

import pytest

from bridge.errors import ModelError, UnitError
from bridge.model import json_schema, load_model, parse_model
from bridge.units import SOLVER_SYSTEM, parse_quantity


def test_units_convert_to_si():
    # unit definitions (SI brochure, exact conversions)
    assert parse_quantity("210 GPa", "pressure") == pytest.approx(210e9, rel=1e-15)
    assert parse_quantity("7850 kg/m^3", "density") == pytest.approx(7850.0, rel=1e-15)
    assert parse_quantity("7.85e-9 t/mm^3", "density") == pytest.approx(7850.0, rel=1e-12)
    assert parse_quantity("2 mm", "length") == pytest.approx(0.002, rel=1e-15)
    assert parse_quantity("1 inch", "length") == pytest.approx(0.0254, rel=1e-15)
    assert parse_quantity("12 kg*mm^2", "inertia") == pytest.approx(12e-6, rel=1e-12)
    assert parse_quantity("5 kHz", "frequency") == pytest.approx(5000.0, rel=1e-15)


@pytest.mark.parametrize("text, dim, fragment", [
    ("2", "length", "has no unit"),
    (2.0, "length", "has no unit"),
    ("2 kg", "length", "not a length"),
    ("2 blorbs", "pressure", "cannot read"),
    ("", "length", "cannot read"),
])
def test_unit_errors_say_what_is_accepted(text, dim, fragment):
    with pytest.raises(ValueError) as exc:
        parse_quantity(text, dim)
    assert fragment in str(exc.value) and "e.g." in str(exc.value)


def test_solver_system_is_consistent():
    # mm-t-s: force unit is N, stress unit MPa (definition of the system, exact)
    s = SOLVER_SYSTEM
    assert s.force == pytest.approx(1.0)
    assert s.pressure == pytest.approx(1e-6)
    assert s.density == pytest.approx(1e-12)


def test_plate_model_parses(write_model, plate):
    m = load_model(write_model(plate()))
    assert m.geometry.length == pytest.approx(0.1)
    assert m.section.thickness == pytest.approx(0.002)
    assert m.material.youngs_modulus == pytest.approx(210e9)
    assert m.supports[0].kind == "clamped"
    assert len(m.content_hash()) == 64


def test_content_hash_follows_values_not_spelling(write_model, plate):
    a = load_model(write_model(plate(), "a.toml"))
    b = load_model(write_model(plate().replace('"2 mm"', '"0.2 cm"'), "b.toml"))
    c = load_model(write_model(plate().replace('"2 mm"', '"2.1 mm"'), "c.toml"))
    assert a.content_hash() == b.content_hash()
    assert a.content_hash() != c.content_hash()


def test_error_names_file_and_field(write_model, plate):
    p = write_model(plate().replace('thickness = "2 mm"', 'thickness = "2 kg"'))
    with pytest.raises(UnitError) as exc:
        load_model(p)
    assert str(p) in str(exc.value) and "section.thickness" in str(exc.value)


@pytest.mark.parametrize("patch, field, fragment", [
    (('family = "quad4"', 'family = "hex20"'), "mesh.family", "solid family"),
    (('kind = "clamped"', 'kind = "symmetry"'), "supports[0]", "normal"),
    (('divisions = [10, 10]', 'divisions = [10, 10]\nsize = "5 mm"'), "mesh", "exactly one"),
    (('sides = ["xmin", "xmax", "ymin", "ymax"]', 'sides = ["zmin"]'), "regions.rim.sides", "edges"),
    (('poisson_ratio = 0.3', 'poisson_ratio = 0.5'), "materials.steel.poisson_ratio", "less than 0.5"),
])
def test_consistency_errors(write_model, plate, patch, field, fragment):
    with pytest.raises(ModelError) as exc:
        load_model(write_model(plate().replace(*patch)))
    assert field in str(exc.value) and fragment in str(exc.value)


def test_parse_model_from_dict_without_file():
    with pytest.raises(ModelError) as exc:
        parse_model({"name": "x"})
    assert "required key is missing" in str(exc.value)


def test_schema_is_json_and_lists_sections():
    s = json_schema()
    json.dumps(s)
    for key in ("geometry", "materials", "section", "regions", "supports", "masses", "analysis", "mesh"):
        assert key in s["properties"]
    # quantities are documented as strings with units
    assert "with its unit" in json.dumps(s)
