"""``modebridge verify``: the benchmark suite on every installed solver."""

from __future__ import annotations

import json
from pathlib import Path

import typer

from . import CHECK_FAILED, app, handle_errors, out_console
from .study import _SCHED, _THREADS, _WORKERS, _Board, _scheduler


def Table(*args, **kwargs):  # rich.table on first use, not at start-up
    from rich.table import Table as _Table

    return _Table(*args, **kwargs)


@app.command(rich_help_panel="Verification")
@handle_errors
def verify(solver: list[str] = typer.Option(None, "--solver", "-s", help="Solver (repeatable; default: all "
                                            "installed)."),
           only: list[str] = typer.Option(None, "--only", help="Run only this case (repeatable)."),
           cases: list[Path] = typer.Option(None, "--cases", help="A folder of your own cases (repeatable)."),
           out: Path = typer.Option(Path("verification"), "--out", "-o", help="Folder for the runs and verify.json."),
           matrix: bool = typer.Option(False, "--matrix", help="Every element family on every solver that "
                                       "offers it over the matrix cases: family × solver, worst deviation."),
           workers: int = _WORKERS, threads: int = _THREADS, scheduler: str = _SCHED,
           as_json: bool = typer.Option(False, "--json", help="Print JSON.")) -> None:
    """Run benchmark cases with published targets (Leissa plates, NAFEMS FV12/FV32, beams, bar)
    on every solver that supports their elements; exits 10 when a case fails."""
    from ..io import folder_lock
    from ..records import write_record
    from ..verify import run_verification

    out = out.expanduser().absolute()
    if matrix:
        with folder_lock(out, "verification"):
            _matrix(out, solver or None, cases or [], workers, threads, _scheduler(scheduler), as_json)
        return

    with folder_lock(out, "verification"):
        with _Board(not as_json) as board:
            results = run_verification(out, solver or None, only or None, cases or [], workers, threads,
                                       _scheduler(scheduler), board)
        payload = [r.as_dict() for r in results]
        write_record(out, "verify", payload)
    ran = [r for r in results if not r.note.startswith("skipped")]  # a case without continuum has no family
    if as_json:
        print(json.dumps({"cases": payload, "passed": all(r.passed for r in ran)}, indent=2))
    else:
        t = Table(title="Verification")
        for col in ("case", "solver", "element", "mode", "target [Hz]", "value [Hz]", "dev.", "tol.", ""):
            t.add_column(col, justify="right" if col not in ("case", "solver", "element") else "left")
        for r in results:
            if r.error or not r.modes:
                t.add_row(r.case.name, r.solver, r.element or (r.family or "-"), "", "", "", "", "",
                          "[bold red]FAIL[/]" if r.error else f"[dim]{r.note}[/]")
                continue
            for k, m in enumerate(r.modes):
                t.add_row(r.case.name if k == 0 else "", r.solver if k == 0 else "", r.element if k == 0 else "",
                          str(m["mode"] or "-"), f"{m['target_hz']:.4g}",
                          "-" if m["value_hz"] is None else f"{m['value_hz']:.4g}",
                          "-" if m["deviation"] is None else f"{100 * m['deviation']:+.2f}%",
                          f"{100 * m['tolerance']:.1f}%", "[green]ok[/]" if m["passed"] else "[bold red]FAIL[/]")
        out_console.print(t)
        for r in results:
            if r.error:
                out_console.print(f"{r.case.name} / {r.solver}: {r.error}", markup=False)
        out_console.print("sources:", markup=False)
        for name, src in dict.fromkeys((r.case.name, r.case.source) for r in results):
            out_console.print(f"  {name}: {src}", markup=False)
    if not ran or not all(r.passed for r in ran):
        raise typer.Exit(CHECK_FAILED)


def _matrix(out: Path, solvers, cases, workers, threads, scheduler, as_json: bool) -> None:
    from ..io import atomic_write_text
    from ..verify import run_matrix

    with _Board(not as_json) as board:
        cells = run_matrix(out, solvers, cases, workers, threads, scheduler, board)
    payload = {"cells": [c.as_dict() for c in cells], "passed": bool(cells) and all(c.passed for c in cells)}
    out.mkdir(parents=True, exist_ok=True)
    atomic_write_text(out / "matrix.json", json.dumps(payload, indent=2))
    if as_json:
        print(json.dumps(payload, indent=2))
    else:
        names = sorted({c.solver for c in cells})
        fams = list(dict.fromkeys(c.family for c in cells))
        by = {(c.family, c.solver): c for c in cells}
        t = Table(title="Element × solver matrix: worst deviation over the matrix cases")
        t.add_column("family")
        for n in names:
            t.add_column(n, justify="right")
        for f in fams:
            row = [f]
            for n in names:
                c = by.get((f, n))
                if c is None:
                    row.append("[dim]not offered[/]")
                    continue
                d = c.worst_deviation
                mark = "[green]ok[/]" if c.passed else "[bold red]FAIL[/]"
                el = next((r.element + ("" if r.element_family in (None, f) else f" ({r.element_family})")
                           for r in c.runs if r.element), "")
                row.append(f"{el} {'-' if d is None else f'{100 * d:+.1f}%'} {mark}")
            t.add_row(*row)
        out_console.print(t)
        for c in cells:
            for r in c.runs:
                worst = max((m for m in r.modes if m["deviation"] is not None), key=lambda m: abs(m["deviation"]),
                            default=None)
                stated = ", ".join(f"{k} {v}" for k, v in r.case.matrix_mesh.get(r.family, {}).items())
                state = "error: " + str(r.error) if r.error else (
                    "-" if worst is None else f"{100 * worst['deviation']:+.2f}% (mode {worst['mode']}, tol. "
                    f"{100 * worst['tolerance']:.1f}%)")
                out_console.print(f"  {c.family} / {c.solver} / {r.case.name} ({r.case.matrix}; {stated}): {state}",
                                  markup=False)
    if not payload["passed"]:
        raise typer.Exit(CHECK_FAILED)
