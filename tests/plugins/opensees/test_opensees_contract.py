"""The opensees plugin keeps the plugin contract (bridge.testing): its declarations, a deck for
every declared family, support kind and option value, documented exit codes, and tiny models with
analytic answers (tolerances and sources in bridge/testing.py) on every family, support and option."""

from __future__ import annotations

import pytest

from bridge.testing import assert_contract
from modebridge_opensees.adapter import OpenSeesAdapter


@pytest.mark.solver
def test_opensees_keeps_the_contract(opensees, tmp_path):
    assert_contract(OpenSeesAdapter(), tmp_path)
