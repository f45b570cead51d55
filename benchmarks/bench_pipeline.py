#!/usr/bin/env python
"""Stage timings of the modebridge pipeline around one CalculiX solve.

The case is the clamped steel plate of the tests (``tests/conftest.py::plate_model``:
100 × 100 × 2 mm, E = 210 GPa, ν = 0.3, ρ = 7850 kg/m³, all four edges clamped), meshed with
quad8 (CalculiX S8R) shells, 10 modes, ``run.threads = 2``. For each size the pipeline is run
once, in this process, stage by stage exactly as ``bridge.pipeline.run_one`` does it, and each
stage is timed with ``time.perf_counter``:

    mesh      bridge.pipeline.prepare (gmsh meshing + constraints + masses)
    deck      adapter.write_deck
    solve     adapter.run (the ccx subprocess)
    parse     adapter.read_results (.dat + .frd, and the ``ccx -v`` version probe it makes)
    to_result bridge.pipeline.to_result (node reordering, SI conversion and modebridge's own
              consistent-mass effective masses)
    save      bridge.results.save_result (result.vtkhdf)

overhead = mesh + deck + parse + to_result + save, reported as a fraction of the solve
(target ≤ 5 %). Also timed, reported, but outside that definition: make_job, the mesh.vtu
write that ``run_model`` does, and the checks/summary step of ``run_one``; the "full"
fraction includes them.

Parse memory: after the timed parse, ``read_results`` is run a second time under
``tracemalloc`` (so the tracing does not slow the timed run); its peak traced allocation is
compared with the ``nbytes`` of the arrays in the returned ``RawModes`` (target ≤ 2×).
numpy reports its array buffers to tracemalloc, so the peak covers them.

Imports (gmsh, h5py, scipy, ...) are done once before any stage is timed and reported apart.

    python benchmarks/bench_pipeline.py                     # both sizes
    python benchmarks/bench_pipeline.py --sizes 50k --json out.json --keep runs/bench
    python benchmarks/bench_pipeline.py --sizes 50k --profile   # cProfile of the overhead stages
"""

from __future__ import annotations

import argparse
import cProfile
import datetime as _dt
import importlib.util
import io
import json
import math
import os
import platform
import pstats
import re
import resource
import shutil
import sys
import tempfile
import time
import tomllib
import tracemalloc
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]

MODES = 10
THREADS = 2
OVERHEAD_TARGET = 0.05   # overhead / solve
MEMORY_TARGET = 2.0      # parse peak / returned nbytes
FAMILY = "quad8"

# --------------------------------------------------------------------------------------------
# case
# --------------------------------------------------------------------------------------------


def _plate_model_text(n: int) -> str:
    """The test suite's plate model (tests/conftest.py::plate_model), n × n quad8, threads = 2."""
    spec = importlib.util.spec_from_file_location("_modebridge_conftest", ROOT / "tests" / "conftest.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)  # type: ignore[union-attr]
    return mod.plate_model(FAMILY, divisions=(n, n), supports="clamped", modes=MODES,
                           extra=f"\n[run]\nthreads = {THREADS}\ntimeout = \"3600 s\"\n")


def free_dof(n: int) -> int:
    """Free DOF of the clamped n × n quad8 plate: 6 × (nodes − the 8n rim nodes)."""
    return 6 * (3 * n * n + 4 * n + 1 - 8 * n)


def divisions_for(label: str) -> int:
    """'50k' -> the n whose clamped n × n quad8 plate has free DOF closest to 50 000."""
    m = re.fullmatch(r"\s*(\d+(?:\.\d+)?)\s*([kKmM]?)\s*", label)
    if not m:
        raise argparse.ArgumentTypeError(f"size {label!r}: write e.g. 50k or 200k")
    target = float(m.group(1)) * {"": 1, "k": 1e3, "m": 1e6}[m.group(2).lower()]
    # 6(3n² − 4n + 1) = target
    n0 = (4 + math.sqrt(16 - 12 * (1 - target / 6))) / 6
    cands = [max(1, int(math.floor(n0))), int(math.ceil(n0))]
    return min(cands, key=lambda n: abs(free_dof(n) - target))


# --------------------------------------------------------------------------------------------
# environment
# --------------------------------------------------------------------------------------------


def _cpu_model() -> str:
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.lower().startswith("model name"):
                return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or "unknown"


def environment() -> dict:
    import gmsh
    import h5py
    import scipy

    from bridge import __version__
    from modebridge_calculix import runner

    mem = None
    try:
        for line in Path("/proc/meminfo").read_text().splitlines():
            if line.startswith("MemTotal:"):
                mem = round(int(line.split()[1]) / 2**20, 1)
    except OSError:
        pass
    git = {}
    try:
        import subprocess

        def _git(*a):
            return subprocess.run(["git", *a], cwd=ROOT, capture_output=True, text=True, timeout=20).stdout
        git = {"commit": _git("rev-parse", "--short", "HEAD").strip(),
               "modified": [ln[3:] for ln in _git("status", "--porcelain", "--untracked-files=no").splitlines()]}
    except (OSError, ValueError):
        pass
    return {
        "date": _dt.datetime.now().astimezone().isoformat(timespec="seconds"),
        "git": git,
        "nproc": os.cpu_count(), "cpu_model": _cpu_model(), "mem_total_gib": mem,
        "platform": platform.platform(), "python": platform.python_version(),
        "numpy": np.__version__, "scipy": scipy.__version__, "gmsh": gmsh.__version__,
        "h5py": h5py.__version__, "modebridge": __version__,
        "ccx": runner.find_ccx(), "ccx_version": runner.ccx_version(),
        "modes": MODES, "threads": THREADS, "family": FAMILY, "element": "S8R",
    }


# --------------------------------------------------------------------------------------------
# one size
# --------------------------------------------------------------------------------------------


def _nbytes(raw) -> int:
    total = 0
    for value in vars(raw).values():
        if isinstance(value, np.ndarray):
            total += value.nbytes
    return total


def _ccx_equations(log: Path) -> int | None:
    try:
        text = log.read_text(errors="replace")
    except OSError:
        return None
    m = re.search(r"number of equations\s*\n\s*(\d+)", text)
    return int(m.group(1)) if m else None


def _size(p: Path) -> int | None:
    return p.stat().st_size if p.is_file() else None


def run_size(label: str, n: int, out: Path, profile: bool, log=print) -> dict:
    from bridge import __version__
    from bridge.checks import run_checks
    from bridge.io import atomic_write_text, inside
    from bridge.meshing.gmsh import save_mesh
    from bridge.model import parse_model
    from bridge.pipeline import RunOutcome, make_job, prepare, resolve_solvers, summarise, to_result
    from bridge.results import save_result

    out.mkdir(parents=True, exist_ok=True)
    model = parse_model(tomllib.loads(_plate_model_text(n)))
    assert model.run.threads == THREADS and model.analysis.modes == MODES
    ((adapter, _choice),) = resolve_solvers(model, ["calculix"])  # (adapter, element choice) pairs
    t: dict[str, float] = {}

    def clock(name, fn, *a, **kw):
        t0 = time.perf_counter()
        value = fn(*a, **kw)
        t[name] = time.perf_counter() - t0
        return value

    log(f"[{label}] n = {n}: meshing")
    prep = clock("mesh", prepare, model, None)
    clock("mesh_vtu", save_mesh, prep.mesh, out / "mesh.vtu")
    job = clock("job", make_job, prep)
    folder = inside(out, adapter.name)
    folder.mkdir(parents=True, exist_ok=True)
    clock("deck", adapter.write_deck, job, folder)
    log(f"[{label}] {prep.mesh.n_nodes} nodes, {prep.free_dof} free DOF: solving with ccx "
        f"({THREADS} threads, {MODES} modes)")
    children_before = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    record = clock("solve", adapter.run, job, folder)
    children_after = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    log(f"[{label}] solve {t['solve']:.1f} s; parsing")
    raw = clock("parse", adapter.read_results, job, folder, record)
    result = clock("to_result", to_result, raw, job, prep)

    def finish():  # what run_one does between to_result and save_result, plus summary.json
        result.metadata.update({
            "provenance": {"model_name": model.name, "model_hash": job.model_hash,
                           "modebridge_version": __version__, "solver": adapter.name,
                           "solver_version": raw.solver_version, "element_type": raw.element_type,
                           "command": record.command, "wall_time_s": t["solve"],
                           "created": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
                           "solver_warnings": list(record.warnings) + list(raw.warnings)},
            "mesh": prep.mesh_summary(), "model": model.canonical_dict()})
        outcome = RunOutcome(adapter.name, folder, result=result)
        outcome.checks = run_checks(model, result)
        result.metadata["checks"] = [c.as_dict() for c in outcome.checks]
        outcome.summary = summarise(outcome, prep)
        return outcome

    outcome = clock("checks", finish)
    clock("save", save_result, result, folder / "result.vtkhdf")
    t0 = time.perf_counter()
    atomic_write_text(folder / "summary.json", json.dumps(outcome.summary, indent=2))
    t["checks"] += time.perf_counter() - t0

    # parse memory: a second, traced read (not timed)
    log(f"[{label}] parse memory (tracemalloc)")
    tracemalloc.start()
    tracemalloc.reset_peak()
    base, _ = tracemalloc.get_traced_memory()
    raw2 = adapter.read_results(job, folder, record)
    current, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    returned = _nbytes(raw2)
    peak_parse = peak - base
    del raw2

    core = ("mesh", "deck", "parse", "to_result", "save")
    overhead = sum(t[k] for k in core)
    full = overhead + t["job"] + t["mesh_vtu"] + t["checks"]
    row = {
        "label": label, "divisions": n, "nodes": prep.mesh.n_nodes,
        "elements": int(prep.mesh.cells.shape[0]), "free_dof": prep.free_dof,
        "ccx_equations": _ccx_equations(folder / "job.log"),
        "f1_hz": float(result.frequencies[0]), "f2_hz": float(result.frequencies[1]),
        "checks_failed": [c.name for c in outcome.checks if getattr(c, "status", "ok") == "fail"],
        "times_s": {k: round(v, 4) for k, v in t.items()},
        "overhead_s": round(overhead, 4), "overhead_fraction": overhead / t["solve"],
        "overhead_target": OVERHEAD_TARGET, "overhead_met": overhead / t["solve"] <= OVERHEAD_TARGET,
        "full_overhead_s": round(full, 4), "full_overhead_fraction": full / t["solve"],
        "parse_peak_bytes": peak_parse, "parse_returned_nbytes": returned,
        "parse_memory_ratio": peak_parse / returned, "memory_target": MEMORY_TARGET,
        "memory_met": peak_parse / returned <= MEMORY_TARGET,
        # RUSAGE_CHILDREN is the max over all children so far: exact for the largest size run yet
        "ccx_peak_rss_mib": round(children_after / 1024, 1),
        "ccx_peak_rss_exact": children_after > children_before,
        "files_bytes": {name: _size(folder / name) for name in
                        ("job.inp", "job.frd", "job.dat", "result.vtkhdf")} | {"mesh.vtu": _size(out / "mesh.vtu")},
    }
    if profile:
        row["profile"] = profile_stages(adapter, model, prep, job, folder, record, raw, result)
    return row


def profile_stages(adapter, model, prep, job, folder, record, raw, result, top: int = 8) -> dict:
    """cProfile of each overhead stage, re-run after the timed run; top functions by tottime."""
    from bridge.pipeline import prepare, to_result
    from bridge.results import save_result

    scratch = folder / "profile_deck"  # write_deck clears job.dat/.frd: keep it off the run folder
    scratch.mkdir(exist_ok=True)
    runs = {
        "mesh": lambda: prepare(model, None),
        "deck": lambda: adapter.write_deck(job, scratch),
        "parse": lambda: adapter.read_results(job, folder, record),
        "to_result": lambda: to_result(raw, job, prep),
        "save": lambda: save_result(result, folder / "result.vtkhdf"),
    }
    report = {}
    for name, fn in runs.items():
        pr = cProfile.Profile()
        pr.enable()
        fn()
        pr.disable()
        st = pstats.Stats(pr)
        total = st.total_tt
        rows = []
        for (file, line, func), (cc, nc, tt, ct, _) in sorted(st.stats.items(), key=lambda kv: -kv[1][2])[:top]:
            short = file if file.startswith("~") else "/".join(Path(file).parts[-2:])
            rows.append({"function": f"{short}:{line}({func})", "calls": nc,
                         "tottime_s": round(tt, 4), "cumtime_s": round(ct, 4)})
        report[name] = {"total_s": round(total, 4), "top_by_tottime": rows}
    shutil.rmtree(scratch, ignore_errors=True)
    return report


# --------------------------------------------------------------------------------------------
# report
# --------------------------------------------------------------------------------------------

_COLS = [("mesh", "mesh"), ("deck", "deck"), ("solve", "ccx solve"), ("parse", "parse"),
         ("to_result", "to_result"), ("save", "save")]
_EXTRA = [("job", "make_job"), ("mesh_vtu", "mesh.vtu"), ("checks", "checks+summary")]


def table(rows: list[dict]) -> str:
    lines = []
    head = f"{'stage':<48}" + "".join(f"{r['label']:>14}" for r in rows)
    lines += [head, "-" * len(head)]

    def line(name, fmt):
        lines.append(f"{name:<48}" + "".join(f"{fmt(r):>14}" for r in rows))

    line("divisions n × n", lambda r: f"{r['divisions']}×{r['divisions']}")
    line("nodes / elements", lambda r: f"{r['nodes']}/{r['elements']}")
    line("free DOF", lambda r: f"{r['free_dof']}")
    line("ccx equations (from its log)", lambda r: f"{r['ccx_equations']}")
    line("f1 / f2 [Hz]", lambda r: f"{r['f1_hz']:.0f}/{r['f2_hz']:.0f}")
    for key, name in _COLS:
        line(f"{name} [s]", lambda r, k=key: f"{r['times_s'][k]:.3f}")
    line("overhead [s] (mesh+deck+parse+to_result+save)", lambda r: f"{r['overhead_s']:.3f}")
    line("overhead / solve (target <= 5 %)",
         lambda r: f"{100 * r['overhead_fraction']:.2f}% {'met' if r['overhead_met'] else 'MISSED'}")
    for key, name in _EXTRA:
        line(f"  not in overhead: {name} [s]", lambda r, k=key: f"{r['times_s'][k]:.3f}")
    line("full overhead / solve (all of the above)", lambda r: f"{100 * r['full_overhead_fraction']:.2f}%")
    line("parse peak (tracemalloc) [MiB]", lambda r: f"{r['parse_peak_bytes'] / 2**20:.1f}")
    line("parse returned nbytes [MiB]", lambda r: f"{r['parse_returned_nbytes'] / 2**20:.1f}")
    line("peak / returned (target <= 2x)",
         lambda r: f"{r['parse_memory_ratio']:.2f}x {'met' if r['memory_met'] else 'MISSED'}")
    line(".frd size [MiB]", lambda r: f"{(r['files_bytes']['job.frd'] or 0) / 2**20:.1f}")
    line("ccx peak RSS [MiB] (* = max of earlier child)",
         lambda r: f"{r['ccx_peak_rss_mib']:.0f}{'' if r['ccx_peak_rss_exact'] else '*'}")
    return "\n".join(lines)


def profile_text(rows: list[dict]) -> str:
    out = []
    for r in rows:
        for stage, p in r.get("profile", {}).items():
            out.append(f"\n[{r['label']}] cProfile of {stage} ({p['total_s']:.3f} s under the profiler), "
                       "top by own time:")
            for f in p["top_by_tottime"]:
                out.append(f"  {f['tottime_s']:8.3f} s own {f['cumtime_s']:8.3f} s cum "
                           f"{f['calls']:>8}  {f['function']}")
    return "\n".join(out)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0],
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--sizes", default="50k,200k",
                    help="comma-separated free-DOF targets (default 50k,200k)")
    ap.add_argument("--json", type=Path, metavar="PATH", help="write the results as JSON")
    ap.add_argument("--keep", type=Path, metavar="DIR", help="keep the run folders in DIR/<size>")
    ap.add_argument("--profile", action="store_true",
                    help="after the timed run, cProfile each overhead stage (re-run, not timed)")
    args = ap.parse_args(argv)
    sizes = [(s.strip(), divisions_for(s)) for s in args.sizes.split(",") if s.strip()]

    t0 = time.perf_counter()  # imports are timed apart, before any stage
    import bridge.pipeline  # noqa: F401
    import gmsh  # noqa: F401
    import h5py  # noqa: F401
    import meshio  # noqa: F401
    import scipy.sparse  # noqa: F401

    import bridge.checks, bridge.fem, bridge.massprops, bridge.meshing.gmsh, bridge.results  # noqa: E401,F401
    imports = time.perf_counter() - t0
    env = environment()
    if env["ccx"] is None:
        print("ccx not found on PATH", file=sys.stderr)
        return 2
    env["imports_s"] = round(imports, 3)
    print(f"modebridge {env['modebridge']}, ccx {env['ccx_version']}, {env['nproc']} × {env['cpu_model']}, "
          f"python {env['python']}; {MODES} modes, threads = {THREADS}, S8R (quad8)")
    print(f"one-off imports before timing: {imports:.2f} s", flush=True)

    tmp = None
    base = args.keep
    if base is None:
        tmp = tempfile.TemporaryDirectory(prefix="bench_pipeline_")
        base = Path(tmp.name)
    rows = []
    try:
        for label, n in sizes:
            out = base / label
            if out.exists() and args.keep is not None:
                shutil.rmtree(out)
            rows.append(run_size(label, n, out, args.profile, log=lambda s: print(s, flush=True)))
    finally:
        if tmp is not None:
            tmp.cleanup()

    print()
    print(table(rows))
    if args.profile:
        print(profile_text(rows))
    missed = [f"{r['label']}: overhead {100 * r['overhead_fraction']:.2f}% > 5%" for r in rows if not r["overhead_met"]]
    missed += [f"{r['label']}: parse memory {r['parse_memory_ratio']:.2f}x > 2x" for r in rows if not r["memory_met"]]
    print("\ntargets: " + ("all met" if not missed else "MISSED — " + "; ".join(missed)))
    if args.json:
        args.json.parent.mkdir(parents=True, exist_ok=True)
        args.json.write_text(json.dumps({"environment": env, "sizes": rows}, indent=2) + "\n")
        print(f"wrote {args.json}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
