#!/usr/bin/env python
"""A 5-level mesh-convergence study on this machine's cores: the study's wall time against its
finest level alone and against all levels run one after another.

The case is the clamped steel plate of the tests (``tests/conftest.py::plate_model``:
100 × 100 × 2 mm, E = 210 GPa, ν = 0.3, ρ = 7850 kg/m³, all four edges clamped), quad8
(CalculiX S8R), 10 modes. The study uses ``--levels`` levels (default 5) from ``--base`` ×
``--base`` elements (default 16) refined by ``--ratio`` (default 1.5). So the divisions are 16, 24, 36,
54 and 81 (116 160 free DOF on the finest level), and the finest level solves in ≈ 20–40 s on one
thread. Measured once each, in this
order, each in a fresh folder (wall time by ``time.perf_counter``):

    (a) study       bridge.study.converge.run_convergence(..., workers=None): the default plan
                    (bridge.study.executor.plan_parallelism), analysis (mode tracking, GCI) included
    (b) finest      bridge.pipeline.run_model of the finest level's mesh (a model with the finest
                    level's divisions), with the solver threads the study's plan gives each run
    (b2) finest     the same with threads = all cores (not in the targets; for the proposal below)
    (c) sequential  run_convergence(..., workers=1), the levels one after another (the plan then
                    gives each run all cores' threads)

Targets: study / finest ≤ 1.15. study / sequential is reported. The study's timeline (when
each level finished, and its solve time from its summary) shows where the time goes.

    python benchmarks/bench_study.py
    python benchmarks/bench_study.py --json out.json --keep runs/bench_study
    python benchmarks/bench_study.py --base 8 --ratio 1.6 --levels 5
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import shutil
import sys
import tempfile
import time
import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_pipeline import _ccx_equations, environment

MODES = 10
TARGET = 1.15  # study / finest level alone


def _conftest():
    import importlib.util

    spec = importlib.util.spec_from_file_location("_modebridge_conftest", ROOT / "tests" / "conftest.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)  # type: ignore[union-attr]
    return mod


def model_text(n: int, threads: int = 1) -> str:
    return _conftest().plate_model("quad8", divisions=(n, n), supports="clamped", modes=MODES,
                                   extra=f"\n[run]\nthreads = {threads}\ntimeout = \"3600 s\"\n")


def free_dof(n: int) -> int:
    """Free DOF of the clamped n × n quad8 plate: 6 × (nodes − the 8n rim nodes)."""
    return 6 * (3 * n * n + 4 * n + 1 - 8 * n)


def level_divisions(base: int, levels: int, ratio: float) -> list[int]:
    """The divisions per level exactly as bridge.meshing.gmsh._divisions makes them."""
    from bridge.meshing.gmsh import _divisions
    from bridge.model import parse_model

    raw = tomllib.loads(model_text(base))
    raw["mesh"].update(levels=levels, ratio=ratio)
    model = parse_model(raw)
    return [_divisions(model, lv)[0] for lv in range(levels)]


class _Clock:
    """Wall time, CPU time of this process and of its children, 1-minute load before and after."""

    def __enter__(self):
        self.load0 = os.getloadavg()[0]
        self.ru0 = resource.getrusage(resource.RUSAGE_CHILDREN)
        self.c0 = time.process_time()
        self.t0 = time.perf_counter()
        return self

    def __exit__(self, *exc):
        self.wall = time.perf_counter() - self.t0
        self.cpu_self = time.process_time() - self.c0
        ru = resource.getrusage(resource.RUSAGE_CHILDREN)
        # RUSAGE_CHILDREN counts waited-for children: ccx, and the pool's worker processes
        # once the pool has shut down (they are not joined earlier)
        self.cpu_children = (ru.ru_utime + ru.ru_stime) - (self.ru0.ru_utime + self.ru0.ru_stime)
        self.load1 = os.getloadavg()[0]
        return False

    def as_dict(self) -> dict:
        return {"wall_s": round(self.wall, 3), "cpu_self_s": round(self.cpu_self, 2),
                "cpu_children_s": round(self.cpu_children, 2),
                "loadavg_1min_before_after": [round(self.load0, 2), round(self.load1, 2)]}


def run_study(model_path: Path, study_dir: Path, levels: int, ratio: float, workers: int | None,
              log=print) -> dict:
    from bridge.study.converge import run_convergence
    from bridge.study.executor import plan_parallelism

    events: list[tuple[float, str, str]] = []
    t_start = time.perf_counter()

    def progress(label: str, state: str) -> None:
        t = time.perf_counter() - t_start
        events.append((round(t, 3), label, state))
        if state in ("done", "failed", "cached"):
            log(f"    {t:7.1f} s  {label}: {state}", flush=True)

    plan = plan_parallelism(levels, workers, None)
    log(f"  plan: {plan[0]} worker process(es), {plan[1]} solver thread(s) per run", flush=True)
    t_start = time.perf_counter()
    with _Clock() as clk:
        (study,) = run_convergence(model_path, study_dir, levels=levels, ratio=ratio, workers=workers,
                                   progress=progress)
    done = {label: t for t, label, state in events if state == "done"}
    runs = []
    for o in study.outcomes:
        s = o.summary or {}
        solve = s.get("wall_time_s")
        t_done = done.get(o.task.label)
        runs.append({"label": o.task.label, "level": o.task.level, "state": o.state,
                     "nodes": s.get("mesh", {}).get("nodes"), "free_dof": s.get("mesh", {}).get("free_dof"),
                     "solve_s": round(solve, 3) if solve is not None else None,
                     "done_at_s": t_done,
                     # the run's own start is not reported by the executor: done − solve is the
                     # solve's start (meshing/reading before and after it are ≪ 1 s here)
                     "solve_started_at_s": round(t_done - solve, 3) if (t_done is not None and solve) else None,
                     "f1_hz": (s.get("frequencies_hz") or [None])[0]})
    last_done = max((r["done_at_s"] for r in runs if r["done_at_s"] is not None), default=None)
    mode1 = study.modes[0].as_dict() if study.modes else None
    return {"plan": {"workers": plan[0], "threads": plan[1]}, **clk.as_dict(), "runs": runs,
            "last_level_done_at_s": last_done,
            "after_last_level_s": round(clk.wall - last_done, 3) if last_done is not None else None,
            "mode1": mode1}


def run_alone(model_path: Path, out: Path, log=print) -> dict:
    from bridge.pipeline import run_model

    with _Clock() as clk:
        prep, (outcome,) = run_model(model_path, out, ["calculix"])
    if not outcome.ok:
        raise SystemExit(f"finest level alone failed: {outcome.error}")
    r = outcome.result
    return {**clk.as_dict(), "nodes": prep.mesh.n_nodes, "free_dof": prep.free_dof,
            "threads": prep.model.run.threads,
            "ccx_equations": _ccx_equations(outcome.folder / "job.log"),
            "solve_s": round(float(r.metadata["provenance"]["wall_time_s"]), 3),
            "f1_hz": float(r.frequencies[0])}


def report(res: dict) -> str:
    a, b, b2, c = res["study"], res["finest"], res["finest_all_cores"], res["sequential"]
    L = [(f"levels {res['levels']} × ratio {res['ratio']} from {res['base']}×{res['base']}: divisions "
          f"{res['divisions']}, free DOF {res['free_dof']}"), ""]

    def clk(name, d):
        L.append(f"{name:<58}{d['wall_s']:9.2f} s   (CPU self {d['cpu_self_s']:.1f} s, children "
                 f"{d['cpu_children_s']:.1f} s; 1-min load {d['loadavg_1min_before_after']})")

    clk(f"(a) study, workers=None: {a['plan']['workers']} workers × {a['plan']['threads']} thread", a)
    clk(f"(b) finest level alone, run_model, threads = {b['threads']}", b)
    clk(f"(b2) finest level alone, run_model, threads = {b2['threads']}", b2)
    clk(f"(c) sequential, workers=1: {c['plan']['workers']} worker × {c['plan']['threads']} threads", c)
    L.append("")
    r1 = a["wall_s"] / b["wall_s"]
    over = a["wall_s"] - TARGET * b["wall_s"]
    verdict = "met" if r1 <= TARGET else f"MISSED by {100 * (r1 / TARGET - 1):.0f} % ({over:.1f} s over)"
    L.append(f"study / finest (threads {b['threads']})   {r1:6.3f}×   target ≤ {TARGET}×: {verdict}")
    L.append(f"study / finest (threads {b2['threads']})   {a['wall_s'] / b2['wall_s']:6.3f}×")
    L.append(f"study / sequential         {a['wall_s'] / c['wall_s']:6.3f}×")
    for name, s in (("(a) study", a), ("(c) sequential", c)):
        L.append(f"\n{name} timeline (s from the start; solve start = done − solve):")
        L.append(f"  {'level':<20}{'nodes':>8}{'free DOF':>10}{'solve':>9}{'start':>9}{'done':>9}")
        for r in s["runs"]:
            L.append(f"  {r['label']:<20}{r['nodes']:>8}{r['free_dof']:>10}{r['solve_s']:>9.2f}"
                     f"{r['solve_started_at_s']:>9.2f}{r['done_at_s']:>9.2f}")
        L.append(f"  after the last level (load results, track modes, GCI): {s['after_last_level_s']:.2f} s")
    return "\n".join(L)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0],
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--base", type=int, default=16, help="divisions of level 0 (default 16)")
    ap.add_argument("--ratio", type=float, default=1.5, help="refinement ratio (default 1.5)")
    ap.add_argument("--levels", type=int, default=5, help="levels (default 5)")
    ap.add_argument("--json", type=Path, metavar="PATH", help="write the results as JSON")
    ap.add_argument("--keep", type=Path, metavar="DIR", help="keep the study and run folders in DIR")
    args = ap.parse_args(argv)

    import bridge.pipeline
    import bridge.study.converge  # noqa: F401

    env = environment()
    if env["ccx"] is None:
        print("ccx not found on PATH", file=sys.stderr)
        return 2
    cores = os.cpu_count() or 1
    env.update(modes=MODES, threads=None)
    divs = level_divisions(args.base, args.levels, args.ratio)
    print(f"modebridge {env['modebridge']}, ccx {env['ccx_version']}, {env['nproc']} × {env['cpu_model']}; "
          f"{MODES} modes, S8R; levels {divs}", flush=True)

    tmp = None
    base = args.keep
    if base is None:
        tmp = tempfile.TemporaryDirectory(prefix="bench_study_")
        base = Path(tmp.name)
    else:
        for sub in ("study_parallel", "study_sequential", "finest", "finest_all_cores"):
            shutil.rmtree(base / sub, ignore_errors=True)
        base.mkdir(parents=True, exist_ok=True)
    from bridge.study.executor import plan_parallelism

    study_threads = plan_parallelism(args.levels, None, None)[1]
    try:
        model = base / "model.toml"
        model.write_text(model_text(args.base), encoding="utf-8")
        res = {"environment": env, "base": args.base, "ratio": args.ratio, "levels": args.levels,
               "divisions": divs, "free_dof": [free_dof(n) for n in divs], "cores": cores}
        print("(a) study, workers=None", flush=True)
        res["study"] = run_study(model, base / "study_parallel", args.levels, args.ratio, None)
        for key, threads in (("finest", study_threads), ("finest_all_cores", cores)):
            m = base / f"{key}.toml"
            m.write_text(model_text(divs[-1], threads), encoding="utf-8")
            print(f"({'b' if key == 'finest' else 'b2'}) finest level alone, {divs[-1]}×{divs[-1]}, "
                  f"threads = {threads}", flush=True)
            res[key] = run_alone(m, base / key)
            print(f"    {res[key]['wall_s']:.1f} s (solve {res[key]['solve_s']:.1f} s)", flush=True)
        print("(c) sequential, workers=1", flush=True)
        res["sequential"] = run_study(model, base / "study_sequential", args.levels, args.ratio, 1)
    finally:
        if tmp is not None:
            tmp.cleanup()
    fin = next(r for r in res["study"]["runs"] if r["level"] == args.levels - 1)
    res["finest_same_mesh"] = fin["nodes"] == res["finest"]["nodes"]
    assert res["finest_same_mesh"], (fin["nodes"], res["finest"]["nodes"])
    res["study_over_finest"] = res["study"]["wall_s"] / res["finest"]["wall_s"]
    res["study_over_finest_all_cores"] = res["study"]["wall_s"] / res["finest_all_cores"]["wall_s"]
    res["study_over_sequential"] = res["study"]["wall_s"] / res["sequential"]["wall_s"]
    res["target"] = TARGET
    res["target_met"] = res["study_over_finest"] <= TARGET
    print()
    print(report(res))
    if args.json:
        args.json.parent.mkdir(parents=True, exist_ok=True)
        args.json.write_text(json.dumps(res, indent=2) + "\n")
        print(f"wrote {args.json}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
