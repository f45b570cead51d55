"""The run pipeline: model → mesh → job → deck → solver → neutral result → checks.

Run folder layout (``OUT``)::

    OUT/model.toml             copy of the model as run
    OUT/mesh.vtu               the mesh, with one 0/1 point array per region
    OUT/<solver>/              the solver's own files (deck, logs, raw results)
    OUT/<solver>/result.vtkhdf the neutral result (written last, atomically)
    OUT/<solver>/summary.json  the summary printed by ``run --json``
    OUT/<solver>/error.txt     only when that solver failed

A result file present in a solver folder is complete: files of an earlier run
are removed before a solver starts, and the result is written in one step.
"""

from __future__ import annotations

import datetime as _dt
import json
import re
import shutil
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from . import __version__
from .checks import Check, element_notes, rigid_body_count, run_checks
from .errors import (BridgeError, CapabilityError, MeshingError, ModelError, ResultCheckError,
                     SolverNotFoundError)
from .io import atomic_write_text, inside
from .massprops import mass_properties
from .mesh import Mesh
from .model import Model, load_model
from .plugins import get_plugin_manager, get_solver, get_solvers
from .postconditions import enforce
from .process import available_cores
from .results import ModalResult, save_result
from .selection import ElementChoice, choose_element, model_for, solver_options
from .solver import JobMass, JobSection, RawModes, SolverAdapter, SolverJob
from .supports import Constraints, NodalMass, resolve_constraints, resolve_masses
from .units import SOLVER_SYSTEM, UnitSystem

__all__ = ["Prepared", "RunOutcome", "prepare", "check_capabilities", "check_job_capabilities", "make_job",
           "to_result", "run_model", "default_out_dir", "model_mass", "resolve_solvers", "solver_names", "ALL",
           "cell_properties", "section_table"]

Progress = Callable[[str], None]


def _quiet(_: str) -> None:
    pass


@dataclass
class Prepared:
    """A validated model with its mesh, constraints and masses."""

    model: Model
    model_path: Path | None
    mesh: Mesh
    constraints: Constraints
    masses: list[NodalMass]
    quality: dict = field(default_factory=dict)  #: figures of the mesh quality gate


    @property
    def free_dof(self) -> int:
        return self.constraints.free_dof(self.mesh.dofs_per_node)

    def mesh_summary(self) -> dict:
        s = self.mesh.stats()
        s["constrained_nodes"] = self.constraints.constrained_nodes
        s["free_dof"] = self.free_dof
        s["dofs_per_node"] = self.mesh.dofs_per_node
        s.update(self.quality)
        return s


@dataclass
class RunOutcome:
    solver: str
    folder: Path
    result: ModalResult | None = None
    checks: list[Check] = field(default_factory=list)
    summary: dict = field(default_factory=dict)
    error: BridgeError | None = None

    @property
    def ok(self) -> bool:
        return self.error is None


def default_out_dir(model_path: Path) -> Path:
    stem = re.sub(r"[^A-Za-z0-9_-]+", "_", model_path.stem).strip("_") or "model"
    return Path("runs") / stem


def cell_properties(model: Model, mesh: Mesh) -> tuple[np.ndarray, np.ndarray | None]:
    """Density (kg/m³) and, for shells, thickness (m) of every element, from its section."""
    secs = [s for _, s in model.section_list()]
    idx = mesh.cell_sections()
    rho = np.array([model.materials[s.material].density for s in secs], float)[idx]
    if not model.is_shell:
        return rho, None
    return rho, np.array([s.thickness for s in secs], float)[idx]


def model_mass(model: Model, mesh: Mesh) -> float:
    """Mass of the structure (from the mesh's element measures, each with its section's density and
    thickness) plus the added masses, kg."""
    from .meshing.gmsh import _cell_measure

    measure = _cell_measure(mesh.points, mesh.cells, mesh.family)
    rho, t = cell_properties(model, mesh)
    per_cell = measure * rho * (t if t is not None else 1.0)
    return float(per_cell.sum()) + sum(m.mass for m in model.masses)


def section_table(model: Model, mesh: Mesh) -> list[dict]:
    """One entry per section: name, region (None: whole body / the rest), kind, material,
    thickness (m, shells), elements, mass (kg)."""
    from .meshing.gmsh import _cell_measure

    measure = _cell_measure(mesh.points, mesh.cells, mesh.family)
    rho, t = cell_properties(model, mesh)
    per_cell = measure * rho * (t if t is not None else 1.0)
    idx = mesh.cell_sections()
    out = []
    for i, (name, sec) in enumerate(model.section_list()):
        mine = idx == i
        out.append({"name": name, "region": model.section_region(name), "kind": sec.kind,
                    "material": sec.material, "thickness_m": getattr(sec, "thickness", None),
                    "elements": int(mine.sum()), "mass_kg": float(per_cell[mine].sum())})
    return out


def check_capabilities(model: Model, adapter: SolverAdapter, source: str | Path | None = None) -> ElementChoice:
    """Refuse, before anything runs, a model that asks a solver for what it lacks (or gives it a
    bad option); return the element family (and mesh size) the solver gets (bridge/selection.py)."""
    cap = adapter.capabilities
    choice = choose_element(model, adapter)
    solver_options(model, adapter, source)
    for i, s in enumerate(model.supports):
        if s.kind not in cap.supports:
            raise CapabilityError(f"supports[{i}].kind: solver '{adapter.name}' does not support '{s.kind}'; "
                                  f"it offers {', '.join(sorted(cap.supports))}")
    for i, m in enumerate(model.masses):
        if m.at is not None and not cap.point_mass:
            raise CapabilityError(f"masses[{i}]: solver '{adapter.name}' takes no point masses")
        if m.region is not None and not cap.distributed_mass:
            raise CapabilityError(f"masses[{i}]: solver '{adapter.name}' takes no distributed masses")
        if m.inertia is not None and not cap.rotary_inertia:
            raise CapabilityError(f"masses[{i}].inertia: solver '{adapter.name}' takes no rotary inertia; "
                                  "drop 'inertia' or use another solver")
    if "modal" not in cap.analyses:
        raise CapabilityError(f"solver '{adapter.name}' offers no natural-frequency analysis")
    return choice


def prepare(model: Model, model_path: Path | None = None, level: int = 0,
            save_mesh_to: Path | None = None) -> Prepared:
    from .meshing.gmsh import build_mesh
    from .meshing.quality import quality_gate

    model_dir = model_path.parent if model_path is not None else Path(".")
    try:
        mesh = build_mesh(model, model_dir, level=level, save_to=save_mesh_to)
        quality = quality_gate(mesh)  # inverted elements stop here, before any solver
        constraints = resolve_constraints(model, mesh)
        masses = resolve_masses(model, mesh, constraints.fixed)
    except ModelError as exc:  # name the file the problem is in
        if exc.source is None and model_path is not None:
            raise ModelError(exc.detail, source=model_path, field=exc.field) from None
        raise
    except MeshingError as exc:
        if model_path is not None:
            raise type(exc)(f"{model_path}: {exc}") from None
        raise
    return Prepared(model, model_path, mesh, constraints, masses, quality)


def make_job(prep: Prepared, units: UnitSystem = SOLVER_SYSTEM, options: dict | None = None) -> SolverJob:
    model, mesh = prep.model, prep.mesh
    L, M = units.length, units.mass
    node_ids = np.arange(1, mesh.n_nodes + 1, dtype=np.int64)
    mat = model.material
    sections = []
    for name, sec in model.section_list():
        m = model.materials[sec.material]
        sections.append(JobSection(name=name, material=sec.material,
                                   youngs_modulus=m.youngs_modulus * units.pressure,
                                   poisson_ratio=m.poisson_ratio, density=m.density * units.density,
                                   thickness=sec.thickness * L if sec.kind == "shell" else None))
    masses = [JobMass(int(node_ids[m.node]), m.mass * M,
                      tuple(x * units.inertia for x in m.inertia) if m.inertia else None)
              for m in prep.masses]
    return SolverJob(
        title=model.name, model_hash=model.content_hash(), units=units, family=mesh.family,
        is_shell=mesh.is_shell, node_ids=node_ids, points=mesh.points * L, cells=mesh.cells,
        fixed=prep.constraints.fixed.copy(),
        node_sets={name: node_ids[mesh.region_nodes(name)] for name in mesh.regions},
        youngs_modulus=mat.youngs_modulus * units.pressure, poisson_ratio=mat.poisson_ratio,
        density=mat.density * units.density,
        thickness=sections[0].thickness,
        masses=masses, modes=model.analysis.modes,
        min_frequency=model.analysis.min_frequency, max_frequency=model.analysis.max_frequency,
        threads=model.run.threads or available_cores(), timeout=model.run.timeout, options=dict(options or {}),
        sections=sections, cell_section=mesh.cell_sections().copy(),
        equations=[[(int(node_ids[n]), d + 1, c) for n, d, c in eq] for eq in prep.constraints.equations])


def check_job_capabilities(job: SolverJob, adapter: SolverAdapter) -> None:
    """Refuse, before the solver runs, what only the mesh reveals (constraint equations)."""
    if job.equations and not getattr(adapter.capabilities, "equations", False):
        raise CapabilityError(f"supports: solver '{adapter.name}' takes no constraint equations, which a support "
                              f"along a direction that is not an axis needs ({len(job.equations)} of them, e.g. "
                              "'simply_supported' on a skew edge); use a solver that does (modebridge solvers), "
                              "or edges along x, y or z")


def to_result(raw: RawModes, job: SolverJob, prep: Prepared) -> ModalResult:
    """Convert a plugin's raw modes (job units) into the neutral SI result on the mesh's node order."""
    L, M = job.units.length, job.units.mass
    sM = np.sqrt(M)
    pos = {int(n): i for i, n in enumerate(raw.node_ids)}
    try:
        rows = np.array([pos[int(n)] for n in job.node_ids], dtype=np.int64)
    except KeyError as exc:
        raise ResultCheckError(f"the solver's mode shapes lack node {exc.args[0]} of the mesh") from None
    shapes = raw.shapes[:, rows, :] * sM  # mass-normalised shapes carry 1/sqrt(mass) only
    rotations = raw.rotations[:, rows, :] * sM * L if raw.rotations is not None else None
    scale_m = np.array([1 / M] * 3 + [1 / (M * L * L)] * 3)
    vtk_type, conn = prep.mesh.vtk_cells()
    model = prep.model
    rho, thick = cell_properties(model, prep.mesh)
    mp = mass_properties(prep.mesh, shapes, prep.constraints.fixed, rho, thick,
                         [(m.node, m.mass) for m in prep.masses])
    solver_mass = None
    if raw.effective_mass is not None:
        solver_mass = {"effective_mass": (raw.effective_mass * scale_m).tolist(),
                       "total_effective_mass": (raw.total_effective_mass * scale_m).tolist()
                       if raw.total_effective_mass is not None else None}
    result = ModalResult(
        frequencies=np.asarray(raw.frequencies, float), eigenvalues=np.asarray(raw.eigenvalues, float),
        points=prep.mesh.points.copy(), node_ids=job.node_ids.copy(), cell_type=vtk_type, cells=conn.copy(),
        shapes=shapes, rotations=rotations,
        participation=mp.participation, effective_mass=mp.effective_mass,
        total_effective_mass=mp.total_effective_mass, total_mass=mp.total_mass,
        reference_point=np.zeros(3), normalisation=raw.normalisation)
    result.metadata = {"modal_mass": mp.modal_mass.tolist(), "solver_mass_properties": solver_mass,
                       "mass_properties_source": "modebridge consistent mass matrix (translations)",
                       "sections": section_table(model, prep.mesh)}
    return result


#: supported nodes kept for the report's model picture at most (an even sample beyond: the
#: metadata is one HDF5 attribute, which must stay well below 64 kB)
_MAX_MARKED = 4000


def _marks(prep: Prepared) -> dict:
    """What the report's model picture marks: nodes with a fixed DOF and point masses (node, kg)."""
    sup = np.flatnonzero(np.asarray(prep.constraints.fixed).any(axis=1))
    shown = sup if sup.size <= _MAX_MARKED else sup[np.linspace(0, sup.size - 1, _MAX_MARKED).astype(int)]
    return {"supported_count": int(sup.size), "supported_nodes": shown.tolist(),
            "point_masses": [[int(m.node), float(m.mass)] for m in prep.masses][:200]}


def summarise(outcome: RunOutcome, prep: Prepared) -> dict:
    r = outcome.result
    assert r is not None
    frac = r.effective_mass_fraction()
    return {
        "model": prep.model.name,
        "solver": outcome.solver,
        "solver_version": r.metadata.get("provenance", {}).get("solver_version", ""),
        "element_type": r.metadata.get("provenance", {}).get("element_type", ""),
        "element": r.metadata.get("provenance", {}).get("element"),
        "solver_options": r.metadata.get("provenance", {}).get("solver_options", {}),
        "frequencies_hz": [float(f) for f in r.frequencies],
        "effective_mass_fraction": (None if frac is None else
                                    {d: [float(x) for x in frac[:, j]] for j, d in enumerate("xyz")}),
        "total_mass_kg": r.total_mass,
        "rigid_body_modes": rigid_body_count(r.frequencies, r.eigenvalues),
        "mesh": prep.mesh_summary(),
        "checks": [c.as_dict() for c in outcome.checks],
        "warnings": list(dict.fromkeys(r.metadata.get("provenance", {}).get("solver_warnings") or [])),
        "result_file": str(outcome.folder / "result.vtkhdf"),
        "wall_time_s": r.metadata.get("provenance", {}).get("wall_time_s"),
    }


def _element_summary(choice: ElementChoice | None, prep: Prepared, element_type: str) -> dict:
    """Which element the solver got and why (shown by ``run`` and kept in the result)."""
    fam = prep.mesh.family
    if choice is None:
        choice = ElementChoice("", prep.model.mesh.family, fam, 1.0, "model", f"{fam}, the model's family")
    d = choice.as_dict()
    d.pop("solver", None)
    d["element_type"] = element_type
    return d


def _clear(folder: Path) -> None:
    for name in ("result.vtkhdf", "summary.json", "error.txt"):
        (folder / name).unlink(missing_ok=True)


def run_one(adapter: SolverAdapter, prep: Prepared, job: SolverJob, out: Path,
            progress: Progress = _quiet, choice: ElementChoice | None = None) -> RunOutcome:
    folder = inside(out, adapter.name)
    folder.mkdir(parents=True, exist_ok=True)
    _clear(folder)
    outcome = RunOutcome(adapter.name, folder)
    try:
        check_job_capabilities(job, adapter)
        progress(f"{adapter.name}: writing the deck")
        adapter.write_deck(job, folder)
        progress(f"{adapter.name}: solving ({job.modes} modes, {prep.free_dof} free DOF)")
        t0 = time.perf_counter()
        record = adapter.run(job, folder)
        wall = time.perf_counter() - t0
        progress(f"{adapter.name}: reading results")
        raw = enforce(adapter.read_results(job, folder, record), job, record, adapter.name)
        result = to_result(raw, job, prep)
        result.metadata.update({
            "provenance": {
                "model_name": prep.model.name, "model_hash": job.model_hash,
                "physics_hash": prep.model.physics_hash(),
                "model_file": str(prep.model_path) if prep.model_path else None,
                "modebridge_version": __version__, "solver": adapter.name,
                "solver_version": raw.solver_version or (adapter.version() or ""),
                "element_type": raw.element_type, "command": record.command,
                "wall_time_s": wall, "created": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
                "solver_warnings": list(raw.warnings),  # the record's and the plugin's (postconditions)
                "element": _element_summary(choice, prep, raw.element_type),
                "solver_options": dict(job.options),
            },
            "mesh": prep.mesh_summary(),
            "model": prep.model.canonical_dict(),
            # what the report's model picture marks: nodes with a fixed DOF, point masses (node, kg)
            "marks": _marks(prep),
        })
        result.metadata["model_mass_kg"] = model_mass(prep.model, prep.mesh)
        outcome.result = result
        outcome.checks = run_checks(prep.model, result, prep.constraints.fixed,
                                    notes=element_notes(prep.model.mesh.family, adapter))
        result.metadata["checks"] = [c.as_dict() for c in outcome.checks]
        outcome.summary = summarise(outcome, prep)
        save_result(result, folder / "result.vtkhdf")
        atomic_write_text(folder / "summary.json", json.dumps(outcome.summary, indent=2))
    except BridgeError as exc:
        outcome.error = exc
        outcome.result = None
        _clear(folder)
        atomic_write_text(folder / "error.txt", f"{type(exc).__name__}: {exc}\n")
    return outcome


ALL = "all"  #: ``--solver all``: every installed solver that can take the model


def resolve_solvers(model: Model, names: list[str] | None, pm=None,
                    source: str | Path | None = None) -> list[tuple[SolverAdapter, ElementChoice]]:
    """The adapters to run, each with its element choice; ``all`` stands for every installed
    solver that can take the model (at least one must)."""
    pm = pm or get_plugin_manager()
    chosen = names or list(model.run.solvers)
    out = []
    if ALL in chosen:
        skipped = []
        for name, a in sorted(get_solvers(pm).items()):
            if a.locate() is None:
                skipped.append(f"{name}: not installed")
                continue
            try:
                out.append((a, check_capabilities(model, a, source)))
            except CapabilityError as exc:
                skipped.append(f"{name}: {exc}")
        if not out:
            raise CapabilityError("no installed solver can take this model: " + "; ".join(skipped)
                                  if skipped else "no solver plugin is installed")
        chosen = [c for c in chosen if c != ALL]
    for name in dict.fromkeys(chosen):
        a = get_solver(pm, name)
        if any(a is b for b, _ in out):
            continue
        out.append((a, check_capabilities(model, a, source)))
    return out


def solver_names(model: Model, names: list[str] | None, source: str | Path | None = None, pm=None) -> list[str]:
    """The solver names a command runs: ``names`` or the model's ``run.solvers``, "all" expanded."""
    chosen = names or list(model.run.solvers)
    if ALL not in chosen:
        return list(dict.fromkeys(chosen))
    return [a.name for a, _ in resolve_solvers(model, chosen, pm, source)]


def run_model(model_path: str | Path, out: str | Path | None = None, solvers: list[str] | None = None,
              progress: Progress = _quiet, pm=None) -> tuple[Prepared, list[RunOutcome]]:
    """Run a model file on each solver; a failing solver is reported, the others go on.

    Each solver runs with the element family it was chosen (bridge/selection.py): solvers that
    share a family and mesh size share one mesh; the model's own mesh is ``OUT/mesh.vtu``, a
    solver's other mesh ``OUT/<solver>/mesh.vtu``.
    """
    model_path = Path(model_path)
    model = load_model(model_path)
    chosen = resolve_solvers(model, solvers, pm, source=model_path)
    adapters = [a for a, _ in chosen]
    missing = [a for a in adapters if a.locate() is None]
    if missing and len(missing) == len(adapters):
        a = missing[0]
        raise SolverNotFoundError(f"solver '{a.name}': executable not found "
                                  f"({getattr(a, 'install_hint', 'see the README for the install line')})")
    out = Path(out) if out is not None else default_out_dir(model_path)
    out.mkdir(parents=True, exist_ok=True)
    # no result of an earlier run may stand beside this run's model: clear every chosen
    # solver's folder before anything else can fail
    folders = {a.name: inside(out, a.name) for a in adapters}
    for folder in folders.values():
        if folder.is_dir():
            _clear(folder)
            (folder / "mesh.vtu").unlink(missing_ok=True)
    (out / "mesh.vtu").unlink(missing_ok=True)
    if model_path.resolve() != (out / "model.toml").resolve():
        shutil.copyfile(model_path, out / "model.toml")
    progress("meshing with gmsh")
    prep = prepare(model, model_path, save_mesh_to=out / "mesh.vtu")
    base_job = make_job(prep)
    for a in adapters:
        if a not in missing:
            check_job_capabilities(base_job, a)
    preps: dict[tuple[str, float], Prepared] = {(model.mesh.family, 1.0): prep}
    outcomes = []
    for a, choice in chosen:
        if a in missing:
            err = SolverNotFoundError(f"solver '{a.name}': executable not found "
                                      f"({getattr(a, 'install_hint', 'see the README')})")
            folders[a.name].mkdir(parents=True, exist_ok=True)
            atomic_write_text(folders[a.name] / "error.txt", f"{type(err).__name__}: {err}\n")
            outcomes.append(RunOutcome(a.name, folders[a.name], error=err))
            continue
        key = (choice.family, choice.size_factor)
        if key not in preps:
            progress(f"meshing with gmsh for {a.name} ({choice.family})")
            preps[key] = prepare(model_for(model, choice), model_path)
        p = preps[key]
        if key != (model.mesh.family, 1.0):  # the mesh this solver ran on, beside its results
            from .meshing.gmsh import save_mesh

            folders[a.name].mkdir(parents=True, exist_ok=True)
            save_mesh(p.mesh, folders[a.name] / "mesh.vtu")
        job = make_job(p, options=solver_options(model, a, model_path))
        outcomes.append(run_one(a, p, job, out, progress, choice))
    return prep, outcomes
