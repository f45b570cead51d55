"""The plugin host: discovery through entry points, blocking, capability refusal, documented hooks."""

from __future__ import annotations

import inspect

import numpy as np
import pytest

from bridge import hookimpl, hookspecs
from bridge.errors import CapabilityError, PluginError
from bridge.model import load_model
from bridge.pipeline import check_capabilities
from bridge.plugins import get_plugin_manager, get_solver, get_solvers
from bridge.solver import Capabilities


def test_bundled_calculix_is_found_through_its_entry_point():
    pm = get_plugin_manager()
    solvers = get_solvers(pm)
    assert "calculix" in solvers
    dists = [d.project_name for _, d in pm.list_plugin_distinfo()]
    assert "modebridge-calculix" in dists  # loaded as a third-party distribution would be


def test_blocked_plugin_is_not_loaded():
    pm = get_plugin_manager(blocked=["calculix"])
    assert "calculix" not in get_solvers(pm)
    with pytest.raises(PluginError, match="unknown solver 'calculix'"):
        get_solver(pm, "calculix")


class _Fake:
    name = "calculix"
    label = "impostor"
    capabilities = Capabilities(families=frozenset({"quad4"}), supports=frozenset({"clamped"}))

    def locate(self):
        return None

    def version(self):
        return None

    def write_deck(self, job, workdir):
        raise AssertionError

    def run(self, job, workdir):
        raise AssertionError

    def read_results(self, job, workdir, record):
        raise AssertionError


class _FakePlugin:
    @hookimpl
    def bridge_register_solvers(self):
        return [_Fake()]


def test_two_solvers_with_one_name_are_refused():
    pm = get_plugin_manager(extra=[_FakePlugin()])
    with pytest.raises(PluginError, match="two plugins"):
        get_solvers(pm)


def test_misspelt_hook_is_rejected():
    class Typo:
        @hookimpl
        def bridge_register_solver(self):  # missing "s"
            return []

    with pytest.raises(Exception, match="unknown hook"):
        get_plugin_manager(entrypoints=False, extra=[Typo()])


def test_capabilities_refuse_before_running(write_model, plate):
    model = load_model(write_model(plate("quad8", (4, 4), "simply_supported")))
    with pytest.raises(CapabilityError, match="no 'quad8' element"):
        check_capabilities(model, _Fake())


def test_every_hook_is_documented():
    for name, fn in inspect.getmembers(hookspecs, inspect.isfunction):
        if name.startswith("bridge_"):
            doc = inspect.getdoc(fn) or ""
            assert ":return:" in doc and "versionadded" in doc, name


def test_solver_rows_are_found_by_node_id():
    """to_result's mapping of the mesh's node ids onto the solver's rows (a sorted search): the
    same rows a dict of ids gives, the last row of a repeated id, and the first missing id named.
    Expected rows worked out by hand (common practice, no source)."""
    from bridge.errors import ResultCheckError
    from bridge.pipeline import _rows_of

    solver = np.array([40, 10, 30, 20], np.int64)
    assert _rows_of(solver, np.array([10, 20, 30, 40], np.int64)).tolist() == [1, 3, 2, 0]
    assert _rows_of(np.array([5, 3, 5, 7], np.int64), np.array([5, 7, 3], np.int64)).tolist() == [2, 3, 1]
    with pytest.raises(ResultCheckError, match="lack node 25 of the mesh"):
        _rows_of(solver, np.array([10, 25, 35], np.int64))
    with pytest.raises(ResultCheckError, match="lack node 2 of the mesh"):
        _rows_of(np.array([], np.int64), np.array([2], np.int64))
