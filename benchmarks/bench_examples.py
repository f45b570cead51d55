#!/usr/bin/env python
"""The demo and every example on every installed solver, compared with ``compare``'s default
thresholds (issue 11: "the demo and every example run with three solvers in one command and
compare within the default thresholds").

Too slow for the test suite (the refined clamped variant alone is ≈ 37k DOF on Kratos and
OpenSees), so it is a script: it runs

    modebridge run  examples/cover_panel.toml           --solver all
    modebridge vary examples/cover_panel_supports.toml  --solver all

through the library (``run_model``, ``run_variant_study``), compares every solver with the first
(CalculiX) on each model and variant, prints max |Δf|, min MAC and the verdict per pair, and
exits 1 when one fails. ``--json FILE`` writes the table; ``--out DIR`` keeps the runs (a second
call with the same DIR reuses the study's finished runs).

    python benchmarks/bench_examples.py [--out DIR] [--json FILE]
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", type=Path, default=None)
    ap.add_argument("--json", type=Path, default=None)
    args = ap.parse_args()
    from bridge.compare.results import Thresholds, compare_results
    from bridge.pipeline import run_model
    from bridge.study.vary import run_variant_study

    out = args.out or Path(tempfile.mkdtemp(prefix="bench_examples-"))
    rows = []
    t0 = time.perf_counter()
    _, outs = run_model(ROOT / "examples" / "cover_panel.toml", out / "demo", solvers=["all"])
    ref = outs[0]
    for o in outs[1:]:
        c = compare_results(ref.result, o.result, ref.solver, o.solver, Thresholds())
        rows.append(_row("cover_panel", ref.solver, o.solver, c.as_dict()))
    t1 = time.perf_counter()
    _, across = run_variant_study(ROOT / "examples" / "cover_panel_supports.toml", out / "vary", ["all"])
    for a in across:
        d = a.comparison.as_dict() if a.comparison is not None else None
        rows.append(_row(f"cover_panel_supports:{a.variant}", a.reference, a.solver, d, a.note))
    t2 = time.perf_counter()
    print(f"{'model / variant':34} {'solver':9} {'modes':>5} {'max |df|':>9} {'min MAC':>8}  verdict")
    for r in rows:
        print(f"{r['model']:34} {r['solver']:9} {r['modes']:5d} {100 * r['max_df']:8.2f}% {r['min_mac']:8.4f}  "
              f"{'pass' if r['passed'] else 'FAIL ' + r['note']}")
    print(f"wall: demo {t1 - t0:.0f} s, variant study {t2 - t1:.0f} s; runs in {out}")
    if args.json:
        args.json.write_text(json.dumps({"rows": rows, "wall_s": {"demo": t1 - t0, "vary": t2 - t1}}, indent=2))
    return 0 if all(r["passed"] for r in rows) else 1


def _row(model, ref, solver, d, note=""):
    pairs = (d or {}).get("pairs") or []
    return {"model": model, "reference": ref, "solver": solver, "modes": len(pairs),
            "max_df": max((abs(p["df"]) for p in pairs), default=float("nan")),
            "min_mac": min((p["mac"] for p in pairs), default=float("nan")),
            "passed": bool(d and d.get("passed")), "note": note}


if __name__ == "__main__":
    sys.exit(main())
