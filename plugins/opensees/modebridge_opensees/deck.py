"""OpenSees "deck" writer: a pure function of the job that returns a Python script.

OpenSees ships no stand-alone interpreter in its Python wheel, so the deck is a generated
Python script, ``model_os.py``, that builds the model with ``openseespy``, runs ``eigen`` with
the ``-genBandArpack`` solver (or the option ``eigen_solver``'s) and writes its own results file ``model_os.npz``. The
script is run in a subprocess by :mod:`.runner`; this module runs nothing.

Mass normalisation (what the script does, and why it can be trusted):

1. ``eigen -genBandArpack`` solves K φ = λ M φ with ARPACK (``dsaupd``/``dseupd``, generalised
   problem ``bmat = 'G'``, shift-invert mode 3), M·x being assembled from every element's
   ``getMass()`` and the nodal masses (OpenSees ``BandArpackSolver::myMv``). ``dseupd`` returns
   M-orthonormal Ritz vectors and OpenSees hands them out unscaled (``nodeEigenvector``): the
   raw modes satisfy φᵀMφ = 1 for the mass matrix OpenSees assembled.
2. The script checks that with a second route to the same M: with the nodal accelerations set
   to φ and zero displacements, ``reactions('-dynamic')`` returns, node by node, the element
   inertia forces plus the nodal masses times the accelerations, i.e. M·φ. From it come the
   modal mass matrix ΦᵀMΦ (off-diagonal terms must vanish to 1e-6 relative: the modes are
   M-orthogonal only for the M the eigen solver used) and, with unit accelerations, OpenSees'
   total mass per direction, which must equal the model's mass as modebridge computes it from
   the exact element measures (1e-6 relative). When both hold (``mass_verified``), each mode is
   divided by its √(φᵀMφ) — a correction of order 1e-12 with 3.7.1.2 — so φᵀMφ = 1 holds for a
   mass matrix that is shown to be both the eigen solver's and the model's. When they do not
   hold, the modes are kept as ARPACK returned them and the adapter warns; modebridge's own
   ``mass_normalisation`` check compares every result with its consistent mass anyway.
3. TenNodeTetrahedron in openseespy 3.7.1.2 integrates its stiffness *and* mass over 1/6 of the
   element volume (measured: total mass ρV/6, while its frequencies equal CalculiX's C3D10 on the
   same mesh to 1e-7, so K carries the same factor). Frequencies of the bare structure are right,
   but an added point mass then weighs six times too much against the structure (measured:
   481 Hz against 1030 Hz) and the modes are normalised to a sixth of the mass. For the elements
   in ``SCALED_ELEMENTS`` the script therefore measures the factor before ``eigen`` (total mass
   of the structure through ``reactions``, against ρV) and, when it is not 1, divides E and ρ by
   it and builds the model again; step 2 then verifies the result like any other.

Data tables are embedded as text blocks (one row per node, element, support and mass) and
read with numpy, so the script stays one readable, diffable file.
"""

from __future__ import annotations

import io
import re
from pathlib import Path

import numpy as np

from bridge.elements import node_order, register_node_order
from bridge.errors import DeckWriteError
from bridge.fem import scalar_mass_matrix
from bridge.solver import SolverJob

__all__ = ["SCRIPT_NAME", "RESULTS_NAME", "ELEMENT_TYPES", "SHELL_ELEMENTS", "NODE_ORDER", "EIGEN_SOLVERS",
           "eigen_solver", "FORMAT_VERSION", "choose_element", "quad_warp", "WARP_LIMIT", "deck_text",
           "structure_mass", "write_deck"]

SCRIPT_NAME = "model_os.py"
RESULTS_NAME = "model_os.npz"
#: version of the results file layout written by the script (checked by the parser)
FORMAT_VERSION = 1

#: modebridge family -> default OpenSees element.
#: quad4: ShellMITC4 (Dvorkin-Bathe MITC4, shear-deformable: valid for thin and moderately
#: thick shells). tri3: ASDShellT3 (shear-deformable like MITC4; ShellDKGT is Kirchhoff-thin).
#: hex8: SSPbrick (stabilised single-point brick): full-integration 8-node bricks lock in
#: bending (measured with this solver on a machine of this kind: 2180 Hz against 1793 Hz). hex20: 20NodeBrick (27 Gauss points).
ELEMENT_TYPES = {"tri3": "ASDShellT3", "quad4": "ShellMITC4",
                 "tet4": "FourNodeTetrahedron", "tet10": "TenNodeTetrahedron",
                 "hex8": "SSPbrick", "hex20": "20NodeBrick"}

#: shell formulations the user may choose (options quad_shell / tri_shell)
SHELL_ELEMENTS = {"quad4": ("ShellMITC4", "ShellDKGQ", "ASDShellQ4"),
                  "tri3": ("ASDShellT3", "ShellDKGT")}

#: gmsh -> OpenSees node order: opensees[i] = gmsh[NODE_ORDER[family][i]].
#: tet10: TenNodeTetrahedron of openseespy 3.7.1.2 takes gmsh's order (measured: frequencies
#: equal CalculiX's C3D10 on one mesh to 1e-7, and are wrong with nodes 9/10 swapped). Later
#: OpenSees sources swap nodes 9 and 10 (TenNodeTetrahedron::shp3d, "switching N9 with N10"),
#: one reason the plugin pins openseespy < 3.8; the physics tests would show such a change.
#: hex20: 20NodeBrick takes the corners, the bottom and top mid-edge rings, then the vertical
#: edges, as CalculiX does (measured: its consistent mass equals modebridge's exact one to 1e-15).
NODE_ORDER = {
    "tri3": [0, 1, 2], "quad4": [0, 1, 2, 3], "tet4": [0, 1, 2, 3],
    "tet10": [0, 1, 2, 3, 4, 5, 6, 7, 8, 9],
    "hex8": [0, 1, 2, 3, 4, 5, 6, 7],
    "hex20": [0, 1, 2, 3, 4, 5, 6, 7, 8, 11, 13, 9, 16, 18, 19, 17, 10, 12, 14, 15],
}

#: the table is registered with the core's element registry, which the deck reads and the
#: contract kit checks (bridge.elements.register_node_order)
for _family, _order in NODE_ORDER.items():
    register_node_order(_family, "opensees", _order)

#: eigen solvers of OpenSees' `eigen` command (option eigen_solver); the first is the default.
#: genBandArpack: ARPACK on banded K and M (shift-invert). fullGenLapack: LAPACK's dense
#: generalised solver (dggev) on full matrices: every eigenpair, no N-1 limit of ARPACK, but
#: O(n³) time and n² memory (measured here: 147 s for the contract kit's 16 x 12 quad4 plate,
#: 1326 DOF, on a loaded 2-core machine, against 3 s for genBandArpack; same frequencies).
#: symmBandLapack is not offered: it fails on shells (measured: "eigen -symmBandLapack failed").
EIGEN_SOLVERS = ("genBandArpack", "fullGenLapack")
#: linear solvers (OpenSees' `system`) for the shift-invert factorisations of genBandArpack
#: (option linear_solver); the first is the default. OpenSees' ArpackSOE factorises K through
#: the analysis' linear system of equations, ProfileSPD (skyline) when none is named; each gives
#: the same frequencies to 1e-12 (measured). Timings: benchmarks/bench_solver_paths.py and
#: benchmarks/RESULTS.md. Mumps (sparse multifrontal) is not offered although it was the fastest
#: on the 40 x 40 shell: with it ARPACK returned one member of a double pair only (8 x 8 clamped
#: quad4 plate, 10 modes: 9967.9 Hz once, then 16053.2 Hz twice, where every other system gives
#: 9967.9 Hz twice; measured with openseespy 3.7.1.2), a mode missed without a word. BandSPD is
#: not offered either: its Cholesky stops on a free body's singular K ("factorization failed,
#: matrix singular"), where the others go through, and it was slower than SuperLU.
LINEAR_SOLVERS = ("SuperLU", "ProfileSPD", "UmfPack")
#: the DOF numberer with each linear solver: reverse Cuthill-McKee narrows the band and the
#: skyline (it is OpenSees' own default); the sparse solvers order the matrix again themselves
_NUMBERER = {"SuperLU": "RCM", "ProfileSPD": "RCM", "BandSPD": "RCM", "UmfPack": "RCM", "Mumps": "RCM"}
#: the largest model fullGenLapack is written for (its two dense matrices: 2 x 8 n² bytes)
FULL_EIGEN_MAX_DOF = 4000

_SAFE_TITLE = re.compile(r"^[A-Za-z0-9 _.,()+-]*$")
#: the family of a model without continuum (reference points, springs, couplings, masses only)
NO_CONTINUUM = "vertex"
_ALIASES = {name.lower(): name for names in SHELL_ELEMENTS.values() for name in names}
_ALIASES.update({name.lower().removeprefix("shell"): name
                 for names in SHELL_ELEMENTS.values() for name in names})


def choose_element(family: str, setting: str | None = None) -> str:
    """The OpenSees element for ``family``; ``setting`` names the shell element(s) to use.

    ``setting`` lists shell elements separated by commas (case does not matter, the ``Shell``
    prefix may be left out: ``MITC4``, ``DKGQ``, ``ASDShellQ4``, ``DKGT``, ``ASDShellT3``); the one
    for the mesh's family is used. Solid families ignore it. A setting that names an unknown
    element, or none for the family being run, is an error, not a silent fallback.
    """
    if family == NO_CONTINUUM:
        return NO_CONTINUUM
    if family not in ELEMENT_TYPES:
        raise DeckWriteError(f"the OpenSees plugin has no element for family '{family}'; "
                             f"it offers {', '.join(sorted(ELEMENT_TYPES))}")
    if family not in SHELL_ELEMENTS or not setting or not setting.strip():
        return ELEMENT_TYPES[family]
    chosen = []
    for part in setting.split(","):
        key = part.strip().lower()
        if not key:
            continue
        if key not in _ALIASES:
            accepted = ", ".join(n for names in SHELL_ELEMENTS.values() for n in names)
            raise DeckWriteError(f"shell element setting {setting!r}: unknown shell element {part.strip()!r}; "
                                 f"accepted: {accepted} (comma-separated, one per family)")
        chosen.append(_ALIASES[key])
    fitting = [c for c in chosen if c in SHELL_ELEMENTS[family]]
    if not fitting:
        raise DeckWriteError(f"shell element setting {setting!r} names no element for {family} meshes; "
                             f"add one of {', '.join(SHELL_ELEMENTS[family])} (comma-separated)")
    if len(set(fitting)) > 1:
        raise DeckWriteError(f"shell element setting {setting!r} names two elements for {family} meshes")
    return fitting[0]


def linear_solver(job: SolverJob) -> str:
    """The job's option linear_solver, checked."""
    name = job.options.get("linear_solver") or LINEAR_SOLVERS[0]
    if name not in LINEAR_SOLVERS:
        raise DeckWriteError(f"linear solver {name!r} is not one of {', '.join(LINEAR_SOLVERS)}")
    return name


def eigen_solver(job: SolverJob, ndf: int) -> str:
    """The job's option eigen_solver, checked (fullGenLapack only for small models)."""
    name = job.options.get("eigen_solver") or EIGEN_SOLVERS[0]
    if name not in EIGEN_SOLVERS:
        raise DeckWriteError(f"eigen solver {name!r} is not one of {', '.join(EIGEN_SOLVERS)}")
    if name == "fullGenLapack":
        free = int(job.points.shape[0] * ndf - np.count_nonzero(job.fixed[:, :ndf]))
        if free > FULL_EIGEN_MAX_DOF:
            raise DeckWriteError(f"solver_options.opensees.eigen_solver: fullGenLapack works on dense matrices and "
                                 f"is written for at most {FULL_EIGEN_MAX_DOF} free DOF; this model has {free}: "
                                 "use genBandArpack")
    return name


#: quads whose corners leave their mean plane by more than this fraction of the element's size
#: are "warped" (unstructured quads on a bend or a curved face)
WARP_LIMIT = 1e-4
#: the quad4 element used instead of the default on warped quads: ShellMITC4 and ShellDKGQ of
#: openseespy 3.7.1.2 were 22 % and 21 % stiff on the first mode of a bent bracket meshed with
#: unstructured quads (CalculiX S4, Kratos and ASDShellQ4 agreed to 0.2 %; measured), while on
#: flat quads they agree with the others
WARPED_QUAD_ELEMENT = "ASDShellQ4"


def quad_warp(job: SolverJob) -> float:
    """Largest warp of the job's quads: corner distance from the mean plane / √(area)."""
    if job.family != "quad4" or not len(job.cells):
        return 0.0
    p = np.asarray(job.points, float)[job.cells[:, :4]]
    n = np.cross(p[:, 2] - p[:, 0], p[:, 3] - p[:, 1])
    size = np.linalg.norm(n, axis=1)
    n = n / np.maximum(size, 1e-300)[:, None]
    centre = p.mean(axis=1, keepdims=True)
    dist = np.abs(np.einsum("ekd,ed->ek", p - centre, n)).max(axis=1)
    return float((dist / np.sqrt(np.maximum(size / 2, 1e-300))).max())


def _table(rows: np.ndarray, fmt: list[str]) -> str:
    out = io.StringIO()
    if rows.size:
        np.savetxt(out, rows, fmt=fmt, delimiter=" ")
    return out.getvalue()


def deck_text(job: SolverJob, element: str | None = None) -> str:
    """The script ``model_os.py`` for ``job`` (job units), with ``element`` or the family's default."""
    if not _SAFE_TITLE.match(job.title):
        raise DeckWriteError("model name holds characters that cannot go into an OpenSees script")
    element = element or choose_element(job.family)
    continuum = job.family != NO_CONTINUUM
    allowed = SHELL_ELEMENTS.get(job.family, (ELEMENT_TYPES.get(job.family, NO_CONTINUUM),))
    if element not in allowed:
        raise DeckWriteError(f"element {element!r} does not fit family '{job.family}'")
    if continuum and job.is_shell != (job.family in SHELL_ELEMENTS):
        raise DeckWriteError(f"family '{job.family}' does not match the job's section kind")
    if job.is_shell and (job.thickness is None or job.thickness <= 0):
        raise DeckWriteError("shell job without a positive thickness")
    secs = job.section_list()
    if job.is_shell and any(sec.thickness is None or not sec.thickness > 0 for sec in secs):
        raise DeckWriteError("shell job with a section without a positive thickness")
    for m in job.masses:
        if m.inertia is not None and any(x > 0 for x in m.inertia):
            raise DeckWriteError("the OpenSees plugin takes no rotary inertia")
    ndf = 6 if job.is_shell or not continuum else 3
    if ndf == 3 and (job.couplings or job.springs):
        raise DeckWriteError("the OpenSees plugin ties couplings and springs to shell models or reference "
                             "points alone (rigidLink needs six DOF per node); this is a solid model")
    for c in job.couplings:
        if c.kind != "rigid":
            raise DeckWriteError(f"the OpenSees plugin has no {c.kind} coupling (coupling '{c.name}')")
    eigen = eigen_solver(job, ndf)
    if not continuum and len(job.beams) and len(job.node_ids) * ndf <= 3000:
        # a small frame of beams alone: the full LAPACK solver whatever the option says (ARPACK's
        # shift-invert returns the highest modes of a free frame; see EIGEN_SOLVER in the script)
        eigen = "fullGenLapack"
    ids = np.asarray(job.node_ids, dtype=np.int64)
    nodes = _table(np.column_stack([ids, job.points]), ["%d", "%.15g", "%.15g", "%.15g"])
    if continuum:
        conn = ids[job.cells[:, list(node_order(job.family, "opensees"))]]
    else:
        conn = np.empty((0, 1), np.int64)
    n_el = conn.shape[0]
    elements = _table(np.column_stack([np.arange(1, n_el + 1), conn]), ["%d"] * (conn.shape[1] + 1))
    fixed = np.asarray(job.fixed[:, :ndf], dtype=bool).copy()
    if ndf == 6 and job.extra_node_ids:
        # a reference point has rotations only as a rigid coupling's reference (or a tied node):
        # elsewhere nothing gives them stiffness or mass, so they are held
        turning = {c.reference for c in job.couplings} | {n for c in job.couplings for n in c.nodes} \
            | {int(n) for n in ids[np.asarray(job.beams, np.int64).ravel()]}
        pos = {int(n): i for i, n in enumerate(ids)}
        for n in job.extra_node_ids:
            if n not in turning:
                fixed[pos[n], 3:6] = True
    rows = np.flatnonzero(fixed.any(axis=1))
    supports = _table(np.column_stack([ids[rows], fixed[rows].astype(np.int64)]), ["%d"] * (ndf + 1))
    # OpenSees' `mass` command sets (does not add to) a node's mass: sum per node here
    per_node: dict[int, float] = {}
    for m in job.masses:
        per_node[int(m.node_id)] = per_node.get(int(m.node_id), 0.0) + float(m.mass)
    masses = _table(np.array(sorted(per_node.items()), dtype=float).reshape(-1, 2), ["%d", "%.15g"])
    # 20NodeBrick takes body forces and its own mass density after the material
    structure = structure_mass(job)
    args = "[MAT, 0.0, 0.0, 0.0, RHO * scale]" if element == "20NodeBrick" else "[MAT]"
    links = _table(np.array([(c.reference, n) for c in job.couplings for n in c.nodes], np.int64).reshape(-1, 2),
                   ["%d", "%d"])
    springs = _table(np.array([[s.node_a, s.node_b or 0, *s.stiffness, *s.axes[0], *s.axes[1]] for s in job.springs],
                              float).reshape(-1, 14), ["%d", "%d"] + ["%.15g"] * 12)
    nb = len(job.beams)
    offsets = np.asarray(job.beam_offset, float).reshape(-1, 3) if len(job.beam_offset) else np.zeros((nb, 3))
    beam_z, section_rows = _principal_axes(job)
    beams = _table(np.column_stack([ids[np.asarray(job.beams, np.int64)].reshape(-1, 2),
                                    np.asarray(job.beam_section, np.int64).reshape(-1, 1),
                                    beam_z.reshape(-1, 3), offsets])
                   if nb else np.empty((0, 9)),
                   ["%d", "%d", "%d", "%.15g", "%.15g", "%.15g", "%.15g", "%.15g", "%.15g"])
    sections = _table(np.array(section_rows, float).reshape(-1, 9), ["%.15g"] * 9)
    if nb:
        length = np.linalg.norm(job.points[job.beams[:, 1]] - job.points[job.beams[:, 0]], axis=1)
        rho_a = np.array([job.beam_sections[k].density * job.beam_sections[k].area for k in job.beam_section])
        structure += float((rho_a * length).sum())
    k_total = sum(sum(s.stiffness[:3]) for s in job.springs) or 1.0
    m_min = min((m.mass for m in job.masses), default=1.0)
    m_pad = max(sum(per_node.values()), 1e-12)
    first = secs[0]
    section_tables, materials = "", (_ONE_SECTION if continuum else "")
    if len(secs) > 1:
        # one section (shells) or nDMaterial (solids) per section, tags 1 … n; each element its own
        owner = job.cell_sections()
        for i, sec in enumerate(secs):
            if not np.any(owner == i):
                raise DeckWriteError(f"section '{sec.name}' holds no element")
        rows = np.array([[i + 1, sec.youngs_modulus, sec.poisson_ratio, sec.density,
                          sec.thickness if job.is_shell else 0.0] for i, sec in enumerate(secs)], float)
        section_tables = _SECTION_TABLES.format(
            sections=_table(rows, ["%d", "%.15g", "%.15g", "%.15g", "%.15g"]),
            element_section=_table((owner + 1).reshape(-1, 1), ["%d"]))
        materials = _SEVERAL_SECTIONS.replace(
            "{tagargs}", "[tag, 0.0, 0.0, 0.0, rho * scale]" if element == "20NodeBrick" else "[tag]")
    return _TEMPLATE.replace("{materials}", materials).format(
        title=job.title, model_hash=job.model_hash, units=job.units.name, family=job.family,
        element=element, ndf=ndf, modes=int(job.modes), E=f"{first.youngs_modulus:.15g}",
        nu=f"{first.poisson_ratio:.15g}", rho=f"{first.density:.15g}",
        thickness=f"{first.thickness:.15g}" if job.is_shell else "None",
        section_tables=section_tables,
        shell=str(job.is_shell), args=args, structure_mass=f"{structure:.15g}",
        added_mass=f"{sum(per_node.values()):.15g}",
        results=RESULTS_NAME, version=FORMAT_VERSION, eigen=eigen,
        linear=linear_solver(job), numberer=_NUMBERER[linear_solver(job)],
        nodes=nodes, elements=elements, supports=supports, masses=masses, links=links, springs=springs,
        beams=beams, beam_sections=sections,
        pad_count=0 if continuum or nb else -(-(2 * int(job.modes) + 8) // 3),
        pad_mass=f"{m_pad:.15g}", pad_stiffness=f"{1e6 * k_total / m_min * m_pad:.15g}")


def _principal_axes(job: SolverJob) -> tuple[np.ndarray, list[list[float]]]:
    """Local z of every beam element and the section rows (E G rho A Iy Iz J Avy Avz) about the
    section's principal axes: ElasticTimoshenkoBeam takes no product of inertia, so a section with
    Iyz ≠ 0 (an angle) gets its local z turned onto the principal axis nearest the given one, with
    the principal second moments (measured: an angle cantilever otherwise came out 36 % off
    Euler–Bernoulli on its first mode)."""
    rows, turn = [], []
    for s in job.beam_sections:
        P = np.array([[s.iz, s.iyz], [s.iyz, s.iy]])  # ∫y², ∫yz; ∫yz, ∫z² in (y, z)
        if abs(s.iyz) <= 1e-12 * max(s.iy, s.iz):
            rows.append([s.youngs_modulus, s.shear_modulus, s.density, s.area, s.iy, s.iz, s.j,
                         s.shear_area_y, s.shear_area_z])
            turn.append(None)
            continue
        val, vec = np.linalg.eigh(P)
        k = int(np.argmax(np.abs(vec[1])))  # the principal axis nearest local z
        zv = vec[:, k] * np.sign(vec[1, k])
        rows.append([s.youngs_modulus, s.shear_modulus, s.density, s.area, float(val[k]), float(val[1 - k]), s.j,
                     s.shear_area_y, s.shear_area_z])
        turn.append(zv)
    z = np.asarray(job.beam_z, float).reshape(-1, 3).copy()
    for e in range(len(job.beams)):
        zv = turn[int(job.beam_section[e])]
        if zv is None:
            continue
        x = job.points[job.beams[e, 1]] - job.points[job.beams[e, 0]]
        x = x / np.linalg.norm(x)
        y = np.cross(z[e], x)
        z[e] = zv[0] * y + zv[1] * z[e]
    return z, rows


def structure_mass(job: SolverJob) -> float:
    """Mass of the structure from the exact element measures (modebridge's consistent mass), job units."""
    rho, thickness = job.cell_density_thickness()
    return float(scalar_mass_matrix(job.points, job.cells, job.family, rho, thickness).sum())


def write_deck(job: SolverJob, workdir: Path, element: str | None = None) -> Path:
    """Write ``model_os.py`` into ``workdir`` (atomically) and return its path."""
    path = Path(workdir) / SCRIPT_NAME
    text = deck_text(job, element)
    tmp = path.with_suffix(".py.part")
    tmp.write_text(text, encoding="ascii")
    tmp.replace(path)
    return path


# build(): materials and elements of a one-section job (the text it always had)
_ONE_SECTION = """\
    if SHELL:
        ops.section("ElasticMembranePlateSection", MAT, E * scale, NU, THICKNESS, RHO * scale)
    else:
        ops.nDMaterial("ElasticIsotropic", MAT, E * scale, NU, RHO * scale)
    args = {args}
    for row in ELEMENTS:
        ops.element(ELEMENT, *[int(v) for v in row], *args)
"""

# build(): one section (shells) or material (solids) per section, each element with its own
_SEVERAL_SECTIONS = """\
    for tag, e, nu, rho, thickness in SECTIONS:
        tag = int(tag)
        if SHELL:
            ops.section("ElasticMembranePlateSection", tag, e * scale, nu, thickness, rho * scale)
        else:
            ops.nDMaterial("ElasticIsotropic", tag, e * scale, nu, rho * scale)
    density = {{int(row[0]): row[3] for row in SECTIONS}}
    for row, tag in zip(ELEMENTS, ELEMENT_SECTION[:, 0]):
        tag = int(tag)
        rho = density[tag]
        ops.element(ELEMENT, *[int(v) for v in row], *{tagargs})
"""

_SECTION_TABLES = '''
# section tag E nu rho thickness (0 for solids)
SECTIONS = table("""
{sections}""", float)
# section tag of each element (rows as in ELEMENTS)
ELEMENT_SECTION = table("""
{element_section}""", np.int64)'''

# The generated script. Braces for str.format are doubled where the script itself needs them.
_TEMPLATE = '''\
# OpenSees model written by modebridge (plugin modebridge-opensees); do not edit by hand.
# model: {title}
# model hash: {model_hash}
# units: {units}
# run: python {script} in this folder; writes {results}
import io
import os
import sys

import numpy as np
import openseespy.opensees as ops

FAMILY = "{family}"
ELEMENT = "{element}"
SHELL = {shell}
NDF = {ndf}
MODES = {modes}
E = {E}
NU = {nu}
RHO = {rho}
THICKNESS = {thickness}
MAT = 1
RESULTS = "{results}"
FORMAT_VERSION = {version}
#: mass of the structure (modebridge: exact element measures x density (x thickness))
STRUCTURE_MASS = {structure_mass}
#: the added (point) masses, summed
ADDED_MASS = {added_mass}
MODEL_MASS = STRUCTURE_MASS + ADDED_MASS
#: relative tolerance of the mass checks (M-orthogonality of the modes, total mass)
TOLERANCE = 1e-6
#: elements that integrate stiffness and mass over a wrong multiple of the element volume
#: (TenNodeTetrahedron in openseespy 3.7.1.2: 1/6); the script measures the multiple and
#: divides E and RHO by it, so that K, M and the point masses keep their true proportions
SCALED_ELEMENTS = ("TenNodeTetrahedron",)


def table(text, dtype):
    if not text.strip():
        return np.empty((0, 0), dtype)
    return np.loadtxt(io.StringIO(text), dtype=dtype, ndmin=2)


def fail(message):
    print("modebridge: ERROR " + message, flush=True)
    sys.exit(3)


# node x y z
NODES = table("""
{nodes}""", float)
# element nodes (OpenSees order)
ELEMENTS = table("""
{elements}""", np.int64)
# node fixed-dof flags (1 = fixed), dof 1..NDF
SUPPORTS = table("""
{supports}""", np.int64)
# node mass (each translation)
MASSES = table("""
{masses}""", float){section_tables}
# rigid couplings: reference node, tied node (rigidLink beam)
LINKS = table("""
{links}""", np.int64)
# springs (zeroLength): node a, node b (0: the ground), k along/about the mount's x y z (6),
# the mount's x and y directions
SPRINGS = table("""
{springs}""", float)
# beam elements (ElasticTimoshenkoBeam, consistent mass): node i, node j, section row, local z,
# the section centroid's offset from both nodes (global; the script seats the beam there)
BEAMS = table("""
{beams}""", float)
# beam sections: E G rho A Iy Iz J Avy Avz
BEAM_SECTIONS = table("""
{beam_sections}""", float)
#: a model without continuum has a handful of equations; ARPACK needs more than the modes asked
#: for: decoupled padding nodes on stiff springs (their modes far above the model's) fill the system
PAD_COUNT = {pad_count}
#: a frame of beams alone is small, and its stiffness matrix exactly singular when it is free:
#: ARPACK's shift-invert at zero then returns the highest modes (measured: a free 41-node beam gave
#: 93 kHz for its first mode); LAPACK's full generalised solver has no such trouble there
EIGEN_SOLVER = "-{eigen}"
#: OpenSees' linear system (and DOF numberer) that factorises K for ARPACK's shift-invert
LINEAR_SOLVER = "{linear}"
NUMBERER = "{numberer}"
PAD_MASS = {pad_mass}
PAD_STIFFNESS = {pad_stiffness}


#: nodes the script adds at the centroids of beams off their nodes (not part of the results; their
#: mass enters the mass checks)
SEATED = []


def build(scale=1.0):
    ops.wipe()
    ops.model("basic", "-ndm", 3, "-ndf", NDF)
    for tag, x, y, z in NODES:
        ops.node(int(tag), float(x), float(y), float(z))
    for row in SUPPORTS:
        ops.fix(int(row[0]), *[int(v) for v in row[1:]])
    for tag, m in MASSES:
        ops.mass(int(tag), *([float(m)] * 3 + [0.0] * (NDF - 3)))
{materials}
    connect()


def connect():
    """Rigid links, springs on zeroLength elements (a fixed ground node where a spring ends on the
    ground), and the padding of a model without continuum."""
    if LINKS.size or SPRINGS.size:
        ops.constraints("Transformation")
    for ref, dep in LINKS:
        ops.rigidLink("beam", int(ref), int(dep))
    where = {{int(r[0]): r[1:4] for r in NODES}}
    next_node = int(NODES[:, 0].max()) + 1 if NODES.size else 1
    next_element = int(ELEMENTS[:, 0].max()) + 1 if ELEMENTS.size else 1
    next_material = 1000
    # a beam off its nodes runs between nodes of its own at the section's centroid (its mass sits
    # where the section is; ElasticTimoshenkoBeam takes no joint offsets of the transformation:
    # measured, its stiffness stayed that of a beam on the nodes). At a reference point the new
    # node is tied by a rigid link. At a shell node (a stiffener) it hangs on a stiff link beam
    # without torsion: a rigid link would also tie the stiffener's rotation about the shell's
    # normal to the shell's drilling rotation, which stiffened the twisting mode of a free ribbed
    # plate by 11 % against a solid model (measured); the rotation about the normal moves no
    # point of the offset, so leaving it to the stiffener is exact.
    seated = {{}}
    del SEATED[:]
    shell_nodes = set(int(n) for n in ELEMENTS[:, 1:].ravel()) if SHELL and ELEMENTS.size else set()
    if np.any(BEAMS[:, 6:9] != 0.0) if BEAMS.size else False:
        ops.constraints("Transformation")
    next_transf = len(BEAMS) + 1
    for k, row in enumerate(BEAMS):
        E_, G_, rho_, A_, Iy_, Iz_, J_, Avy_, Avz_ = BEAM_SECTIONS[int(row[2])]
        ends = [int(row[0]), int(row[1])]
        offset = tuple(float(x) for x in row[6:9])
        if any(offset):
            axis = np.asarray(where[ends[1]], float) - np.asarray(where[ends[0]], float)
            for e, node in enumerate(ends):
                key = (node, offset)
                if key not in seated:
                    seated[key] = next_node
                    ops.node(next_node, *[float(a) + b for a, b in zip(where[node], offset)])
                    if node in shell_nodes:
                        length = float(np.linalg.norm(offset))
                        stiff = 1e4 * max(Iy_, Iz_, A_ * length * length)
                        ops.geomTransf("Linear", next_transf, *[float(x) for x in axis])
                        ops.element("elasticBeamColumn", next_element, node, next_node, 1e4 * A_, E_, G_,
                                    1e-9 * J_, stiff, stiff, next_transf)
                        next_transf += 1
                        next_element += 1
                    else:
                        ops.rigidLink("beam", node, next_node)
                    SEATED.append(next_node)
                    next_node += 1
                ends[e] = seated[key]
        ops.geomTransf("Linear", 1 + k, *[float(x) for x in row[3:6]])
        ops.element("ElasticTimoshenkoBeam", next_element, ends[0], ends[1], E_, G_, A_, J_, Iy_, Iz_,
                    Avy_, Avz_, 1 + k, "-mass", rho_ * A_, "-cMass")
        next_element += 1
    for row in SPRINGS:
        a, b = int(row[0]), int(row[1])
        if b == 0:
            b = next_node
            next_node += 1
            ops.node(b, *[float(x) for x in where[a]])
            ops.fix(b, *([1] * NDF))
        mats, dirs = [], []
        for d in range(NDF):
            if row[2 + d] > 0:
                ops.uniaxialMaterial("Elastic", next_material, float(row[2 + d]))
                mats.append(next_material)
                dirs.append(d + 1)
                next_material += 1
        ops.element("zeroLength", next_element, b, a, "-mat", *mats, "-dir", *dirs,
                    "-orient", *[float(x) for x in row[8:14]])
        next_element += 1
    for k in range(PAD_COUNT):
        ground, node = next_node, next_node + 1
        next_node += 2
        ops.node(ground, 0.0, 0.0, 0.0)
        ops.fix(ground, *([1] * NDF))
        ops.node(node, 0.0, 0.0, 0.0)
        ops.fix(node, *([0] * 3 + [1] * (NDF - 3)))
        ops.mass(node, *([PAD_MASS] * 3 + [0.0] * (NDF - 3)))
        ops.uniaxialMaterial("Elastic", next_material, PAD_STIFFNESS)
        ops.element("zeroLength", next_element, ground, node, "-mat", *([next_material] * 3), "-dir", 1, 2, 3)
        next_material += 1
        next_element += 1


def mass_times(tags, vectors):
    """M v with OpenSees' mass matrix: inertia forces for accelerations v, displacements 0."""
    for tag, v in zip(tags, vectors):
        for dof in range(NDF):
            ops.setNodeAccel(tag, dof + 1, float(v[dof]), "-commit")
    ops.reactions("-dynamic")
    return np.array([ops.nodeReaction(tag) for tag in tags], float)


def total_mass(tags):
    """r' M r for each translation r."""
    unit = np.eye(NDF)
    return np.array([mass_times(tags, unit[[d] * len(tags)])[:, d].sum() for d in range(3)])


def main():
    tags = [int(t) for t in NODES[:, 0]]
    build()
    factor = 1.0
    if ELEMENT in SCALED_ELEMENTS:
        factor = float((total_mass(tags)[0] - ADDED_MASS) / STRUCTURE_MASS)
        if not factor > 0:
            fail("%s has no positive mass (%.6g of the model's)" % (ELEMENT, factor))
        if abs(factor - 1.0) > TOLERANCE:
            print("modebridge: NOTE %s integrates stiffness and mass over %.9g times the element "
                  "volume; E and RHO are divided by that" % (ELEMENT, factor), flush=True)
            build(1.0 / factor)
    try:
        ops.numberer(NUMBERER)
        ops.system(LINEAR_SOLVER)
        eigenvalues = np.asarray(ops.eigen(EIGEN_SOLVER, MODES), float)
    except Exception as exc:
        fail("eigen %s failed: %s" % (EIGEN_SOLVER, exc))
    if eigenvalues.size != MODES:
        fail("eigen returned %d of the %d modes asked for" % (eigenvalues.size, MODES))
    every = tags + list(SEATED)
    phi = np.array([[ops.nodeEigenvector(tag, k + 1) for tag in every] for k in range(MODES)], float)
    if not np.all(np.isfinite(phi)) or not np.all(np.isfinite(eigenvalues)):
        fail("eigen returned non-finite values")
    # check, and where it holds apply, the normalisation with M from inertia forces
    m_phi = np.array([mass_times(every, phi[k]) for k in range(MODES)])
    modal = np.einsum("ind,jnd->ij", phi, m_phi)
    diag = np.diag(modal).copy()
    mass = total_mass(every)
    phi = phi[:, :len(tags)]
    if np.all(diag > 0):
        orthogonality = float((np.abs(modal - np.diag(diag)) / np.sqrt(np.outer(diag, diag))).max())
    else:
        orthogonality = float("inf")
    verified = bool(orthogonality <= TOLERANCE
                    and np.all(np.abs(mass - MODEL_MASS) <= TOLERANCE * MODEL_MASS))
    if verified:
        phi /= np.sqrt(diag)[:, None, None]
    out = {{
        "format_version": np.array(FORMAT_VERSION),
        "opensees_version": np.array(str(ops.version())),
        "element": np.array(ELEMENT),
        "eigenvalues": eigenvalues,
        "node_ids": np.array(tags, np.int64),
        "translations": phi[:, :, :3],
        "generalized_mass": diag,
        "orthogonality": np.array(orthogonality),
        "total_mass": mass,
        "model_mass": np.array(MODEL_MASS),
        "mass_verified": np.array(verified),
        "element_factor": np.array(factor),
    }}
    if NDF == 6:
        out["rotations"] = phi[:, :, 3:6]
    part = RESULTS + ".part"
    with open(part, "wb") as fh:
        np.savez(fh, **out)
    os.replace(part, RESULTS)
    print("modebridge: wrote %d modes to %s" % (MODES, RESULTS), flush=True)


if __name__ == "__main__":
    main()
'''.replace("{script}", SCRIPT_NAME)
