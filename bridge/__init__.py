"""modebridge: one neutral model, many open FE solvers, one neutral modal result."""

__version__ = "0.1.0"

from .errors import BridgeError  # noqa: E402

__all__ = ["__version__", "hookimpl", "BridgeError"]


def __getattr__(name: str):
    # pluggy is imported when a plugin asks for the marker, not by every command's start-up
    if name == "hookimpl":
        from .hookspecs import hookimpl

        return hookimpl
    raise AttributeError(f"module 'bridge' has no attribute {name!r}")
