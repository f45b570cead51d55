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
        except OSError as exc:  # a disk or permission fault that no library code turned into a line
            if _state["debug"]:
                raise
            from ..io import write_fault

            fault = write_fault(exc.filename or "(file not named by the system)", exc)
            err_console.print(f"[bold red]error:[/] {_one_line(str(fault))}", markup=True)
            raise typer.Exit(fault.exit_code) from None
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


def _click_exceptions():
    try:  # typer ≥ 0.2x carries its own copy of click
        from typer._click import exceptions as cx
    except ImportError:  # pragma: no cover
        from click import exceptions as cx
    return cx


def main() -> None:
    from ..cache import setup_caches

    setup_caches()  # before anything imports matplotlib: its caches go to modebridge's cache folder
    cx = _click_exceptions()
    try:
        rv = app(prog_name="modebridge", standalone_mode=False)
    except cx.UsageError as exc:  # a bad argument: one line, exit 2
        if type(exc).__name__ == "NoArgsIsHelpError" and exc.ctx is not None:
            print(exc.ctx.get_help())
            sys.exit(0)
        hint = f" (see: {exc.ctx.command_path} --help)" if exc.ctx is not None else ""
        err_console.print(f"[bold red]error:[/] {_one_line(exc.format_message())}{hint}", markup=True)
        sys.exit(exc.exit_code)
    except cx.ClickException as exc:
        err_console.print(f"[bold red]error:[/] {_one_line(exc.format_message())}", markup=True)
        sys.exit(exc.exit_code)
    except KeyboardInterrupt:
        err_console.print("[bold red]interrupted[/]", markup=True)
        sys.exit(130)
    sys.exit(rv if isinstance(rv, int) else 0)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
