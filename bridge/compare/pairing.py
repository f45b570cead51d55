"""Pairing modes of two results by shape and frequency; repeated-mode clusters as subspaces."""

from __future__ import annotations

from dataclasses import asdict, dataclass, field

import numpy as np
from scipy.linalg import subspace_angles
from scipy.optimize import linear_sum_assignment

from .mac import mac_matrix

__all__ = ["Pair", "Cluster", "Comparison", "pair_modes", "find_clusters", "compare_modes",
           "CLUSTER_TOLERANCE"]

#: modes whose frequencies lie within this relative distance form one cluster of (nearly)
#: repeated modes (common practice, no source)
CLUSTER_TOLERANCE = 0.01
#: weight of the frequency term in the pairing cost, per unit |ln(fa/fb)|
FREQUENCY_WEIGHT = 2.0


@dataclass
class Pair:
    a: int  #: 0-based mode index in A
    b: int  #: 0-based mode index in B
    fa: float
    fb: float
    mac: float
    cluster: int | None = None  #: index into Comparison.clusters when both modes are in one

    @property
    def df(self) -> float:
        """(fb - fa) / fa"""
        return (self.fb - self.fa) / self.fa if self.fa else float("inf")

    def as_dict(self) -> dict:
        d = asdict(self)
        d["df"] = self.df
        return d


@dataclass
class Cluster:
    """A group of (nearly) repeated modes, compared as the subspace they span."""

    a: list[int]
    b: list[int]
    angles_deg: list[float]  #: principal angles between the two subspaces, ascending

    def as_dict(self) -> dict:
        return asdict(self)


@dataclass
class Comparison:
    mac: np.ndarray  #: (m, k)
    pairs: list[Pair]
    clusters: list[Cluster] = field(default_factory=list)
    unpaired_a: list[int] = field(default_factory=list)
    unpaired_b: list[int] = field(default_factory=list)


def find_clusters(freqs: np.ndarray, tol: float = CLUSTER_TOLERANCE) -> list[list[int]]:
    """Groups (len ≥ 2) of consecutive modes whose neighbouring frequencies differ by ≤ tol."""
    f = np.asarray(freqs, float)
    groups, cur = [], [0] if f.size else []
    for i in range(1, f.size):
        ref = max(abs(f[i - 1]), 1e-12)
        if abs(f[i] - f[i - 1]) / ref <= tol:
            cur.append(i)
        else:
            if len(cur) > 1:
                groups.append(cur)
            cur = [i]
    if len(cur) > 1:
        groups.append(cur)
    return groups


def pair_modes(fa: np.ndarray, fb: np.ndarray, mac: np.ndarray, skip_a: int = 0, skip_b: int = 0,
               min_mac: float = 0.0) -> list[Pair]:
    """Optimal one-to-one pairing minimising (1 − MAC) + w·|ln(fa/fb)| (scipy's linear_sum_assignment).

    The first ``skip_a`` / ``skip_b`` modes (rigid-body modes) are left out. Pairs below
    ``min_mac`` are dropped.
    """
    fa = np.asarray(fa, float)
    fb = np.asarray(fb, float)
    sub = mac[skip_a:, skip_b:]
    if sub.size == 0:
        return []
    ga = np.maximum(np.abs(fa[skip_a:]), 1e-12)[:, None]
    gb = np.maximum(np.abs(fb[skip_b:]), 1e-12)[None, :]
    cost = (1.0 - sub) + FREQUENCY_WEIGHT * np.abs(np.log(ga / gb))
    rows, cols = linear_sum_assignment(cost)
    pairs = []
    for r, c in sorted(zip(rows, cols)):
        i, j = r + skip_a, c + skip_b
        if mac[i, j] >= min_mac:
            pairs.append(Pair(int(i), int(j), float(fa[i]), float(fb[j]), float(mac[i, j])))
    return pairs


def _subspace_deg(a: np.ndarray, b: np.ndarray) -> list[float]:
    A = np.asarray(a).reshape(a.shape[0], -1).T
    B = np.asarray(b).reshape(b.shape[0], -1).T
    return sorted(float(x) for x in np.degrees(subspace_angles(A, B)))


def compare_modes(fa, shapes_a, fb, shapes_b, skip_a: int = 0, skip_b: int = 0,
                  cluster_tol: float = CLUSTER_TOLERANCE) -> Comparison:
    """MAC matrix, pairing and repeated-mode clusters of two sets of modes on the same points."""
    mac = mac_matrix(shapes_a, shapes_b)
    pairs = pair_modes(fa, fb, mac, skip_a, skip_b)
    clusters: list[Cluster] = []
    ca = [g for g in find_clusters(np.asarray(fa)[skip_a:], cluster_tol)]
    ca = [[i + skip_a for i in g] for g in ca]
    by_a = {p.a: p for p in pairs}
    for g in ca:
        partners = sorted(by_a[i].b for i in g if i in by_a)
        if len(partners) != len(g):
            continue
        # B's cluster: its partners, widened to B's own cluster around them
        gb = set(partners)
        for h in find_clusters(np.asarray(fb)[skip_b:], cluster_tol):
            h = [j + skip_b for j in h]
            if gb & set(h):
                gb |= set(h)
        gb = sorted(gb)
        if len(gb) != len(g):
            continue
        angles = _subspace_deg(np.asarray(shapes_a)[g], np.asarray(shapes_b)[gb])
        k = len(clusters)
        clusters.append(Cluster(list(g), gb, angles))
        for i in g:
            by_a[i].cluster = k
    ua = sorted(set(range(skip_a, len(fa))) - {p.a for p in pairs})
    ub = sorted(set(range(skip_b, len(fb))) - {p.b for p in pairs})
    return Comparison(mac, pairs, clusters, ua, ub)
