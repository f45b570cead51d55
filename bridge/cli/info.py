"""``modebridge solvers`` and ``modebridge schema``."""

from __future__ import annotations

import json

import typer

from . import app, handle_errors, out_console


def Table(*args, **kwargs):  # rich.table on first use, not at start-up
    from rich.table import Table as _Table

    return _Table(*args, **kwargs)


@app.command(rich_help_panel="Information")
@handle_errors
def solvers(as_json: bool = typer.Option(False, "--json", help="Print JSON.")) -> None:
    """List the solver plugins found, whether their executable is installed, and what they support."""
    from ..plugins import get_plugin_manager, get_solvers

    pm = get_plugin_manager()
    dists = {}
    for plugin, dist in pm.list_plugin_distinfo():
        dists[id(plugin)] = (dist.project_name, dist.version)
    rows = []
    for name, a in sorted(get_solvers(pm).items()):
        module = type(a).__module__.split(".")[0]
        import sys as _sys
        mod = _sys.modules.get(module)
        dist = dists.get(id(mod), (module, "?"))
        exe = a.locate()
        rows.append({"name": name, "label": a.label, "plugin": dist[0], "plugin_version": dist[1],
                     "executable": exe, "solver_version": a.version() if exe else None,
                     "capabilities": a.capabilities.as_dict()})
    if as_json:
        print(json.dumps(rows, indent=2))
        return
    t = Table(title="Solver plugins")
    for col in ("solver", "plugin", "executable", "version", "element families", "supports"):
        t.add_column(col)
    for r in rows:
        t.add_row(r["name"], f"{r['plugin']} {r['plugin_version']}", r["executable"] or "[red]not found[/]",
                  r["solver_version"] or "-", " ".join(r["capabilities"]["families"]),
                  " ".join(r["capabilities"]["supports"]))
    out_console.print(t)
    from ..cache import cache_dir

    out_console.print(f"cache (solver versions, plot fonts; safe to delete): {cache_dir()}", markup=False)
    for r in rows:
        subs = r["capabilities"].get("substitutes", {})
        for fam, sub in subs.items():
            size = "same size" if sub["size_factor"] == 1.0 else f"{sub['size_factor']:g} × the size"
            out_console.print(f"{r['name']}: {fam} → {sub['family']} at {size} ({sub['reason']})", markup=False)
        opts = r["capabilities"].get("options", [])
        if opts:
            from rich.markup import escape

            o = Table(title=escape(f"{r['name']} options ([solver_options.{r['name']}] in a model)"))
            for col in ("option", "type", "default", "accepted", "what it does"):
                o.add_column(col)
            for x in opts:
                accepted = " ".join(map(str, x["choices"])) if x["choices"] else "-"
                o.add_row(x["name"], x["type"], str(x["default"]), accepted, x["help"])
            out_console.print(o)
    if not rows:
        out_console.print("no solver plugin installed: pip install plugins/calculix")


@app.command(rich_help_panel="Information")
@handle_errors
def schema() -> None:
    """Print the JSON Schema of model files (for editor completion)."""
    from ..model import json_schema

    print(json.dumps(json_schema(), indent=2))
