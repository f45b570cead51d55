"""Variants of one model (other supports, thickness, material, masses): modes paired with the
baseline by shape, frequency shifts and MAC mode by mode.

A study file (TOML)::

    model = "panel.toml"            # the baseline, relative to the study file
    solver = "calculix"             # optional; default: the model's first solver
    # scheduler = "tcp://host:8786" # optional: run on a Dask cluster

    [[variant]]
    name = "free"
    [variant.set]                   # keys replace the model's (tables are merged key by key)
    supports = []

    [[variant]]
    name = "thick"
    set = { section = { thickness = "3 mm" } }
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

__all__ = ["VariantResult", "apply_variant", "run_variants", "load_study"]

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
    study_path = Path(study_path)
    base, model_path, variants, solver_file, sched_file = load_study(study_path)
    model = parse_model(base, source=model_path)
    solver = solver or solver_file or model.run.solvers[0]
    mdir = str(model_path.parent)
    tasks = [Task(f"baseline / {solver}", base, mdir, solver, extra={"variant": "baseline"},
                  model_file=str(model_path))]
    tasks += [Task(f"{name} / {solver}", raw, mdir, solver, extra={"variant": name},
                   model_file=str(model_path)) for name, raw in variants]
    outcomes = run_tasks(tasks, study_dir, workers, threads, scheduler or sched_file, progress)
    base_out = outcomes[0]
    if not base_out.ok:
        raise BridgeError(f"the baseline run failed: {base_out.error}")
    base_res = load_result(base_out.result_path)
    baseline = VariantResult("baseline", base_out, rigid_body_count(base_res.frequencies, base_res.eigenvalues),
                             frequencies=[float(f) for f in base_res.frequencies],
                             checks=list((base_out.summary or {}).get("checks") or []))
    results = []
    for (name, _), o in zip(variants, outcomes[1:]):
        vr = VariantResult(name, o)
        if o.ok:
            r = load_result(o.result_path)
            vr.rigid_body_modes = rigid_body_count(r.frequencies, r.eigenvalues)
            vr.frequencies = [float(f) for f in r.frequencies]
            vr.checks = list((o.summary or {}).get("checks") or [])
            try:
                # variants are different models on purpose
                vr.comparison = compare_results(base_res, r, "baseline", name, Thresholds(), force=True)
            except MappingError as exc:
                vr.note = f"mode shapes not compared: {exc}"
        results.append(vr)
    return baseline, results
