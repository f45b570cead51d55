"""OpenSees plugin for modebridge (registered through the ``modebridge.solvers`` entry point)."""

from bridge import hookimpl

__version__ = "0.1.0"


@hookimpl
def bridge_register_solvers():
    from .adapter import OpenSeesAdapter

    return [OpenSeesAdapter()]
