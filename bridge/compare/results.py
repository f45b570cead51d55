"""Compare neutral results: the same part across solvers, meshes or variants."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from ..checks import rigid_body_count
from ..errors import BridgeError, ExitCode
from ..results import ModalResult
from .mac import auto_mac

if TYPE_CHECKING:
    from .pairing import Comparison

__all__ = ["ResultComparison", "compare_results", "DifferentModelsError", "Thresholds", "ALIAS_MAC"]

#: off-diagonal auto-MAC above this flags modes the points cannot tell apart (common practice, no source)
ALIAS_MAC = 0.9


class DifferentModelsError(BridgeError):
    exit_code = ExitCode.DIFFERENT_MODELS


@dataclass(frozen=True)
class Thresholds:
    min_mac: float = 0.9  #: paired MAC at least this (common practice, no source)
    max_df: float = 0.01  #: |Δf| / f at most this

    @property
    def max_angle_deg(self) -> float:
        """A repeated-mode cluster passes when every principal angle is at most acos(√min_mac):
        the angle a single pair at MAC = min_mac makes."""
        return float(np.degrees(np.arccos(np.sqrt(self.min_mac))))


@dataclass
class ResultComparison:
    label_a: str
    label_b: str
    comparison: Comparison
    mapped: bool  #: B's shapes were interpolated onto A's points
    translations_only: bool
    rigid_a: int
    rigid_b: int
    auto_mac_a: tuple[float, int, int]  #: largest off-diagonal auto-MAC of A's elastic modes and where
    auto_mac_b: tuple[float, int, int]
    thresholds: Thresholds = field(default_factory=Thresholds)
    forced: bool = False

    def pair_verdicts(self) -> list[dict]:
        """One verdict per pair; mode numbers ``a``, ``b`` and ``cluster`` are 1-based."""
        t = self.thresholds
        out = []
        clusters = self.comparison.clusters
        for p in self.comparison.pairs:
            ok_f = abs(p.df) <= t.max_df
            if p.cluster is not None:
                ang = max(clusters[p.cluster].angles_deg)
                ok_s = ang <= t.max_angle_deg
            else:
                ok_s = p.mac >= t.min_mac
            d = p.as_dict()
            d.update(ok=bool(ok_f and ok_s), shape_ok=bool(ok_s), frequency_ok=bool(ok_f))
            out.append(d)
        return out

    @property
    def passed(self) -> bool:
        v = self.pair_verdicts()
        return bool(v) and all(x["ok"] for x in v) and not self.comparison.unpaired_a

    def as_dict(self) -> dict:
        c = self.comparison
        return {
            "a": self.label_a, "b": self.label_b, "mapped": self.mapped,
            "translations_only": self.translations_only, "forced": self.forced,
            "rigid_body_modes": {"a": self.rigid_a, "b": self.rigid_b},
            "thresholds": {"min_mac": self.thresholds.min_mac, "max_df": self.thresholds.max_df,
                           "max_cluster_angle_deg": self.thresholds.max_angle_deg},
            "pairs": self.pair_verdicts(),
            "clusters": [cl.as_dict() for cl in c.clusters],
            "unpaired_a": [i + 1 for i in c.unpaired_a], "unpaired_b": [j + 1 for j in c.unpaired_b],
            "auto_mac": {"a": {"max_off_diagonal": self.auto_mac_a[0], "modes": [i + 1 for i in self.auto_mac_a[1:]]},
                         "b": {"max_off_diagonal": self.auto_mac_b[0], "modes": [j + 1 for j in self.auto_mac_b[1:]]}},
            "mode_numbers": "1-based, as in the tables",
            "mac": c.mac.tolist(),
            "passed": self.passed,
        }


def _max_off_diag(shapes: np.ndarray, skip: int, freqs: np.ndarray) -> tuple[float, int, int]:
    s = shapes[skip:]
    if s.shape[0] < 2:
        return (0.0, -1, -1)
    m = auto_mac(s)
    np.fill_diagonal(m, 0.0)
    i, j = np.unravel_index(np.argmax(m), m.shape)
    return (float(m[i, j]), int(i + skip), int(j + skip))


def _same_points(a: ModalResult, b: ModalResult) -> bool:
    return a.points.shape == b.points.shape and np.allclose(a.points, b.points, rtol=0, atol=1e-9)


def _physics(r: ModalResult) -> str | None:
    return r.metadata.get("provenance", {}).get("physics_hash")


def compare_results(a: ModalResult, b: ModalResult, label_a: str = "A", label_b: str = "B",
                    thresholds: Thresholds = Thresholds(), force: bool = False) -> ResultComparison:
    """Pair B's modes with A's by shape and frequency; map B onto A's points if the meshes differ."""
    ha, hb = _physics(a), _physics(b)
    if not force and (ha is None or hb is None or ha != hb):
        raise DifferentModelsError(f"{label_a} and {label_b} are results of different models (or of an "
                                   "unknown one); compare them anyway with --force")
    # MAC on translations: rotations (rad per metre of modal coordinate) would enter with
    # another unit and a weight that depends on the part's size; CalculiX gives none for shells
    sa = a.shapes
    mapped = not _same_points(a, b)
    from .mapping import map_shapes  # scipy, imported when results are compared (not for Thresholds)
    from .pairing import compare_modes

    sb = map_shapes(b.points, b.cells, b.cell_type, b.shapes, a.points) if mapped else b.shapes
    use_rot = False
    ra = rigid_body_count(a.frequencies, a.eigenvalues)
    rb = rigid_body_count(b.frequencies, b.eigenvalues)
    comp = compare_modes(a.frequencies, sa, b.frequencies, sb, skip_a=ra, skip_b=rb)
    return ResultComparison(label_a, label_b, comp, mapped, not use_rot, ra, rb,
                            _max_off_diag(sa, ra, a.frequencies), _max_off_diag(sb, rb, b.frequencies),
                            thresholds, force)
