"""The plugin host: builds a pluggy manager and collects solver adapters."""

from __future__ import annotations

from collections.abc import Iterable

import pluggy

from . import hookspecs
from .errors import PluginError
from .solver import SolverAdapter

__all__ = ["get_plugin_manager", "get_solvers", "get_solver", "broken_plugins"]


def get_plugin_manager(entrypoints: bool = True, blocked: Iterable[str] = (),
                       extra: Iterable[object] = ()) -> pluggy.PluginManager:
    """A new plugin manager (no global state).

    :param entrypoints: load plugins registered under ``modebridge.solvers``.
    :param blocked: entry-point names not to load.
    :param extra: plugin objects (modules or instances) to register directly, e.g. in tests.
    """
    pm = pluggy.PluginManager("bridge")
    pm.add_hookspecs(hookspecs)
    for name in blocked:
        pm.set_blocked(name)
    if entrypoints:
        try:
            pm.load_setuptools_entrypoints(hookspecs.ENTRY_POINT_GROUP)
        except Exception as exc:  # a broken third-party plugin must not hide the others' errors
            raise PluginError(f"a solver plugin failed to load: {exc}") from exc
    for obj in extra:
        pm.register(obj)
    pm.check_pending()
    return pm


def broken_plugins(pm: pluggy.PluginManager) -> dict[str, str]:
    """Plugins whose ``bridge_register_solvers`` raised: name -> the error, one line."""
    return dict(_collect(pm)[1])


def _collect(pm: pluggy.PluginManager):
    adapters, broken = [], {}
    for impl in pm.hook.bridge_register_solvers.get_hookimpls():
        try:
            adapters.extend(impl.function() or [])
        except Exception as exc:  # one broken plugin must not take the others down
            broken[impl.plugin_name] = f"{type(exc).__name__}: {exc}"
    return adapters, broken


def get_solvers(pm: pluggy.PluginManager) -> dict[str, SolverAdapter]:
    """Solvers of every plugin that loads; a plugin that fails is left out (see broken_plugins)."""
    solvers: dict[str, SolverAdapter] = {}
    for a in _collect(pm)[0]:
        if not isinstance(a, SolverAdapter):
            raise PluginError(f"plugin returned {a!r}, which is not a solver adapter")
        if a.name in solvers:
            raise PluginError(f"two plugins register a solver named '{a.name}'")
        solvers[a.name] = a
    return solvers


def get_solver(pm: pluggy.PluginManager, name: str) -> SolverAdapter:
    solvers = get_solvers(pm)
    if name not in solvers:
        broken = broken_plugins(pm)
        if name in broken:
            raise PluginError(f"solver plugin '{name}' is installed but fails to load: {broken[name]}")
        known = ", ".join(sorted(solvers)) or "none installed"
        raise PluginError(f"unknown solver '{name}'; installed: {known}")
    return solvers[name]
