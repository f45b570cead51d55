"""The calculix plugin keeps the plugin contract (bridge.testing): its declarations, a deck for
every declared family, support kind and option value, documented exit codes, and tiny models with
analytic answers (tolerances and sources in bridge/testing.py) on every family, support and option."""

from __future__ import annotations

import pytest

from bridge.testing import assert_contract
from modebridge_calculix.adapter import CalculixAdapter


@pytest.mark.solver
def test_calculix_keeps_the_contract(ccx, tmp_path):
    assert_contract(CalculixAdapter(), tmp_path)
