"""The verification suite: benchmark cases with published targets, run on every solver.

A case is a folder holding ``model.toml`` (an ordinary model) and ``case.toml``::

    title = "…"
    source = "…"                      # where the targets come from ("[from memory]" if recalled)
    targets_hz = [ … ]                # the compared modes, ascending
    tolerance = 0.015                 # a fraction, or one per target
    tolerance_note = "why this tolerance"
    skip_rigid = true                 # leave out near-zero modes first (free bodies)
    mode_filter = { kind = "share", component = "z", min_share = 0.9 }
    #   or { kind = "effective_mass", direction = "z", min_fraction = 0.001 }
    #   or { kind = "axially_uniform", axis = "z", min_share = 0.95 }  (shells of revolution:
    #      modes whose radial motion does not vary along the axis, e.g. ring modes of a tube)
    families = ["quad8", "quad4"]     # element families in order of preference
    [mesh_by_family.quad4]            # mesh settings to use with a fallback family
    divisions = [40, 40]
    matrix = "plate bending, clamped" # optional: part of the element × solver matrix, as this
    [matrix_mesh.tri3]                # the stated mesh of each family in the matrix
    size = "4 mm"

The built-in cases are in ``bridge/verify/cases``; users add their own folders with ``--cases``.
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..checks import rigid_body_count
from ..errors import BridgeError, CapabilityError, ModelError, PluginError
from ..model import parse_model
from ..plugins import get_plugin_manager, get_solvers
from ..results import ModalResult, load_result
from ..study.executor import Task, run_tasks
from ..study.vary import apply_variant

__all__ = ["Case", "load_cases", "run_verification", "BUILTIN", "select_modes", "CaseResult", "run_matrix",
           "MatrixCell"]

BUILTIN = Path(__file__).parent / "cases"
_CASE_KEYS = {"title", "source", "targets_hz", "tolerance", "tolerance_note", "skip_rigid", "mode_filter",
              "families", "mesh_by_family", "matrix", "matrix_mesh"}


@dataclass
class Case:
    name: str
    folder: Path
    raw_model: dict
    title: str
    source: str
    targets: list[float]
    tolerance: list[float]
    tolerance_note: str
    skip_rigid: bool
    mode_filter: dict | None
    families: list[str]
    mesh_by_family: dict = field(default_factory=dict)
    matrix: str = ""  #: what the case stands for in the element × solver matrix ("" = not in it)
    matrix_mesh: dict = field(default_factory=dict)  #: family → mesh settings in the matrix

    def model_for(self, family: str | None, matrix: bool = False) -> dict:
        if family is None:  # a model without continuum (geometry "points") has no mesh
            return self.raw_model
        mesh = dict(self.raw_model.get("mesh", {}))
        mesh["family"] = family
        over = (self.matrix_mesh if matrix else self.mesh_by_family).get(family, {})
        if "size" in over:
            mesh.pop("divisions", None)
        if "divisions" in over:
            mesh.pop("size", None)
        mesh.update(over)
        out = apply_variant(self.raw_model, {})
        out["mesh"] = mesh  # replaced whole: a merge would keep 'divisions' beside a new 'size'
        return out


def _load_case(folder: Path) -> Case:
    try:
        raw = tomllib.loads((folder / "model.toml").read_text(encoding="utf-8"))
        spec = tomllib.loads((folder / "case.toml").read_text(encoding="utf-8"))
    except FileNotFoundError as exc:
        raise ModelError(f"a case folder needs model.toml and case.toml ({exc.filename} is missing)",
                         source=folder) from None
    except tomllib.TOMLDecodeError as exc:
        raise ModelError(f"malformed TOML: {exc}", source=folder) from None
    unknown = set(spec) - _CASE_KEYS
    if unknown:
        raise ModelError(f"unknown key; accepted here: {', '.join(sorted(_CASE_KEYS))}",
                         source=folder / "case.toml", field=sorted(unknown)[0])
    for key in ("title", "source", "targets_hz", "tolerance"):
        if key not in spec:
            raise ModelError("required key is missing", source=folder / "case.toml", field=key)
    targets = [float(x) for x in spec["targets_hz"]]
    tol = spec["tolerance"]
    tol = [float(tol)] * len(targets) if isinstance(tol, (int, float)) else [float(x) for x in tol]
    if len(tol) != len(targets) or not targets or any(t <= 0 for t in tol):
        raise ModelError("one positive tolerance, or one per target", source=folder / "case.toml", field="tolerance")
    parse_model(raw, source=folder / "model.toml")
    families = list(spec.get("families", [raw.get("mesh", {}).get("family")]))
    if "/" in str(spec["source"]) and (".md" in spec["source"] or "../" in spec["source"]):
        raise ModelError("cite the publication itself, not a file", source=folder / "case.toml", field="source")
    return Case(folder.name, folder, raw, spec["title"], spec["source"], targets, tol,
                spec.get("tolerance_note", ""), bool(spec.get("skip_rigid", False)), spec.get("mode_filter"),
                families, spec.get("mesh_by_family", {}), str(spec.get("matrix", "")), spec.get("matrix_mesh", {}))


def load_cases(extra: list[Path] = (), only: list[str] | None = None, builtin: bool = True) -> list[Case]:
    folders = sorted(p for p in BUILTIN.iterdir() if p.is_dir()) if builtin else []
    for base in extra:
        base = Path(base)
        if not base.is_dir():
            raise ModelError("not a folder of cases", source=base)
        folders += sorted(p for p in base.iterdir() if (p / "case.toml").is_file())
    cases = [_load_case(f) for f in folders]
    if only:
        names = {c.name for c in cases}
        missing = [o for o in only if o not in names]
        if missing:
            raise BridgeError(f"unknown case '{missing[0]}'; cases: {', '.join(sorted(names))}")
        cases = [c for c in cases if c.name in only]
    return cases


def select_modes(result: ModalResult, case: Case) -> np.ndarray:
    """Indices of the modes a case compares: after the rigid-body modes, through its filter."""
    start = rigid_body_count(result.frequencies, result.eigenvalues) if case.skip_rigid else 0
    idx = np.arange(start, result.n_modes)
    f = case.mode_filter
    if f:
        if f.get("kind") == "share":
            c = "xyz".index(f["component"])
            share = (result.shapes[:, :, c] ** 2).sum(axis=1) / np.maximum((result.shapes**2).sum(axis=(1, 2)), 1e-300)
            idx = idx[share[idx] >= float(f.get("min_share", 0.9))]
        elif f.get("kind") == "effective_mass":
            frac = result.effective_mass_fraction()
            if frac is None:
                raise BridgeError(f"case {case.name}: the result has no effective masses to filter by")
            idx = idx[frac[idx, "xyz".index(f["direction"])] >= float(f.get("min_fraction", 1e-3))]
        elif f.get("kind") == "axially_uniform":
            share = _axially_uniform_share(result, "xyz".index(f.get("axis", "z")))
            idx = idx[share[idx] >= float(f.get("min_share", 0.95))]
        else:
            raise ModelError(f"unknown mode_filter kind '{f.get('kind')}'; accepted: share, effective_mass, "
                             "axially_uniform",
                             source=case.folder / "case.toml", field="mode_filter.kind")
    return idx[: len(case.targets)]


def _axially_uniform_share(result: ModalResult, axis: int) -> np.ndarray:
    """Per mode, the share of the radial motion (about ``axis`` through the points' centroid) that
    is the same all along the axis: nodes on one generator (same angle) are averaged."""
    p = result.points - result.points.mean(axis=0)
    a, b = [(axis + 1) % 3, (axis + 2) % 3]
    theta = np.arctan2(p[:, b], p[:, a])
    scale = max(float(np.abs(p[:, [a, b]]).max()), 1e-300)
    key = np.round(np.c_[p[:, a], p[:, b]] / scale * 1e6).astype(np.int64)
    _, group = np.unique(key, axis=0, return_inverse=True)
    group = group.ravel()
    count = np.bincount(group)
    out = np.zeros(result.n_modes)
    for k in range(result.n_modes):
        w = result.shapes[k][:, a] * np.cos(theta) + result.shapes[k][:, b] * np.sin(theta)
        mean = np.bincount(group, weights=w) / count
        total = float(np.sum(w**2))
        out[k] = float(np.sum(mean**2 * count)) / total if total > 0 else 0.0
    return out


@dataclass
class CaseResult:
    case: Case
    solver: str
    family: str | None
    element: str = ""
    modes: list[dict] = field(default_factory=list)
    error: str | None = None
    note: str = ""
    mesh: dict = field(default_factory=dict)  #: the run's mesh statistics
    element_family: str | None = None  #: the family the solver ran (a plugin's substitute may differ)

    @property
    def passed(self) -> bool:
        return self.error is None and len(self.modes) == len(self.case.targets) and all(m["passed"] for m in self.modes)

    def as_dict(self) -> dict:
        return {"case": self.case.name, "title": self.case.title, "solver": self.solver, "family": self.family,
                "element": self.element, "source": self.case.source, "tolerance_note": self.case.tolerance_note,
                "modes": self.modes, "passed": self.passed, "error": self.error, "note": self.note}


def run_verification(out: str | Path, solvers: list[str] | None = None, only: list[str] | None = None,
                     extra_cases: list[Path] = (), workers: int | None = None, threads: int | None = None,
                     scheduler: str | None = None, progress=lambda label, state: None) -> list[CaseResult]:
    cases = load_cases(list(extra_cases), only)
    installed = get_solvers(get_plugin_manager())
    names = solvers or sorted(n for n, a in installed.items() if a.locate() is not None)
    if not names:
        raise BridgeError("no solver with an installed executable to verify")
    tasks, planned, results = [], [], []
    for case in cases:
        for s in names:
            if s not in installed:
                raise PluginError(f"unknown solver '{s}'; installed: {', '.join(sorted(installed))}")
            caps = installed[s].capabilities
            fam = next((f for f in case.families if f in caps.families), None)
            if fam is None and "mesh" not in case.raw_model:
                fam = None  # no continuum: the capability check below decides
            elif fam is None:
                results.append(CaseResult(case, s, None, note=f"skipped: {s} has none of {', '.join(case.families)}"))
                continue
            raw = case.model_for(fam)
            model = parse_model(raw, source=case.folder / "model.toml")
            if any(sp.kind not in caps.supports for sp in model.supports):
                results.append(CaseResult(case, s, fam, note=f"skipped: {s} lacks a support kind of this case"))
                continue
            try:
                from ..pipeline import check_capabilities

                check_capabilities(model, installed[s])
            except CapabilityError as exc:
                results.append(CaseResult(case, s, fam, note=f"skipped: {exc}"))
                continue
            tasks.append(Task(f"{case.name} / {s} / {fam}", raw, str(case.folder), s, extra={"case": case.name}))
            planned.append(CaseResult(case, s, fam))
    outcomes = run_tasks(tasks, out, workers, threads, scheduler, progress)
    for cr, o in zip(planned, outcomes):
        results.append(_evaluate(cr, o))
    order = {c.name: i for i, c in enumerate(cases)}
    results.sort(key=lambda x: (order[x.case.name], x.solver))
    return results


def _evaluate(cr: CaseResult, o) -> CaseResult:
    if not o.ok:
        cr.error = o.error
        return cr
    r = load_result(o.result_path)
    cr.element = r.metadata.get("provenance", {}).get("element_type", "")
    cr.element_family = ((o.summary or {}).get("element") or {}).get("family") or cr.family
    idx = select_modes(r, cr.case)
    for k, target in enumerate(cr.case.targets):
        if k >= idx.size:
            cr.modes.append({"mode": None, "target_hz": target, "value_hz": None, "deviation": None,
                             "tolerance": cr.case.tolerance[k], "passed": False})
            continue
        v = float(r.frequencies[idx[k]])
        dev = (v - target) / target
        cr.modes.append({"mode": int(idx[k]) + 1, "target_hz": target, "value_hz": v, "deviation": dev,
                         "tolerance": cr.case.tolerance[k], "passed": bool(abs(dev) <= cr.case.tolerance[k])})
    if idx.size < len(cr.case.targets):
        cr.note = f"only {idx.size} of {len(cr.case.targets)} target modes found: compute more modes"
    cr.mesh = (o.summary or {}).get("mesh", {})
    return cr


@dataclass
class MatrixCell:
    """One element family on one solver, over every matrix case that family can run."""

    family: str
    solver: str
    runs: list[CaseResult] = field(default_factory=list)

    @property
    def worst(self) -> CaseResult | None:
        """The run with the largest |deviation| (a failed run first)."""
        def key(cr):
            if cr.error or not cr.modes or any(m["deviation"] is None for m in cr.modes):
                return float("inf")
            return max(abs(m["deviation"]) for m in cr.modes)
        return max(self.runs, key=key) if self.runs else None

    @property
    def worst_deviation(self) -> float | None:
        w = self.worst
        if w is None or w.error or not w.modes or any(m["deviation"] is None for m in w.modes):
            return None
        return max((m["deviation"] for m in w.modes), key=abs)

    @property
    def passed(self) -> bool:
        return bool(self.runs) and all(r.passed for r in self.runs)

    def as_dict(self) -> dict:
        w = self.worst
        return {"family": self.family, "solver": self.solver, "passed": self.passed,
                "substituted": any(r.element and r.element_family not in (None, self.family) for r in self.runs),
                "worst_deviation": self.worst_deviation, "worst_case": w.case.name if w else None,
                "element": next((r.element for r in self.runs if r.element), ""),
                "runs": [{**r.as_dict(), "matrix": r.case.matrix,
                          "mesh": {k: getattr(r, "mesh", {}).get(k) for k in ("nodes", "elements", "element_size_m")},
                          "stated_mesh": r.case.matrix_mesh.get(r.family, {})} for r in self.runs]}


def run_matrix(out: str | Path, solvers: list[str] | None = None, extra_cases: list[Path] = (),
               workers: int | None = None, threads: int | None = None, scheduler: str | None = None,
               progress=lambda label, state: None) -> list[MatrixCell]:
    """Every element family on every solver that offers it, over the matrix cases (plate bending
    clamped and free, a membrane, a solid, …) at each case's stated mesh per family."""
    cases = [c for c in load_cases(list(extra_cases)) if c.matrix]
    installed = get_solvers(get_plugin_manager())
    names = solvers or sorted(n for n, a in installed.items() if a.locate() is not None)
    if not names:
        raise BridgeError("no solver with an installed executable to verify")
    cells: dict[tuple[str, str], MatrixCell] = {}
    tasks, planned = [], []
    for case in cases:
        for s in names:
            if s not in installed:
                raise BridgeError(f"unknown solver '{s}'; installed: {', '.join(sorted(installed))}")
            caps = installed[s].capabilities
            subs = getattr(caps, "substitutes", None) or {}
            for fam in case.matrix_mesh:
                if fam not in caps.families and fam not in subs:
                    continue  # not offered (a substitute runs what a user of the family gets)
                cell = cells.setdefault((fam, s), MatrixCell(fam, s))
                raw = case.model_for(fam, matrix=True)
                model = parse_model(raw, source=case.folder / "model.toml")
                if any(sp.kind not in caps.supports for sp in model.supports):
                    continue
                tasks.append(Task(f"{case.name} / {s} / {fam}", raw, str(case.folder), s,
                                  extra={"case": case.name, "matrix": True}))
                cr = CaseResult(case, s, fam)
                planned.append(cr)
                cell.runs.append(cr)
    outcomes = run_tasks(tasks, out, workers, threads, scheduler, progress)
    for cr, o in zip(planned, outcomes):
        _evaluate(cr, o)
    order = {f: i for i, f in enumerate(["tri3", "tri6", "quad4", "quad8", "tet4", "tet10", "hex8", "hex20"])}
    return sorted(cells.values(), key=lambda c: (order.get(c.family, 99), c.solver))
