"""CalculiX input deck writer: a pure function of the job (no subprocesses)."""

from __future__ import annotations

import io
import re
from pathlib import Path

import numpy as np

from bridge.elements import node_order, register_node_order
from bridge.errors import DeckWriteError
from bridge.solver import SolverJob

__all__ = ["ELEMENT_TYPES", "NODE_ORDER", "write_deck", "deck_text"]

#: modebridge family -> CalculiX element type. S4R is avoided: a single layer of
#: reduced-integration hexahedra misbehaves in plate bending (measured with this solver on a machine of this kind).
#: C3D8I (incompatible modes) is used for hex8 because full-integration C3D8 locks in bending.
ELEMENT_TYPES = {"tri3": "S3", "tri6": "S6", "quad4": "S4", "quad8": "S8R",
                 "tet4": "C3D4", "tet10": "C3D10", "hex8": "C3D8I", "hex20": "C3D20R"}

#: gmsh -> CalculiX node order: ccx[i] = gmsh[NODE_ORDER[family][i]]
NODE_ORDER = {
    "tri3": [0, 1, 2], "tri6": [0, 1, 2, 3, 4, 5], "quad4": [0, 1, 2, 3],
    "quad8": [0, 1, 2, 3, 4, 5, 6, 7], "tet4": [0, 1, 2, 3],
    "tet10": [0, 1, 2, 3, 4, 5, 6, 7, 9, 8],
    "hex8": [0, 1, 2, 3, 4, 5, 6, 7],
    "hex20": [0, 1, 2, 3, 4, 5, 6, 7, 8, 11, 13, 9, 16, 18, 19, 17, 10, 12, 14, 15],
}

#: the table is registered with the core's element registry, which the deck reads and the
#: contract kit checks (bridge.elements.register_node_order)
for _family, _order in NODE_ORDER.items():
    register_node_order(_family, "calculix", _order)

_SAFE_TITLE = re.compile(r"^[A-Za-z0-9 _.,()+-]*$")
_PER_LINE = 16  # CalculiX reads at most 16 entries on an element data line
# CalculiX reads at most 20 characters of a real number: "-1.43527716167129e-15" (21, as %.15g
# writes it) was read as -0.1435 and made a tet10 of a bent sheet "nonpositive jacobian"
# (measured). 14 significant digits keep every number, sign and two-digit exponent in 20.


def _set_name(index: int, name: str, prefix: str = "R") -> str:
    # region and section names are validated upstream; the set name is rebuilt from safe characters only
    clean = re.sub(r"[^A-Za-z0-9_]", "_", name)[:60]
    return f"{prefix}{index}_{clean}".upper()


def _sections(w, job: SolverJob, n_el: int) -> None:
    """One *MATERIAL per material, and per section an element set and its *SHELL/*SOLID SECTION.
    A one-section job keeps the deck it always had: MAT1 on EALL."""
    secs = job.section_list()
    if job.is_shell:
        if job.thickness is None or job.thickness <= 0:
            raise DeckWriteError("shell job without a positive thickness")
        for s in secs:
            if s.thickness is None or not s.thickness > 0:
                raise DeckWriteError(f"section '{s.name}': shell section without a positive thickness")
    mats: dict[str, int] = {}
    for s in secs:
        if s.material not in mats:
            mats[s.material] = len(mats) + 1
            w(f"*MATERIAL, NAME=MAT{mats[s.material]}\n*ELASTIC\n")
            w(f"{s.youngs_modulus:.14g}, {s.poisson_ratio:.14g}\n")
            w(f"*DENSITY\n{s.density:.14g}\n")
    if len(secs) == 1:
        sets = ["EALL"]
    else:
        owner = job.cell_sections()
        sets = []
        for i, s in enumerate(secs):
            ids = np.flatnonzero(owner == i) + 1
            if ids.size == 0:
                raise DeckWriteError(f"section '{s.name}' holds no element")
            name = _set_name(i + 1, s.name, prefix="S")
            sets.append(name)
            w(f"*ELSET, ELSET={name}\n")
            for k in range(0, ids.size, 16):
                w(", ".join(str(int(e)) for e in ids[k:k + 16]) + "\n")
    for s, elset in zip(secs, sets):
        mat = f"MAT{mats[s.material]}"
        if job.is_shell:
            w(f"*SHELL SECTION, ELSET={elset}, MATERIAL={mat}\n{s.thickness:.14g}\n")
        else:
            w(f"*SOLID SECTION, ELSET={elset}, MATERIAL={mat}\n")


def deck_text(job: SolverJob) -> str:
    if not _SAFE_TITLE.match(job.title):
        raise DeckWriteError("model name holds characters that cannot go into a CalculiX deck")
    etype = ELEMENT_TYPES.get(job.family)
    if etype is None:
        raise DeckWriteError(f"CalculiX plugin has no element for family '{job.family}'")
    out = io.StringIO()
    w = out.write
    w(f"** modebridge deck for model: {job.title}\n")
    w(f"** model hash {job.model_hash}\n")
    w(f"** units: {job.units.name}\n")
    w("*NODE, NSET=NALL\n")
    ids = job.node_ids
    pts = np.asarray(job.points, float).copy()
    pts[np.abs(pts) < 1e-12 * max(float(np.abs(pts).max()), 1e-300)] = 0.0  # round-off zeros: exactly 0
    block = np.column_stack([ids, pts])
    np.savetxt(out, block, fmt=["%d", "%.14g", "%.14g", "%.14g"], delimiter=", ")
    w(f"*ELEMENT, TYPE={etype}, ELSET=EALL\n")
    conn = ids[job.cells[:, list(node_order(job.family, "calculix"))]]
    n_el = conn.shape[0]
    rows = np.column_stack([np.arange(1, n_el + 1), conn])
    if rows.shape[1] <= _PER_LINE:
        np.savetxt(out, rows, fmt="%d", delimiter=", ")
    else:
        first, rest = rows[:, :_PER_LINE], rows[:, _PER_LINE:]
        for a, b in zip(first, rest):
            w(", ".join(map(str, a)) + ",\n" + ", ".join(map(str, b)) + "\n")
    for i, (name, nodes) in enumerate(job.node_sets.items(), start=1):
        w(f"*NSET, NSET={_set_name(i, name)}\n")
        for k in range(0, len(nodes), 16):
            w(", ".join(str(int(n)) for n in nodes[k:k + 16]) + "\n")
    _sections(w, job, n_el)
    # point masses: one MASS element per node, one *MASS card per element
    next_el = n_el + 1
    for k, m in enumerate(job.masses, start=1):
        if m.inertia is not None and any(x > 0 for x in m.inertia):
            raise DeckWriteError("the CalculiX plugin takes no rotary inertia")
        w(f"*ELEMENT, TYPE=MASS, ELSET=PM{k}\n{next_el}, {m.node_id}\n")
        w(f"*MASS, ELSET=PM{k}\n{m.mass:.14g}\n")
        next_el += 1
    ndof = 6 if job.is_shell else 3
    fixed = job.fixed[:, :ndof]
    nodes = np.flatnonzero(fixed.any(axis=1))
    if nodes.size:
        w("*BOUNDARY\n")
        for i in nodes:
            dofs = np.flatnonzero(fixed[i]) + 1
            # consecutive runs as "node, first, last"
            start = prev = dofs[0]
            for d in list(dofs[1:]) + [None]:
                if d is not None and d == prev + 1:
                    prev = d
                    continue
                w(f"{ids[i]}, {start}, {prev}\n")
                if d is not None:
                    start = prev = d
    if job.equations:
        # homogeneous equations, the dependent DOF first (it must not be fixed: the core fixes a
        # DOF instead of writing a one-term equation)
        for eq in job.equations:
            w(f"*EQUATION\n{len(eq)}\n")
            w(", ".join(f"{int(n)}, {int(d)}, {c:.14g}" for n, d, c in eq) + "\n")
    w("*STEP\n*FREQUENCY\n")
    lo = job.min_frequency or 0.0
    if job.max_frequency is not None:
        w(f"{job.modes}, {lo:.14g}, {job.max_frequency:.14g}\n")
    elif lo > 0:
        w(f"{job.modes}, {lo:.14g}\n")
    else:
        w(f"{job.modes}\n")
    w("*NODE FILE, OUTPUT=2D\nU\n" if job.is_shell else "*NODE FILE\nU\n")
    w("*END STEP\n")
    return out.getvalue()


def write_deck(job: SolverJob, workdir: Path) -> Path:
    """Write ``<jobname>.inp`` into ``workdir`` and return its path."""
    path = Path(workdir) / f"{job.jobname}.inp"
    text = deck_text(job)
    tmp = path.with_suffix(".inp.part")
    tmp.write_text(text, encoding="ascii")
    tmp.replace(path)
    return path
