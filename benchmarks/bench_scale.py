#!/usr/bin/env python
"""A 1M-DOF shell model end to end with CalculiX: time and peak memory of every stage.

The case is the steel plate of the tests (``tests/conftest.py::plate_model``: E = 210 GPa,
ν = 0.3, ρ = 7850 kg/m³, all four edges clamped), made larger so that the elements stay about
half the thickness: 800 × 800 × 4 mm, n × n quad4 shells (CalculiX S4), 10 modes,
``run.threads = 2``. n = 410 gives 411² = 168 921 nodes and 6 × 409² = 1 003 686 free DOF.

The stages are the real code paths, in this process:

    mesh      bridge.pipeline.prepare (gmsh + supports + masses) + the mesh.vtu `run` writes
    job       bridge.pipeline.make_job
    deck      adapter.write_deck                         ┐
    solve     adapter.run (the ccx subprocess)           │ bridge.pipeline.run_one, with the
    parse     adapter.read_results + post-conditions     │ adapter and the module functions it
    to_result bridge.pipeline.to_result (incl. effective │ calls wrapped by timers (nothing else
              masses from modebridge's own mass matrix)  │ changes)
    checks    run_checks + summarise                     │
    save      save_result + its checksum + summary.json  ┘
    compare   load both result files + compare_results against a coarse run (n/4, mapped
              between the meshes), as `modebridge compare` does
    report    bridge.report.build_report of the run folder, as `modebridge report` does
              (pictures drawn in spawned worker processes when cores are free, else in-process)

Memory: before each stage this process's high-water mark is reset (``/proc/self/clear_refs``
← 5, Linux ≥ 4.0) and read back after it (``VmHWM``), so each stage gets the peak RSS of this
process during that stage (which includes what earlier stages still hold: the mesh, the
result). A sampler thread (every 50 ms) adds the RSS of all descendant processes (report
workers, ccx), so "tree peak" counts workers too. The solver's peak is exact:
``resource.getrusage(RUSAGE_CHILDREN).ru_maxrss`` after the big solve (the coarse run solved
before it is smaller, and the ``ccx -v`` probe is tiny).

    python benchmarks/bench_scale.py                      # n = 410 (≈ 1.0M free DOF)
    python benchmarks/bench_scale.py --n 200 --keep /tmp/scale --json out.json
"""

from __future__ import annotations

import argparse
import datetime as _dt
import importlib.util
import json
import os
import resource
import shutil
import sys
import tempfile
import threading
import time
import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
MODES = 10
THREADS = 2
SIZE = ("800 mm", "800 mm", "4 mm")


def model_text(n: int, threads: int | None = None) -> str:
    threads = threads or THREADS
    spec = importlib.util.spec_from_file_location("_modebridge_conftest", ROOT / "tests" / "conftest.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)  # type: ignore[union-attr]
    return mod.plate_model("quad4", divisions=(n, n), supports="clamped", modes=MODES,
                           length=SIZE[0], width=SIZE[1], thickness=SIZE[2],
                           extra=f"\n[run]\nthreads = {threads}\ntimeout = \"7200 s\"\n")


# --------------------------------------------------------------------------------------------
# memory
# --------------------------------------------------------------------------------------------

def _status_kib(pid: int | str, field: str) -> int:
    try:
        with open(f"/proc/{pid}/status") as fh:
            for line in fh:
                if line.startswith(field + ":"):
                    return int(line.split()[1])
    except OSError:
        pass
    return 0


def _descendants(pid: int) -> list[int]:
    out, todo = [], [pid]
    while todo:
        p = todo.pop()
        try:
            tids = os.listdir(f"/proc/{p}/task")
        except OSError:
            continue
        for tid in tids:
            try:
                kids = open(f"/proc/{p}/task/{tid}/children").read().split()
            except OSError:
                continue
            for k in kids:
                out.append(int(k))
                todo.append(int(k))
    return out


class Sampler(threading.Thread):
    """Peak RSS of this process plus all its descendants, sampled every 50 ms."""

    def __init__(self):
        super().__init__(daemon=True)
        self.peak_kib = 0
        self.children_peak_kib = 0
        self._stop = threading.Event()

    def reset(self):
        self.peak_kib = 0
        self.children_peak_kib = 0

    def run(self):
        me = os.getpid()
        while not self._stop.wait(0.05):
            kids = sum(_status_kib(k, "VmRSS") for k in _descendants(me))
            self.children_peak_kib = max(self.children_peak_kib, kids)
            self.peak_kib = max(self.peak_kib, _status_kib(me, "VmRSS") + kids)

    def stop(self):
        self._stop.set()


class Stages:
    """Times and peak memory per stage; stages may not nest."""

    def __init__(self, sampler: Sampler, log=print):
        self.rows: dict[str, dict] = {}
        self.sampler = sampler
        self.log = log
        self.current: str | None = None

    def start(self, name: str):
        assert self.current is None, (self.current, name)
        self.current = name
        self.log(f"  [{_dt.datetime.now():%H:%M:%S}] {name} …")
        try:
            with open("/proc/self/clear_refs", "w") as fh:
                fh.write("5")  # reset VmHWM to the current RSS
        except OSError:
            pass
        self.sampler.reset()
        self._t0 = time.perf_counter()

    def stop(self):
        dt = time.perf_counter() - self._t0
        row = self.rows.setdefault(self.current, {"time_s": 0.0, "self_peak_mib": 0.0,
                                                  "tree_peak_mib": 0.0, "children_peak_mib": 0.0})
        row["time_s"] += dt
        row["self_peak_mib"] = max(row["self_peak_mib"], _status_kib("self", "VmHWM") / 1024)
        row["tree_peak_mib"] = max(row["tree_peak_mib"], self.sampler.peak_kib / 1024, row["self_peak_mib"])
        row["children_peak_mib"] = max(row["children_peak_mib"], self.sampler.children_peak_kib / 1024)
        self.current = None

    def wrap(self, name: str, fn):
        def timed(*a, **kw):
            self.start(name)
            try:
                return fn(*a, **kw)
            finally:
                self.stop()
        return timed


# --------------------------------------------------------------------------------------------
# the run
# --------------------------------------------------------------------------------------------

def run(n: int, base: Path, log=print) -> dict:
    import bridge.pipeline as pl

    sampler = Sampler()
    sampler.start()
    coarse_n = max(4, n // 4)
    out = {}

    def one(nn: int, folder: Path, stages: Stages | None):
        """`modebridge run` of the n × n model into ``folder`` (bridge.pipeline.run_model)."""
        folder.mkdir(parents=True, exist_ok=True)
        model_file = folder.parent / f"plate_{nn}.toml"
        model_file.write_text(model_text(nn, THREADS))
        if stages is None:
            prep, (outcome,) = pl.run_model(model_file, folder, ["calculix"])
            return outcome, prep
        from bridge.plugins import get_plugin_manager, get_solver
        import bridge.results as br

        cls = type(get_solver(get_plugin_manager(), "calculix"))
        steps = {"write_deck": "deck", "run": "solve", "read_results": "parse"}
        own = {name: cls.__dict__[name] for name in steps}  # the adapter class's three steps, timed
        for name, stage in steps.items():
            setattr(cls, name, stages.wrap(stage, own[name]))
        names = {"prepare": "mesh", "make_job": "job", "enforce": "parse", "to_result": "to_result",
                 "run_checks": "checks", "summarise": "checks", "save_result": "save"}
        saved = {k: getattr(pl, k) for k in names}
        saved_checksum = br.result_checksum
        try:
            for k, stage in names.items():
                setattr(pl, k, stages.wrap(stage, saved[k]))
            br.result_checksum = stages.wrap("save", saved_checksum)
            before = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
            t0 = time.perf_counter()
            prep, (outcome,) = pl.run_model(model_file, folder, ["calculix"])
            out["run_model_s"] = time.perf_counter() - t0
            after = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
        finally:
            for k, v in saved.items():
                setattr(pl, k, v)
            br.result_checksum = saved_checksum
            for name, fn in own.items():
                setattr(cls, name, fn)
        stages.rows["solve"]["solver_peak_mib"] = after / 1024
        stages.rows["solve"]["solver_peak_exact"] = after > before
        return outcome, prep

    log(f"coarse run n = {coarse_n} (for the compare stage)")
    t0 = time.perf_counter()
    coarse, _ = one(coarse_n, base / "coarse", None)
    if coarse.error is not None:
        raise SystemExit(f"coarse run failed: {coarse.error}")
    out["coarse"] = {"n": coarse_n, "wall_s": time.perf_counter() - t0,
                     "f1_hz": float(coarse.result.frequencies[0])}

    stages = Stages(sampler, log)
    log(f"big run n = {n}")
    big, prep = one(n, base / "big", stages)
    if big.error is not None:
        raise SystemExit(f"big run failed: {big.error}")
    out.update({"n": n, "nodes": int(prep.mesh.n_nodes), "elements": int(prep.mesh.cells.shape[0]),
                "free_dof": int(prep.free_dof),
                "frequencies_hz": [float(f) for f in big.result.frequencies],
                "checks": {c.name: c.status for c in big.checks}})
    del big, prep

    from bridge.compare.results import compare_results
    from bridge.results import load_result

    stages.start("compare")
    a = load_result(base / "big" / "calculix" / "result.vtkhdf")
    b = load_result(base / "coarse" / "calculix" / "result.vtkhdf")
    rc = compare_results(a, b, "fine", "coarse")
    stages.stop()
    d = rc.as_dict()
    out["compare"] = {"mapped": rc.mapped, "pairs": len(d.get("pairs", [])) if isinstance(d, dict) else None}
    del a, b, rc

    from bridge.report import build_report

    stages.start("report")
    html = build_report(base / "big")
    stages.stop()
    out["report_bytes"] = html.stat().st_size
    out["children_maxrss_after_report_mib"] = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024
    sampler.stop()
    out["stages"] = stages.rows
    for name in ("job.inp", "job.frd", "job.dat", "result.vtkhdf"):
        p = base / "big" / "calculix" / name
        out.setdefault("files_mb", {})[name] = round(p.stat().st_size / 1e6, 1) if p.is_file() else None
    return out


def table(r: dict) -> str:
    solve = r["stages"]["solve"]
    solver_peak = solve["solver_peak_mib"]
    lines = [f"{'stage':<10}{'time [s]':>10}{'share':>8}{'self peak [MiB]':>17}{'tree peak [MiB]':>17}",
             "-" * 62]
    tool_t = 0.0
    tool_peak = 0.0
    total = sum(v["time_s"] for v in r["stages"].values())
    for name in ("mesh", "job", "deck", "solve", "parse", "to_result", "checks", "save", "compare", "report"):
        row = r["stages"].get(name)
        if row is None:
            continue
        if name != "solve":
            tool_t += row["time_s"]
            tool_peak = max(tool_peak, row["tree_peak_mib"])
        self_peak = f"{row['self_peak_mib']:.0f}"
        tree = f"{row['tree_peak_mib']:.0f}"
        if name == "solve":
            tree = f"ccx {solver_peak:.0f}{'' if solve.get('solver_peak_exact') else '*'}"
        lines.append(f"{name:<10}{row['time_s']:>10.1f}{100 * row['time_s'] / total:>7.1f}%{self_peak:>17}{tree:>17}")
    lines.append("-" * 62)
    lines.append(f"tool (all but solve): {tool_t:.1f} s = {100 * tool_t / solve['time_s']:.1f} % of the solve; "
                 f"tool peak {tool_peak:.0f} MiB vs ccx peak {solver_peak:.0f} MiB "
                 f"({'≤' if tool_peak <= solver_peak else '>'} solver)")
    return "\n".join(lines)


def main(argv=None) -> int:
    global THREADS
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--n", type=int, default=410, help="divisions n × n (default 410: ≈ 1.0M free DOF)")
    ap.add_argument("--keep", type=Path, help="keep the run folders here")
    ap.add_argument("--threads", type=int, default=THREADS, help="[run] threads of both runs (default 2)")
    ap.add_argument("--json", type=Path, help="write the figures as JSON")
    args = ap.parse_args(argv)
    THREADS = args.threads
    if shutil.which("ccx") is None:
        print("ccx not found on PATH", file=sys.stderr)
        return 2
    t0 = time.perf_counter()
    import bridge.pipeline  # noqa: F401  imports before any stage is timed
    import bridge.report  # noqa: F401
    import gmsh  # noqa: F401
    import h5py  # noqa: F401
    imports = time.perf_counter() - t0
    print(f"{_dt.datetime.now(_dt.timezone.utc):%Y-%m-%d %H:%M} UTC, load {os.getloadavg()}, "
          f"imports {imports:.2f} s", flush=True)
    tmp = None
    base = args.keep
    if base is None:
        tmp = tempfile.TemporaryDirectory(prefix="bench_scale_")
        base = Path(tmp.name)
    elif base.exists():
        shutil.rmtree(base)
    base.mkdir(parents=True, exist_ok=True)
    try:
        r = run(args.n, base, log=lambda s: print(s, flush=True))
    finally:
        if tmp is not None:
            tmp.cleanup()
    r["load_after"] = os.getloadavg()
    print(f"\n{r['nodes']} nodes, {r['elements']} quad4 (S4), {r['free_dof']} free DOF, {MODES} modes, "
          f"threads = {THREADS}; f1..f3 = {', '.join(f'{f:.2f}' for f in r['frequencies_hz'][:3])} Hz")
    print(f"coarse run for compare: n = {r['coarse']['n']}, f1 = {r['coarse']['f1_hz']:.2f} Hz; "
          f"report {r['report_bytes'] / 1e6:.2f} MB; files {r['files_mb']}")
    print(f"checks: {r['checks']}")
    print(table(r))
    print(f"load after: {r['load_after']}")
    if args.json:
        args.json.write_text(json.dumps(r, indent=2))
    return 0


if __name__ == "__main__":
    sys.exit(main())
