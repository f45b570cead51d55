#!/usr/bin/env python
"""Shell model of a closed sheet enclosure against a tet10 solid model of it: DOF and wall time.

The part is the box of ``examples/telemetry_enclosure.toml`` (220 x 160 x 70 mm mid-surface,
2 mm aluminium 5052, lid joined), free-free and without its added masses and screws, so that
the two models differ only in how they represent the walls: a mid-surface shell mesh
(``kind = "enclosure"``, CalculiX S8R) against a solid hollow box with the walls' real thickness
(outer faces t/2 outside the mid-surface, a STEP solid made here with gmsh, CalculiX C3D10).
``--scale`` shrinks the box (not the wall thickness) to fit a smaller machine; the solid's DOF
grow with the box's wall area over the element size cubed.

Printed: per model the free DOF, mesh time, solve wall time (the ccx subprocess) and the first
six elastic frequencies; the largest deviation of the shell from the solid over those six (modes
paired by shape after mapping the solid's modes onto the shell's points); and the ratios.

    python benchmarks/bench_shell_vs_solid.py                       # as in RESULTS.md
    python benchmarks/bench_shell_vs_solid.py --scale 0.5 --solid-size 2.5 --json out.json
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]

MODEL = """
name = "{name}"
[geometry]
{geometry}
[materials.al5052]
youngs_modulus = "70.3 GPa"
poisson_ratio = 0.33
density = "2680 kg/m^3"
[section]
{section}
[analysis]
modes = 12
[mesh]
family = "{family}"
size = "{size} mm"
[run]
solvers = ["calculix"]
threads = {threads}
timeout = "7200 s"
"""


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--scale", type=float, default=1.0, help="box size factor (wall thickness kept)")
    ap.add_argument("--thickness", type=float, default=2.0, help="wall thickness, mm")
    ap.add_argument("--shell-size", type=float, default=5.0, help="shell element size, mm")
    ap.add_argument("--solid-size", type=float, default=2.0, help="tet10 element size, mm")
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--out", type=Path, default=Path("runs/bench_shell_vs_solid"))
    ap.add_argument("--json", type=Path)
    args = ap.parse_args(argv)

    import numpy as np

    from bridge.compare.results import Thresholds, compare_results
    from bridge.meshing.gmsh import write_step
    from bridge.model import load_model
    from bridge.pipeline import make_job, prepare, run_one
    from bridge.plugins import get_plugin_manager, get_solver

    L, W, H = (x * args.scale for x in (220.0, 160.0, 70.0))
    t = args.thickness
    out = args.out
    out.mkdir(parents=True, exist_ok=True)

    def solid_box(gmsh):
        occ = gmsh.model.occ
        mm = 1e-3
        outer = occ.addBox(-t / 2 * mm, -t / 2 * mm, -t / 2 * mm, (L + t) * mm, (W + t) * mm, (H + t) * mm)
        inner = occ.addBox(t / 2 * mm, t / 2 * mm, t / 2 * mm, (L - t) * mm, (W - t) * mm, (H - t) * mm)
        occ.cut([(3, outer)], [(3, inner)])

    write_step(out / "enclosure_solid.step", solid_box)
    models = {
        "shell": MODEL.format(name="enclosure shell", family="quad8", size=args.shell_size, threads=args.threads,
                              geometry=f'kind = "enclosure"\nlength = "{L} mm"\nwidth = "{W} mm"\n'
                                       f'height = "{H} mm"\ntop = "lid"',
                              section=f'kind = "shell"\nmaterial = "al5052"\nthickness = "{t} mm"'),
        "solid": MODEL.format(name="enclosure solid", family="tet10", size=args.solid_size, threads=args.threads,
                              geometry='kind = "cad"\nfile = "enclosure_solid.step"',
                              section='kind = "solid"\nmaterial = "al5052"'),
    }
    adapter = get_solver(get_plugin_manager(), "calculix")
    rows, results = {}, {}
    for name, text in models.items():
        path = out / f"{name}.toml"
        path.write_text(text, encoding="utf-8")
        model = load_model(path)
        t0 = time.perf_counter()
        prep = prepare(model, path)
        t_mesh = time.perf_counter() - t0
        job = make_job(prep)
        outcome = run_one(adapter, prep, job, out / name)
        if not outcome.ok:
            print(f"{name}: {outcome.error}", file=sys.stderr)
            return 1
        r = outcome.result
        results[name] = r
        rows[name] = {"free_dof": prep.free_dof, "nodes": prep.mesh.n_nodes, "elements": prep.mesh.n_elements,
                      "mesh_s": t_mesh, "solve_s": r.metadata["provenance"]["wall_time_s"],
                      "element": r.metadata["provenance"]["element_type"],
                      "frequencies_hz": [float(f) for f in r.frequencies[6:12]],
                      "mass_kg": float(r.total_mass)}
    cmp = compare_results(results["shell"], results["solid"], "shell", "solid",
                          Thresholds(min_mac=0.9, max_df=0.02), force=True)
    pairs = [p for p in cmp.comparison.pairs if 6 <= p.a < 12]
    dev = [p.df for p in pairs]
    summary = {
        "box_mm": [L, W, H], "thickness_mm": t, "models": rows,
        "pairs": [{"shell_mode": p.a + 1, "solid_mode": p.b + 1, "df": p.df, "mac": p.mac} for p in pairs],
        "max_abs_deviation": float(np.max(np.abs(dev))) if dev else None,
        "dof_ratio_solid_over_shell": rows["solid"]["free_dof"] / rows["shell"]["free_dof"],
        "solve_time_ratio_solid_over_shell": rows["solid"]["solve_s"] / rows["shell"]["solve_s"],
    }
    print(f"box {L:g} x {W:g} x {H:g} mm, walls {t:g} mm, free-free, CalculiX, {args.threads} threads")
    print(f"{'model':6} {'element':6} {'free DOF':>9} {'mesh s':>7} {'solve s':>8}  first six elastic modes [Hz]")
    for name, row in rows.items():
        print(f"{name:6} {row['element']:6} {row['free_dof']:9d} {row['mesh_s']:7.1f} {row['solve_s']:8.1f}  "
              + " ".join(f"{f:8.1f}" for f in row["frequencies_hz"]))
    for p in pairs:
        print(f"  shell mode {p.a + 1:2d} <-> solid mode {p.b + 1:2d}: {100 * p.df:+.2f} %  MAC {p.mac:.3f}")
    print(f"largest |deviation| {100 * summary['max_abs_deviation']:.2f} % (target ≤ 2 %); "
          f"solid/shell: DOF x{summary['dof_ratio_solid_over_shell']:.1f}, "
          f"solve time x{summary['solve_time_ratio_solid_over_shell']:.1f} (target ≥ 10)")
    if args.json:
        args.json.write_text(json.dumps(summary, indent=2), encoding="utf-8")
    return 0


if __name__ == "__main__":
    sys.path.insert(0, str(ROOT))
    raise SystemExit(main())
