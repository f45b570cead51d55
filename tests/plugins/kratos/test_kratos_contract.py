"""The kratos plugin keeps the plugin contract (bridge.testing): its declarations, a deck for
every declared family, support kind and option value, documented exit codes, and tiny models with
analytic answers (tolerances and sources in bridge/testing.py) on every family, support and option."""

from __future__ import annotations

import pytest

from bridge.testing import assert_contract
from modebridge_kratos.adapter import KratosAdapter


@pytest.mark.solver
def test_kratos_keeps_the_contract(kratos, tmp_path):
    assert_contract(KratosAdapter(), tmp_path)
