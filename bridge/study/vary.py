"""Variants of one model (other supports, thickness, material, masses): modes paired with the
baseline by shape, frequency shifts and MAC mode by mode.

A study file (TOML)::

    model = "panel.toml"            # the baseline, relative to the study file
    solver = "calculix"             # optional; default: the model's first solver ("all": every
                                    # installed solver that can take the model)
    # scheduler = "tcp://host:8786" # optional: run on a Dask cluster

    [[variant]]
    name = "free"
    [variant.set]                   # keys replace the model's (tables are merged key by key)
    supports = []

    [[variant]]
    name = "thick"
    set = { section = { thickness = "3 mm" } }

With several solvers (``--solver`` repeated, or ``all``) every variant runs on each, each solver's
variants are paired with its own baseline, and each variant's results are compared across the
solvers (the first is the reference) with the default thresholds of ``modebridge compare``.
"""

from __future__ import annotations

import copy
import re
from dataclasses import dataclass, field
from pathlib import Path

from ..checks import rigid_body_count, worst_status
from ..compare.mapping import MappingError
from ..compare.results import ResultComparison, Thresholds, compare_results
from ..errors import BridgeError, ModelError
from ..model import NAME_PATTERN, parse_model
from ..results import load_result
from .converge import read_model_dict
from .executor import Task, TaskOutcome, run_tasks

__all__ = ["VariantResult", "SolverVariants", "AcrossSolvers", "apply_variant", "run_variants",
           "run_variant_study", "load_study"]

_KEYS = {"model", "solver", "scheduler", "variant"}


def apply_variant(base: dict, patch: dict) -> dict:
    """Deep-merge ``patch`` into a copy of ``base``: tables merge key by key, anything else replaces."""
    out = copy.deepcopy(base)
    for k, v in patch.items():
        if isinstance(v, dict) and isinstance(out.get(k), dict):
            out[k] = apply_variant(out[k], v)
        else:
            out[k] = copy.deepcopy(v)
    return out


@dataclass
class VariantResult:
    name: str
    outcome: TaskOutcome
    rigid_body_modes: int = 0
    comparison: ResultComparison | None = None
    note: str = ""
    frequencies: list[float] = field(default_factory=list)
    checks: list[dict] = field(default_factory=list)  #: the run's own check verdicts

    @property
    def status(self) -> str:
        """"fail" when the run failed or one of its checks failed, else the worst check status."""
        if not self.outcome.ok:
            return "fail"
        return worst_status(self.checks)

    def as_dict(self) -> dict:
        d = {"name": self.name, "state": self.outcome.state, "error": self.outcome.error,
             "folder": str(self.outcome.folder), "rigid_body_modes": self.rigid_body_modes,
             "frequencies_hz": self.frequencies, "note": self.note, "status": self.status,
             "checks": self.checks}
        if self.comparison is not None:
            c = self.comparison.as_dict()
            d["pairs"] = [{"baseline_mode": p["a"], "variant_mode": p["b"], "f_baseline_hz": p["fa"],
                           "f_variant_hz": p["fb"], "shift": p["df"], "mac": p["mac"]} for p in c["pairs"]]
            d["clusters"] = c["clusters"]
            d["unpaired_variant_modes"] = c["unpaired_b"]
            d["unpaired_baseline_modes"] = c["unpaired_a"]
        return d


def load_study(path: Path) -> tuple[dict, Path, list[tuple[str, dict]], str | None, str | None]:
    data = read_model_dict(path, "study file")
    unknown = set(data) - _KEYS
    if unknown:
        raise ModelError(f"unknown key; accepted here: {', '.join(sorted(_KEYS))}", source=path,
                         field=sorted(unknown)[0])
    if "model" not in data or not isinstance(data["model"], str):
        raise ModelError("required: the baseline model file, e.g. model = \"panel.toml\"", source=path, field="model")
    model_path = (path.parent / data["model"]).resolve()
    for key in ("solver", "scheduler"):
        if key in data and not isinstance(data[key], str):
            raise ModelError("must be a string", source=path, field=key)
    listed = data.get("variant", [])
    if not isinstance(listed, list):
        raise ModelError("must be a list of tables: write each variant as [[variant]] with name and set",
                         source=path, field="variant")
    base = read_model_dict(model_path)
    variants = []
    for i, v in enumerate(listed):
        if not isinstance(v, dict) or set(v) - {"name", "set"} or "name" not in v:
            raise ModelError("each variant has 'name' and 'set'", source=path, field=f"variant[{i}]")
        if not isinstance(v.get("set", {}), dict):
            raise ModelError("must be a table of model keys, e.g. set = { section = { thickness = \"2 mm\" } }",
                             source=path, field=f"variant[{i}].set")
        if not re.match(NAME_PATTERN, str(v["name"])) or v["name"] == "baseline":
            raise ModelError("not an accepted variant name (letters, digits, _ or -; not 'baseline')",
                             source=path, field=f"variant[{i}].name")
        patched = apply_variant(base, v.get("set", {}))
        parse_model(patched, source=f"{path} variant '{v['name']}'")  # validate each variant up front
        variants.append((v["name"], patched))
    if not variants:
        raise ModelError("no [[variant]] given", source=path, field="variant")
    return base, model_path, variants, data.get("solver"), data.get("scheduler")


def run_variants(study_path: str | Path, study_dir: str | Path, solver: str | None = None,
                 workers: int | None = None, threads: int | None = None, scheduler: str | None = None,
                 progress=lambda label, state: None) -> tuple[VariantResult, list[VariantResult]]:
    """One solver's variant study: its baseline and its variants (the first of several solvers)."""
    studies, _ = run_variant_study(study_path, study_dir, [solver] if solver else None, workers, threads,
                                   scheduler, progress)
    return studies[0].baseline, studies[0].variants


@dataclass
class SolverVariants:
    """The variant study on one solver: each variant paired with this solver's own baseline."""

    solver: str
    baseline: VariantResult
    variants: list[VariantResult]

    def as_dict(self) -> dict:
        return {"solver": self.solver, "baseline": self.baseline.as_dict(),
                "variants": [v.as_dict() for v in self.variants]}


@dataclass
class AcrossSolvers:
    """One variant (or the baseline) on another solver against the reference solver's run."""

    variant: str
    reference: str  #: the first solver
    solver: str
    comparison: ResultComparison | None = None
    note: str = ""  #: why there is no comparison

    @property
    def passed(self) -> bool:
        return self.comparison is not None and self.comparison.passed

    def as_dict(self) -> dict:
        d = {"variant": self.variant, "reference": self.reference, "solver": self.solver,
             "passed": self.passed, "note": self.note}
        if self.comparison is not None:
            c = self.comparison
            d["thresholds"] = {"min_mac": c.thresholds.min_mac, "max_df": c.thresholds.max_df}
            # from the pairs themselves (0-based indices), whatever the numbering of their dicts
            d["pairs"] = [{"reference_mode": p.a + 1, "solver_mode": p.b + 1, "f_reference_hz": float(p.fa),
                           "f_solver_hz": float(p.fb), "df": float(p.df), "mac": float(p.mac), "ok": v["ok"]}
                          for p, v in zip(c.comparison.pairs, c.pair_verdicts())]
            d["unpaired_reference_modes"] = [int(i) + 1 for i in c.comparison.unpaired_a]
        return d


def run_variant_study(study_path: str | Path, study_dir: str | Path, solvers: list[str] | None = None,
                      workers: int | None = None, threads: int | None = None, scheduler: str | None = None,
                      progress=lambda label, state: None) -> tuple[list[SolverVariants], list[AcrossSolvers]]:
    """Every variant on every solver named (``all``: every installed solver that can take the
    model), all runs in one go; per solver the variants against its baseline, and per variant
    each solver against the first (the reference)."""
    from ..pipeline import solver_names

    study_path = Path(study_path)
    base, model_path, variants, solver_file, sched_file = load_study(study_path)
    model = parse_model(base, source=model_path)
    solvers = solver_names(model, solvers or ([solver_file] if solver_file else None), model_path)
    mdir = str(model_path.parent)
    tasks = []
    for solver in solvers:
        tasks.append(Task(f"baseline / {solver}", base, mdir, solver, extra={"variant": "baseline"},
                          model_file=str(model_path)))
        tasks += [Task(f"{name} / {solver}", raw, mdir, solver, extra={"variant": name},
                       model_file=str(model_path)) for name, raw in variants]
    outcomes = run_tasks(tasks, study_dir, workers, threads, scheduler or sched_file, progress)
    per = len(variants) + 1
    studies, loaded = [], []
    for k, solver in enumerate(solvers):
        baseline, results, res = _solver_study(solver, variants, outcomes[k * per:(k + 1) * per])
        studies.append(SolverVariants(solver, baseline, results))
        loaded.append(res)
    return studies, _across(studies, loaded)


def _solver_study(solver, variants, outcomes):
    base_out = outcomes[0]
    if not base_out.ok:
        raise BridgeError(f"the baseline run on '{solver}' failed: {base_out.error}")
    base_res = load_result(base_out.result_path)
    baseline = VariantResult("baseline", base_out, rigid_body_count(base_res.frequencies, base_res.eigenvalues),
                             frequencies=[float(f) for f in base_res.frequencies],
                             checks=list((base_out.summary or {}).get("checks") or []))
    results, loaded = [], {"baseline": base_res}
    for (name, _), o in zip(variants, outcomes[1:]):
        vr = VariantResult(name, o)
        if o.ok:
            r = load_result(o.result_path)
            loaded[name] = r
            vr.rigid_body_modes = rigid_body_count(r.frequencies, r.eigenvalues)
            vr.frequencies = [float(f) for f in r.frequencies]
            vr.checks = list((o.summary or {}).get("checks") or [])
            try:
                # variants are different models on purpose
                vr.comparison = compare_results(base_res, r, "baseline", name, Thresholds(), force=True)
            except MappingError as exc:
                vr.note = f"mode shapes not compared: {exc}"
        results.append(vr)
    return baseline, results, loaded


def _across(studies: list[SolverVariants], loaded: list[dict]) -> list[AcrossSolvers]:
    """Each variant on each further solver against the first solver's run of the same variant:
    the same model, so ``compare``'s default thresholds apply (MAC ≥ 0.9, |Δf| ≤ 1 %)."""
    out = []
    if len(studies) < 2:
        return out
    ref, ref_res = studies[0].solver, loaded[0]
    for st, res in zip(studies[1:], loaded[1:]):
        for name in ["baseline", *(v.name for v in st.variants)]:
            a = AcrossSolvers(name, ref, st.solver)
            if name not in ref_res or name not in res:
                a.note = "a run failed: nothing to compare"
            else:
                try:
                    a.comparison = compare_results(ref_res[name], res[name], ref, st.solver, Thresholds())
                except BridgeError as exc:
                    a.note = f"not compared: {exc}"
            out.append(a)
    return out
