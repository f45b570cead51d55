"""Universal File Format: measured or planned modes, read and written with ``pyuff``.

Read: units (dataset 164), coordinate systems (2420, Cartesian), nodes (2411 or 15), mode
shapes at nodes (55: normal modes, analysis type 2, or complex modes, types 3 and 7; three
or six values per node, of which the translations are used). Dataset 58 (FRFs) is read by
``identify``.

* Units: dataset 164's length factor (file units per metre) converts coordinates; a file
  without dataset 164 is refused unless the length unit is given.
* Coordinate systems: a node's coordinates are in its definition system and its values in its
  displacement system. Systems 0 and 1 without a dataset 2420 entry are the global one. A
  dataset 2420 matrix is read as four rows: rows 1–3 the system's x, y, z axes written in the
  global frame, row 4 its origin (file length unit): p_global = origin + Σ pᵢ·axisᵢ.
* Sensors: every translation component of a node that is non-zero in at least one mode is a
  sensor along that axis of the node's displacement system (a component that is zero in every
  mode carries no information: it was not measured).
* Precision: dataset 55 holds six significant digits (E13.5). modebridge writes each mode's
  frequency in full also in ID line 4 (``modebridge f_hz=…``) and reads it back from there when
  it agrees with the E13.5 field, so its own files round-trip frequencies exactly. Nodes are
  written in dataset 2411 (double precision).
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np

from .measured import MeasuredModes, Placement, TestDataError, real_modes

__all__ = ["read_uff", "write_uff", "read_uff_sets", "GLOBAL_CS"]

GLOBAL_CS = (0, 1)
_FEXACT = re.compile(r"modebridge f_hz=([-+0-9.eE]+)")


def read_uff_sets(path: str | Path) -> list[dict]:
    import pyuff

    path = Path(path)
    if not path.is_file():
        raise TestDataError(f"{path}: no such file")
    try:
        sets = pyuff.UFF(str(path)).read_sets()
    except Exception as exc:  # pyuff raises plain Exceptions for malformed files
        raise TestDataError(f"{path}: not a readable universal file: {' '.join(str(exc).split())[:200]}") from None
    if isinstance(sets, dict):
        sets = [sets]
    return list(sets)


def _systems(sets: list[dict], scale: float, path: Path) -> dict[int, tuple[np.ndarray, np.ndarray]]:
    """label → (R with the axes as columns, origin in m)."""
    out: dict[int, tuple[np.ndarray, np.ndarray]] = {}
    for s in sets:
        if s.get("type") != 2420:
            continue
        for lab, typ, mat in zip(s["CS_sys_labels"], s["CS_types"], s["CS_matrices"]):
            if int(typ) != 0:
                raise TestDataError(f"{path}: dataset 2420, coordinate system {int(lab)}: only Cartesian "
                                    f"systems (type 0) are read; this one is of type {int(typ)}")
            M = np.asarray(mat, float).reshape(4, 3)
            R = M[:3].T
            if not np.allclose(R.T @ R, np.eye(3), atol=1e-5):
                raise TestDataError(f"{path}: dataset 2420, coordinate system {int(lab)}: its axes are not orthonormal")
            out[int(lab)] = (R, M[3] * scale)
    return out


def _system(systems, label: int, path: Path, node: int):
    if label in systems:
        return systems[label]
    if label in GLOBAL_CS:
        return np.eye(3), np.zeros(3)
    raise TestDataError(f"{path}: node {node} refers to coordinate system {label}, which no dataset 2420 defines")


def uff_geometry(sets: list[dict], path: Path, length_unit: str | None = None
                 ) -> tuple[str, dict, dict[int, tuple[np.ndarray, int]]]:
    """What every reader of a UFF file needs first, from its datasets 164 (units), 2420/18
    (coordinate systems) and 2411/15 (nodes): the name of the file's length unit (``length_unit``
    overrides dataset 164), the coordinate systems (in metres), and each node's position in the
    file's global frame (m) with the label of its displacement system."""
    from .measured import length_factor

    units = [s for s in sets if s.get("type") == 164]
    if length_unit is not None:
        scale, unit = length_factor(length_unit, str(path)), length_unit
    elif units:
        lf = float(units[0]["length"])
        if not np.isfinite(lf) or lf <= 0:
            raise TestDataError(f"{path}: dataset 164: length factor {lf} is not a positive number")
        scale = 1.0 / lf
        unit = str(units[0].get("units_description", "")).strip() or f"1/{lf:g} m"
    else:
        raise TestDataError(f"{path}: units missing: the file has no dataset 164; give the length unit "
                            "with --length-unit")
    systems = _systems(sets, scale, path)
    geo = [s for s in sets if s.get("type") == 2411] or [s for s in sets if s.get("type") == 15]
    if not geo:
        raise TestDataError(f"{path}: the file holds no node coordinates (dataset 2411 or 15)")
    nodes: dict[int, tuple[np.ndarray, int]] = {}
    for g in geo:
        for k, n in enumerate(np.asarray(g["node_nums"]).astype(int)):
            R, o = _system(systems, int(g["def_cs"][k]), path, int(n))
            p = np.array([g["x"][k], g["y"][k], g["z"][k]], float) * scale
            nodes[int(n)] = (o + R @ p, int(g["disp_cs"][k]))
    return unit, systems, nodes


def read_uff(path: str | Path, placement: Placement | None = None, length_unit: str | None = None) -> MeasuredModes:
    """Measured modes from dataset 55 at the nodes of 2411/15, in the part's frame (SI)."""
    path = Path(path)
    sets = read_uff_sets(path)
    kinds = {int(s.get("type", -1)) for s in sets}
    modes = [s for s in sets if s.get("type") == 55 and int(s.get("analysis_type", 0)) in (2, 3, 7)]
    if not modes:
        extra = (" (it holds FRFs, dataset 58: identify modes from them with --identify)" if 58 in kinds else "")
        raise TestDataError(f"{path}: the file holds no modes (no dataset 55 of normal or complex modes){extra}")
    unit, systems, nodes = uff_geometry(sets, path, length_unit)
    # the node list of the first mode decides the sensors; every mode must give the same nodes
    modes.sort(key=lambda s: int(s.get("mode_n", 0)))
    node_list = np.asarray(modes[0]["node_nums"]).astype(int)
    for s in modes:
        if int(s.get("data_ch", 2)) not in (2, 3):
            raise TestDataError(f"{path}: dataset 55, mode {s.get('mode_n')}: data characteristic "
                                f"{s.get('data_ch')} is not a translation vector (2 or 3)")
        if not np.array_equal(np.asarray(s["node_nums"]).astype(int), node_list):
            raise TestDataError(f"{path}: dataset 55, mode {s.get('mode_n')}: other nodes than mode "
                                f"{modes[0].get('mode_n')}; every mode must give the same nodes")
    missing = [int(n) for n in node_list if int(n) not in nodes]
    if missing:
        raise TestDataError(f"{path}: node(s) {missing[:5]} carry mode shapes but have no coordinates (dataset 2411/15)")
    vals = np.stack([np.column_stack([np.asarray(s[f"r{c}"]) for c in (1, 2, 3)]) for s in modes])  # (k, n, 3)
    measured = np.any(vals != 0, axis=0)  # (n, 3)
    labels, pts, dirs, cols = [], [], [], []
    for i, n in enumerate(node_list):
        p, dcs = nodes[int(n)]
        R, _ = _system(systems, dcs, path, int(n))
        for c in range(3):
            if measured[i, c]:
                labels.append(str(int(n)))
                pts.append(p)
                dirs.append(R[:, c])
                cols.append((i, c))
    if not cols:
        raise TestDataError(f"{path}: every mode shape is zero at every node")
    shapes = np.stack([vals[:, i, c] for i, c in cols], axis=1)  # (k, s)
    freqs, damp, notes = [], [], []
    for s in modes:
        if int(s["analysis_type"]) == 2:
            f = float(s["freq"])
            m = _FEXACT.search(str(s.get("id4", "")))
            if m:
                fx = float(m.group(1))
                if abs(fx - f) <= 1e-5 * abs(fx):
                    f = fx
            freqs.append(f)
            damp.append(float(s.get("modal_damp_vis", np.nan)))
        else:
            lam = complex(s["eig"])
            w = abs(lam)
            freqs.append(w / (2 * np.pi))
            damp.append(-lam.real / w if w > 0 else np.nan)
    freqs = np.array(freqs)
    mpc = None
    if np.iscomplexobj(shapes) and np.any(shapes.imag != 0):
        shapes, mpc = real_modes(shapes)
        notes.append("complex shapes reduced to real along each mode's principal axis in the complex plane "
                     "(MPC per mode, Pappa, Elliott and Schenk 1993)")
    shapes = np.real(shapes).astype(float)
    order = np.argsort(freqs, kind="stable")
    placement = placement or Placement()
    damping = np.array(damp)[order]
    out = MeasuredModes(points=placement.point(np.array(pts)), directions=placement.direction(np.array(dirs)),
                        point_labels=labels, frequencies=freqs[order], shapes=shapes[order],
                        damping=None if np.all(np.isnan(damping)) else damping,
                        mpc=None if mpc is None else mpc[order], source=str(path), length_unit=unit,
                        placement=placement, notes=notes)
    return out.check()


def _frame(dirs: np.ndarray) -> np.ndarray:
    """Axes (as columns) of a right-handed system whose first axes are the given orthonormal directions."""
    d = np.asarray(dirs, float)
    if d.shape[0] == 1:
        x = d[0]
        helper = np.eye(3)[int(np.argmin(np.abs(x)))]
        y = np.cross(x, helper)
        y /= np.linalg.norm(y)
        return np.column_stack([x, y, np.cross(x, y)])
    if not np.allclose(d @ d.T, np.eye(d.shape[0]), atol=1e-9):
        raise TestDataError("sensor directions at one point must be perpendicular to each other to be written "
                            "in one displacement coordinate system")
    x, y = d[0], d[1]
    z = np.cross(x, y)
    if d.shape[0] == 3 and np.dot(z, d[2]) < 0:
        raise TestDataError("the three sensor directions at one point form a left-handed set")
    return np.column_stack([x, y, z])


def write_uff(m: MeasuredModes, path: str | Path, length_unit: str | None = None, title: str = "",
              units_code: int | None = None) -> Path:
    """Write ``m`` (datasets 164, 2420, 2411, 55) in its test frame and length unit (or ``length_unit``).

    Sensors along the test frame's axes use the global system (1); a point whose sensors point
    elsewhere gets its own displacement system in dataset 2420 whose first axes are its sensor
    directions.
    """
    import pyuff

    from ..io import atomic_path
    from .measured import length_factor

    path = Path(path)
    unit = length_unit or m.length_unit
    scale = length_factor(unit, str(path))
    R0, o0 = m.placement.rotation, m.placement.origin
    pts_file = (m.points - o0) @ R0 / scale
    dirs_file = m.directions_in_file()
    # one node per distinct point label
    order: list[str] = []
    for lab in m.point_labels:
        if lab not in order:
            order.append(lab)
    node_num = {}
    for k, lab in enumerate(order):
        node_num[lab] = int(lab) if lab.isdigit() and int(lab) > 0 and int(lab) not in node_num.values() else None
    used = {v for v in node_num.values() if v is not None}
    nxt = 1
    for lab in order:
        if node_num[lab] is None:
            while nxt in used:
                nxt += 1
            node_num[lab] = nxt
            used.add(nxt)
    cs_labels, cs_mats = [1], [np.vstack([np.eye(3), np.zeros(3)])]
    node_cs, node_vals_idx, node_xyz = [], [], []
    for lab in order:
        idx = [s for s in range(m.n_sensors) if m.point_labels[s] == lab]
        D = dirs_file[idx]
        comp = []
        axis_aligned = all(np.allclose(np.abs(d), np.round(np.abs(d)), atol=1e-12) and abs(np.abs(d).sum() - 1) < 1e-12
                           for d in D)
        if axis_aligned:
            cs = 1
            A = np.eye(3)
        else:
            A = _frame(D)
            cs = max(cs_labels) + 1
            cs_labels.append(cs)
            cs_mats.append(np.vstack([A.T, np.zeros(3)]))
        for s, d in zip(idx, D):
            c = int(np.argmax(np.abs(A.T @ d)))
            comp.append((s, c, float(np.sign((A.T @ d)[c]))))
        node_cs.append(cs)
        node_vals_idx.append(comp)
        node_xyz.append(pts_file[idx[0]])
    node_xyz = np.array(node_xyz)
    nums = np.array([node_num[lab] for lab in order])
    code = units_code if units_code is not None else {1.0: 1, 1e-3: 5, 1e-2: 6, 0.0254: 7}.get(round(scale, 12), 9)
    sets = [pyuff.prepare_164(units_code=code, units_description=unit[:20], temp_mode=2, length=1.0 / scale,
                              force=1.0, temp=1.0, temp_offset=273.15),
            pyuff.prepare_2420(Part_UID=1, Part_Name=(title or "modebridge")[:80], CS_sys_labels=cs_labels,
                               CS_types=[0] * len(cs_labels), CS_colors=[8] * len(cs_labels),
                               CS_names=[f"cs{c}" for c in cs_labels], CS_matrices=cs_mats),
            pyuff.prepare_2411(node_nums=nums, def_cs=np.ones(len(nums), int), disp_cs=np.array(node_cs),
                               color=np.ones(len(nums), int), x=node_xyz[:, 0], y=node_xyz[:, 1], z=node_xyz[:, 2])]
    for k in range(m.n_modes):
        r = np.zeros((len(nums), 3))
        for i, comp in enumerate(node_vals_idx):
            for s, c, sign in comp:
                r[i, c] = sign * m.shapes[k, s]
        f = float(m.frequencies[k])
        damp = float(m.damping[k]) if m.damping is not None and np.isfinite(m.damping[k]) else 0.0
        sets.append(pyuff.prepare_55(
            id1=(title or "modebridge modes")[:80], id2=f"mode {k + 1} of {m.n_modes}",
            id3=f"frequency {f:.6g} Hz", id4=f"modebridge f_hz={f!r}", id5="translations at sensors; zero = not measured",
            model_type=1, analysis_type=2, data_ch=2, spec_data_type=8, n_data_per_node=3,
            r1=r[:, 0], r2=r[:, 1], r3=r[:, 2], load_case=1, mode_n=k + 1, freq=f, modal_m=1.0,
            modal_damp_vis=damp, modal_damp_his=0.0, node_nums=nums))
    with atomic_path(path) as tmp:
        Path(tmp).unlink(missing_ok=True)
        try:
            pyuff.UFF(str(tmp)).write_sets(sets, mode="overwrite")
        except Exception as exc:
            raise TestDataError(f"{path}: cannot write the universal file: {exc}") from None
    return path
