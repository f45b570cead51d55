"""Correlate measured modes with the model's.

The model is placed at the test points (``locate``), its translations projected onto each
sensor's direction; points off the model are named and left out. The model's elastic modes
(A) and the measured ones (B) are then paired by ``bridge.compare.pairing`` — the same
assignment over MAC and frequency as ``modebridge compare`` — with repeated-mode clusters
compared as subspaces. Per pair: the frequency error (f_test − f_model)/f_model and MAC.
Per sensor: CoMAC over the paired modes (Lieven and Ewins, 6th IMAC, 1988). The auto-MAC of
the measured set shows whether its sensors tell its modes apart.

CoMAC is computed after each measured mode is scaled onto its model partner by the modal
scale factor MSF = φ_Aᵀφ_X / φ_Xᵀφ_X and each model mode to unit length:
CoMAC_j = (Σ_l φ_A,jl φ_X,jl)² / (Σ_l φ_A,jl² · Σ_l φ_X,jl²). The products are kept signed
(Lieven and Ewins take their absolute values), so a sensor mounted the wrong way round lowers
it too.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..checks import rigid_body_count
from ..compare.mac import auto_mac
from ..compare.pairing import Comparison, compare_modes
from ..results import ModalResult
from .locate import Located, default_max_distance, locate_on_model, model_at
from .measured import MPC_WARN, MeasuredModes, TestDataError

__all__ = ["CorrelationThresholds", "Correlation", "correlate", "comac"]

#: off-diagonal auto-MAC above this: the sensors cannot tell those modes apart (common practice, no source)
ALIAS_MAC = 0.9


@dataclass(frozen=True)
class CorrelationThresholds:
    min_mac: float = 0.9  #: paired MAC at least this (common practice, no source)
    max_df: float = 0.05  #: |f_test − f_model| / f_model at most this (common practice, no source)
    min_comac: float = 0.8  #: a sensor below this is flagged (common practice, no source)

    @property
    def max_angle_deg(self) -> float:
        """A cluster passes when every principal angle is at most acos(√min_mac), as in ``compare``."""
        return float(np.degrees(np.arccos(np.sqrt(self.min_mac))))


def comac(model: np.ndarray, test: np.ndarray) -> np.ndarray:
    """CoMAC per sensor (s,) of paired shapes model (p, s) and test (p, s) (see the module's text)."""
    A = np.asarray(model, float)
    X = np.asarray(test, float)
    A = A / np.linalg.norm(A, axis=1, keepdims=True)
    msf = np.einsum("ps,ps->p", A, X) / np.einsum("ps,ps->p", X, X)
    X = X * msf[:, None]
    num = np.einsum("ps,ps->s", A, X) ** 2
    den = np.einsum("ps,ps->s", A, A) * np.einsum("ps,ps->s", X, X)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(den > 0, num / np.where(den > 0, den, 1), 0.0)


@dataclass
class Correlation:
    model_label: str
    test_label: str
    model_frequencies: np.ndarray  #: (m,) Hz
    test: MeasuredModes
    located: Located
    predicted: np.ndarray  #: (m, s) the model along each sensor direction (off-model sensors: nan)
    comparison: Comparison  #: A = model (elastic modes paired), B = measured; on the on-model sensors
    rigid_model: int
    comac: np.ndarray  #: (s,) nan for off-model sensors
    auto_mac_test: np.ndarray  #: (k, k)
    auto_mac_model: np.ndarray  #: (m − rigid, m − rigid) the model's elastic modes at the sensors
    thresholds: CorrelationThresholds = field(default_factory=CorrelationThresholds)
    max_distance: float = 0.0  #: m

    @property
    def on(self) -> np.ndarray:
        return self.located.on

    def off_model(self) -> list[dict]:
        labels = self.test.sensor_labels()
        return [{"sensor": labels[i], "point": self.test.point_labels[i], "distance_m": float(self.located.distance[i]),
                 "at_m": self.test.points[i].tolist()} for i in np.flatnonzero(self.located.off)]

    def pair_verdicts(self) -> list[dict]:
        t = self.thresholds
        out = []
        cl = self.comparison.clusters
        for p in self.comparison.pairs:
            ok_f = abs(p.df) <= t.max_df
            if p.cluster is not None:
                ok_s = max(cl[p.cluster].angles_deg) <= t.max_angle_deg
            else:
                ok_s = p.mac >= t.min_mac
            d = {"model_mode": p.a + 1, "test_mode": p.b + 1, "f_model_hz": p.fa, "f_test_hz": p.fb,
                 "df": p.df, "mac": p.mac, "cluster": None if p.cluster is None else p.cluster + 1,
                 "mpc": None if self.test.mpc is None else float(self.test.mpc[p.b]),
                 "ok": bool(ok_f and ok_s), "shape_ok": bool(ok_s), "frequency_ok": bool(ok_f)}
            out.append(d)
        return out

    @property
    def unpaired_test(self) -> list[int]:
        return [j + 1 for j in self.comparison.unpaired_b]

    @property
    def passed(self) -> bool:
        v = self.pair_verdicts()
        return bool(v) and all(x["ok"] for x in v) and not self.comparison.unpaired_b

    def flagged_sensors(self) -> list[dict]:
        labels = self.test.sensor_labels()
        out = []
        for i in np.flatnonzero(self.on):
            if self.comac[i] < self.thresholds.min_comac:
                out.append({"sensor": labels[i], "index": int(i), "comac": float(self.comac[i])})
        return sorted(out, key=lambda d: d["comac"])

    def frequency_bias(self) -> dict:
        """Mean and spread of the paired frequency errors, and the uniform stiffness scale that
        would explain the mean (f ∝ √k)."""
        df = np.array([p.df for p in self.comparison.pairs])
        if df.size == 0:
            return {"mean_df": None, "std_df": None, "stiffness_scale": None}
        return {"mean_df": float(df.mean()), "std_df": float(df.std(ddof=1)) if df.size > 1 else 0.0,
                "stiffness_scale": float((1 + df.mean()) ** 2)}

    def alias(self, which: str = "test") -> tuple[float, int, int]:
        m = (self.auto_mac_test if which == "test" else self.auto_mac_model).copy()
        if m.shape[0] < 2:
            return (0.0, -1, -1)
        np.fill_diagonal(m, 0.0)
        i, j = np.unravel_index(np.argmax(m), m.shape)
        off = self.rigid_model if which == "model" else 0
        return (float(m[i, j]), int(i + off + 1), int(j + off + 1))

    def warnings(self) -> list[str]:
        out = []
        for s in self.off_model():
            out.append(f"sensor {s['sensor']} is off the model ({s['distance_m'] * 1e3:.3g} mm from it, tolerance "
                       f"{self.max_distance * 1e3:.3g} mm): left out")
        for f in self.flagged_sensors():
            out.append(f"sensor {f['sensor']}: CoMAC {f['comac']:.2f} < {self.thresholds.min_comac}: a bad, swapped "
                       "or wrongly oriented sensor, or one at a node of every paired mode")
        v, i, j = self.alias("test")
        if v > ALIAS_MAC:
            out.append(f"auto-MAC of the measured set: modes {i} and {j} look alike (MAC {v:.2f}): the sensors "
                       "cannot tell them apart")
        v, i, j = self.alias("model")
        if v > ALIAS_MAC:
            out.append(f"auto-MAC of the model at the sensors: model modes {i} and {j} look alike (MAC {v:.2f}): "
                       "their pairing is doubtful")
        if self.test.mpc is not None:
            for k, x in enumerate(self.test.mpc):
                if x < MPC_WARN:
                    out.append(f"measured mode {k + 1}: MPC {x:.2f} < {MPC_WARN}: strongly complex, its real "
                               "reduction is doubtful")
        if self.unpaired_test:
            out.append(f"measured modes without a model partner: {self.unpaired_test} (compute more model modes?)")
        return out

    def as_dict(self) -> dict:
        t = self.thresholds
        labels = self.test.sensor_labels()
        return {
            "model": self.model_label, "measured": self.test_label,
            "placement": self.test.placement.describe(), "length_unit": self.test.length_unit,
            "thresholds": {"min_mac": t.min_mac, "max_df": t.max_df, "min_comac": t.min_comac,
                           "max_cluster_angle_deg": t.max_angle_deg},
            "rigid_body_modes_model": self.rigid_model,
            "sensors": [{"sensor": labels[i], "point": self.test.point_labels[i], "at_m": self.test.points[i].tolist(),
                         "direction": self.test.directions[i].tolist(), "on_model": bool(self.on[i]),
                         "distance_m": float(self.located.distance[i]),
                         "comac": None if not self.on[i] else float(self.comac[i])}
                        for i in range(self.test.n_sensors)],
            "off_model": self.off_model(),
            "pairs": self.pair_verdicts(),
            "clusters": [c.as_dict() for c in self.comparison.clusters],
            "unpaired_test_modes": self.unpaired_test,
            "frequency_bias": self.frequency_bias(),
            "auto_mac_test": {"max_off_diagonal": self.alias("test")[0], "modes": list(self.alias("test")[1:]),
                              "matrix": self.auto_mac_test.tolist()},
            "auto_mac_model_at_sensors": {"max_off_diagonal": self.alias("model")[0],
                                          "modes": list(self.alias("model")[1:])},
            "mac": self.comparison.mac.tolist(),
            "mpc": None if self.test.mpc is None else self.test.mpc.tolist(),
            "notes": list(self.test.notes),
            "warnings": self.warnings(),
            "passed": self.passed,
        }


def correlate(result: ModalResult, test: MeasuredModes, model_label: str = "model", test_label: str = "test",
              thresholds: CorrelationThresholds = CorrelationThresholds(),
              max_distance: float | None = None) -> Correlation:
    test.check()
    md = default_max_distance(result) if max_distance is None else float(max_distance)
    loc = locate_on_model(result, test.points, md)
    on = loc.on
    src = test.source or test_label
    if not on.any():
        d = float(loc.distance.min())
        raise TestDataError(f"{src}: every test point is off the model (the nearest is {d * 1e3:.4g} mm from it, "
                            f"tolerance {md * 1e3:.4g} mm): wrong length unit or frame? (--length-unit, --frame)")
    n_on = int(on.sum())
    if n_on < test.n_modes:
        raise TestDataError(f"{src}: {n_on} sensor(s) on the model for {test.n_modes} measured modes: fewer points "
                            "than modes cannot tell the modes apart")
    predicted = np.full((result.n_modes, test.n_sensors), np.nan)
    sub = Located(loc.element[on], loc.xi[on], loc.distance[on], loc.off[on])
    predicted[:, on] = model_at(result, sub, test.directions[on])
    rigid = rigid_body_count(result.frequencies, result.eigenvalues)
    if result.n_modes - rigid < 1:
        raise TestDataError("the model result has no elastic mode to correlate with")
    A = predicted[:, on]
    B = test.shapes[:, on]
    comp = compare_modes(result.frequencies, A, test.frequencies, B, skip_a=rigid, skip_b=0)
    cm = np.full(test.n_sensors, np.nan)
    if comp.pairs:
        ia = [p.a for p in comp.pairs]
        ib = [p.b for p in comp.pairs]
        cm[on] = comac(A[ia], B[ib])
    return Correlation(model_label, test_label, np.asarray(result.frequencies, float), test, loc, predicted, comp,
                       rigid, cm, auto_mac(B), auto_mac(A[rigid:]), thresholds, md)
