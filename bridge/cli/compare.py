"""``modebridge compare``: pair modes of results across solvers, meshes or variants."""

from __future__ import annotations

import csv
import json
from pathlib import Path

import typer

from . import CHECK_FAILED, app, handle_errors, out_console


def Table(*args, **kwargs):  # rich.table on first use, not at start-up
    from rich.table import Table as _Table

    return _Table(*args, **kwargs)


@app.command(rich_help_panel="Comparison")
@handle_errors
def compare(results: list[Path] = typer.Argument(..., help="Result files or solver folders; the first "
                                                 "is the reference."),
            min_mac: float = typer.Option(0.9, "--min-mac", min=0.0, max=1.0, help="Paired MAC at least."),
            max_df: float = typer.Option(1.0, "--max-df", min=0.0, help="|Δf| at most, in %."),
            force: bool = typer.Option(False, "--force", help="Compare results of different models."),
            as_json: bool = typer.Option(False, "--json", help="Print JSON."),
            csv_path: Path = typer.Option(None, "--csv", help="Write the paired table as CSV."),
            plot: Path = typer.Option(None, "--plot", help="Write the MAC heat map(s) as PNG.")) -> None:
    """Frequencies side by side, MAC, pairing by shape, repeated-mode clusters; exits 10 when a
    pair fails the thresholds."""
    from ..compare.results import Thresholds, compare_results
    from ..plots import mac_heatmap
    from ..results import load_result

    if len(results) < 2:
        raise typer.BadParameter("give at least two results")
    loaded = [(str(p), load_result(p)) for p in results]
    th = Thresholds(min_mac=min_mac, max_df=max_df / 100.0)
    ref_label, ref = loaded[0]
    comps = [compare_results(ref, r, ref_label, label, th, force=force) for label, r in loaded[1:]]
    plots: list[str] = []
    if plot is not None:
        for n, c in enumerate(comps):
            target = plot if len(comps) == 1 else plot.with_name(f"{plot.stem}_{n + 1}{plot.suffix}")
            plots.append(str(mac_heatmap(c.comparison.mac, ref.frequencies, loaded[n + 1][1].frequencies,
                                         [(p.a, p.b) for p in c.comparison.pairs], target, c.label_a, c.label_b)))
    if csv_path is not None:
        import io as _io

        from ..io import atomic_write_text, guard_output

        guard_output(csv_path, results, what="CSV table", make_parent=False)
        fh = _io.StringIO(newline="")
        w = csv.writer(fh)
        w.writerow(["result_b", "mode_a", "f_a_hz", "mode_b", "f_b_hz", "df_percent", "mac", "cluster", "ok"])
        for c in comps:
            for v in c.pair_verdicts():
                w.writerow([c.label_b, v["a"], f"{v['fa']:.6g}", v["b"], f"{v['fb']:.6g}",
                            f"{100 * v['df']:.4f}", f"{v['mac']:.4f}",
                            "" if v["cluster"] is None else v["cluster"], v["ok"]])
        atomic_write_text(csv_path, fh.getvalue())
    if as_json:
        payload = {"reference": ref_label, "comparisons": [c.as_dict() for c in comps],
                   "passed": all(c.passed for c in comps)}
        if plots:
            payload["plots"] = plots
        print(json.dumps(payload, indent=2))
    else:
        for c in comps:
            _print(c)
        for p in plots:
            out_console.print(f"wrote {p}", markup=False)
    if not all(c.passed for c in comps):
        raise typer.Exit(CHECK_FAILED)


def _print(c) -> None:
    from ..compare.pairing import PAIR_MIN_MAC

    t = Table(title=f"{c.label_a}  vs  {c.label_b}" + ("  (B mapped onto A's points)" if c.mapped else ""))
    for col in ("A mode", "f A [Hz]", "B mode", "f B [Hz]", "Δf", "MAC", "cluster", ""):
        t.add_column(col, justify="right")
    for v in c.pair_verdicts():
        t.add_row(str(v["a"]), f"{v['fa']:.2f}", str(v["b"]), f"{v['fb']:.2f}", f"{100 * v['df']:+.3f}%",
                  f"{v['mac']:.3f}", "" if v["cluster"] is None else f"C{v['cluster']}",
                  "[green]ok[/]" if v["ok"] else "[bold red]FAIL[/]")
    out_console.print(t)
    for k, cl in enumerate(c.comparison.clusters):
        out_console.print(f"cluster C{k + 1}: A modes {[i + 1 for i in cl.a]} ↔ B modes {[j + 1 for j in cl.b]}, "
                          f"principal angles {', '.join(f'{x:.2f}°' for x in cl.angles_deg)} "
                          f"(limit {c.thresholds.max_angle_deg:.1f}°)", markup=False)
    for side, (val, i, j) in (("A", c.auto_mac_a), ("B", c.auto_mac_b)):
        if val > 0.9:
            out_console.print(f"[yellow]warn[/] auto-MAC of {side}: modes {i + 1} and {j + 1} look alike "
                              f"(MAC {val:.2f}): aliased or poorly separated", markup=True)
    if c.comparison.unpaired_a:
        out_console.print(f"unpaired modes of A (no partner with MAC ≥ {PAIR_MIN_MAC:g}): "
                          f"{[i + 1 for i in c.comparison.unpaired_a]}", markup=False)
    if c.comparison.unpaired_b:
        out_console.print(f"unpaired modes of B (no partner with MAC ≥ {PAIR_MIN_MAC:g}): "
                          f"{[j + 1 for j in c.comparison.unpaired_b]}", markup=False)
    out_console.print("verdict: " + ("[green]pass[/]" if c.passed else "[bold red]fail[/]"), markup=True)
