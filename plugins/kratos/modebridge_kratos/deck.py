"""Kratos case writer: a pure function of the job (no subprocesses, no Kratos import).

A Kratos case is four files in the work folder:

* ``model.mdpa`` — nodes, elements (gmsh node order mapped to Kratos's), the point-mass
  elements with their masses as elemental data, and one sub-model part per constrained DOF;
* ``ProjectParameters.json`` — an ``eigen_value`` analysis with the Spectra shift-invert
  eigensolver and one ``assign_scalar_variable_process`` per constrained DOF;
* ``StructuralMaterials.json`` — the isotropic material and the constitutive law;
* ``run_case.py`` — the main: runs the analysis, mass-normalises the modes with Kratos's own
  element mass matrices, checks them, and writes ``modes.npz`` (see :data:`RUN_CASE`).

Units are the job's (mm, t, s, N, MPa): Kratos has none of its own.
"""

from __future__ import annotations

import io
import json
import math
import re
from pathlib import Path

import numpy as np

from bridge.elements import node_order, register_node_order
from bridge.errors import DeckWriteError
from bridge.solver import SolverJob

from .connections import BEAM_ELEMENT, BEAM_LAW, SPRING_ELEMENT, Layout, layout

__all__ = ["ELEMENT_TYPES", "THICK_SHELL_ELEMENT_TYPES", "CONSTITUTIVE_LAWS", "NODE_ORDER", "DOF_VARIABLES",
           "RAYLEIGH_TOLERANCE", "EIGEN_SOLVERS", "eigensolver_settings", "MDPA", "PARAMETERS", "MATERIALS", "MAIN", "RESULTS", "RUN_CASE",
           "shell_theory", "SHELL_THEORIES", "AUTO_SHELL_THEORY", "MITC4_DRILLING_FACTOR",
           "kirchhoff_stiffening", "element_type", "mdpa_text", "parameters", "materials", "case_files", "write_deck"]

MDPA = "model.mdpa"
PARAMETERS = "ProjectParameters.json"
MATERIALS = "StructuralMaterials.json"
MAIN = "run_case.py"
RESULTS = "modes.npz"

#: modebridge family -> Kratos element (thin shells: Kirchhoff-Love, corotational formulation;
#: at the small amplitudes of an eigen-analysis the corotation plays no part).
#: Left out on purpose: quad8 and tri6 (Kratos has no 8- or 6-node shell) and hex8: Kratos's
#: 8-node bricks are the fully integrated one (2 × 2 × 2 Gauss points), which shear-locks in
#: bending (clamped plate 40 × 40 × 2: 2180 Hz against 1793 Hz, +22 %), and the B-bar one,
#: which only cures volumetric locking (2035 Hz, +14 %). hex20 is the serendipity brick with
#: its default 27-point rule (20 × 20 × 1 on the same plate: 1807 Hz, +0.8 %).
ELEMENT_TYPES = {
    "quad4": "ShellThinElementCorotational3D4N",
    "tri3": "ShellThinElementCorotational3D3N",
    "tet4": "SmallDisplacementElement3D4N",
    "tet10": "SmallDisplacementElement3D10N",
    "hex20": "SmallDisplacementElement3D20N",
}

#: thick (Reissner–Mindlin) shells: the quad by default (``shell_theory = "auto"``), both with
#: ``shell_theory = "thick"``
THICK_SHELL_ELEMENT_TYPES = {
    "quad4": "ShellThickElementCorotational3D4N",
    "tri3": "ShellThickElementCorotational3D3N",
}

#: element -> constitutive law. The thin shells and the thick triangle integrate a plane-stress
#: law through the thickness (ShellCrossSection: "needs 3 or 6 components"); Kratos 10.4 maps
#: ShellThickElementCorotational3D4N to its MITC4 element, which needs the 8-component
#: Reissner–Mindlin shell law (measured with this solver on a machine of this kind; both checked by running them).
CONSTITUTIVE_LAWS = {
    "ShellThinElementCorotational3D4N": "LinearElasticPlaneStress2DLaw",
    "ShellThinElementCorotational3D3N": "LinearElasticPlaneStress2DLaw",
    "ShellThickElementCorotational3D4N": "ReissnerMindlinShellElasticConstitutiveLaw",
    "ShellThickElementCorotational3D3N": "LinearElasticPlaneStress2DLaw",
    "SmallDisplacementElement3D4N": "LinearElastic3DLaw",
    "SmallDisplacementElement3D10N": "LinearElastic3DLaw",
    "SmallDisplacementElement3D20N": "LinearElastic3DLaw",
}

#: gmsh -> Kratos node order: kratos[i] = gmsh[NODE_ORDER[family][i]]. Corners agree.
#: tet10: gmsh puts edge (2,3) in slot 8 and edge (1,3) in slot 9, Kratos's Tetrahedra3D10 the
#: other way round. hex20: Kratos's Hexahedra3D20 numbers the bottom edges (0,1) (1,2) (2,3) (3,0),
#: then the vertical ones (0,4) (1,5) (2,6) (3,7), then the top ones (4,5) (5,6) (6,7) (7,4)
#: (not the Abaqus/CalculiX order, which puts the top edges before the vertical ones).
#: Found and checked with Kratos's own shape functions (tests/plugins/kratos/test_deck.py).
NODE_ORDER = {
    "quad4": [0, 1, 2, 3],
    "tri3": [0, 1, 2],
    "tet4": [0, 1, 2, 3],
    "tet10": [0, 1, 2, 3, 4, 5, 6, 7, 9, 8],
    "hex20": [0, 1, 2, 3, 4, 5, 6, 7, 8, 11, 13, 9, 10, 12, 14, 15, 16, 18, 19, 17],
}

#: the table is registered with the core's element registry, which the deck reads and the
#: contract kit checks (bridge.elements.register_node_order)
for _family, _order in NODE_ORDER.items():
    register_node_order(_family, "kratos", _order)

#: the job's DOF columns ux uy uz rx ry rz as Kratos variables
DOF_VARIABLES = ("DISPLACEMENT_X", "DISPLACEMENT_Y", "DISPLACEMENT_Z", "ROTATION_X", "ROTATION_Y", "ROTATION_Z")

#: |φᵀKφ/φᵀMφ − λ| allowed for an eigenpair, relative to the largest |λ| of the run (round-off
#: leaves ~1e-11; an unconverged pair is off by 1e-6 … 1e-1)
RAYLEIGH_TOLERANCE = 1e-6

_SAFE_TITLE = re.compile(r"^[A-Za-z0-9 _.,()+-]*$")
_BODY = "body"
_MASSES = "point_masses"
_BODY_PROPERTIES = 1  #: the first section's; section i (0-based) has 1 + i, the point masses n + 1


#: the values of the option ``shell_theory``
SHELL_THEORIES = ("auto", "thin", "thick")

#: what ``shell_theory = "auto"`` (the default) gives each shell family. Quads: the Reissner–Mindlin
#: MITC4 quad, which reduces to thin-shell theory on thin parts and, unlike the Kirchhoff quad, twists
#: as a 3-D strip does where the section is not thin (a 20 mm wide, 2 mm leg: Kirchhoff +3.7 %,
#: MITC4 −0.5 % against a tet10 solid, measured) and has no soft membrane on coarse meshes.
#: Triangles: the thin one, as Kratos's thick triangle is soft on the same leg's twisting modes
#: (−4.7 % at 1 mm, measured); a thin element on a section that is not thin is warned of
#: (:func:`kirchhoff_stiffening`).
AUTO_SHELL_THEORY = {"quad4": "thick", "tri3": "thin"}

#: Kratos's MITC4 quad (MITCThickShellElement3D4N) weighs its drilling penalty by the property
#: STABILIZATION_FACTOR: drilling stiffness = factor · G t per unit area, 0.1 when the property is
#: not given. On flat parts it changes nothing (a 100 × 20 × 2 mm strip: ≤ 0.01 %), but where
#: facets meet at an angle (a bend radius meshed with flat quads) 0.1 leaves the rotations about
#: the facets' normals too free: the twisting modes of a bent 2 mm bracket came out up to 1.3 % low
#: at 1 mm and 1.6 % at 0.5 mm against a tet10 solid (factor 0.01: −6.3 %; 1: −0.3 % at 1 mm, −0.5 %
#: at 0.5 mm; 10: −0.3 %; CalculiX S4/S8R and OpenSees ShellMITC4 within +0.6 %; measured). 1 is the penalty γ = G of Hughes and Brezzi (1989),
#: the value OpenSees's ShellMITC4 uses.
MITC4_DRILLING_FACTOR = 1.0


def shell_theory(job: SolverJob) -> str:
    """"thin" or "thick" for the job's shell family: the option ``shell_theory``
    ([solver_options.kratos]); "auto" (the default) as :data:`AUTO_SHELL_THEORY`."""
    theory = job.options.get("shell_theory") or "auto"
    if theory not in SHELL_THEORIES:
        raise DeckWriteError(f"shell theory '{theory}' is not one of {', '.join(SHELL_THEORIES)}")
    if theory == "auto":
        return AUTO_SHELL_THEORY.get(job.family, "thin")
    return theory


#: 3-D torsion of a thin rectangular strip b × t: J = b t³/3 · (1 − 0.630 t/b) (Timoshenko and
#: Goodier, Theory of Elasticity, torsion of rectangular bars — from memory); Kirchhoff plate
#: theory gives b t³/3, Reissner–Mindlin (κ = 5/6) b t³/3 · (1 − 0.632 t/b).
TORSION_EDGE_FACTOR = 0.630
#: a thin (Kirchhoff) shell is warned of where it may twist this much stiffer in frequency
KIRCHHOFF_WARNING = 0.01


def kirchhoff_stiffening(job: SolverJob) -> list[tuple[str, float, float, float]]:
    """(section, thickness, narrowest extent b, frequency excess) of each shell section on which
    Kirchhoff theory may over-state the twisting frequencies by :data:`KIRCHHOFF_WARNING` or more.

    b is the smallest extent of the section's nodes along their principal axes that exceeds its
    thickness (a flat part's normal is left out): the width of the narrowest strip the section
    can twist as. A strip's torsion stiffness is b t³/3 in thin theory and b t³/3 (1 − 0.630 t/b)
    in 3-D, so its twisting frequencies come out about 1/√(1 − 0.630 t/b) − 1 too high: the figure
    reported (a part whose twist is held by folds or supports is stiffened less)."""
    if not job.is_shell:
        return []
    owner = job.cell_sections()
    out = []
    for i, sec in enumerate(job.section_list()):
        t = sec.thickness
        cells = job.cells[owner == i]
        if not cells.size or not t:
            continue
        pts = job.points[np.unique(cells)]
        centred = pts - pts.mean(axis=0)
        axes = np.linalg.svd(centred, full_matrices=False)[2]
        span = np.ptp(centred @ axes.T, axis=0)
        widths = span[span > t]
        if not widths.size:
            continue
        b = float(widths.min())
        ratio = t / b
        excess = 1 / math.sqrt(max(1 - TORSION_EDGE_FACTOR * ratio, 1e-6)) - 1
        if excess >= KIRCHHOFF_WARNING:
            out.append((sec.name, float(t), b, excess))
    return out


def has_continuum(job: SolverJob) -> bool:
    return bool(np.asarray(job.cells).size)


def element_type(job: SolverJob) -> str:
    """The continuum's Kratos element; for a model without continuum, the beam element or "no continuum"."""
    if not has_continuum(job):
        return BEAM_ELEMENT if len(job.beams) else "no continuum"
    table = THICK_SHELL_ELEMENT_TYPES if job.is_shell and shell_theory(job) == "thick" else ELEMENT_TYPES
    etype = table.get(job.family)
    if etype is None:
        raise DeckWriteError(f"the Kratos plugin has no element for family '{job.family}'; "
                             f"it offers {', '.join(sorted(ELEMENT_TYPES))}")
    return etype


def _check(job: SolverJob) -> None:
    if not _SAFE_TITLE.match(job.title):
        raise DeckWriteError("model name holds characters that cannot go into a Kratos case")
    if job.is_shell and (job.thickness is None or not job.thickness > 0):
        raise DeckWriteError("shell job without a positive thickness")
    if job.modes < 1:
        raise DeckWriteError("the job asks for no mode")
    for m in job.masses:
        if m.inertia is not None and any(x > 0 for x in m.inertia):
            raise DeckWriteError("the Kratos plugin takes no rotary inertia")
        if not m.mass > 0:
            raise DeckWriteError(f"point mass on node {m.node_id} is not positive")
    for b in job.beam_sections:
        for name in ("youngs_modulus", "shear_modulus", "density", "area", "iy", "iz", "j"):
            value = getattr(b, name)
            if not (math.isfinite(value) and value > 0):
                raise DeckWriteError(f"beam section '{b.name}': {name} must be positive, got {value!r}")
    if not has_continuum(job):
        return
    for name, value in (("youngs_modulus", job.youngs_modulus), ("density", job.density)):
        if not (math.isfinite(value) and value > 0):
            raise DeckWriteError(f"material {name} must be positive, got {value!r}")
    for sec in job.section_list():
        for name, value in (("youngs_modulus", sec.youngs_modulus), ("density", sec.density)):
            if not (math.isfinite(value) and value > 0):
                raise DeckWriteError(f"section '{sec.name}': material {name} must be positive, got {value!r}")
        if job.is_shell and not (sec.thickness is not None and sec.thickness > 0):
            raise DeckWriteError(f"section '{sec.name}': shell section without a positive thickness")


def _n_sections(job: SolverJob) -> int:
    return len(job.section_list()) if has_continuum(job) else 0


def _mass_properties(job: SolverJob) -> int:
    """Properties id of the point masses: after the sections' (1 … n), so 2 for one section."""
    return _n_sections(job) + 1


def _beam_properties(job: SolverJob, k: int) -> int:
    """Properties id of beam section k (0-based): after the point masses'."""
    return _n_sections(job) + 2 + k


def _spring_properties(job: SolverJob) -> int:
    return _n_sections(job) + 2 + len(job.beam_sections)


def _beam_part(k: int, name: str) -> str:
    return f"beams_{k + 1}_" + re.sub(r"[^A-Za-z0-9_]", "_", name)[:48]


_SPRINGS = "springs"

#: reduced systems up to this many unknowns are solved densely (LAPACK), larger ones by ARPACK
DENSE_MAX = 1000

#: the run's warning when run_case.py solves the constrained eigen-problem itself
ASSEMBLED_NOTE = ("Kratos: couplings, mount axes and support equations as master-slave relations u = T u_red "
                  "applied by the run script to K and M summed from Kratos's element matrices; T^T K T, T^T M T "
                  "(exact, no penalty) solved with scipy, as Kratos 10.4.4's eigen strategy failed with its "
                  "LinearMasterSlaveConstraint on such a model; every eigenpair checked against its Rayleigh "
                  "quotient from the element matrices")
#: the same for a model without continuum and without constraints (a frame of beams)
FRAME_NOTE = ("Kratos: K and M summed from Kratos's element matrices and solved by the run script with scipy "
              "(a small frame: dense LAPACK; every eigenpair checked against its Rayleigh quotient)")


def case_layout(job: SolverJob) -> Layout:
    """The case's nodes, fixed DOFs and constraints (see :mod:`modebridge_kratos.connections`)."""
    return layout(job)


def _section_part(index: int, name: str) -> str:
    """Sub-model part of section ``index`` (0-based); the name is rebuilt from safe characters."""
    return f"section_{index + 1}_" + re.sub(r"[^A-Za-z0-9_]", "_", name)[:48]


def _ids_block(w, ids: np.ndarray, per_line: int = 10) -> None:
    for k in range(0, len(ids), per_line):
        w("        " + " ".join(str(int(i)) for i in ids[k:k + per_line]) + "\n")


def _fixed_dofs(job: SolverJob, lay: Layout | None = None) -> list[tuple[str, np.ndarray]]:
    """(Kratos variable, node ids) for every DOF column some node fixes."""
    lay = case_layout(job) if lay is None else lay
    ndof = 6 if lay.rotations else 3
    out = []
    for j in range(ndof):
        nodes = lay.node_ids[np.flatnonzero(lay.fixed[:, j])]
        if nodes.size:
            out.append((DOF_VARIABLES[j], nodes))
    return out


def _sub_model_part_name(variable: str) -> str:
    return f"fix_{variable.lower()}"


def _part(w, name: str, nodes, elements=()) -> None:
    w(f"Begin SubModelPart {name}\n    Begin SubModelPartNodes\n")
    _ids_block(w, np.asarray(nodes))
    w("    End SubModelPartNodes\n")
    if len(elements):
        w("    Begin SubModelPartElements\n")
        _ids_block(w, np.asarray(elements))
        w("    End SubModelPartElements\n")
    w("End SubModelPart\n\n")


def _vector_data(w, variable: str, ids, rows) -> None:
    w(f"Begin ElementalData {variable}\n")
    for i, r in zip(ids, rows):
        w(f"{int(i)} [3] ({r[0]:.15g}, {r[1]:.15g}, {r[2]:.15g})\n")
    w("End ElementalData\n\n")


def beam_local_y(job: SolverJob) -> np.ndarray:
    """(nb, 3) Kratos's LOCAL_AXIS_2 of each beam element: local y = z × x, so that Kratos's local 3 is
    the member's section z (I22 = ∫z² dA is the job's iy, I33 = ∫y² dA its iz)."""
    b = np.asarray(job.beams, np.int64)
    x = job.points[b[:, 1]] - job.points[b[:, 0]]
    x /= np.linalg.norm(x, axis=1)[:, None]
    y = np.cross(np.asarray(job.beam_z, float), x)
    return y / np.linalg.norm(y, axis=1)[:, None]


def mdpa_text(job: SolverJob) -> str:
    _check(job)
    etype = element_type(job)
    lay = case_layout(job)
    out = io.StringIO()
    w = out.write
    w(f"// modebridge Kratos case for model: {job.title}\n")
    w(f"// model hash {job.model_hash}\n")
    w(f"// units: {job.units.name}\n")
    w("Begin ModelPartData\nEnd ModelPartData\n\n")
    # properties are filled from StructuralMaterials.json: one per section (1 … n), then the masses',
    # the beam sections' and the springs'
    continuum = has_continuum(job)
    secs = job.section_list() if continuum else []
    for i in range(len(secs)):
        w(f"Begin Properties {_BODY_PROPERTIES + i}\nEnd Properties\n\n")
    if job.masses:
        w(f"Begin Properties {_mass_properties(job)}\nEnd Properties\n\n")
    for k in range(len(job.beam_sections) if len(job.beams) else 0):
        w(f"Begin Properties {_beam_properties(job, k)}\nEnd Properties\n\n")
    if lay.springs:
        w(f"Begin Properties {_spring_properties(job)}\nEnd Properties\n\n")
    w("Begin Nodes\n")
    np.savetxt(out, np.column_stack([lay.node_ids, lay.points]), fmt=["%d", "%.15g", "%.15g", "%.15g"],
               delimiter=" ")
    w("End Nodes\n\n")
    n_el = 0
    el_ids = np.empty(0, np.int64)
    if continuum:
        conn = job.node_ids[job.cells[:, list(node_order(job.family, "kratos"))]]
        n_el = conn.shape[0]
        el_ids = np.arange(1, n_el + 1)
        w(f"Begin Elements {etype}\n")
        owner = job.cell_sections()
        np.savetxt(out, np.column_stack([el_ids, _BODY_PROPERTIES + owner, conn]), fmt="%d", delimiter=" ")
        w("End Elements\n\n")
    mass_ids = np.arange(n_el + 1, n_el + 1 + len(job.masses))
    if job.masses:
        w("Begin Elements NodalConcentratedElement3D1N\n")
        for eid, m in zip(mass_ids, job.masses):
            w(f"{eid} {_mass_properties(job)} {m.node_id}\n")
        w("End Elements\n\n")
        w("Begin ElementalData NODAL_MASS\n")
        for eid, m in zip(mass_ids, job.masses):
            w(f"{eid} {m.mass:.15g}\n")
        w("End ElementalData\n\n")
    next_el = n_el + len(job.masses) + 1
    beam_ids = np.arange(next_el, next_el + len(job.beams))
    next_el += len(job.beams)
    if len(job.beams):
        b = np.asarray(job.beams, np.int64)
        sec = np.asarray(job.beam_section, np.int64)
        w(f"Begin Elements {BEAM_ELEMENT}\n")
        for eid, (i, j), k in zip(beam_ids, lay.beam_ends, sec):
            w(f"{eid} {_beam_properties(job, int(k))} {int(i)} {int(j)}\n")
        w("End Elements\n\n")
        _vector_data(w, "LOCAL_AXIS_2", beam_ids, beam_local_y(job))
    spring_ids = np.arange(next_el, next_el + len(lay.springs))
    next_el += len(lay.springs)
    if lay.springs:
        w(f"Begin Elements {SPRING_ELEMENT}\n")
        for eid, (q, g, _) in zip(spring_ids, lay.springs):
            w(f"{eid} {_spring_properties(job)} {q} {g}\n")
        w("End Elements\n\n")
        _vector_data(w, "NODAL_DISPLACEMENT_STIFFNESS", spring_ids, [k[:3] for _, _, k in lay.springs])
        _vector_data(w, "NODAL_ROTATIONAL_STIFFNESS", spring_ids, [k[3:] for _, _, k in lay.springs])
    if continuum:
        _part(w, _BODY, job.node_ids[np.unique(job.cells)] if len(secs) > 1 else job.node_ids, el_ids)
    if len(secs) > 1:
        for i, sec in enumerate(secs):
            mine = np.flatnonzero(owner == i)
            if mine.size == 0:
                raise DeckWriteError(f"section '{sec.name}' holds no element")
            _part(w, _section_part(i, sec.name), job.node_ids[np.unique(job.cells[mine])], el_ids[mine])
    if job.masses:
        _part(w, _MASSES, np.unique([m.node_id for m in job.masses]), mass_ids)
    if len(job.beams):
        for k, bs in enumerate(job.beam_sections):
            mine = np.flatnonzero(np.asarray(job.beam_section) == k)
            if mine.size:
                _part(w, _beam_part(k, bs.name), np.unique(lay.beam_ends[mine]),
                      beam_ids[mine])
    if lay.springs:
        _part(w, _SPRINGS, np.unique([n for q, g, _ in lay.springs for n in (q, g)]), spring_ids)
    for variable, nodes in _fixed_dofs(job, lay):
        _part(w, _sub_model_part_name(variable), nodes)
    return out.getvalue()


def _shift(job: SolverJob) -> float:
    """Spectra's first shift, (rad/s)²: a little below zero, so that K − σM is regular even for a
    free body and the lowest modes come first. With rigid-body modes present, −1 leaves the
    elastic pairs unconverged (measured: a free plate's f7 610 Hz instead of 671 Hz); run_case.py
    sees that in the Rayleigh quotients and solves again with −λ_elastic/100 (see RUN_CASE)."""
    return -1.0


#: Kratos eigen solvers (option eigen_solver; KratosLinearSolversApplication's solver_type), the
#: first the default. spectra_sym_g_eigs_shift: Lanczos-type shift-invert iteration (Spectra).
#: eigen_eigensystem: subspace iteration on K's sparse LU, without a shift: K must be regular,
#: so a model with rigid-body freedom is refused (measured on the contract kit's simply supported
#: 16 x 12 plate: the same frequencies as Spectra to 0.1 %, Rayleigh quotients equal to 1e-14).
EIGEN_SOLVERS = ("spectra_sym_g_eigs_shift", "eigen_eigensystem")


def eigensolver_settings(job: SolverJob) -> dict:
    """The eigensolver block of ProjectParameters.json for the job's option eigen_solver."""
    name = job.options.get("eigen_solver") or EIGEN_SOLVERS[0]
    if name not in EIGEN_SOLVERS:
        raise DeckWriteError(f"eigen solver {name!r} is not one of {', '.join(EIGEN_SOLVERS)}")
    if name == "eigen_eigensystem":
        if not np.asarray(job.fixed).any():
            raise DeckWriteError("solver_options.kratos.eigen_solver: eigen_eigensystem factorises K without a "
                                 "shift and cannot solve a free body (K is singular); use "
                                 "spectra_sym_g_eigs_shift")
        return {"solver_type": name, "number_of_eigenvalues": int(job.modes), "max_iteration": 1000,
                "tolerance": 1e-8, "echo_level": 1}
    return {"solver_type": name, "number_of_eigenvalues": int(job.modes), "max_iteration": 1000,
            "shift": _shift(job), "echo_level": 1}


def parameters(job: SolverJob) -> dict:
    _check(job)
    lay = case_layout(job)
    constraints = [{
        "python_module": "assign_scalar_variable_process",
        "kratos_module": "KratosMultiphysics",
        "process_name": "AssignScalarVariableProcess",
        "Parameters": {
            "model_part_name": f"Structure.{_sub_model_part_name(variable)}",
            "variable_name": variable,
            "constrained": True,
            "value": 0.0,
            "interval": [0.0, "End"],
        },
    } for variable, _ in _fixed_dofs(job, lay)]
    solver = {
        "solver_type": "eigen_value",
        "model_part_name": "Structure",
        "domain_size": 3,
        "echo_level": 1,
        "model_import_settings": {"input_type": "mdpa", "input_filename": Path(MDPA).stem},
        "material_import_settings": {"materials_filename": MATERIALS},
        "time_stepping": {"time_step": 1.1},
        "rotation_dofs": bool(lay.rotations),
        "eigensolver_settings": eigensolver_settings(job),
    }
    ours = {
        "results_file": RESULTS,
        "element_type": element_type(job),
        "rayleigh_tolerance": RAYLEIGH_TOLERANCE,
        "max_attempts": 3,
    }
    if lay.constraints:
        ours["constraints"] = lay.constraint_rows()
    if len(lay.node_ids) > len(job.node_ids):  # auxiliary nodes (springs, ground, stiffeners' centroids) stay out of the results
        ours["last_job_node"] = lay.last_job_node
    if lay.constraints or not has_continuum(job):
        ours["assemble"] = ASSEMBLED_NOTE if lay.constraints else FRAME_NOTE
        ours["dense_max"] = DENSE_MAX
    return {
        "problem_data": {
            "problem_name": "modebridge",
            "parallel_type": "OpenMP",
            "echo_level": 1,
            "start_time": 0.0,
            "end_time": 1.0,
        },
        "solver_settings": solver,
        "processes": {"constraints_process_list": constraints},
        "output_processes": {},
        "modebridge": ours,
    }


def materials(job: SolverJob) -> dict:
    _check(job)
    etype = element_type(job)
    secs = job.section_list() if has_continuum(job) else []
    lay = case_layout(job)
    props = []
    for i, sec in enumerate(secs):
        variables = {"YOUNG_MODULUS": sec.youngs_modulus, "POISSON_RATIO": sec.poisson_ratio,
                     "DENSITY": sec.density}
        if job.is_shell:
            variables["THICKNESS"] = sec.thickness
        if etype == THICK_SHELL_ELEMENT_TYPES["quad4"]:
            variables["STABILIZATION_FACTOR"] = MITC4_DRILLING_FACTOR
        # Kratos gives a block's properties to every element of its sub-model part: one section
        # covers the body, several have a part each
        part = _BODY if len(secs) == 1 else _section_part(i, sec.name)
        props.append({
            "model_part_name": f"Structure.{part}",
            "properties_id": _BODY_PROPERTIES + i,
            "Material": {"constitutive_law": {"name": CONSTITUTIVE_LAWS[etype]}, "Variables": variables,
                         "Tables": {}},
        })
    if job.masses:
        props.append({"model_part_name": f"Structure.{_MASSES}", "properties_id": _mass_properties(job),
                      "Material": {"Variables": {}, "Tables": {}}})
    for k, b in enumerate(job.beam_sections if len(job.beams) else []):
        if not np.any(np.asarray(job.beam_section) == k):
            continue  # a section no member uses has no sub-model part
        # Kratos's beam takes E and ν: ν from the section's own shear modulus, G = E / (2 (1 + ν))
        variables = {"YOUNG_MODULUS": b.youngs_modulus, "POISSON_RATIO": b.youngs_modulus / (2 * b.shear_modulus) - 1,
                     "DENSITY": b.density, "CROSS_AREA": b.area, "I22": b.iy, "I33": b.iz,
                     "TORSIONAL_INERTIA": b.j, "AREA_EFFECTIVE_Y": b.shear_area_y, "AREA_EFFECTIVE_Z": b.shear_area_z}
        props.append({"model_part_name": f"Structure.{_beam_part(k, b.name)}", "properties_id": _beam_properties(job, k),
                      "Material": {"constitutive_law": {"name": BEAM_LAW}, "Variables": variables, "Tables": {}}})
    if lay.springs:
        props.append({"model_part_name": f"Structure.{_SPRINGS}", "properties_id": _spring_properties(job),
                      "Material": {"Variables": {}, "Tables": {}}})
    return {"properties": props}


def _json(data: dict) -> str:
    return json.dumps(data, indent=4) + "\n"


def case_files(job: SolverJob) -> dict[str, str]:
    """File name -> text of every file of the case."""
    params = parameters(job)
    # ProjectParameters.json must hold only what Kratos validates: our block goes to the main
    ours = params.pop("modebridge")
    main = RUN_CASE.replace("@SETTINGS@", json.dumps(ours, sort_keys=True))
    return {MDPA: mdpa_text(job), PARAMETERS: _json(params), MATERIALS: _json(materials(job)), MAIN: main}


def write_deck(job: SolverJob, workdir: Path) -> Path:
    """Write the case into ``workdir`` (each file atomically) and return the path of the main."""
    workdir = Path(workdir)
    files = case_files(job)
    for name, text in files.items():
        path = workdir / name
        tmp = path.with_name(f".{name}.part")
        tmp.write_text(text, encoding="ascii")
        tmp.replace(path)
    return workdir / MAIN


#: The case's main, run as ``python run_case.py`` in the case folder by the Python that has
#: Kratos. @SETTINGS@ becomes a JSON object: results_file, element_type, rayleigh_tolerance, max_attempts.
RUN_CASE = r'''"""Kratos eigen-analysis written by modebridge; run it in this folder: python run_case.py

Writes modes.npz: eigenvalues (rad/s)^2, node_ids, translations and rotations per mode and
node, mass-normalised with Kratos's own element mass matrices (phi^T M phi = 1), the modal
masses Kratos's eigensolver had left (kratos_modal_mass) and each pair's Rayleigh quotient
from the element matrices. A pair whose quotient differs from its eigenvalue was returned
unconverged: the analysis is then run again with a shift scaled to the eigenvalues found.
"""

import importlib.metadata
import json
import os
import sys
import time

import numpy as np

import KratosMultiphysics as KM
import KratosMultiphysics.LinearSolversApplication  # noqa: F401  (registers the Spectra solver)
import KratosMultiphysics.StructuralMechanicsApplication as SMA
from KratosMultiphysics.StructuralMechanicsApplication.structural_mechanics_analysis import (
    StructuralMechanicsAnalysis)

SETTINGS = json.loads(r"""@SETTINGS@""")
VARIABLES = ("DISPLACEMENT_X", "DISPLACEMENT_Y", "DISPLACEMENT_Z", "ROTATION_X", "ROTATION_Y", "ROTATION_Z")


def _global_modes(model_part, n_modes, variables):
    """Eigenvectors as an (equations, modes) array, zero on fixed DOFs.

    EIGENVECTOR_MATRIX holds one row per mode and one column per nodal DOF, in the order of the
    node's DOF list (sorted by variable key, EigensolverStrategy::AssignVariables)."""
    keyed = sorted(variables, key=lambda v: KM.KratosGlobals.GetVariable(v).Key())
    n_eq = 0
    nodes = list(model_part.Nodes)
    for node in nodes:
        for v in variables:
            n_eq = max(n_eq, node.GetDof(KM.KratosGlobals.GetVariable(v)).EquationId + 1)
    phi = np.zeros((n_eq, n_modes))
    for node in nodes:
        vectors = np.array(node.GetValue(SMA.EIGENVECTOR_MATRIX), dtype=float).reshape(n_modes, -1)
        if vectors.shape[1] != len(variables):
            raise RuntimeError(f"node {node.Id}: {vectors.shape[1]} eigenvector columns for "
                               f"{len(variables)} DOFs")
        for j, v in enumerate(keyed):
            dof = node.GetDof(KM.KratosGlobals.GetVariable(v))
            if not dof.IsFixed():
                phi[dof.EquationId] = vectors[:, j]
    return phi


def _element_quadratic_forms(model_part, phi):
    """phi_i^T M phi_i and phi_i^T K phi_i summed over the elements' own matrices."""
    info = model_part.ProcessInfo
    m_sum = np.zeros(phi.shape[1])
    k_sum = np.zeros(phi.shape[1])
    M = KM.Matrix()
    K = KM.Matrix()
    for element in model_part.Elements:
        ids = element.EquationIdVector(info)
        if len(ids) == 0:
            continue
        v = phi[np.asarray(ids, dtype=np.int64)]
        element.CalculateMassMatrix(M, info)
        m_sum += np.einsum("im,ij,jm->m", v, np.array(M, dtype=float), v)
        element.CalculateLeftHandSide(K, info)
        k = np.array(K, dtype=float)
        if k.size:
            k_sum += np.einsum("im,ij,jm->m", v, k, v)
    return m_sum, k_sum


def _version():
    try:
        return importlib.metadata.version("KratosMultiphysics")
    except importlib.metadata.PackageNotFoundError:
        return ""


def _variable(dof):
    return KM.KratosGlobals.GetVariable(VARIABLES[dof])


def _eq(model_part, node, dof):
    return model_part.Nodes[node].GetDof(_variable(dof)).EquationId


def _constrained_eigenpairs(model, settings, shift):
    """The eigen-problem with modebridge's constraints, solved here rather than by Kratos's eigen
    strategy: every DOF of the case is numbered here, K and M are summed from Kratos's own element
    matrices (CalculateLeftHandSide, CalculateMassMatrix), u = T u_red holds the constraints (masters:
    the free DOFs that are no slave; slave rows hold their coefficients) and T^T K T, T^T M T are
    solved with scipy: LAPACK's dense generalised solver on (K - sM)^-1 M up to dense_max unknowns,
    ARPACK's shift-invert above. Kratos 10.4.4's eigen strategy honours a simple tie (a point mass
    tied to a beam's tip: the same eigenvalues as the mass on the tip), but on a box on four mounts
    (multi-master constraints, slaves of slaves resolved) its Spectra factorisation failed and its
    subspace solver reported a structurally zero column at a slave DOF (measured; the cause inside
    Kratos was not found), while K and M with the constraints applied by hand are regular.
    """
    import scipy.linalg
    import scipy.sparse
    import scipy.sparse.linalg

    analysis = StructuralMechanicsAnalysis(model, settings)
    analysis.Initialize()
    model_part = model["Structure"]
    info = model_part.ProcessInfo
    variables = VARIABLES[:6 if settings["solver_settings"]["rotation_dofs"].GetBool() else 3]
    n_eq = 0
    fixed = []
    for node in model_part.Nodes:
        for v in variables:
            dof = node.GetDof(KM.KratosGlobals.GetVariable(v))
            dof.EquationId = n_eq
            fixed.append(dof.IsFixed())
            n_eq += 1
    fixed = np.array(fixed, bool)
    rows, cols, kv, mv = [], [], [], []
    Ke, Me = KM.Matrix(), KM.Matrix()
    for element in model_part.Elements:
        ids = np.asarray(element.EquationIdVector(info), dtype=np.int64)
        if ids.size == 0:
            continue
        element.CalculateLeftHandSide(Ke, info)
        element.CalculateMassMatrix(Me, info)
        k, m = np.array(Ke, dtype=float), np.array(Me, dtype=float)
        r, c = np.meshgrid(ids, ids, indexing="ij")
        rows.append(r.ravel())
        cols.append(c.ravel())
        kv.append(k.ravel() if k.size == ids.size ** 2 else np.zeros(ids.size ** 2))
        mv.append(m.ravel() if m.size == ids.size ** 2 else np.zeros(ids.size ** 2))
    rows, cols = np.concatenate(rows), np.concatenate(cols)
    K = scipy.sparse.csr_matrix((np.concatenate(kv), (rows, cols)), shape=(n_eq, n_eq))
    M = scipy.sparse.csr_matrix((np.concatenate(mv), (rows, cols)), shape=(n_eq, n_eq))
    slave_rows = {_eq(model_part, n, d): [(_eq(model_part, mn, md), c) for mn, md, c in masters]
                  for n, d, masters in SETTINGS.get("constraints", [])}
    slave = np.zeros(n_eq, bool)
    slave[list(slave_rows)] = True
    masters = np.flatnonzero(~fixed & ~slave)
    column = -np.ones(n_eq, np.int64)
    column[masters] = np.arange(masters.size)
    rows, cols, vals = list(masters), list(range(masters.size)), [1.0] * masters.size
    for s, terms in slave_rows.items():
        for m, c in terms:
            if column[m] < 0:
                raise RuntimeError(f"constraint on equation {s}: master equation {m} is fixed or a slave")
            rows.append(s)
            cols.append(int(column[m]))
            vals.append(c)
    T = scipy.sparse.csr_matrix((vals, (rows, cols)), shape=(n_eq, masters.size))
    Kr = (T.T @ K @ T).tocsc()
    Mr = (T.T @ M @ T).tocsc()
    Kr = (Kr + Kr.T) * 0.5
    Mr = (Mr + Mr.T) * 0.5
    n = masters.size
    nev = min(int(settings["solver_settings"]["eigensolver_settings"]["number_of_eigenvalues"].GetInt()), n)
    if n <= SETTINGS["dense_max"]:
        A = (Kr - shift * Mr).toarray()
        # (K - sM)^-1 M x = mu x, lambda = s + 1/mu: the nev largest mu
        mu, vec = scipy.linalg.eigh(Mr.toarray(), A, subset_by_index=[n - nev, n - 1])
        order = np.argsort(-mu)
        mu, vec = mu[order], vec[:, order]
        if np.any(mu <= 0):
            raise RuntimeError(f"only {int((mu > 0).sum())} finite eigenvalues for {nev} modes")
        lam = shift + 1.0 / mu
    else:
        lam, vec = scipy.sparse.linalg.eigsh(Kr, k=nev, M=Mr, sigma=shift, which="LM")
    order = np.argsort(lam)
    vec = vec[:, order]
    vec = vec / np.sqrt(np.abs(np.einsum("im,im->m", vec, Mr @ vec)))  # M-orthonormal, as Kratos's solvers return them
    return model_part, lam[order], np.asarray(T @ vec)


def _solve(parameters, shift):
    """One eigen-analysis with the given shift; eigenpairs checked and mass-normalised."""
    settings = parameters.Clone()
    if settings["solver_settings"]["eigensolver_settings"].Has("shift"):  # eigen_eigensystem has none
        settings["solver_settings"]["eigensolver_settings"]["shift"].SetDouble(shift)
    model = KM.Model()
    rotations = settings["solver_settings"]["rotation_dofs"].GetBool()
    variables = VARIABLES if rotations else VARIABLES[:3]
    note = ""
    if SETTINGS.get("assemble"):
        model_part, eigenvalues, phi = _constrained_eigenpairs(model, settings, shift)
        n_modes = eigenvalues.size
        note = SETTINGS["assemble"]
    else:
        analysis = StructuralMechanicsAnalysis(model, settings)
        analysis.Run()
        model_part = model["Structure"]
        eigenvalues = np.array(model_part.ProcessInfo[SMA.EIGENVALUE_VECTOR], dtype=float)
        n_modes = eigenvalues.size
        if n_modes == 0:
            raise RuntimeError("the eigensolver returned no eigenvalue")
        phi = _global_modes(model_part, n_modes, variables)
    modal_mass, modal_stiffness = _element_quadratic_forms(model_part, phi)
    if np.any(modal_mass <= 0):
        raise RuntimeError(f"non-positive modal mass {modal_mass}: the eigenvector DOF map is wrong")
    phi /= np.sqrt(modal_mass)
    last = SETTINGS.get("last_job_node")
    nodes = sorted((n for n in model_part.Nodes if last is None or n.Id <= last), key=lambda n: n.Id)
    shapes = np.zeros((n_modes, len(nodes), len(variables)))
    for i, node in enumerate(nodes):
        for j, v in enumerate(variables):
            dof = node.GetDof(KM.KratosGlobals.GetVariable(v))
            if not dof.IsFixed():
                shapes[:, i, j] = phi[dof.EquationId]
    out = {
        "eigenvalues": eigenvalues,
        "frequencies": np.sqrt(np.abs(eigenvalues)) / (2 * np.pi),
        "node_ids": np.array([n.Id for n in nodes], dtype=np.int64),
        "translations": shapes[:, :, :3],
        "kratos_modal_mass": modal_mass,
        # phi^T K phi / phi^T M phi from the element matrices must equal the eigenvalue: this
        # proves the DOF map and catches eigenpairs the eigensolver returned unconverged
        "rayleigh_quotient": modal_stiffness / modal_mass,
        "shift": np.array(shift),
        "solve_note": np.array(note),
    }
    if rotations:
        out["rotations"] = shapes[:, :, 3:]
    return out


def _converged(result, tolerance):
    lam = result["eigenvalues"]
    scale = max(float(np.abs(lam).max()), 1.0)
    return bool(np.all(np.abs(result["rayleigh_quotient"] - lam) <= tolerance * scale))


def main():
    t0 = time.perf_counter()
    with open("ProjectParameters.json") as fh:
        parameters = KM.Parameters(fh.read())
    eigensolver = parameters["solver_settings"]["eigensolver_settings"]
    shift = eigensolver["shift"].GetDouble() if eigensolver.Has("shift") else 0.0
    for attempt in range(1, SETTINGS["max_attempts"] + 1):
        result = _solve(parameters, shift)
        result["attempts"] = np.array(attempt)
        if _converged(result, SETTINGS["rayleigh_tolerance"]) or not eigensolver.Has("shift"):
            break  # without a shift to move, unconverged pairs are left to the adapter's check
        # Near-zero (rigid-body) eigenvalues far above the others in shift-invert space leave the
        # elastic pairs unconverged: shift to a hundredth of the lowest elastic eigenvalue found
        lam = result["eigenvalues"]
        elastic = lam[lam > 1e3 * abs(shift)]
        if elastic.size == 0:
            break
        shift = -0.01 * float(elastic.min())
        print(f"modebridge: eigenpairs not converged (Rayleigh quotients differ); "
              f"solving again with shift {shift:.6g}", flush=True)
    result["kratos_version"] = np.array(_version())
    result["element_type"] = np.array(SETTINGS["element_type"])
    result["wall_time"] = np.array(time.perf_counter() - t0)
    target = SETTINGS["results_file"]
    tmp = "." + target + ".part"
    with open(tmp, "wb") as fh:
        np.savez(fh, **result)
    os.replace(tmp, target)
    n_modes, n_nodes = result["translations"].shape[:2]
    print(f"modebridge: wrote {target}: {n_modes} modes, {n_nodes} nodes, shift {shift:.6g}, "
          f"{int(result['attempts'])} solve(s)", flush=True)


if __name__ == "__main__":
    sys.exit(main())
'''
