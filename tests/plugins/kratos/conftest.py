"""Fixtures of the Kratos plugin's tests.

``kratos``: the Python interpreter that can import Kratos (the plugin's "solver executable").
Like ``ccx`` in tests/conftest.py it skips the test locally when Kratos is missing and fails it
when ``CI`` is set: every solver test must run in CI.
"""

from __future__ import annotations

import os

import pytest


@pytest.fixture
def kratos() -> str:
    from modebridge_kratos.runner import INSTALL_HINT, find_python

    python = find_python()
    if python is None:
        if os.environ.get("CI"):
            pytest.fail(f"Kratos missing in CI: .ci/run must install it ({INSTALL_HINT})")
        pytest.skip("KratosMultiphysics not importable")
    return python
