"""Fixtures of the OpenSees plugin tests."""

from __future__ import annotations

import os

import pytest


@pytest.fixture
def opensees() -> str:
    """A Python that can import openseespy (skips locally when there is none, fails in CI)."""
    from modebridge_opensees.runner import find_python

    python = find_python()
    if python is None:
        if os.environ.get("CI"):
            pytest.fail("openseespy missing in CI: scripts/install must install plugins/opensees")
        pytest.skip("openseespy not installed (pip install -e plugins/opensees)")
    return python
