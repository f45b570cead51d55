"""``modebridge run`` and ``modebridge check``."""

from __future__ import annotations

import json
from pathlib import Path

import typer

from ..errors import ExitCode
from . import CHECK_FAILED, _one_line, app, err_console, handle_errors, out_console


def Table(*args, **kwargs):  # rich.table on first use, not at start-up
    from rich.table import Table as _Table

    return _Table(*args, **kwargs)


CAUTION = ("Results are to be checked by a qualified engineer under the applicable codes and standards "
           "before they inform a design.")
_MARK = {"ok": "[green]ok[/]", "warn": "[yellow]warn[/]", "fail": "[bold red]FAIL[/]"}


def _model_arg():
    # no click-side path checks: load_model reports a missing or unreadable file in one line
    return typer.Argument(..., help="Model file (TOML).")


@app.command(rich_help_panel="Analysis")
@handle_errors
def check(model: Path = _model_arg(),
          as_json: bool = typer.Option(False, "--json", help="Print JSON.")) -> None:
    """Validate and mesh a model without solving: mesh size, supports, free DOF."""
    from ..checks import element_notes, free_rigid_motions
    from ..errors import BridgeError
    from ..meshing.quality import POOR_QUALITY
    from ..model import load_model
    from ..pipeline import check_capabilities, check_job_capabilities, make_job, model_mass, prepare, section_table
    from ..plugins import get_plugin_manager, get_solvers

    m = load_model(model)
    with err_console.status("meshing with gmsh", spinner="dots"):
        prep = prepare(m, model)  # the mesh quality gate refuses inverted elements here
    caps = {}
    job = make_job(prep)
    notes: list[str] = list(element_notes(m.mesh.family)) if m.mesh is not None else []
    solvers = get_solvers(get_plugin_manager())
    names = list(m.run.solvers)
    if "all" in names:  # every installed solver: each says whether it can take the model
        names = sorted(set(n for n in names if n != "all") | {n for n, a in solvers.items() if a.locate()})
    for name in names:
        if name not in solvers:
            caps[name] = f"no such solver plugin (installed: {', '.join(sorted(solvers)) or 'none'})"
            continue
        a = solvers[name]
        try:
            choice = check_capabilities(m, a, model)
            check_job_capabilities(job, a)
        except BridgeError as exc:  # CapabilityError: report, do not stop the check
            caps[name] = str(exc)
            continue
        if a.locate() is None:
            hint = getattr(a, "install_hint", "see the README for the install line")
            caps[name] = f"executable not found ({hint})"
            continue
        caps[name] = "ok" if not choice.changed else f"ok: {choice.reason}"
        notes += [n for n in element_notes(choice.family, a) if n not in notes]
    from ..connections import rigid_motion_rows

    fx = prep.constraints.fixed  # reference points carry rotations even beside solid nodes
    motions = free_rigid_motions(prep.mesh.points, fx, 6 if prep.mesh.dofs_per_node == 6 or fx[:, 3:].any() else 3,
                                 rigid_motion_rows(prep.mesh, prep.connections, prep.constraints.equations))
    warnings = list(notes)
    q = prep.quality.get("quality_min")
    if q is not None and q < POOR_QUALITY:
        warnings.append(f"{prep.quality.get('quality_poor', 0)} element(s) of poor shape, minSICN down to {q:.3f} "
                        f"(below {POOR_QUALITY})")
    summary = {"model": m.name, "mesh": prep.mesh_summary(), "supports": prep.constraints.described,
               "masses": [{"name": x.source, "node": x.node + 1, "mass_kg": x.mass, "offset_m": x.offset}
                          for x in prep.masses],
               "total_mass_kg": model_mass(m, prep.mesh),
               "sections": [{"name": x["name"], "region": x["region"], "kind": x["kind"],
                             "material": x["material"], "thickness_m": x["thickness_m"],
                             "elements": x["elements"], "mass_kg": x["mass_kg"]}
                            for x in (section_table(m, prep.mesh) if m.has_continuum else [])],
               "regions": {name: int(prep.mesh.region_nodes(name).size) for name in prep.mesh.regions},
               "solvers": caps,
               "expected_rigid_body_modes": {"count": motions.count, "free_motions": motions.names},
               "warnings": warnings,
               # shells: per face its groups, element count and normal after orientation
               "surfaces": prep.mesh.surfaces}
    runnable = [n for n, st in caps.items() if st == "ok" or st.startswith("ok: ")]
    if as_json:
        print(json.dumps(summary, indent=2))
        if not runnable:
            raise typer.Exit(ExitCode.PLUGIN)
        return
    s = summary["mesh"]
    out_console.print(f"[bold]{m.name}[/]: {s['family']} mesh, {s['nodes']} nodes, {s['elements']} elements, "
                      f"{s['constrained_nodes']} constrained nodes, {s['free_dof']} free DOF "
                      f"({s['dofs_per_node']} per node); element quality (minSICN) min "
                      f"{s.get('quality_min', float('nan')):.3f}; mass {summary['total_mass_kg']:.6g} kg",
                      markup=True)
    t = Table(title="Sections")
    for col in ("section", "region", "kind", "material", "thickness", "elements", "mass"):
        t.add_column(col)
    for x in summary["sections"]:
        t.add_row(x["name"], x["region"] or ("whole body" if len(summary["sections"]) == 1 else "the rest"),
                  x["kind"], x["material"],
                  f"{x['thickness_m'] * 1e3:.6g} mm" if x["thickness_m"] is not None else "-",
                  str(x["elements"]), f"{x['mass_kg']:.6g} kg")
    out_console.print(t)
    t = Table(title="Regions")
    for col in ("region", "nodes"):
        t.add_column(col)
    for name, count in summary["regions"].items():
        t.add_row(name, str(count))
    if not summary["regions"]:
        t.add_row("-", "0")
    out_console.print(t)
    t = Table(title="Supports")
    for col in ("region", "kind", "fixes", "nodes"):
        t.add_column(col)
    for d in prep.constraints.described:
        t.add_row(d["region"], d["kind"], d["fixes"], str(d["nodes"]))
    for s in prep.model.springs:
        ends = ", ".join(s.points) if s.points else f"region {s.region}"
        t.add_row(ends, f"springs '{s.name}' to {s.to}", "elastic", str(len(s.points or [])
                                                                         or len(prep.mesh.region_nodes(s.region))))
    if not prep.constraints.described and not prep.model.springs:
        t.add_row("-", "free body", "nothing", "0")
    out_console.print(t)
    if motions.count:
        out_console.print(f"rigid-body motions the supports leave free ({motions.count}): "
                          f"{', '.join(motions.names)}", markup=False)
    for w in warnings:
        out_console.print("  [yellow]warn[/]  ", markup=True, end="")
        out_console.print(w, markup=False)
    for name, status in caps.items():
        out_console.print(f"solver {name}: {status}", markup=False)
    if not runnable:
        err_console.print("[bold red]error:[/] no solver listed in run.solvers can run this model "
                          "(see the reason beside each)", markup=True)
        raise typer.Exit(ExitCode.PLUGIN)


@app.command(rich_help_panel="Analysis")
@handle_errors
def run(model: Path = _model_arg(),
        solver: list[str] = typer.Option(None, "--solver", "-s", help="Solver to run (repeatable); 'all': every "
                                         "installed solver that can take the model; default: the model's "
                                         "run.solvers."),
        out: Path = typer.Option(None, "--out", "-o", help="Run folder (default: runs/<model file name>)."),
        as_json: bool = typer.Option(False, "--json", help="Print a JSON summary on stdout.")) -> None:
    """Mesh, write the deck, solve, read the modes back and check them."""
    from ..pipeline import run_model

    status = err_console.status("starting", spinner="dots")
    with status:
        prep, outcomes = run_model(model, out, solver or None, progress=lambda msg: status.update(msg))
    failed = [o for o in outcomes if not o.ok]
    if as_json:
        payload = [o.summary if o.ok else {"solver": o.solver, "error": str(o.error)} for o in outcomes]
        print(json.dumps(payload[0] if len(payload) == 1 else {"runs": payload}, indent=2))
    else:
        for o in outcomes:
            if o.ok:
                _print_run(o)
        out_console.print(f"[dim]{CAUTION}[/]", markup=True)
    for o in failed:
        # _one_line escapes markup: a path such as runs/[old] must print as it is
        err_console.print(f"[bold red]error:[/] {o.solver}: {_one_line(str(o.error))}", markup=True)
    if failed:
        raise typer.Exit(max(o.error.exit_code for o in failed))
    if any(c.status == "fail" for o in outcomes for c in o.checks):
        raise typer.Exit(CHECK_FAILED)


def _print_run(o) -> None:
    s = o.summary
    r = o.result
    mesh = s["mesh"]
    out_console.print(f"[bold]{s['model']}[/] — {s['solver']} {s['solver_version']} ({s['element_type']}), "
                      f"{mesh['nodes']} nodes, {mesh['elements']} elements, {mesh['free_dof']} free DOF",
                      markup=True)
    el = s.get("element") or {}
    if el:
        out_console.print(f"  element: {el.get('element_type') or el.get('family')} — {el.get('reason', '')}",
                          markup=False)
    if s.get("solver_options"):
        out_console.print("  options: " + ", ".join(f"{k} = {v}" for k, v in s["solver_options"].items()),
                          markup=False)
    t = Table(title="Natural frequencies")
    t.add_column("mode", justify="right")
    t.add_column("f [Hz]", justify="right")
    frac = r.effective_mass_fraction()
    # a cumulative column for every direction the model asks the 90 % rule in (all three by default)
    wanted = ((r.metadata.get("model") or {}).get("analysis") or {}).get("mass_directions") or ["x", "y", "z"]
    cum_dirs = [j for j, d in enumerate("xyz") if d in wanted]
    if frac is not None:
        for d in "xyz":
            t.add_column(f"m_eff {d}", justify="right")
        for j in cum_dirs:
            t.add_column(f"cum. {'xyz'[j]}", justify="right")
        cum = frac.cumsum(axis=0)
    rigid = s["rigid_body_modes"]
    for i, f in enumerate(r.frequencies):
        row = [str(i + 1), f"{f:.2f}" + (" (rigid)" if i < rigid else "")]
        if frac is not None:
            row += [f"{x:.1%}" for x in frac[i]] + [f"{cum[i, j]:.1%}" for j in cum_dirs]
        t.add_row(*row)
    out_console.print(t)
    for c in o.checks:
        out_console.print(f"  {_MARK[c.status]}  {c.name}: ", markup=True, end="")
        out_console.print(c.message, markup=False)
    bands = [c for c in o.checks if c.name.startswith("excitation:")]
    if bands:
        elastic = r.frequencies[rigid:]
        f1 = f"{elastic[0]:.1f} Hz" if elastic.size else "none computed"
        bad = [c.name.split(":", 1)[1] for c in bands if c.status == "fail"]
        if bad:
            out_console.print(f"[bold red]verdict:[/] first elastic mode {f1}; modes fall inside the widened "
                              f"band(s) {', '.join(bad)}", markup=True)
        else:
            out_console.print(f"[green]verdict:[/] first elastic mode {f1}; every computed mode stays clear of "
                              f"all {len(bands)} excitation band(s) with their margins", markup=True)
    out_console.print(f"result: {o.folder / 'result.vtkhdf'}", markup=False)
