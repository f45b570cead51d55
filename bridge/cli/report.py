"""``modebridge report`` (one self-contained HTML file) and ``modebridge export`` (VTU, XDMF, CSV)."""

from __future__ import annotations

from enum import Enum
from pathlib import Path

import typer

from . import app, err_console, handle_errors, out_console


class _Format(str, Enum):
    vtu = "vtu"
    xdmf = "xdmf"
    csv = "csv"


@app.command(rich_help_panel="Reports")
@handle_errors
def report(paths: list[Path] = typer.Argument(..., help="A run folder, a solver folder or result file, or a "
                                              "study folder (convergence.json / variants.json); with "
                                              "--compare, two or more results, the first the reference."),
           compare: bool = typer.Option(False, "--compare", help="Compare the results given (reuses "
                                        "`modebridge compare`'s pairing and thresholds)."),
           out: Path = typer.Option(None, "--out", "-o", help="HTML file to write (default: report.html in "
                                    "the folder; comparison-report.html here with --compare); a name "
                                    "ending in .pdf writes a PDF for filing instead."),
           verify: Path = typer.Option(None, "--verify", help="A verify.json to include (default: the one "
                                       "in the folder, if any)."),
           max_modes: int = typer.Option(20, "--max-modes", min=0, help="Modes drawn per result "
                                         "(picture + animation each)."),
           animations: bool = typer.Option(True, "--animations/--no-animations", help="Animate each drawn mode "
                                           "(a light GIF: 7 poses, one shared palette)."),
           max_size: float = typer.Option(5.0, "--max-size", min=0.0, help="Hold the HTML below this many MB: "
                                          "animations are left out first, then mode pictures, from the last "
                                          "result's highest mode (the report says which); 0: no cap."),
           min_mac: float = typer.Option(0.9, "--min-mac", min=0.0, max=1.0, help="Comparison: paired MAC at least."),
           max_df: float = typer.Option(1.0, "--max-df", min=0.0, help="Comparison: |Δf| at most, in %."),
           force: bool = typer.Option(False, "--force", help="Compare results of different models.")) -> None:
    """One self-contained HTML report (or a PDF with --out x.pdf): verdict, model, mesh, frequencies
    and effective mass, checks, a picture and an animation of each mode, comparisons, convergence,
    verification, provenance."""
    from ..compare.results import Thresholds
    from ..report import build_comparison_report, build_report

    th = Thresholds(min_mac=min_mac, max_df=max_df / 100.0)
    if out is not None:  # refuse a bad --out before any picture is drawn
        from ..io import guard_output

        guard_output(out, paths, what="report")
    if compare:
        if len(paths) < 2:
            raise typer.BadParameter("--compare needs at least two results")
        with err_console.status("drawing the report", spinner="dots"):
            written = build_comparison_report(paths, out, verify, max_modes, force=force, thresholds=th,
                                              animations=animations, max_bytes=int(max_size * 1e6))
    else:
        if len(paths) != 1:
            raise typer.BadParameter("give one path (or --compare with two or more results)")
        with err_console.status("drawing the report", spinner="dots"):
            written = build_report(paths[0], out, verify, max_modes, force=force, thresholds=th,
                                   animations=animations, max_bytes=int(max_size * 1e6))
    out_console.print(f"report: {written}", markup=False)


@app.command(rich_help_panel="Reports")
@handle_errors
def export(result: Path = typer.Argument(..., help="Result file (result.vtkhdf) or solver folder."),
           fmt: _Format = typer.Option(..., "--format", "-f", help="vtu: mode shapes with the frequencies as "
                                       "field data; xdmf: XDMF + HDF5 mode shapes; csv: frequencies and "
                                       "effective masses."),
           out: Path = typer.Option(None, "--out", "-o", help="File to write (default: modes.<format> "
                                    "beside the result).")) -> None:
    """Export mode shapes (VTU, XDMF + HDF5) or the table of modes (CSV)."""
    from ..export import export_result

    for p in export_result(result, fmt.value, out):
        out_console.print(f"wrote {p}", markup=False)
