"""The ``modebridge`` command line.

A user's mistake is reported as one line on stderr with a non-zero exit code;
``--debug`` shows the traceback instead.
"""

from __future__ import annotations

import functools
import sys

import typer
from rich.console import Console

from ..errors import BridgeError, ExitCode

__all__ = ["app", "main", "handle_errors", "err_console", "out_console"]

#: exit code when a run finished but one of its checks failed (table: bridge.errors.EXIT_CODES)
CHECK_FAILED = ExitCode.CHECK_FAILED
#: exit code for an unexpected internal error (a bug: please report it)
INTERNAL = ExitCode.INTERNAL

err_console = Console(stderr=True, highlight=False, soft_wrap=True)
out_console = Console(highlight=False, soft_wrap=True)  # a summary line stays one line when piped

app = typer.Typer(
    name="modebridge",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    help="Natural-frequency analysis from one neutral model on open FE solvers.",
)
_state = {"debug": False}


@app.callback()
def _root(debug: bool = typer.Option(False, "--debug", help="Show full tracebacks of errors.")) -> None:
    _state["debug"] = debug


def handle_errors(func):
    """Turn a BridgeError into one red line and its exit code."""

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        try:
            return func(*args, **kwargs)
        except (typer.Exit, typer.Abort, typer.BadParameter):
            raise
        except BridgeError as exc:
            if _state["debug"]:
                raise
            err_console.print(f"[bold red]error:[/] {_one_line(str(exc))}", markup=True)
            raise typer.Exit(exc.exit_code) from None
        except KeyboardInterrupt:
            err_console.print("[bold red]interrupted[/]: results already written are kept", markup=True)
            raise typer.Exit(ExitCode.INTERRUPTED) from None
        except Exception as exc:  # a bug, not the user's mistake; still no traceback unless asked
            if _state["debug"]:
                raise
            err_console.print(f"[bold red]internal error:[/] {type(exc).__name__}: {_one_line(str(exc))} "
                              "(run with --debug for the traceback and please report it)", markup=True)
            raise typer.Exit(INTERNAL) from None

    return wrapper


def _one_line(text: str) -> str:
    from rich.markup import escape

    return escape(" ".join(text.split()))


from . import compare, info, report, run, study, verify  # noqa: E402,F401  (register the commands)


def main() -> None:
    app(prog_name="modebridge")


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
