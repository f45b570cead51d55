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
import os
import re
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from . import __version__
from .checks import Check, element_notes, rigid_body_count, run_checks
from .connections import Connections, add_extra_nodes, resolve_connections, rigid_motion_rows
from .errors import (BridgeError, CapabilityError, MeshingError, ModelError, OutputError, ResultCheckError,
                     SolverNotFoundError)
from .io import atomic_write_bytes, atomic_write_text, folder_lock, inside, read_input, write_fault
from .massprops import mass_matrix, mass_properties
from .mesh import NO_CONTINUUM, Mesh
from .model import Model, load_model
from .plugins import get_plugin_manager, get_solver, get_solvers
from .postconditions import enforce
from .process import available_cores
from .results import ModalResult, save_result
from .selection import ElementChoice, choose_element, model_for, solver_options
from .solver import JobBeamSection, JobCoupling, JobMass, JobSection, JobSpring, RawModes, SolverAdapter, SolverJob
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
    connections: Connections = field(default_factory=Connections)
    quality: dict = field(default_factory=dict)  #: figures of the mesh quality gate

    @property
    def free_dof(self) -> int:
        if not self.model.has_continuum and not self.model.members:
            return _system_modes(self) or 0
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

    added = sum(m.mass for m in model.masses) + float(beam_masses(model, mesh).sum())
    if not model.has_continuum:
        return added
    body = mesh.points[:mesh.n_nodes - len(mesh.extra_nodes)]
    measure = _cell_measure(body, mesh.cells, mesh.family)
    rho, t = cell_properties(model, mesh)
    per_cell = measure * rho * (t if t is not None else 1.0)
    return float(per_cell.sum()) + added

def beam_properties(model: Model) -> dict:
    """Section name -> (SectionProperties, material) of the model's beam sections (SI)."""
    from .sections import section_properties

    out = {}
    for name, sec in model.beam_sections.items():
        mat = model.materials[sec.material]
        out[name] = (section_properties(sec.shape, sec.dims(), mat.poisson_ratio, field=f"beam_sections.{name}"), mat)
    return out


def beam_masses(model: Model, mesh: Mesh) -> np.ndarray:
    """Mass of each beam element of ``mesh.beams``, kg (ρ A L)."""
    if not len(mesh.beams):
        return np.zeros(0)
    props = beam_properties(model)
    length = np.linalg.norm(mesh.points[mesh.beams[:, 1]] - mesh.points[mesh.beams[:, 0]], axis=1)
    rho_a = np.array([props[s][1].density * props[s][0].area for s in mesh.beam_sections])
    return rho_a * length


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
    _check_connections(model, adapter)
    choice = (choose_element(model, adapter) if model.has_continuum else
              ElementChoice(adapter.name, NO_CONTINUUM, NO_CONTINUUM, 1.0, "model", "no continuum"))
    solver_options(model, adapter, source)
    for i, s in enumerate(model.supports):
        if s.kind not in cap.supports and s.point is None:
            raise CapabilityError(f"supports[{i}].kind: solver '{adapter.name}' does not support '{s.kind}'; "
                                  f"it offers {', '.join(sorted(cap.supports))}")
    for i, m in enumerate(model.masses):
        if m.at is not None and not cap.point_mass:
            raise CapabilityError(f"masses[{i}]: solver '{adapter.name}' takes no point masses")
        if m.region is not None and not cap.distributed_mass:
            raise CapabilityError(f"masses[{i}]: solver '{adapter.name}' takes no distributed masses")
        if m.inertia is not None and "rigid" not in cap.couplings:
            raise CapabilityError(f"masses[{i}].inertia: solver '{adapter.name}' has no rigid coupling to carry "
                                  "the inertia tensor; drop 'inertia' or use another solver")
    if "modal" not in cap.analyses:
        raise CapabilityError(f"solver '{adapter.name}' offers no natural-frequency analysis")
    return choice


def _check_connections(model: Model, adapter: SolverAdapter) -> None:
    cap = getattr(adapter, "capabilities")
    name = adapter.name
    couplings = getattr(cap, "couplings", frozenset())
    if model.members and not getattr(cap, "beams", False):
        raise CapabilityError(f"members: solver '{name}' has no beam elements in its plugin yet")
    for i, mb in enumerate(model.members):
        if (mb.side is not None or mb.offset) and not getattr(cap, "beam_offsets", False):
            raise CapabilityError(f"members[{i}]: solver '{name}' has no beams off their nodes (a stiffener's "
                                  "'side' or 'offset'); its plugin places sections on their axis only")
    shapes = getattr(cap, "beam_shapes", frozenset())
    for sec_name, sec in model.beam_sections.items():
        if model.members and shapes and sec.shape not in shapes:
            why = getattr(cap, "beam_shape_notes", {}).get(sec.shape)
            raise CapabilityError(f"beam_sections.{sec_name}.shape: solver '{name}' takes beam sections "
                                  f"{', '.join(sorted(shapes))}, not '{sec.shape}'" + (f": {why}" if why else ""))
    if model.has_continuum and not model.is_shell and (model.couplings or model.springs) \
            and not getattr(cap, "solid_connections", False):
        raise CapabilityError(f"couplings/springs: solver '{name}' ties couplings and springs to shell models "
                              "and reference points only, not to solid elements")
    if not model.has_continuum and not getattr(cap, "reference_points_alone", False):
        raise CapabilityError(f"geometry.kind: solver '{name}' cannot run a model without continuum ('points')")
    for i, c in enumerate(model.couplings):
        if c.kind not in couplings:
            raise CapabilityError(f"couplings[{i}].kind: solver '{name}' has no {c.kind} coupling; it offers "
                                  f"{', '.join(sorted(couplings)) or 'none'}")
    for i, s in enumerate(model.springs):
        if not getattr(cap, "springs", False):
            raise CapabilityError(f"springs[{i}]: solver '{name}' takes no springs")
        if s.rotational_stiffness and any(k > 0 for k in s.rotational_stiffness) \
                and not getattr(cap, "rotational_springs", False):
            raise CapabilityError(f"springs[{i}].rotational_stiffness: solver '{name}' takes no rotational springs")
    for i, s in enumerate(model.supports):
        if s.point is not None and s.kind not in ("clamped", "pinned", "fixed_dofs"):
            raise CapabilityError(f"supports[{i}].kind: a reference point takes clamped, pinned or fixed_dofs")


def _points_mesh(model: Model) -> Mesh:
    """The mesh of a model without continuum: no cells; its nodes are the reference points."""
    return Mesh(points=np.empty((0, 3)), family="vertex", cells=np.empty((0, 1), np.int64))


def prepare(model: Model, model_path: Path | None = None, level: int = 0,
            save_mesh_to: Path | None = None) -> Prepared:
    from .meshing.gmsh import build_mesh
    from .meshing.quality import quality_gate

    from .guards import check_size

    model_dir = model_path.parent if model_path is not None else Path(".")
    check_size(model, level, source=model_path)  # before gmsh allocates anything
    try:
        if model.has_continuum:
            mesh = build_mesh(model, model_dir, level=level, save_to=save_mesh_to)
            quality = quality_gate(mesh)  # inverted elements stop here, before any solver
        else:
            mesh = _points_mesh(model)
            quality = {}
        add_extra_nodes(model, mesh)
        constraints = resolve_constraints(model, mesh)
        masses = resolve_masses(model, mesh, constraints.fixed)
        connections = resolve_connections(model, mesh, constraints.fixed)
    except ModelError as exc:  # name the file the problem is in
        if exc.source is None and model_path is not None:
            raise ModelError(exc.detail, source=model_path, field=exc.field) from None
        raise
    except MeshingError as exc:
        if model_path is not None:
            raise type(exc)(f"{model_path}: {exc}") from None
        raise
    return Prepared(model, model_path, mesh, constraints, masses, connections, quality)


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
    conn = prep.connections
    scale_k = np.array([units.stiffness] * 3 + [units.rotational_stiffness] * 3)
    springs = [JobSpring(s.name, int(node_ids[s.a]), None if s.b is None else int(node_ids[s.b]),
                         tuple(float(x) for x in s.stiffness * scale_k),
                         tuple(tuple(float(x) for x in row) for row in s.axes))
               for s in conn.springs]
    props = beam_properties(model)
    names = list(props)
    beam_sections = [JobBeamSection(n, p.youngs_modulus * units.pressure,
                                    p.youngs_modulus / (2 * (1 + p.poisson_ratio)) * units.pressure,
                                    p.density * units.density, sp.area * L**2, sp.iy * L**4, sp.iz * L**4,
                                    sp.j * L**4, sp.shear_area_y * L**2, sp.shear_area_z * L**2,
                                    model.beam_sections[n].shape,
                                    tuple((k, v * L) for k, v in model.beam_sections[n].dims().items()
                                          if k in ("width", "height", "diameter", "wall", "web", "flange",
                                                   "thickness")), sp.iyz * L**4)
                     for n, (sp, p) in props.items()]
    couplings = [JobCoupling(c.name, c.kind, int(node_ids[c.reference]), tuple(int(x) for x in node_ids[c.nodes]),
                             None if c.weights is None else tuple(float(w) for w in c.weights))
                 for c in conn.ties]
    return SolverJob(
        title=model.name, model_hash=model.content_hash(), units=units, family=mesh.family,
        is_shell=mesh.is_shell, node_ids=node_ids, points=mesh.points * L, cells=mesh.cells,
        fixed=prep.constraints.fixed.copy(),
        node_sets={name: node_ids[mesh.region_nodes(name)] for name in mesh.regions},
        youngs_modulus=mat.youngs_modulus * units.pressure if mat else 0.0,
        poisson_ratio=mat.poisson_ratio if mat else 0.0,
        density=mat.density * units.density if mat else 0.0,
        thickness=sections[0].thickness if sections else None,
        masses=masses, modes=model.analysis.modes,
        min_frequency=model.analysis.min_frequency, max_frequency=model.analysis.max_frequency,
        threads=model.run.threads or available_cores(), timeout=model.run.timeout, options=dict(options or {}),
        sections=sections, cell_section=mesh.cell_sections().copy(),
        springs=springs, couplings=couplings, beams=mesh.beams.copy(),
        beam_section=np.array([names.index(s) for s in mesh.beam_sections], np.int64),
        beam_z=mesh.beam_z.copy(), beam_sections=beam_sections,
        beam_offset=(mesh.beam_offset * L).reshape(-1, 3) if len(mesh.beam_offset) else np.zeros((len(mesh.beams), 3)),
        extra_node_ids=tuple(int(node_ids[i]) for i in sorted(mesh.extra_nodes.values())),
        equations=[[(int(node_ids[n]), d + 1, c) for n, d, c in eq] for eq in prep.constraints.equations])


def check_job_capabilities(job: SolverJob, adapter: SolverAdapter) -> None:
    """Refuse, before the solver runs, what only the mesh reveals (constraint equations)."""
    if job.equations and not getattr(adapter.capabilities, "equations", False):
        raise CapabilityError(f"supports: solver '{adapter.name}' takes no constraint equations, which a support "
                              f"along a direction that is not an axis needs ({len(job.equations)} of them, e.g. "
                              "'simply_supported' on a skew edge); use a solver that does (modebridge solvers), "
                              "or edges along x, y or z")


class _Ahead:
    """Work that needs only the mesh, done on a thread while the solver runs: the user waits for
    the solve either way. At 200k DOF the mass matrix (with scipy.sparse's import) was 0.38 s of
    the run's own time after the solve. :meth:`result` joins and re-raises the thread's error."""

    def __init__(self, fn, *args):
        import threading

        self._out, self._exc = None, None
        # a daemon, and run_one joins it on every way out: when the solver failed at once, a thread
        # left importing h5py at the interpreter's exit crashed it (SIGSEGV, seen in the full-disk test)
        self._thread = threading.Thread(target=self._run, args=(fn, args), daemon=True, name="modebridge-ahead")
        self._thread.start()

    def _run(self, fn, args) -> None:
        try:
            self._out = fn(*args)
        except BaseException as exc:  # noqa: BLE001 - handed to the caller by result()
            self._exc = exc

    def join(self) -> None:
        """Wait for the thread (its error, if any, stays for :meth:`result`)."""
        self._thread.join()

    def result(self):
        self._thread.join()
        if self._exc is not None:
            raise self._exc
        return self._out


def prepared_mass_matrix(prep: Prepared):
    """:func:`bridge.massprops.mass_matrix` of a prepared model (sections, added and beam masses)."""
    rho, thick = cell_properties(prep.model, prep.mesh)
    return mass_matrix(prep.mesh, rho, thick, [(m.node, m.mass) for m in prep.masses],
                       beam_masses(prep.model, prep.mesh))


def _while_solving(prep: Prepared):
    """What a run does while the solver runs: assemble the mass matrix, and import the result
    writer's HDF5 library (h5py, 0.05 s) that saving the result needs next."""
    import h5py  # noqa: F401 - imported now, used by save_result after the solve

    return prepared_mass_matrix(prep)


def to_result(raw: RawModes, job: SolverJob, prep: Prepared, matrix=None) -> ModalResult:
    """Convert a plugin's raw modes (job units) into the neutral SI result on the mesh's node order.
    ``matrix``: :func:`prepared_mass_matrix` of ``prep`` if already at hand (the run assembles it
    while the solver runs)."""
    L, M = job.units.length, job.units.mass
    sM = np.sqrt(M)
    rows = _rows_of(np.asarray(raw.node_ids, np.int64), np.asarray(job.node_ids, np.int64))
    shapes = raw.shapes[:, rows, :]  # a new array (fancy indexing), scaled in place:
    shapes *= sM  # mass-normalised shapes carry 1/sqrt(mass) only
    rotations = raw.rotations[:, rows, :] * sM * L if raw.rotations is not None else None
    scale_m = np.array([1 / M] * 3 + [1 / (M * L * L)] * 3)
    vtk_type, conn = prep.mesh.vtk_cells()
    model = prep.model
    mp = mass_properties(prep.mesh, shapes, prep.constraints.fixed,
                         prepared_mass_matrix(prep) if matrix is None else matrix)
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
                       "sections": section_table(model, prep.mesh) if model.has_continuum else [],
                       "system_modes": _system_modes(prep)}
    return result


def _rows_of(solver_ids: np.ndarray, mesh_ids: np.ndarray) -> np.ndarray:
    """Row of each mesh node id in the solver's node list (the last row where an id repeats).

    A sorted search rather than a dict of Python ints: on 72 000 nodes the dict and the lookups
    cost tens of milliseconds, several times the binary .frd read of a 100-mode result."""
    order = np.argsort(solver_ids, kind="stable")
    ordered = solver_ids[order]
    pos = np.searchsorted(ordered, mesh_ids, side="right") - 1   # the last of equal ids
    found = (pos >= 0) & (ordered[np.maximum(pos, 0)] == mesh_ids) if ordered.size else np.zeros(mesh_ids.size, bool)
    if not found.all():
        missing = int(mesh_ids[np.flatnonzero(~found)[0]])
        raise ResultCheckError(f"the solver's mode shapes lack node {missing} of the mesh")
    return order[pos]


def _system_modes(prep: Prepared) -> int | None:
    """How many modes a model without continuum has at all (its reference points' free DOF that
    carry mass through a rigid coupling or directly), so that a check knows every mode was computed;
    None for a continuum."""
    if prep.model.has_continuum or prep.model.members:
        return None
    mesh, fixed = prep.mesh, prep.constraints.fixed
    ties = prep.connections.ties
    rigid = {t.reference for t in ties if t.kind == "rigid"}
    tied = {int(n) for t in ties for n in t.nodes} | {t.reference for t in ties if t.kind == "distributing"}
    count = 0
    for i in mesh.extra_nodes.values():
        if i in rigid:
            count += 6 - int(fixed[i].sum())
        elif i not in tied:
            count += 3 - int(fixed[i, :3].sum())
    return count


#: supported nodes kept for the report's model picture at most (an even sample beyond: the
#: metadata is one HDF5 attribute, which must stay well below 64 kB)
_MAX_MARKED = 4000


def _marks(prep: Prepared) -> dict:
    """What the report's model picture marks: nodes with a fixed DOF, point masses (node, kg),
    beams, springs and couplings."""
    sup = np.flatnonzero(np.asarray(prep.constraints.fixed).any(axis=1))
    con = prep.connections
    beams = np.asarray(prep.mesh.beams, np.int64).reshape(-1, 2)
    # satellite node -> its reference point: the six nodes that carry a mass's inertia
    owner = {int(i): int(ref) for ref, sat in con.satellites.values() for i in np.asarray(sat).ravel()}
    satellites = np.fromiter(owner, np.int64, len(owner))
    return {"supported_count": int(sup.size), "supported_nodes": _sample(sup, _MAX_MARKED).tolist(),
            "point_masses": _masses_drawn(prep.masses, owner)[:200],
            # beam members (point index pairs), springs [a, b] (b = -1: to the ground) and couplings
            # [kind, reference, tied nodes] (the six satellite nodes of a mass with inertia are left
            # out: they are the mass, not a connection the analyst made)
            "beam_count": int(len(beams)), "beams": beams[:_MAX_MARKED].tolist(),
            "springs": [[int(s.a), -1 if s.b is None else int(s.b)] for s in con.springs][:_MAX_MARKED],
            "couplings": [[t.kind, int(t.reference), [int(i) for i in _sample(tied, 200)]]
                          for t in con.ties
                          if (tied := np.setdiff1d(np.asarray(t.nodes, np.int64), satellites)).size][:200]}


def _masses_drawn(masses: list[NodalMass], owner: dict[int, int]) -> list[list]:
    """[node, kg] of each point mass as the analyst gave it: the six satellites that carry a mass's
    inertia (``owner``: satellite -> reference point) are drawn as one mass at their reference point."""
    out: dict[int, float] = {}
    for m in masses:
        node = owner.get(int(m.node), int(m.node))
        out[node] = out.get(node, 0.0) + float(m.mass)
    return [[n, kg] for n, kg in out.items()]


def _sample(idx: np.ndarray, most: int) -> np.ndarray:
    """``idx`` itself, or ``most`` of its entries evenly spread over it."""
    return idx if idx.size <= most else idx[np.linspace(0, idx.size - 1, most).astype(int)]


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
        choice = ElementChoice("", prep.model.mesh.family if prep.model.mesh is not None else NO_CONTINUUM, fam,
                               1.0, "model", f"{fam}, the model's family")
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
    try:
        folder.mkdir(parents=True, exist_ok=True)
        for p in folder.iterdir():  # a link planted among the solver's files is never written through
            if p.is_symlink():
                p.unlink()
    except OSError as exc:
        raise write_fault(folder, exc) from None
    _clear(folder)
    outcome = RunOutcome(adapter.name, folder)
    ahead = None
    try:
        check_job_capabilities(job, adapter)
        if job.modes > prep.free_dof:  # an eigen-solver would fail with its own code (ARPACK info=-3)
            raise ModelError(f"{job.modes} modes asked but the mesh has only {prep.free_dof} free DOF; ask for "
                             "fewer modes or refine the mesh", source=prep.model_path, field="analysis.modes")
        progress(f"{adapter.name}: writing the deck")
        adapter.write_deck(job, folder)
        progress(f"{adapter.name}: solving ({job.modes} modes, {prep.free_dof} free DOF)")
        ahead = _Ahead(_while_solving, prep)
        t0 = time.perf_counter()
        record = adapter.run(job, folder)
        wall = time.perf_counter() - t0
        progress(f"{adapter.name}: reading results")
        raw = enforce(adapter.read_results(job, folder, record), job, record, adapter.name)
        result = to_result(raw, job, prep, matrix=ahead.result())
        result.metadata.update({
            "provenance": {
                "model_name": prep.model.name, "model_hash": job.model_hash,
                "physics_hash": prep.model.physics_hash(),
                "model_file": str(prep.model_path) if prep.model_path else None,
                "modebridge_version": __version__, "solver": adapter.name,
                "solver_version": raw.solver_version or (adapter.version() or ""),
                "element_type": raw.element_type, "command": record.command,
                "wall_time_s": wall, "created": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
                "solver_warnings": list(prep.connections.notes) + list(raw.warnings),  # the record's and the plugin's (postconditions)
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
                                    constraint_rows=rigid_motion_rows(prep.mesh, prep.connections,
                                                                      prep.constraints.equations),
                                    notes=element_notes(prep.mesh.family, adapter))
        result.metadata["checks"] = [c.as_dict() for c in outcome.checks]
        outcome.summary = summarise(outcome, prep)
        save_result(result, folder / "result.vtkhdf")
        from .results import result_checksum

        outcome.summary["result_sha256"] = result_checksum(folder / "result.vtkhdf")
        atomic_write_text(folder / "summary.json", json.dumps(outcome.summary, indent=2))
    except (BridgeError, OSError) as exc:
        if not isinstance(exc, BridgeError):  # a write fault inside a plugin: name the file
            exc = write_fault(exc.filename or folder, exc)
        outcome.error = exc
        outcome.result = None
        record_error(folder, exc)
    finally:
        if ahead is not None:  # never left running: a thread still importing at exit crashed Python
            ahead.join()
    return outcome


def record_error(folder: Path, exc: BaseException, extra: str = "") -> None:
    """Clear a failed run's outputs and write its error.txt. A failure of that write (a full
    disk) is added to the error's message, never put in its place: the first error is the one
    the user sees."""
    try:
        _clear(folder)
        atomic_write_text(folder / "error.txt", f"{type(exc).__name__}: {exc}\n{extra}")
    except (BridgeError, OSError) as second:
        note = f" (and {folder / 'error.txt'} could not be written: {second})"
        if exc.args and isinstance(exc.args[0], str):
            exc.args = (exc.args[0] + note,) + exc.args[1:]


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
    with folder_lock(out, "run"):
        return _run_locked(model_path, model, chosen, missing, out, progress)


#: marks a folder as a modebridge run folder: its model.toml, mesh.vtu and solver folders are ours
RUN_MARKER = ".modebridge-run"


def check_run_folder(out: Path, model_path: Path, names: list[str]) -> None:
    """Refuse a run folder whose files modebridge would replace but did not write (the user's own
    model.toml or mesh.vtu), and any of those that is a symbolic link."""
    ours = (out / RUN_MARKER).is_file()
    for name in ["model.toml", "mesh.vtu", *names]:
        p = out / name
        if p.is_symlink():
            raise OutputError(f"{p}: is a symbolic link; a run never writes through a link "
                              "(remove it or choose another --out)")
        if not p.exists() or ours:
            continue
        if name == "model.toml" and model_path.exists() and os.path.samefile(p, model_path):
            continue  # the model being run is this folder's model.toml: it is read, never written
        raise OutputError(f"{p}: exists and was not written by a modebridge run; a run never replaces "
                          "files it did not make (choose a new or empty --out folder)")


def _run_locked(model_path, model, chosen, missing, out: Path, progress) -> tuple[Prepared, list[RunOutcome]]:
    adapters = [a for a, _ in chosen]
    check_run_folder(out, model_path, [a.name for a in adapters])
    atomic_write_text(out / RUN_MARKER, json.dumps({"modebridge": __version__}) + "\n")
    # no result of an earlier run may stand beside this run's model: clear every chosen
    # solver's folder before anything else can fail
    folders = {a.name: inside(out, a.name) for a in adapters}
    for folder in folders.values():
        if folder.is_dir():
            _clear(folder)
            (folder / "mesh.vtu").unlink(missing_ok=True)
    try:
        (out / "mesh.vtu").unlink(missing_ok=True)
    except OSError as exc:
        raise write_fault(out / "mesh.vtu", exc) from None
    if not (out / "model.toml").exists() or not os.path.samefile(model_path, out / "model.toml"):
        # a copy by rename: never through a link, never half a file
        atomic_write_bytes(out / "model.toml", read_input(model_path))
    progress("meshing with gmsh")
    prep = prepare(model, model_path, save_mesh_to=out / "mesh.vtu")
    base_job = make_job(prep)
    for a in adapters:
        if a not in missing:
            check_job_capabilities(base_job, a)
    own = model.mesh.family if model.mesh is not None else NO_CONTINUUM
    preps: dict[tuple[str, float], Prepared] = {(own, 1.0): prep}
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
        if key != (own, 1.0):  # the mesh this solver ran on, beside its results
            from .meshing.gmsh import save_mesh

            folders[a.name].mkdir(parents=True, exist_ok=True)
            save_mesh(p.mesh, folders[a.name] / "mesh.vtu")
        job = make_job(p, options=solver_options(model, a, model_path))
        outcomes.append(run_one(a, p, job, out, progress, choice))
    return prep, outcomes
