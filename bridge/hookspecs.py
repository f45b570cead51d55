"""Hook specifications of modebridge.

Plugins implement these with ``@bridge.hookimpl`` and are found through the
entry-point group ``modebridge.solvers``. Hooks are called with keyword
arguments only; an implementation may accept a subset of them.
"""

from __future__ import annotations

import pluggy

hookspec = pluggy.HookspecMarker("bridge")
hookimpl = pluggy.HookimplMarker("bridge")

#: entry-point group that solver plugins register under
ENTRY_POINT_GROUP = "modebridge.solvers"


# --- solvers -----------------------------------------------------------------

@hookspec
def bridge_register_solvers():
    """Return the solver adapters this plugin provides.

    :return: a list of objects that satisfy :class:`bridge.solver.SolverAdapter`.
        Each adapter's ``name`` must be unique across all installed plugins.

    The core drives the pipeline (mesh, deck, run, parse, checks); this hook only
    makes solvers known. Results of all implementations are concatenated.

    .. versionadded:: 0.1
    """
