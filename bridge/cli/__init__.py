"""The ``modebridge`` command line.

A user's mistake is reported as one line on stderr with a non-zero exit code;
``--debug`` shows the traceback instead.

Start-up: this package imports typer and nothing heavy. Each command imports what it needs
inside its function (numpy, gmsh, scipy, matplotlib, pyvista, dask only where used); the rich
consoles are created on first use; help is click's plain formatter with the commands grouped
by panel (typer's rich help formatter costs about 0.1 s per ``--help``).
``tests/core/test_startup.py`` checks what ``import bridge.cli`` leaves out.
"""

from __future__ import annotations

import functools
import sys

import typer
from typer.core import TyperGroup

from ..errors import BridgeError, ExitCode

__all__ = ["app", "main", "handle_errors", "err_console", "out_console"]

#: exit code when a run finished but one of its checks failed (table: bridge.errors.EXIT_CODES)
CHECK_FAILED = ExitCode.CHECK_FAILED
#: exit code for an unexpected internal error (a bug: please report it)
INTERNAL = ExitCode.INTERNAL



class _LazyConsole:
    """A rich Console made on first use (importing rich.console costs ~40 ms of every start-up)."""

    def __init__(self, **kwargs):
        self._kwargs = kwargs
        self._console = None

    def get(self):
        if self._console is None:
            from rich.console import Console

            self._console = Console(**self._kwargs)
        return self._console

    def __getattr__(self, name):
        return getattr(self.get(), name)


err_console = _LazyConsole(stderr=True, highlight=False, soft_wrap=True)
out_console = _LazyConsole(highlight=False, soft_wrap=True)  # a summary line stays one line when piped


class _PanelGroup(TyperGroup):
    """Plain (click) help with the commands listed under their ``rich_help_panel`` headings."""

    def format_commands(self, ctx, formatter) -> None:
        panels: dict[str, list] = {}
        for name in self.list_commands(ctx):
            cmd = self.get_command(ctx, name)
            if cmd is not None and not cmd.hidden:
                panels.setdefault(getattr(cmd, "rich_help_panel", None) or "Commands", []).append((name, cmd))
        if not panels:
            return
        order = ("Analysis", "Studies", "Comparison", "Reports", "Verification", "Information")
        panels = dict(sorted(panels.items(), key=lambda kv: order.index(kv[0]) if kv[0] in order else len(order)))
        width = max(len(n) for rows in panels.values() for n, _ in rows)
        limit = formatter.width - 6 - width
        for panel, rows in panels.items():
            with formatter.section(panel):
                formatter.write_dl([(n, c.get_short_help_str(limit)) for n, c in rows])


app = typer.Typer(
    name="modebridge",
    cls=_PanelGroup,
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    rich_markup_mode=None,
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


from . import compare, info, modaltest, report, run, study, verify  # noqa: E402,F401  (register the commands)


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
