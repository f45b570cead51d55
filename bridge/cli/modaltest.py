"""``modebridge plan-test`` and ``modebridge correlate``: test and analysis together."""

from __future__ import annotations

import csv
import json
from pathlib import Path

import typer
from rich.table import Table

from . import CHECK_FAILED, app, handle_errors, out_console


def _placement(frame: Path | None):
    from ..modaltest.measured import Placement

    return Placement.from_toml(frame) if frame is not None else None


def _distance(text: str | None) -> float | None:
    if text is None:
        return None
    from ..modaltest.measured import TestDataError
    from ..units import parse_quantity

    try:
        return parse_quantity(text, "length")
    except ValueError as exc:
        raise TestDataError(f"--max-distance: {exc}") from None


def _keep_inputs(outputs: list[Path | None], inputs: list[Path]) -> None:
    """Refuse an output path that is one of the inputs: bad input loses nothing."""
    from ..modaltest.measured import TestDataError

    ins = {p.resolve() for p in inputs if p.exists()}
    ins |= {(p / "result.vtkhdf").resolve() for p in inputs if p.is_dir()}
    for o in outputs:
        if o is not None and o.resolve() in ins:
            raise TestDataError(f"{o}: is one of the inputs; write the output elsewhere")


def read_measured(path: Path, placement=None, length_unit: str | None = None, identify: bool = False,
                  result=None):
    """Measured modes from a .uff/.unv or .csv file (or identified from its FRFs)."""
    from ..modaltest.csvfile import read_csv
    from ..modaltest.measured import TestDataError
    from ..modaltest.uff import read_uff

    suffix = path.suffix.lower()
    if not path.is_file():
        raise TestDataError(f"{path}: no such file")
    if suffix in (".uff", ".unv"):
        if identify:
            from ..modaltest.identify import identify_from_uff

            return identify_from_uff(path, result, placement=placement, length_unit=length_unit)
        return read_uff(path, placement, length_unit)
    if suffix == ".csv":
        if identify:
            raise TestDataError(f"{path}: --identify needs FRFs in a universal file (dataset 58)")
        return read_csv(path, placement, length_unit)
    raise TestDataError(f"{path}: unknown kind of file {suffix!r}; accepted: .uff, .unv (universal file), .csv")


@app.command("correlate", rich_help_panel="Comparison")
@handle_errors
def correlate_cmd(result: Path = typer.Argument(..., help="The model's result (file or solver folder)."),
                  measured: Path = typer.Argument(..., help="Measured modes: .uff/.unv (datasets 164, 2420, "
                                                  "2411/15, 55) or modebridge's .csv."),
                  frame: Path = typer.Option(None, "--frame", help="TOML placing the test frame in the part's "
                                             "frame (origin, x_axis, y_axis)."),
                  length_unit: str = typer.Option(None, "--length-unit", help="The file's length unit, when it "
                                                  "does not say (or to override it)."),
                  identify: bool = typer.Option(False, "--identify", help="Identify the modes from the file's FRFs "
                                                "(dataset 58) with sdypy-EMA, poles picked near the model's."),
                  min_mac: float = typer.Option(0.9, "--min-mac", min=0.0, max=1.0, help="Paired MAC at least."),
                  max_df: float = typer.Option(5.0, "--max-df", min=0.0, help="|Δf| at most, in %."),
                  min_comac: float = typer.Option(0.8, "--min-comac", min=0.0, max=1.0,
                                                  help="Flag sensors whose CoMAC is below this."),
                  max_distance: str = typer.Option(None, "--max-distance", help="A test point farther than this "
                                                   "from the model is off it (default: half the element size)."),
                  as_json: bool = typer.Option(False, "--json", help="Print JSON."),
                  csv_path: Path = typer.Option(None, "--csv", help="Write the paired table as CSV."),
                  report: Path = typer.Option(None, "--report", help="Write an HTML report of the correlation.")) -> None:
    """Frequency errors, MAC with pairing, clusters, auto-MAC and CoMAC of measured modes against the
    model's; exits 10 when a pair fails the thresholds or a measured mode has no partner."""
    from ..modaltest.correlate import CorrelationThresholds, correlate
    from ..results import load_result

    _keep_inputs([csv_path, report], [result, measured] + ([frame] if frame else []))
    res = load_result(result)
    test = read_measured(measured, _placement(frame), length_unit, identify, res)
    th = CorrelationThresholds(min_mac=min_mac, max_df=max_df / 100.0, min_comac=min_comac)
    c = correlate(res, test, str(result), str(measured), th, _distance(max_distance))
    if csv_path is not None:
        _write_pairs_csv(c, csv_path)
    if report is not None:
        from ..report.correlation import write_correlation_report

        write_correlation_report(c, res, report)
    if as_json:
        print(json.dumps(c.as_dict(), indent=2))
    else:
        _print(c)
    if not c.passed:
        raise typer.Exit(CHECK_FAILED)


def _write_pairs_csv(c, path: Path) -> None:
    from ..io import atomic_path

    with atomic_path(path) as tmp:
        with open(tmp, "w", newline="", encoding="utf-8") as fh:
            w = csv.writer(fh)
            w.writerow(["model_mode", "f_model_hz", "test_mode", "f_test_hz", "df_percent", "mac", "cluster", "mpc", "ok"])
            for v in c.pair_verdicts():
                w.writerow([v["model_mode"], f"{v['f_model_hz']:.8g}", v["test_mode"], f"{v['f_test_hz']:.8g}",
                            f"{100 * v['df']:.4f}", f"{v['mac']:.5f}", v["cluster"] or "",
                            "" if v["mpc"] is None else f"{v['mpc']:.4f}", v["ok"]])
            w.writerow([])
            w.writerow(["sensor", "x_m", "y_m", "z_m", "on_model", "distance_m", "comac"])
            labels = c.test.sensor_labels()
            for i in range(c.test.n_sensors):
                p = c.test.points[i]
                w.writerow([labels[i], f"{p[0]:.6g}", f"{p[1]:.6g}", f"{p[2]:.6g}", bool(c.on[i]),
                            f"{c.located.distance[i]:.3g}", "" if not c.on[i] else f"{c.comac[i]:.4f}"])


def _print(c) -> None:
    t = Table(title=f"model {c.model_label}  vs  measured {c.test_label}")
    for col in ("model mode", "f model [Hz]", "test mode", "f test [Hz]", "Δf", "MAC", "cluster", ""):
        t.add_column(col, justify="right")
    for v in c.pair_verdicts():
        t.add_row(str(v["model_mode"]), f"{v['f_model_hz']:.2f}", str(v["test_mode"]), f"{v['f_test_hz']:.2f}",
                  f"{100 * v['df']:+.2f}%", f"{v['mac']:.3f}", "" if v["cluster"] is None else f"C{v['cluster']}",
                  "[green]ok[/]" if v["ok"] else "[bold red]FAIL[/]")
    out_console.print(t)
    b = c.frequency_bias()
    n_on = int(c.on.sum())
    out_console.print(f"{n_on} of {c.test.n_sensors} sensors on the model; {c.test.placement.describe()}", markup=False)
    if b["mean_df"] is not None:
        out_console.print(f"mean Δf {100 * b['mean_df']:+.2f} % (spread {100 * b['std_df']:.2f} %): a uniform "
                          f"stiffness scale of {b['stiffness_scale']:.3f} would explain the mean", markup=False)
    lab = c.test.sensor_labels()
    worst = sorted((float(c.comac[i]), lab[i]) for i in range(c.test.n_sensors) if c.on[i])[:3]
    if worst:
        out_console.print("lowest CoMAC: " + ", ".join(f"{s} {v:.3f}" for v, s in worst), markup=False)
    for w in c.warnings():
        out_console.print(f"[yellow]warn[/] {w}", markup=True, highlight=False)
    th = c.thresholds
    out_console.print(f"verdict: {'[green]pass[/]' if c.passed else '[bold red]fail[/]'} (MAC ≥ {th.min_mac}, "
                      f"|Δf| ≤ {100 * th.max_df:g} %, every measured mode paired)", markup=True)


@app.command("plan-test", rich_help_panel="Comparison")
@handle_errors
def plan_test_cmd(result: Path = typer.Argument(..., help="The model's result (file or solver folder)."),
                  sensors: int = typer.Option(..., "--sensors", min=1, help="How many sensors (measured DOF)."),
                  modes: str = typer.Option(None, "--modes", help="Target modes, e.g. 1-6 or 1,2,4 "
                                            "(default: every elastic mode)."),
                  candidates: str = typer.Option(None, "--candidates", help="A region of the model (from the run's "
                                                 "mesh.vtu) or a file of points (.csv, .uff); default: every "
                                                 "surface node."),
                  directions: str = typer.Option("normal", "--directions", help="normal (one sensor along the "
                                                 "surface normal per point) or xyz (three)."),
                  out: Path = typer.Option(..., "--out", help="The plan as a universal file (.uff)."),
                  length_unit: str = typer.Option("mm", "--length-unit", help="Length unit of the plan file."),
                  csv_path: Path = typer.Option(None, "--csv", help="Write the plan also as modebridge CSV."),
                  as_json: bool = typer.Option(False, "--json", help="Print JSON.")) -> None:
    """Choose sensor positions and directions by Effective Independence (Kammer 1991) for the target
    modes; write them as UFF geometry with the model's modes there (dataset 55)."""
    from ..modaltest.csvfile import write_csv
    from ..modaltest.plan import candidates_from_file, candidates_from_model, parse_modes, plan_test, region_nodes
    from ..modaltest.uff import write_uff
    from ..results import load_result

    _keep_inputs([out, csv_path], [result] + ([Path(candidates)] if candidates else []))
    res = load_result(result)
    idx = parse_modes(modes, res)
    if candidates is None:
        cand = candidates_from_model(res, directions=directions)
    elif Path(candidates).suffix.lower() in (".csv", ".uff", ".unv") or Path(candidates).is_file():
        cand = candidates_from_file(Path(candidates), res, directions)
    else:
        nodes = region_nodes(result, res, candidates)
        cand = candidates_from_model(res, nodes, directions, f"surface nodes of region {candidates}, {directions}")
    plan = plan_test(res, sensors, idx, cand)
    name = (res.metadata.get("model") or {}).get("name") or result.name
    m = plan.measured(f"modebridge test plan: {name}")
    m.length_unit = length_unit
    write_uff(m, out, title=f"modebridge test plan: {name}")
    if csv_path is not None:
        write_csv(m, csv_path, comment=f"modebridge test plan: {name}; shapes are the model's (mass-normalised)")
    if as_json:
        d = plan.as_dict()
        d["out"] = str(out)
        print(json.dumps(d, indent=2))
        return
    t = Table(title=f"test plan: {sensors} sensors for modes {', '.join(str(i + 1) for i in idx)} "
                    f"({cand.description})")
    for col in ("#", "point", "x [mm]", "y [mm]", "z [mm]", "direction", "EfI"):
        t.add_column(col, justify="right")
    from ..modaltest.measured import direction_label

    for n, (i, e) in enumerate(zip(plan.efi.kept, plan.efi.effective_independence), 1):
        p = cand.points[i] * 1e3
        t.add_row(str(n), cand.labels[i], f"{p[0]:.1f}", f"{p[1]:.1f}", f"{p[2]:.1f}",
                  direction_label(cand.directions[i]), f"{e:.3f}")
    out_console.print(t)
    out_console.print(f"Fisher information: log10 det {plan.efi.log10_det:.3f}, condition {plan.efi.condition:.3g}",
                      markup=False)
    goal = "goal met" if plan.goal_met else "[yellow]goal not met[/]: add sensors or drop modes"
    out_console.print(f"auto-MAC of the target modes at the chosen sensors: largest off-diagonal "
                      f"{plan.max_off_diagonal:.3f} (goal ≤ 0.1: {goal})", markup=True)
    out_console.print(f"wrote {out}", markup=False)
