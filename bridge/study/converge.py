"""Mesh convergence per mode: runs at refinement levels, modes tracked by shape, GCI."""

from __future__ import annotations

import copy
import hashlib
import json
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..checks import rigid_body_count
from ..compare.convergence import GciResult, fitted_slope, gci, gci_two
from ..errors import BridgeError, ModelError
from ..io import atomic_write_text
from ..model import parse_model
from ..results import ModalResult, load_result
from .executor import Task, TaskOutcome, run_tasks

__all__ = ["ModeConvergence", "ConvergenceStudy", "convergence_tasks", "track_modes", "run_convergence",
           "read_model_dict", "TRACK_MIN_MAC", "H_DEFINITION"]

#: how the element size h of each level is defined (printed with every study)
H_DEFINITION = ("h = (mean element length, area or volume)^(1/dim) of the level's mesh, the representative "
                "size of Celik et al. (2008) eq. 1; for triangles and tetrahedra it is smaller than the "
                "requested edge length (an equilateral triangle of edge 4 mm: h = 2.63 mm)")

#: a mode is followed to a coarser level only when its best partner there has at least this MAC
#: (common practice, no source)
TRACK_MIN_MAC = 0.8


@dataclass
class ModeConvergence:
    mode: int  #: 1-based index on the finest level
    h: list[float]  #: element size per level (coarse → fine), m
    f: list[float | None]  #: frequency per level, Hz (None where not tracked)
    index: list[int | None]  #: the mode's 1-based index on each level
    mac: list[float | None]  #: MAC with the finest level's mode
    gci: GciResult | None
    slope: float  #: fitted log-log slope of |f − f_ext| against h over all tracked levels

    @property
    def verdict(self) -> str:
        return self.gci.verdict if self.gci else "not tracked"

    @property
    def converged(self) -> bool:
        return self.verdict == "converged"

    def as_dict(self) -> dict:
        return {"mode": self.mode, "h_m": self.h, "f_hz": self.f, "index": self.index, "mac": self.mac,
                "slope": self.slope, "gci": self.gci.as_dict() if self.gci else None, "verdict": self.verdict}


@dataclass
class ConvergenceStudy:
    solver: str
    levels: list[int]
    h: list[float]
    modes: list[ModeConvergence]
    rigid_body_modes: int
    tolerance: float
    outcomes: list[TaskOutcome] = field(default_factory=list)

    @property
    def unconverged(self) -> list[int]:
        """Modes (1-based, finest level) not converged or whose behaviour cannot be told."""
        return [m.mode for m in self.modes if not m.converged]

    @property
    def passed(self) -> bool:
        return bool(self.modes) and not self.unconverged

    def as_dict(self) -> dict:
        return {"solver": self.solver, "levels": self.levels, "h_m": self.h, "h_definition": H_DEFINITION,
                "tolerance": self.tolerance, "passed": self.passed, "unconverged_modes": self.unconverged,
                "rigid_body_modes": self.rigid_body_modes, "modes": [m.as_dict() for m in self.modes],
                "runs": [{"label": o.task.label, "level": o.task.level, "state": o.state, "folder": str(o.folder),
                          "error": o.error,
                          "note": o.note}
                         for o in self.outcomes]}


def read_model_dict(path: Path, what: str = "model file") -> dict:
    from ..model import read_toml

    return read_toml(path, what)


def convergence_tasks(model_path: Path, levels: int | None, ratio: float | None,
                      solvers: list[str] | None) -> list[Task]:
    raw = read_model_dict(model_path)
    raw = copy.deepcopy(raw)
    if (raw.get("geometry") or {}).get("kind") == "points":
        raise ModelError("a model without continuum has no mesh to refine; run it with 'modebridge run'",
                         source=model_path, field="geometry.kind")
    mesh = raw.setdefault("mesh", {})
    if levels is not None:
        mesh["levels"] = levels
    if ratio is not None:
        mesh["ratio"] = ratio
    model = parse_model(raw, source=model_path)  # validates levels ≥ 1 and ratio ≥ 1.3
    if model.mesh.levels < 3:
        raise ModelError("a convergence study needs at least 3 levels", source=model_path, field="mesh.levels")
    from ..guards import check_size

    check_size(model, model.mesh.levels - 1, source=model_path)  # the finest level, before anything runs
    from ..pipeline import solver_names

    tasks = []
    for solver in solver_names(model, solvers, model_path):  # "all": every installed solver that can
        for lv in range(model.mesh.levels):
            tasks.append(Task(f"level {lv} / {solver}", raw, str(Path(model_path).parent.resolve()), solver,
                              level=lv, extra={"study": "converge"}, model_file=str(Path(model_path).resolve())))
    return tasks


def _partners(a: ModalResult, ra: int, b: ModalResult, rb: int) -> dict[int, tuple[int, float]]:
    """A's elastic modes → (B's mode, MAC or subspace cos²) paired by mapped shape and frequency."""
    from ..compare.mapping import map_shapes
    from ..compare.pairing import compare_modes

    same = b.points.shape == a.points.shape and np.allclose(b.points, a.points)
    sb = b.shapes if same else map_shapes(b.points, b.cells, b.cell_type, b.shapes, a.points)
    comp = compare_modes(a.frequencies, a.shapes, b.frequencies, sb, skip_a=ra, skip_b=rb)
    out = {}
    for p in comp.pairs:
        mac = p.mac
        if p.cluster is not None:  # inside a cluster judge by the subspace
            ang = max(comp.clusters[p.cluster].angles_deg)
            mac = max(mac, math.cos(math.radians(ang)) ** 2)
        out[p.a] = (p.b, float(mac))
    return out


def track_modes(results: list[ModalResult]) -> tuple[int, list[list[tuple[int | None, float | None]]]]:
    """Follow each elastic mode of the finest result (last) down the levels.

    Each level is paired with the next finer one (its shapes mapped onto the finer mesh, the
    assignment weighing MAC and frequency together, close modes as subspaces), and the chain is
    followed from the finest level down; a link needs MAC ≥ TRACK_MIN_MAC. Neighbouring levels
    resemble each other more than the coarsest does the finest, so a mode is lost less often.
    Returns the finest level's rigid-body count and, per finest elastic mode, per level, the
    (0-based index, MAC of that link) or (None, None).
    """
    from ..compare.mapping import map_shapes  # scipy: only when modes are tracked, not on a cached rerun
    from ..compare.pairing import compare_modes

    fine = results[-1]
    rig = [rigid_body_count(r.frequencies, r.eigenvalues) for r in results]
    rf = rig[-1]
    n = len(results)
    table = [[(None, None)] * n for _ in range(rf, fine.n_modes)]
    for k in range(len(table)):
        table[k][n - 1] = (rf + k, 1.0)
    current = {k: rf + k for k in range(len(table))}  # finest mode → its index on the level above
    for lv in range(n - 2, -1, -1):
        links = _partners(results[lv + 1], rig[lv + 1], results[lv], rig[lv])
        nxt = {}
        for k, i in current.items():
            if i in links and links[i][1] >= TRACK_MIN_MAC:
                j, mac = links[i]
                table[k][lv] = (j, mac)
                nxt[k] = j
        current = nxt
    return rf, table


def analyse(results: list[ModalResult], h: list[float], tolerance: float) -> tuple[int, list[ModeConvergence]]:
    rf, table = track_modes(results)
    modes = []
    for k, row in enumerate(table):
        f = [None if i is None else float(results[lv].frequencies[i]) for lv, (i, _) in enumerate(row)]
        idx = [None if i is None else i + 1 for i, _ in row]
        macs = [m for _, m in row]
        ok = [lv for lv, v in enumerate(f) if v is not None]
        g = None
        slope = float("nan")
        if len(ok) >= 3:
            fine3 = ok[-3:]
            g = gci([h[lv] for lv in fine3], [f[lv] for lv in fine3], tolerance)
            if np.isfinite(g.extrapolated):
                slope = fitted_slope([h[lv] for lv in ok], [f[lv] for lv in ok], g.extrapolated)
        elif len(ok) == 2:
            g = gci_two([h[lv] for lv in ok], [f[lv] for lv in ok], tolerance)
        modes.append(ModeConvergence(rf + k + 1, list(h), f, idx, macs, g, slope))
    return rf, modes


def run_convergence(model_path: str | Path, study_dir: str | Path, levels: int | None = None,
                    ratio: float | None = None, solvers: list[str] | None = None, tolerance: float = 0.01,
                    workers: int | None = None, threads: int | None = None, scheduler: str | None = None,
                    progress=lambda label, state: None) -> list[ConvergenceStudy]:
    model_path = Path(model_path)
    tasks = convergence_tasks(model_path, levels, ratio, solvers)
    outcomes = run_tasks(tasks, study_dir, workers, threads, scheduler, progress)
    studies = []
    for solver in dict.fromkeys(t.solver for t in tasks):
        mine = [o for o in outcomes if o.task.solver == solver]
        good = [o for o in mine if o.ok]
        if len(good) < 3:
            failed = "; ".join(f"{o.task.label}: {o.error}" for o in mine if not o.ok)
            raise BridgeError(f"convergence with '{solver}' needs 3 finished levels, got {len(good)}: {failed}")
        good.sort(key=lambda o: o.task.level)
        h = [float(o.summary["mesh"]["element_size_m"]) for o in good]
        key = _analysis_key(good, tolerance)
        cache = Path(study_dir) / f".analysis_{solver}.json"
        cached = _read_analysis(cache, key)
        if cached is None:
            results = [load_result(o.result_path) for o in good]
            rf, modes = analyse(results, h, tolerance)
            atomic_write_text(cache, json.dumps({"key": key, "rigid_body_modes": rf,
                                                 "modes": [m.as_dict() for m in modes]}))
        else:
            rf, modes = cached
        studies.append(ConvergenceStudy(solver, [o.task.level for o in good], h, modes, rf, tolerance, mine))
    return studies


#: bump when the tracking or the GCI changes, so stored analyses are recomputed
_ANALYSIS_VERSION = 1


def _analysis_key(good: list[TaskOutcome], tolerance: float) -> str:
    """What decides a study's analysis: the runs (their content keys), the tolerance, the code."""
    blob = json.dumps([_ANALYSIS_VERSION, TRACK_MIN_MAC, tolerance, [o.task.key for o in good]])
    return hashlib.sha256(blob.encode()).hexdigest()


def _read_analysis(path: Path, key: str) -> tuple[int, list[ModeConvergence]] | None:
    """A stored analysis of the same runs (a cached rerun reads neither the results nor scipy)."""
    try:
        d = json.loads(path.read_text())
        if d.get("key") != key:
            return None
        modes = [ModeConvergence(m["mode"], m["h_m"], m["f_hz"], m["index"], m["mac"],
                                 GciResult(**{k: tuple(v) if isinstance(v, list) else v for k, v in m["gci"].items()})
                                 if m["gci"] else None, float("nan") if m["slope"] is None else m["slope"])
                 for m in d["modes"]]
        return int(d["rigid_body_modes"]), modes
    except (OSError, ValueError, KeyError, TypeError):
        return None
