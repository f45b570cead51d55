"""modebridge: one neutral model, many open FE solvers, one neutral modal result."""

__version__ = "0.1.0"

from .hookspecs import hookimpl  # noqa: E402
from .errors import BridgeError  # noqa: E402

__all__ = ["__version__", "hookimpl", "BridgeError"]
