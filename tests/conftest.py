"""Shared fixtures. Tests marked ``solver`` run a real solver; on a developer machine
without it they skip, in CI (``CI`` set) a missing solver fails the test."""

from __future__ import annotations

import os
import shutil
import textwrap
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
FIXTURES = ROOT / "fixtures"


def _need(executable: str) -> str:
    path = shutil.which(executable)
    if path is None:
        if os.environ.get("CI"):
            pytest.fail(f"solver executable '{executable}' missing in CI: .ci/run must install it")
        pytest.skip(f"'{executable}' not installed")
    return path


@pytest.fixture
def ccx() -> str:
    """Path of CalculiX's ccx (skips locally when missing, fails in CI)."""
    return _need("ccx")


@pytest.fixture
def pm():
    from bridge.plugins import get_plugin_manager

    yield get_plugin_manager()


@pytest.fixture
def write_model(tmp_path):
    """Write a model TOML (dedented) into tmp_path and return its path."""

    def _write(text: str, name: str = "model.toml") -> Path:
        p = tmp_path / name
        p.write_text(textwrap.dedent(text), encoding="utf-8")
        return p

    return _write


STEEL = """
[materials.steel]
youngs_modulus = "210 GPa"
poisson_ratio = 0.3
density = "7850 kg/m^3"
"""


def plate_model(family: str = "quad4", divisions=(10, 10), supports: str = "clamped",
                modes: int = 10, extra: str = "", length: str = "100 mm", width: str = "100 mm",
                thickness: str = "2 mm") -> str:
    """The steel plate of the checks (100 × 100 × 2 mm unless told), all four edges with one support kind."""
    sup = "" if supports == "free" else f"""
[regions.rim]
select = "sides"
sides = ["xmin", "xmax", "ymin", "ymax"]

[[supports]]
region = "rim"
kind = "{supports}"
"""
    return f"""
name = "steel plate {supports}"

[geometry]
kind = "plate"
length = "{length}"
width = "{width}"
{STEEL}
[section]
kind = "shell"
material = "steel"
thickness = "{thickness}"
{sup}
[analysis]
modes = {modes}

[mesh]
family = "{family}"
divisions = [{divisions[0]}, {divisions[1]}]
{extra}
"""


@pytest.fixture
def plate():
    return plate_model


@pytest.fixture
def three_solvers(ccx) -> list[str]:
    """CalculiX, Kratos and OpenSees all installed (skips locally when one is missing, fails in CI)."""
    _need_modules("KratosMultiphysics", "openseespy")
    return ["calculix", "kratos", "opensees"]


def _need_modules(*modules: str) -> None:
    """Each solver module importable (skips locally when one is missing, fails in CI)."""
    import importlib.util

    for mod in modules:
        if importlib.util.find_spec(mod) is None:
            if os.environ.get("CI"):
                pytest.fail(f"{mod} missing in CI: scripts/install must install its plugin")
            pytest.skip(f"{mod} not installed")


@pytest.fixture
def ccx_and_opensees(ccx) -> list[str]:
    """CalculiX and OpenSees installed (skips locally when one is missing, fails in CI)."""
    _need_modules("openseespy")
    return ["calculix", "opensees"]
