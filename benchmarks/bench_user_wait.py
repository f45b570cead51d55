#!/usr/bin/env python
"""What the user waits for: whole ``modebridge`` commands, start-up included.

Every figure is the wall time of the CLI as a user starts it (a fresh ``python -m bridge.cli``
process, bytecode caches written as in a normal install), repeated ``--repeat`` times (≥ 3);
the table gives the median with min and max, and the 1-minute load average around each series
(this 2-core machine is shared: ratios measured within one run, not absolute times, are what
to compare).

    start-up     ``--help``; ``check`` on the demo; a bare ``python -c pass`` for reference
    run          ``run`` on the demo: CLI wall, the solver's own wall (``wall_time_s`` of its
                 summary), and the user's wait outside the solver = CLI wall − solver wall
    report       ``report`` of that run: cold (renders and charts removed) and cached, against
                 25 % of the run's wall (target: ≤ max(5 s, 25 %)); the page's size (≤ 5 MB)
    converge     a 3-level ``converge`` of the demo: the first run, then fully cached reruns
                 (target ≤ 2 s)
    vary         (``--vary``) the demo's variant study and its report's size (≤ 10 MB)
    dof          (``--dof N``, repeatable) ``run`` of the clamped quad8 plate of bench_pipeline.py
                 near N free DOF: CLI wall − solver wall as a fraction of the solve (targets
                 ≤ 10 % at 50k, ≤ 2 % at 200k); with ``--report-dof N`` also its first report
                 (no renders kept) against the solve (target ≤ 10 % at ≥ 50k)

    python benchmarks/bench_user_wait.py --json out.json [--repeat 3] [--vary] [--dof 50000]
        [--report-dof 50000]
"""

from __future__ import annotations

import argparse
import datetime as _dt
import json
import os
import platform
import shutil
import statistics
import subprocess
import sys
import resource
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "examples" / "cover_panel.toml"
VARY = ROOT / "examples" / "cover_panel_supports.toml"
PLUGINS = [ROOT / "plugins" / s for s in ("calculix", "kratos", "opensees")]


def _env() -> dict:
    env = dict(os.environ)
    env.pop("PYTHONDONTWRITEBYTECODE", None)  # a user's install writes and reuses bytecode
    env["PYTHONPATH"] = os.pathsep.join(str(p) for p in [ROOT, *PLUGINS])
    return env


def cli(*args: str, cwd: Path, check: bool = True) -> tuple[float, subprocess.CompletedProcess]:
    t0 = time.perf_counter()
    proc = subprocess.run([sys.executable, "-m", "bridge.cli", *args], cwd=cwd, env=_env(),
                          capture_output=True, text=True)
    wall = time.perf_counter() - t0
    if check and proc.returncode not in (0, 10):
        raise SystemExit(f"modebridge {' '.join(args)} failed ({proc.returncode}):\n{proc.stderr[-2000:]}")
    return wall, proc


def _child_cpu() -> float:
    ru = resource.getrusage(resource.RUSAGE_CHILDREN)
    return ru.ru_utime + ru.ru_stime


def series(fn, repeat: int) -> dict:
    """Wall times of ``repeat`` calls, and the CPU time (user + system) of the processes they
    started: on a loaded machine the CPU time is the steadier figure of the work done."""
    load0 = os.getloadavg()[0]
    xs, cpu = [], []
    for _ in range(repeat):
        c0 = _child_cpu()
        xs.append(fn())
        cpu.append(_child_cpu() - c0)
    return {"median": statistics.median(xs), "min": min(xs), "max": max(xs), "n": len(xs),
            "values": [round(x, 3) for x in xs], "cpu_median": statistics.median(cpu),
            "cpu_min": min(cpu), "cpu_max": max(cpu),
            "load_before_after": [round(load0, 2), round(os.getloadavg()[0], 2)]}


def fmt(s: dict, unit: str = "s") -> str:
    return (f"{s['median']:.2f} {unit} (min {s['min']:.2f}, max {s['max']:.2f}; CPU {s['cpu_median']:.2f} {unit}; "
            f"n={s['n']}; load {s['load_before_after'][0]:.1f}→{s['load_before_after'][1]:.1f})")


def _clear_renders(folder: Path) -> None:
    for d in folder.rglob(".renders"):
        shutil.rmtree(d, ignore_errors=True)


def bench_startup(work: Path, repeat: int) -> dict:
    bare = series(lambda: _timed([sys.executable, "-c", "pass"]), repeat)
    cli("--help", cwd=work)  # bytecode written once, as after an install
    helps = series(lambda: cli("--help", cwd=work)[0], repeat)
    checks = series(lambda: cli("check", str(DEMO), cwd=work)[0], repeat)
    return {"python_bare_s": bare, "help_s": helps, "check_demo_s": checks}


def _timed(cmd: list[str]) -> float:
    t0 = time.perf_counter()
    subprocess.run(cmd, env=_env(), capture_output=True, check=True)
    return time.perf_counter() - t0


def _solver_wall(out: Path) -> float:
    return float(json.loads((out / "calculix" / "summary.json").read_text())["wall_time_s"])


def bench_run_and_report(work: Path, repeat: int) -> dict:
    runs, waits, reports_cold, reports_cached, sizes = [], [], [], [], []
    out = work / "demo-run"
    for _ in range(repeat):
        shutil.rmtree(out, ignore_errors=True)
        wall, _ = cli("run", str(DEMO), "--out", str(out), cwd=work)
        solver = _solver_wall(out)
        runs.append((wall, solver))
        waits.append(wall - solver)
        _clear_renders(out)
        cold, _ = cli("report", str(out), cwd=work)
        reports_cold.append(cold)
        cached, _ = cli("report", str(out), cwd=work)
        reports_cached.append(cached)
        sizes.append((out / "report.html").stat().st_size)
    walls = [w for w, _ in runs]
    ratio = [c / w for c, w in zip(reports_cold, walls)]
    pdf, _ = cli("report", str(out), "--out", str(out / "report.pdf"), cwd=work)

    def st(xs):
        return {"median": statistics.median(xs), "min": min(xs), "max": max(xs), "n": len(xs),
                "values": [round(x, 3) for x in xs]}
    return {"run_cli_wall_s": st(walls), "solver_wall_s": st([s for _, s in runs]),
            "run_wait_outside_solver_s": st(waits),
            "report_cold_s": st(reports_cold), "report_cached_s": st(reports_cached),
            "report_cold_over_run_wall": st(ratio), "report_bytes": st(sizes), "report_pdf_s": round(pdf, 3),
            "report_pdf_bytes": (out / "report.pdf").stat().st_size}


def bench_converge(work: Path, repeat: int) -> dict:
    study = work / "demo-converge"
    shutil.rmtree(study, ignore_errors=True)
    first, _ = cli("converge", str(DEMO), "--levels", "3", "--out", str(study), "--json", cwd=work)
    cached = series(lambda: cli("converge", str(DEMO), "--levels", "3", "--out", str(study), "--json",
                                cwd=work)[0], repeat)
    return {"first_s": round(first, 3), "cached_rerun_s": cached}


def bench_vary(work: Path, repeat: int) -> dict:
    study = work / "demo-vary"
    shutil.rmtree(study, ignore_errors=True)
    first, _ = cli("vary", str(VARY), "--out", str(study), cwd=work)
    cached = series(lambda: cli("vary", str(VARY), "--out", str(study), cwd=work)[0], repeat)
    _clear_renders(study)
    cold, _ = cli("report", str(study), cwd=work)
    warm = series(lambda: cli("report", str(study), cwd=work)[0], repeat)
    return {"first_s": round(first, 3), "cached_rerun_s": cached, "report_cold_s": round(cold, 3),
            "report_cached_s": warm, "report_bytes": (study / "report.html").stat().st_size}


def bench_dof(work: Path, target: int, repeat: int, report: bool = False) -> dict:
    sys.path[:0] = [str(ROOT), str(ROOT / "tests")]
    import conftest  # the plate of the tests and of bench_pipeline.py

    n = min(range(4, 400), key=lambda k: abs(6 * (3 * k * k + 4 * k + 1 - 8 * k) - target))
    model = work / f"plate_{target}.toml"
    model.write_text(conftest.plate_model("quad8", (n, n), "clamped", modes=10,
                                          extra='\n[run]\ntimeout = "3600 s"\n'))
    rows = []
    for _ in range(repeat):
        out = work / f"plate_{target}"
        shutil.rmtree(out, ignore_errors=True)
        wall, _ = cli("run", str(model), "--out", str(out), cwd=work)
        solver = _solver_wall(out)
        row = {"cli_wall_s": round(wall, 3), "solver_wall_s": round(solver, 3),
               "outside_solver_s": round(wall - solver, 3), "fraction": (wall - solver) / solver,
               "load": round(os.getloadavg()[0], 2)}
        if report:  # the first report of this run (no renders kept yet) against its solve
            _clear_renders(out)
            c0 = _child_cpu()
            cold, _ = cli("report", str(out), cwd=work)
            row.update({"report_cold_s": round(cold, 3), "report_cpu_s": round(_child_cpu() - c0, 3),
                        "report_over_solve": cold / solver,
                        "report_bytes": (out / "report.html").stat().st_size})
        rows.append(row)
    fr = [r["fraction"] for r in rows]
    res = {"divisions": n, "free_dof": 6 * (3 * n * n + 4 * n + 1 - 8 * n), "runs": rows,
           "fraction_median": statistics.median(fr), "fraction_min": min(fr), "fraction_max": max(fr)}
    if report:
        rr = [r["report_over_solve"] for r in rows]
        res.update({"report_over_solve_median": statistics.median(rr), "report_over_solve_min": min(rr),
                    "report_over_solve_max": max(rr)})
    return res


def main(argv=None) -> dict:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--vary", action="store_true", help="also the demo's variant study and its report")
    ap.add_argument("--dof", type=int, action="append", default=[], help="also a plate run near N free DOF")
    ap.add_argument("--report-dof", type=int, action="append", default=[],
                    help="also time the first report of the plate run near N free DOF (one of --dof)")
    ap.add_argument("--skip", action="append", default=[], help="startup, run, converge")
    ap.add_argument("--json", type=Path)
    ap.add_argument("--work", type=Path, default=None)
    args = ap.parse_args(argv)
    if args.repeat < 3:
        ap.error("--repeat must be at least 3 (medians of at least 3 runs)")
    work = args.work or Path(tempfile.mkdtemp(prefix="modebridge-bench-wait-"))
    work.mkdir(parents=True, exist_ok=True)
    res: dict = {"date": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
                 "machine": {"cpus": os.cpu_count(), "python": platform.python_version(),
                             "loadavg_start": os.getloadavg()}, "repeat": args.repeat}
    if "startup" not in args.skip:
        res["startup"] = bench_startup(work, args.repeat)
        s = res["startup"]
        print(f"python -c pass          {fmt(s['python_bare_s'])}")
        print(f"modebridge --help       {fmt(s['help_s'])}   target ≤ 0.3 s")
        print(f"modebridge check demo   {fmt(s['check_demo_s'])}   target ≤ 1 s", flush=True)
    if "run" not in args.skip:
        res["run_report"] = r = bench_run_and_report(work, args.repeat)
        print(f"run demo: CLI {r['run_cli_wall_s']['median']:.2f} s (min {r['run_cli_wall_s']['min']:.2f}, max "
              f"{r['run_cli_wall_s']['max']:.2f}), solver {r['solver_wall_s']['median']:.2f} s, outside the solver "
              f"{r['run_wait_outside_solver_s']['median']:.2f} s")
        print(f"report cold {r['report_cold_s']['median']:.2f} s (min {r['report_cold_s']['min']:.2f}, max "
              f"{r['report_cold_s']['max']:.2f}) = {100 * r['report_cold_over_run_wall']['median']:.0f} % of the run "
              f"(min {100 * r['report_cold_over_run_wall']['min']:.0f}, max "
              f"{100 * r['report_cold_over_run_wall']['max']:.0f}); cached {r['report_cached_s']['median']:.2f} s; "
              f"{r['report_bytes']['median'] / 1e6:.2f} MB; PDF {r['report_pdf_s']:.2f} s, "
              f"{r['report_pdf_bytes'] / 1e6:.2f} MB", flush=True)
    if "converge" not in args.skip:
        res["converge"] = c = bench_converge(work, args.repeat)
        print(f"converge 3 levels: first {c['first_s']:.1f} s; cached rerun {fmt(c['cached_rerun_s'])}   target ≤ 2 s",
              flush=True)
    if args.vary:
        res["vary"] = v = bench_vary(work, args.repeat)
        print(f"vary: first {v['first_s']:.1f} s; cached rerun {fmt(v['cached_rerun_s'])}; report cold "
              f"{v['report_cold_s']:.1f} s, cached {fmt(v['report_cached_s'])}, {v['report_bytes'] / 1e6:.2f} MB "
              "(target ≤ 10 MB)", flush=True)
    for target in args.dof:
        d = bench_dof(work, target, args.repeat, report=target in args.report_dof)
        res.setdefault("dof", []).append(d)
        print(f"plate {d['free_dof']} free DOF: outside the solver / solve = {100 * d['fraction_median']:.1f} % "
              f"(min {100 * d['fraction_min']:.1f}, max {100 * d['fraction_max']:.1f})"
              + (f"; first report / solve = {100 * d['report_over_solve_median']:.1f} % (min "
                 f"{100 * d['report_over_solve_min']:.1f}, max {100 * d['report_over_solve_max']:.1f})"
                 if "report_over_solve_median" in d else "") + f"; runs {d['runs']}", flush=True)
    res["machine"]["loadavg_end"] = os.getloadavg()
    if args.json:
        args.json.write_text(json.dumps(res, indent=2) + "\n")
    return res


if __name__ == "__main__":
    main()
