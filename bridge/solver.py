"""What a solver plugin is: its declared capabilities, the job it is given, what it returns.

A plugin receives a :class:`SolverJob` whose numbers are in one consistent unit
system (:data:`bridge.units.SOLVER_SYSTEM`: mm, t, s, N, MPa) and returns
:class:`RawModes` in the same system; the core converts to SI.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Protocol, runtime_checkable

import numpy as np

from .units import UnitSystem

__all__ = ["Capabilities", "SolverJob", "RawModes", "RunRecord", "SolverAdapter", "JobMass", "SolverOption",
           "Substitute", "JobSection", "JobSpring", "JobCoupling", "JobBeamSection"]


@dataclass(frozen=True)
class SolverOption:
    """A setting of one solver that a model may give in ``[solver_options.<solver>]``.

    The core validates the model's value (type, choices, bounds) and hands the plugin every
    declared option in ``SolverJob.options``, defaults filled in. Options that change the result
    (``affects_result``) are part of a study task's cache key.
    """

    name: str  #: key in the model's table, e.g. "quad_shell"
    type: type  #: str, int, float or bool
    default: Any
    help: str
    choices: tuple | None = None  #: the accepted values, when a closed list
    minimum: float | None = None
    maximum: float | None = None
    affects_result: bool = True  #: False for e.g. a thread count: left out of the cache key
    applies_to: tuple[str, ...] = ()  #: element families it acts on (empty: all)

    def as_dict(self) -> dict:
        return {"name": self.name, "type": self.type.__name__, "default": self.default, "help": self.help,
                "choices": list(self.choices) if self.choices is not None else None,
                "minimum": self.minimum, "maximum": self.maximum, "affects_result": self.affects_result,
                "applies_to": list(self.applies_to)}


@dataclass(frozen=True)
class Substitute:
    """How a solver serves a family it has no element of: with another family, at a size."""

    family: str  #: the family it meshes with instead, e.g. "quad4" for "quad8"
    size_factor: float  #: element size relative to the model's (0.5: half the size, twice the divisions)
    reason: str  #: one line, shown in the run's summary


@dataclass(frozen=True)
class Capabilities:
    """What a solver plugin can do; the core refuses a model that asks for more, before running."""

    families: frozenset[str]  #: element families, e.g. {"quad8", "hex20"}
    supports: frozenset[str]  #: support kinds
    point_mass: bool = True
    rotary_inertia: bool = False
    distributed_mass: bool = True
    analyses: frozenset[str] = frozenset({"modal"})
    reports_effective_mass: bool = False  #: participation and effective masses come from the solver
    #: linear constraint equations between DOFs (a support along a direction that is not an axis,
    #: e.g. ``simply_supported`` on a skew edge)
    equations: bool = False
    #: family the solver lacks -> the family (and size) it serves that section with instead
    substitutes: Mapping[str, Substitute] = field(default_factory=dict)
    #: the solver's own settings a model may give (``[solver_options.<solver>]``)
    options: tuple[SolverOption, ...] = ()
    springs: bool = False  #: translational springs to the ground and between nodes, in their own axes
    rotational_springs: bool = False  #: springs on the rotations of rigid couplings' reference points
    couplings: frozenset[str] = frozenset()  #: coupling kinds: "rigid", "distributing"
    reference_points_alone: bool = False  #: models without continuum (geometry "points")
    solid_connections: bool = False  #: couplings and springs on the nodes of solid elements
    beams: bool = False  #: beam members (two-node beam elements with the section's A, I, J)
    beam_shapes: frozenset[str] = frozenset()  #: section shapes it takes (empty: every shape)
    #: beams whose section centroid lies off their nodes (stiffeners seated on a shell's face)
    beam_offsets: bool = False
    #: section shape it refuses -> why (appended to the refusal line)
    beam_shape_notes: Mapping[str, str] = field(default_factory=dict)

    def as_dict(self) -> dict:
        return {"families": sorted(self.families), "supports": sorted(self.supports),
                "point_mass": self.point_mass, "rotary_inertia": self.rotary_inertia,
                "distributed_mass": self.distributed_mass, "analyses": sorted(self.analyses),
                "reports_effective_mass": self.reports_effective_mass, "equations": self.equations,
                "substitutes": {k: {"family": v.family, "size_factor": v.size_factor, "reason": v.reason}
                                for k, v in sorted(self.substitutes.items())},
                "options": [o.as_dict() for o in self.options], "springs": self.springs,
                "rotational_springs": self.rotational_springs, "couplings": sorted(self.couplings),
                "reference_points_alone": self.reference_points_alone,
                "solid_connections": self.solid_connections, "beams": self.beams,
                "beam_shapes": sorted(self.beam_shapes), "beam_offsets": self.beam_offsets}


@dataclass(frozen=True)
class JobMass:
    node_id: int
    mass: float  #: system mass units
    inertia: tuple[float, float, float] | None  #: system mass x length^2


@dataclass(frozen=True)
class JobSection:
    """One section of the job: its elements share material and thickness."""

    name: str  #: section name (validated: a letter, then letters, digits, _ or -)
    material: str  #: material name (validated like ``name``)
    youngs_modulus: float  #: system pressure units
    poisson_ratio: float
    density: float  #: system density units
    thickness: float | None  #: system length units, shells only


@dataclass(frozen=True)
class JobSpring:
    """A spring from node ``node_a`` to the ground (``node_b`` None) or to node ``node_b``."""

    name: str
    node_a: int
    node_b: int | None
    stiffness: tuple[float, float, float, float, float, float]  #: along/about the mount's x y z: force/length, force x length/rad
    axes: tuple[tuple[float, float, float], ...]  #: rows: the mount's unit x, y, z in global coordinates


@dataclass(frozen=True)
class JobCoupling:
    """A reference node tied to nodes. ``rigid``: the nodes move with the reference as one rigid body
    (the reference carries six DOF). ``distributing``: the reference's translations are the weighted
    mean of the nodes' (u_ref = Σ w_i u_i); it adds no stiffness."""

    name: str
    kind: str  #: "rigid" or "distributing"
    reference: int  #: node id
    nodes: tuple[int, ...]  #: node ids
    weights: tuple[float, ...] | None = None  #: distributing only, summing to 1


@dataclass(frozen=True)
class JobBeamSection:
    """A beam section in job units, about its centroid: local z is the member's ``beam_z``."""

    name: str
    youngs_modulus: float
    shear_modulus: float
    density: float
    area: float
    iy: float  #: ∫ z² dA
    iz: float  #: ∫ y² dA
    j: float
    shear_area_y: float
    shear_area_z: float
    shape: str = "general"  #: bridge.sections.SHAPES
    dims: tuple[tuple[str, float], ...] = ()  #: the shape's dimensions, job length units
    iyz: float = 0.0  #: ∫ y z dA about the centroid (channel, angle: principal axes turned from y, z)


@dataclass
class SolverJob:
    """Everything a plugin needs to write a deck, in ``units``."""

    title: str  #: model name, already validated (letters, digits, spaces, _ . , ( ) + -)
    model_hash: str
    units: UnitSystem
    family: str
    is_shell: bool
    node_ids: np.ndarray  #: (n,) int64, 1-based
    points: np.ndarray  #: (n, 3) system length units
    cells: np.ndarray  #: (ne, k) 0-based indices into points, gmsh node order
    fixed: np.ndarray  #: (n, 6) bool: ux uy uz rx ry rz
    node_sets: dict[str, np.ndarray]  #: region name -> node ids
    youngs_modulus: float  #: of the first (or only) section
    poisson_ratio: float  #: of the first (or only) section
    density: float  #: of the first (or only) section
    thickness: float | None  #: shells only; of the first (or only) section
    masses: list[JobMass]
    modes: int
    min_frequency: float | None  #: Hz
    max_frequency: float | None  #: Hz
    threads: int = 1
    timeout: float = 1800.0  #: s
    jobname: str = "job"
    #: homogeneous linear constraints Σ c·u = 0: each a list of (node id, dof 1..6, coefficient),
    #: the first term the dependent DOF (coefficient 1); empty unless a support needs them
    equations: list[list[tuple[int, int, float]]] = field(default_factory=list)
    #: the solver's options (``[solver_options.<solver>]``), validated, every declared one with its default
    options: dict[str, Any] = field(default_factory=dict)
    springs: list[JobSpring] = field(default_factory=list)
    couplings: list[JobCoupling] = field(default_factory=list)
    #: ids of the nodes outside the continuum (reference points, inertia-carrying nodes); they have
    #: rotations only as references of rigid couplings
    extra_node_ids: tuple[int, ...] = ()
    #: beam elements: (nb, 2) 0-based indices into points, a section index and the local z per element
    beams: np.ndarray = field(default_factory=lambda: np.empty((0, 2), np.int64))
    beam_section: np.ndarray = field(default_factory=lambda: np.empty(0, np.int64))
    beam_z: np.ndarray = field(default_factory=lambda: np.empty((0, 3)))
    beam_sections: list[JobBeamSection] = field(default_factory=list)
    #: (nb, 3) per beam element, its section centroid's offset from its nodes (global, job length
    #: units); empty or zeros: on the nodes
    beam_offset: np.ndarray = field(default_factory=lambda: np.empty((0, 3)))
    #: every section (empty: one section from the scalar fields above)
    sections: list[JobSection] = field(default_factory=list)
    #: (ne,) int64 index into ``sections`` of each element (None: all in the first)
    cell_section: np.ndarray | None = None

    def section_list(self) -> list[JobSection]:
        """The job's sections; a job built without them has one, from the scalar fields."""
        if self.sections:
            return list(self.sections)
        return [JobSection("section", "material", self.youngs_modulus, self.poisson_ratio, self.density,
                           self.thickness)]

    def cell_sections(self) -> np.ndarray:
        """(ne,) int64 section index of every element."""
        if self.cell_section is None or not self.sections:
            return np.zeros(self.cells.shape[0], dtype=np.int64)
        return np.asarray(self.cell_section, dtype=np.int64)

    def cell_density_thickness(self) -> tuple[np.ndarray, np.ndarray | None]:
        """Per element density and (shells) thickness, system units."""
        secs = self.section_list()
        idx = self.cell_sections()
        rho = np.array([s.density for s in secs], float)[idx]
        if not self.is_shell:
            return rho, None
        return rho, np.array([s.thickness if s.thickness is not None else np.nan for s in secs], float)[idx]


@dataclass
class RunRecord:
    """What a solver run left behind (no parsing)."""

    command: list[str]
    returncode: int
    wall_time: float  #: s
    log_path: Path
    warnings: list[str] = field(default_factory=list)


@dataclass
class RawModes:
    """A plugin's eigen-results, in the job's unit system."""

    frequencies: np.ndarray  #: (m,) Hz
    eigenvalues: np.ndarray  #: (m,) (rad/s)^2, as the solver reported (may be slightly negative)
    node_ids: np.ndarray  #: (n,) ids of the rows of ``shapes``
    shapes: np.ndarray  #: (m, n, 3) translations, mass-normalised (1 / sqrt(mass))
    rotations: np.ndarray | None = None  #: (m, n, 3), rad / (length sqrt(mass))
    participation: np.ndarray | None = None  #: (m, 6) Γ: sqrt(mass) ; rotational ones x length
    effective_mass: np.ndarray | None = None  #: (m, 6) mass ; rotational ones mass x length^2
    total_effective_mass: np.ndarray | None = None  #: (6,)
    reference_point: tuple[float, float, float] = (0.0, 0.0, 0.0)  #: for rotational participation
    normalisation: str = "mass"
    solver_version: str = ""
    element_type: str = ""
    warnings: list[str] = field(default_factory=list)


@runtime_checkable
class SolverAdapter(Protocol):
    """The object a plugin registers through ``bridge_register_solvers``."""

    name: str  #: short name used on the command line, e.g. "calculix"
    label: str  #: human name
    capabilities: Capabilities

    def locate(self) -> str | None:
        """Path of the executable, or None when it is not installed."""

    def version(self) -> str | None:
        """Solver version string, or None when unknown."""

    def write_deck(self, job: SolverJob, workdir: Path) -> Path:
        """Write the input files into ``workdir``; return the main one. No subprocesses."""

    def run(self, job: SolverJob, workdir: Path) -> RunRecord:
        """Run the solver in ``workdir`` without a shell, with ``job.timeout`` and ``job.threads``."""

    def read_results(self, job: SolverJob, workdir: Path, record: RunRecord) -> RawModes:
        """Parse the results written by :meth:`run`."""
