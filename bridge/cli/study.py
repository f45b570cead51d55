"""``modebridge converge`` and ``modebridge vary``: studies of many runs."""

from __future__ import annotations

import json
import os
from pathlib import Path

import typer

from ..errors import ExitCode
from ..io import folder_lock
from ..records import relative_to, write_record
from . import app, err_console, handle_errors, out_console


def Table(*args, **kwargs):  # rich.table on first use, not at start-up
    from rich.table import Table as _Table

    return _Table(*args, **kwargs)


_STYLE = {"queued": "dim", "running": "yellow", "cached": "cyan", "done": "green", "failed": "bold red"}


class _Board:
    """A live table of the study's runs and their state (on stderr)."""

    def __init__(self, enabled: bool):
        self.states: dict[str, str] = {}
        self.enabled = enabled
        self.live = None  # started at the first run's state: an error before it prints no empty table

    def _table(self) -> Table:
        t = Table(title="runs", expand=False)
        t.add_column("run")
        t.add_column("state")
        for label, state in self.states.items():
            t.add_row(label, f"[{_STYLE.get(state, '')}]{state}[/]")
        return t

    def __call__(self, label: str, state: str) -> None:
        self.states[label] = state
        if self.enabled and self.live is None:
            from rich.live import Live

            self.live = Live(self._table(), console=err_console.get(), refresh_per_second=4, transient=False)
            self.live.__enter__()
        if self.live is not None:
            self.live.update(self._table())

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        if self.live is not None:
            self.live.__exit__(*exc)
        return False


def _notes(outcomes) -> None:
    for o in outcomes:
        if o.note:
            err_console.print(f"[yellow]note:[/] {o.task.label}: {o.note}", markup=True)


def _scheduler(option: str | None) -> str | None:
    return option or os.environ.get("MODEBRIDGE_SCHEDULER") or None


_WORKERS = typer.Option(None, "--workers", "-j", min=1, help="Runs at once (default: fits the cores).")
_THREADS = typer.Option(None, "--threads", min=1, help="Solver threads per run (default: cores / workers).")
_SCHED = typer.Option(None, "--scheduler", help="Dask scheduler address, e.g. tcp://host:8786 "
                      "(or MODEBRIDGE_SCHEDULER, or [run] scheduler in the model).")


@app.command(rich_help_panel="Studies")
@handle_errors
def converge(model: Path = typer.Argument(..., help="Model file (TOML)."),
             levels: int = typer.Option(None, "--levels", min=3, max=8, help="Refinement levels (≥ 3)."),
             ratio: float = typer.Option(None, "--ratio", min=1.3, max=4.0, help="Refinement ratio (≥ 1.3)."),
             solver: list[str] = typer.Option(None, "--solver", "-s", help="Solver (repeatable); 'all': every "
                                              "installed solver that can take the model."),
             tolerance: float = typer.Option(1.0, "--tolerance", min=0.0, help="GCI of the finest grid at most, %."),
             out: Path = typer.Option(None, "--out", "-o", help="Study folder (default: studies/<model>-converge)."),
             workers: int = _WORKERS, threads: int = _THREADS, scheduler: str = _SCHED,
             as_json: bool = typer.Option(False, "--json", help="Print JSON.")) -> None:
    """Run the model at refinement levels, follow each mode by shape, and estimate its
    discretisation error (observed order, Richardson extrapolation, GCI)."""
    from ..model import load_model
    from ..pipeline import default_out_dir
    from ..plots import convergence_plots
    from ..study.converge import run_convergence

    m = load_model(model)
    out = (out or Path("studies") / f"{default_out_dir(model).name}-converge").expanduser().absolute()
    with folder_lock(out, "study"):  # the study, its plots and its record: one writer at a time
        with _Board(not as_json) as board:
            studies = run_convergence(model, out, levels, ratio, solver or None, tolerance / 100.0, workers,
                                      threads, _scheduler(scheduler) or m.run.scheduler, progress=board)
        payload = []
        for st in studies:
            pf, pe = convergence_plots(st, out / f"convergence_{st.solver}.png", out / f"error_{st.solver}.png")
            d = st.as_dict()
            d["plots"] = [relative_to(pf, out), relative_to(pe, out)]
            for r in d.get("runs", []):
                r["folder"] = relative_to(r["folder"], out)
            payload.append(d)
        write_record(out, "convergence", payload)
    _notes(o for st in studies for o in st.outcomes)
    if as_json:
        print(json.dumps(payload[0] if len(payload) == 1 else {"studies": payload}, indent=2))
    else:
        for st, d in zip(studies, payload):
            _print_convergence(st)
            out_console.print(f"plots: {d['plots'][0]}, {d['plots'][1]}", markup=False)
    failed = [o for st in studies for o in st.outcomes if not o.ok]
    for o in failed:
        err_console.print(f"[bold red]failed:[/] {o.task.label}: {o.error} ({o.folder})", markup=True)
    if failed:
        raise typer.Exit(ExitCode.SOLVER)
    if not all(st.passed for st in studies):
        raise typer.Exit(ExitCode.CHECK_FAILED)


def _fmt(x, spec=".2f", none="-"):
    return none if x is None or x != x else format(x, spec)


def _print_convergence(st) -> None:
    from ..study.converge import H_DEFINITION

    t = Table(title=f"Mesh convergence — {st.solver} (h: {', '.join(f'{h * 1e3:.3g}' for h in st.h)} mm)")
    t.add_column("mode", justify="right")
    for lv in st.levels:
        t.add_column(f"L{lv} [Hz]", justify="right")
    for col in ("p", "f_ext [Hz]", "GCI fine", "asym.", "trend", "verdict"):
        t.add_column(col, justify="right")
    notes = []
    for m in st.modes:
        g = m.gci
        p = _fmt(g.p if g else None)
        if g is not None and g.order_assumed:
            p = "(1)"  # assumed order: no order could be observed
        t.add_row(str(m.mode), *[_fmt(f) + ("" if i is None or i == m.mode else f" (#{i})")
                                 for f, i in zip(m.f, m.index)],
                  p, _fmt(g.extrapolated if g else None),
                  (_fmt(100 * g.gci_fine, ".3f") + "%") if g else "not tracked",
                  _fmt(g.asymptotic_ratio if g else None, ".3f"), g.trend if g else "-", m.verdict)
        if g is not None and g.note:
            notes.append(f"mode {m.mode}: {g.note}")
        elif g is None:
            notes.append(f"mode {m.mode}: followed on the finest level only (no partner with MAC ≥ 0.8 below)")
    out_console.print(t)
    out_console.print(H_DEFINITION + "; GCI with Fs = 1.25 (Celik et al. 2008), p in parentheses: assumed",
                      markup=False)
    for n in notes:
        out_console.print("  " + n, markup=False)
    if st.rigid_body_modes:
        out_console.print(f"{st.rigid_body_modes} rigid-body modes left out", markup=False)
    if st.passed:
        out_console.print(f"[green]verdict:[/] every mode converged (GCI of the finest grid ≤ "
                          f"{100 * st.tolerance:g} %)", markup=True)
    else:
        out_console.print(f"[bold red]verdict:[/] mode(s) {', '.join(map(str, st.unconverged))} not converged "
                          f"to {100 * st.tolerance:g} % or their behaviour cannot be told", markup=True)


@app.command(rich_help_panel="Studies")
@handle_errors
def vary(study: Path = typer.Argument(..., help="Study file (TOML) naming a model and its variants."),
         solver: list[str] = typer.Option(None, "--solver", "-s", help="Solver (repeatable; default: the study's, "
                                          "or the model's); 'all': every installed solver that can take the model."),
         out: Path = typer.Option(None, "--out", "-o", help="Study folder (default: studies/<study file>)."),
         workers: int = _WORKERS, threads: int = _THREADS, scheduler: str = _SCHED,
         as_json: bool = typer.Option(False, "--json", help="Print JSON.")) -> None:
    """Run named variants of a model (supports, thickness, material, masses) and pair each
    variant's modes with the baseline by shape: frequency shifts and MAC, mode by mode. With
    several solvers, each variant is also compared across them (the first is the reference)."""
    from ..pipeline import default_out_dir
    from ..study.vary import run_variant_study

    out = (out or Path("studies") / default_out_dir(study).name).expanduser().absolute()
    with folder_lock(out, "study"):
        with _Board(not as_json) as board:
            studies, across = run_variant_study(study, out, solver or None, workers, threads,
                                                _scheduler(scheduler), board)
        baseline, variants = studies[0].baseline, studies[0].variants
        payload = {"solver": studies[0].solver, "baseline": baseline.as_dict(),
                   "variants": [v.as_dict() for v in variants]}
        for d in [payload["baseline"], *payload["variants"]]:
            d["folder"] = relative_to(d["folder"], out)
        if len(studies) > 1:  # the first solver's study stays at the top, as with one solver
            payload["solvers"] = [st.as_dict() for st in studies]
            for st in payload["solvers"]:
                for d in [st["baseline"], *st["variants"]]:
                    d["folder"] = relative_to(d["folder"], out)
            payload["across_solvers"] = [a.as_dict() for a in across]
        write_record(out, "variants", payload)
    _notes([o for st in studies for o in [st.baseline.outcome] + [v.outcome for v in st.variants]])
    if as_json:
        print(json.dumps(payload, indent=2))
    else:
        for st in studies:
            if len(studies) > 1:
                out_console.print(f"[bold]{st.solver}[/]", markup=True)
            _print_variants(st.baseline, st.variants)
        if across:
            _print_across(across)
    failed = [v for st in studies for v in st.variants if not v.outcome.ok]
    for v in failed:
        err_console.print(f"[bold red]failed:[/] {v.name}: {v.outcome.error} ({v.outcome.folder})", markup=True)
    if failed:
        raise typer.Exit(ExitCode.SOLVER)
    if any(v.status == "fail" for st in studies for v in [st.baseline, *st.variants]):
        raise typer.Exit(ExitCode.CHECK_FAILED)
    if any(not a.passed for a in across):
        raise typer.Exit(ExitCode.CHECK_FAILED)


_MARK = {"ok": "[green]ok[/]", "warn": "[yellow]warn[/]", "fail": "[bold red]FAIL[/]"}


def _print_checks(v) -> None:
    out_console.print(f"{v.name}: checks {_MARK.get(v.status, v.status)}", markup=True)
    for c in v.checks:
        if c.get("status") == "ok":
            continue
        out_console.print(f"  {_MARK.get(c.get('status'), '?')}  {c.get('name', '')}: ", markup=True, end="")
        out_console.print(str(c.get("message", "")), markup=False)


def _print_across(across) -> None:
    """Each variant's solvers against the first: worst frequency difference, lowest MAC, verdict."""
    t = Table(title=f"across solvers (reference: {across[0].reference})")
    for col in ("variant", "solver", "modes", "max |Δf|", "min MAC", "verdict"):
        t.add_column(col, justify="right" if col in ("modes", "max |Δf|", "min MAC") else "left")
    for a in across:
        if a.comparison is None:
            t.add_row(a.variant, a.solver, "-", "-", "-", a.note)
            continue
        pv = a.comparison.pair_verdicts()
        df = max((abs(p["df"]) for p in pv), default=float("nan"))
        mac = min((p["mac"] for p in pv), default=float("nan"))
        t.add_row(a.variant, a.solver, str(len(pv)), f"{100 * df:.2f}%", f"{mac:.3f}", "pass" if a.passed else "FAIL")
    out_console.print(t)
    th = across[0].comparison.thresholds if across[0].comparison is not None else None
    limits = f" (MAC ≥ {th.min_mac:g}, |Δf| ≤ {100 * th.max_df:g} %)" if th else ""
    bad = [f"{a.variant} / {a.solver}" for a in across if not a.passed]
    if bad:
        out_console.print(f"[bold red]solvers differ{limits}:[/] " + ", ".join(bad), markup=True)
    else:
        out_console.print(f"[green]every variant agrees across the solvers{limits}[/]", markup=True)


def _print_variants(baseline, variants) -> None:
    from ..compare.pairing import PAIR_MIN_MAC

    _print_checks(baseline)
    for v in variants:
        if v.outcome.ok:
            _print_checks(v)
        if v.comparison is None:
            out_console.print(f"{v.name}: {v.outcome.state} {v.note or v.outcome.error or ''}", markup=False)
            continue
        t = Table(title=f"{v.name} against the baseline")
        for col in ("baseline mode", "f [Hz]", f"{v.name} mode", "f [Hz] ", "shift", "MAC"):
            t.add_column(col, justify="right")
        for p in v.comparison.pair_verdicts():
            t.add_row(str(p["a"]), f"{p['fa']:.2f}", str(p["b"]), f"{p['fb']:.2f}",
                      f"{100 * p['df']:+.2f}%", f"{p['mac']:.3f}")
        out_console.print(t)
        if v.rigid_body_modes:
            out_console.print(f"  {v.name}: {v.rigid_body_modes} rigid-body modes, set apart "
                              f"({', '.join(f'{f:.3g}' for f in v.frequencies[:v.rigid_body_modes])} Hz)", markup=False)
        un = v.comparison.comparison.unpaired_b
        if un:
            out_console.print(f"  {v.name} modes without a baseline partner (no MAC ≥ {PAIR_MIN_MAC:g}): "
                              f"{[j + 1 for j in un]}", markup=False)
        ua = v.comparison.comparison.unpaired_a
        if ua:
            out_console.print(f"  baseline modes without a partner in {v.name} (no MAC ≥ {PAIR_MIN_MAC:g}): "
                              f"{[i + 1 for i in ua]}", markup=False)
    worst = [v.name for v in [baseline, *variants] if v.status == "fail"]
    if worst:
        out_console.print(f"[bold red]verdict:[/] a check failed in: {', '.join(worst)}", markup=True)
    else:
        out_console.print("[green]verdict:[/] no check failed in the baseline or any variant", markup=True)
