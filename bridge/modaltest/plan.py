"""Plan a modal test from the model: candidate sensors, Effective Independence, the plan.

Candidates are points with directions: every surface node of the model (default), the nodes
of a named region (from the run folder's ``mesh.vtu``), or the points of a file (modebridge's
CSV, with or without mode columns, or a UFF with nodes). Each candidate point gives one
sensor along the surface normal (``directions="normal"``: a uniaxial accelerometer glued on the
surface) or three along x, y, z (``"xyz"``), in the part's frame.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..checks import rigid_body_count
from ..compare.mac import auto_mac
from ..results import ModalResult
from .efi import EfIResult, effective_independence
from .locate import locate_on_model, model_at, node_normals, surface_nodes
from .measured import MeasuredModes, Placement, TestDataError, length_factor

__all__ = ["Candidates", "TestPlan", "candidates_from_model", "candidates_from_file", "plan_test",
           "parse_modes", "AUTO_MAC_GOAL"]

#: the goal for the chosen set's auto-MAC off-diagonals (common practice, no source)
AUTO_MAC_GOAL = 0.1


@dataclass
class Candidates:
    labels: list[str]  #: point names (node numbers for model nodes)
    points: np.ndarray  #: (c, 3) m
    directions: np.ndarray  #: (c, 3) unit
    phi: np.ndarray  #: (c, m_all) the model's modes along each direction (all modes)
    description: str


def parse_modes(text: str | None, result: ModalResult) -> np.ndarray:
    """0-based indices from "1-6" or "1,2,5" (1-based); default: every elastic mode."""
    rigid = rigid_body_count(result.frequencies, result.eigenvalues)
    if not text:
        idx = np.arange(rigid, result.n_modes)
    else:
        out = []
        for part in text.split(","):
            part = part.strip()
            try:
                if "-" in part:
                    a, b = (int(x) for x in part.split("-", 1))
                    out.extend(range(a, b + 1))
                else:
                    out.append(int(part))
            except ValueError:
                raise TestDataError(f"--modes: {part!r} is not a mode number or a range like 1-6") from None
        idx = np.array(sorted(set(out))) - 1
        if idx.size == 0 or idx.min() < 0 or idx.max() >= result.n_modes:
            raise TestDataError(f"--modes: the result has modes 1 to {result.n_modes}; got {text!r}")
        rb = [int(i) + 1 for i in idx if i < rigid]
        if rb:
            raise TestDataError(f"--modes: mode(s) {rb} are rigid-body modes; a test plan targets elastic modes")
    if idx.size == 0:
        raise TestDataError("the result has no elastic mode to plan a test for")
    return idx


def _expand(labels, points, normals, directions: str):
    if directions == "normal":
        ok = np.linalg.norm(normals, axis=1) > 0
        return [l for l, o in zip(labels, ok) if o], points[ok], normals[ok]
    if directions == "xyz":
        L, P, D = [], [], []
        for l, p in zip(labels, points):
            for d in np.eye(3):
                L.append(l)
                P.append(p)
                D.append(d)
        return L, np.array(P), np.array(D)
    raise TestDataError(f"--directions: {directions!r}; accepted: normal, xyz")


def candidates_from_model(result: ModalResult, region_nodes: np.ndarray | None = None,
                          directions: str = "normal", description: str = "") -> Candidates:
    nodes = surface_nodes(result)
    if region_nodes is not None:
        nodes = np.intersect1d(nodes, region_nodes)
        if nodes.size == 0:
            raise TestDataError("the region holds no surface node of the model")
    nrm = node_normals(result)[nodes]
    labels = [str(int(result.node_ids[i])) for i in nodes]
    L, P, D = _expand(labels, result.points[nodes], nrm, directions)
    idx = {str(int(result.node_ids[i])): i for i in nodes}
    rows = np.array([idx[l] for l in L])
    phi = np.einsum("mtc,tc->tm", result.shapes[:, rows, :], D)
    return Candidates(L, P, D, phi, description or f"{len(nodes)} surface nodes of the model, {directions}")


def region_nodes(result_path: Path, result: ModalResult, name: str) -> np.ndarray:
    """Nodes of a named region, from the run folder's mesh.vtu (one 0/1 point array per region)."""
    import meshio

    p = Path(result_path)
    folder = p if p.is_dir() else p.parent
    for cand in (folder / "mesh.vtu", folder.parent / "mesh.vtu"):
        if cand.is_file():
            mesh = meshio.read(cand)
            key = f"region_{name}"
            if key not in mesh.point_data:
                have = sorted(k[7:] for k in mesh.point_data if k.startswith("region_"))
                raise TestDataError(f"{cand}: no region '{name}'; regions: {', '.join(have) or 'none'}")
            if mesh.points.shape != result.points.shape or not np.allclose(mesh.points, result.points, atol=1e-9):
                raise TestDataError(f"{cand}: its mesh is not the result's mesh; cannot take region '{name}' from it")
            return np.flatnonzero(np.asarray(mesh.point_data[key]).ravel() > 0)
    raise TestDataError(f"--candidates {name}: neither a file nor a region found in a mesh.vtu beside the result "
                        f"({folder}); give a candidates file or run the model with modebridge run")


def candidates_from_file(path: Path, result: ModalResult, directions: str = "normal",
                         placement: Placement | None = None, length_unit: str | None = None,
                         max_distance: float | None = None) -> Candidates:
    """Points (and directions, when the file gives them) located on the model."""
    from .uff import read_uff_sets, uff_geometry

    placement = placement or Placement()
    path = Path(path)
    given_dirs = None
    if path.suffix.lower() in (".uff", ".unv"):
        sets = read_uff_sets(path)
        _, _, nodes = uff_geometry(sets, path, length_unit)
        labels = [str(n) for n in nodes]
        pts = [p for p, _ in nodes.values()]
        pts = placement.point(np.array(pts))
    else:
        if not path.is_file():
            raise TestDataError(f"{path}: no such file")
        labels, pts, given_dirs = _points_csv(path, length_unit)
        pts = placement.point(pts)
        if given_dirs is not None:
            given_dirs = placement.direction(given_dirs)
    from .locate import Located

    loc = locate_on_model(result, pts, max_distance)
    if loc.off.any():
        bad = [labels[i] for i in np.flatnonzero(loc.off)]
        if loc.off.all():
            raise TestDataError(f"{path}: every candidate point is off the model: wrong length unit or frame?")
        raise TestDataError(f"{path}: candidate point(s) {bad[:8]} are off the model")
    if given_dirs is None:
        # the surface normal at each point: the normals of its element's nodes, interpolated
        from .locate import _family, _gmsh_cells
        from ..fem import shape_functions

        nrm = node_normals(result)
        N, _ = shape_functions(_family(result), loc.xi)
        nn = np.einsum("tn,tnc->tc", N, nrm[_gmsh_cells(result)[loc.element]])
        nn /= np.maximum(np.linalg.norm(nn, axis=1, keepdims=True), 1e-300)
        L, P, D = _expand(labels, pts, nn, directions)
        index = {}
        for i, l in enumerate(labels):
            index.setdefault(l, i)
        rows = np.array([index[l] for l in L])
    else:
        L, P, D = labels, pts, given_dirs
        rows = np.arange(len(L))
    sub = Located(loc.element[rows], loc.xi[rows], loc.distance[rows], loc.off[rows])
    phi = model_at(result, sub, D).T
    return Candidates(list(L), np.asarray(P), np.asarray(D), phi, f"{len(set(labels))} points of {path.name}")


def _points_csv(path: Path, length_unit: str | None):
    """Points (and directions, when the file has dx, dy, dz) of a candidates CSV: modebridge's
    measured-modes CSV (mode columns and the frequency row are ignored) or just point,x,y,z."""
    import csv
    import re

    unit = length_unit
    rows = []
    for line in path.read_text(encoding="utf-8-sig").splitlines():
        s = line.strip()
        if not s:
            continue
        if s.startswith("#"):
            m = re.match(r"^#\s*length_unit\s*[=:]\s*(\S+)\s*$", s)
            if m and unit is None:
                unit = m.group(1)
            continue
        rows.append(line)
    if unit is None:
        raise TestDataError(f"{path}: units missing: add a line '# length_unit = mm' or give --length-unit")
    t = list(csv.reader(rows))
    head = [h.strip().lower() for h in t[0]] if t else []
    if head[:4] != ["point", "x", "y", "z"]:
        raise TestDataError(f"{path}: a candidates file starts with the header point,x,y,z (then, optionally, dx,dy,dz)")
    has_dirs = head[4:7] == ["dx", "dy", "dz"]
    labels, pts, dirs = [], [], []
    for r in t[1:]:
        if r and r[0].strip().lower() in ("frequency_hz", "damping_ratio"):
            continue
        try:
            pts.append([float(v) for v in r[1:4]])
            if has_dirs:
                d = np.array([float(v) for v in r[4:7]])
                if np.linalg.norm(d) == 0:
                    raise ValueError(f"point {r[0]}: zero direction")
                dirs.append(d / np.linalg.norm(d))
        except (ValueError, IndexError) as exc:
            raise TestDataError(f"{path}: row {r[:1]}: {exc}") from None
        labels.append(r[0].strip())
    if not pts:
        raise TestDataError(f"{path}: no candidate point")
    return labels, np.array(pts) * length_factor(unit, str(path)), (np.array(dirs) if has_dirs else None)


@dataclass
class TestPlan:
    __test__ = False
    candidates: Candidates
    modes: np.ndarray  #: 0-based target modes
    efi: EfIResult
    frequencies: np.ndarray  #: (t,) Hz of the target modes
    auto_mac: np.ndarray  #: (t, t) of the target modes on the chosen sensors

    @property
    def max_off_diagonal(self) -> float:
        m = self.auto_mac.copy()
        np.fill_diagonal(m, 0.0)
        return float(m.max()) if m.size > 1 else 0.0

    @property
    def goal_met(self) -> bool:
        return self.max_off_diagonal <= AUTO_MAC_GOAL

    def measured(self, title: str = "") -> MeasuredModes:
        """The chosen sensors with the model's target modes: what the plan file holds."""
        k = self.efi.kept
        c = self.candidates
        return MeasuredModes(points=c.points[k], directions=c.directions[k], point_labels=[c.labels[i] for i in k],
                             frequencies=self.frequencies.copy(), shapes=c.phi[k][:, self.modes].T.copy(),
                             source=title, length_unit="m")

    def as_dict(self) -> dict:
        k = self.efi.kept
        c = self.candidates
        return {"candidates": c.description, "n_candidates": len(c.labels), "target_modes": (self.modes + 1).tolist(),
                "frequencies_hz": self.frequencies.tolist(),
                "sensors": [{"point": c.labels[i], "at_m": c.points[i].tolist(), "direction": c.directions[i].tolist(),
                             "effective_independence": float(e)} for i, e in zip(k, self.efi.effective_independence)],
                "fisher": {"log10_det": self.efi.log10_det, "condition": self.efi.condition},
                "auto_mac": {"max_off_diagonal": self.max_off_diagonal, "goal": AUTO_MAC_GOAL,
                             "goal_met": self.goal_met, "matrix": self.auto_mac.tolist()},
                "deletion_order": [c.labels[i] for i in self.efi.deleted[-50:]]}


def plan_test(result: ModalResult, n_sensors: int, modes: np.ndarray, candidates: Candidates) -> TestPlan:
    phi = candidates.phi[:, modes]
    if n_sensors < len(modes):
        raise TestDataError(f"--sensors {n_sensors}: fewer sensors than the {len(modes)} target modes cannot "
                            "tell them apart; give at least as many")
    res = effective_independence(phi, n_sensors)
    am = auto_mac(phi[res.kept].T)
    return TestPlan(candidates, np.asarray(modes), res, np.asarray(result.frequencies)[modes], am)
