"""Pairing modes of two results by shape and frequency; repeated-mode clusters as subspaces."""

from __future__ import annotations

from dataclasses import asdict, dataclass, field

import numpy as np
from scipy.linalg import subspace_angles
from scipy.optimize import linear_sum_assignment

from .mac import mac_matrix

__all__ = ["Pair", "Cluster", "Comparison", "pair_modes", "find_clusters", "compare_modes",
           "CLUSTER_TOLERANCE", "PAIR_MIN_MAC", "SPLIT_MAC", "SPLIT_FREQUENCY"]

#: modes whose frequencies lie within this relative distance form one cluster of (nearly)
#: repeated modes (common practice, no source)
CLUSTER_TOLERANCE = 0.01
#: the MAC floor of a pair: an assignment below it is no match, and both modes stay unpaired
#: (and are reported so). 0.5: a mode shares less than half its shape with the partner —
#: common practice, no source.
PAIR_MIN_MAC = 0.5
#: close modes whose shapes are split between partners: a cross-MAC at least this between modes
#: within :data:`SPLIT_FREQUENCY` of each other links them into one cluster compared as a subspace
#: (common practice, no source)
SPLIT_MAC = 0.2
SPLIT_FREQUENCY = 0.05
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
        """Mode numbers 1-based, as in every table."""
        d = asdict(self)
        d["a"], d["b"] = self.a + 1, self.b + 1
        d["cluster"] = None if self.cluster is None else self.cluster + 1
        d["df"] = self.df
        return d


@dataclass
class Cluster:
    """A group of (nearly) repeated modes, compared as the subspace they span."""

    a: list[int]
    b: list[int]
    angles_deg: list[float]  #: principal angles between the two subspaces, ascending

    def as_dict(self) -> dict:
        """Mode numbers 1-based, as in every table."""
        return {"a": [i + 1 for i in self.a], "b": [j + 1 for j in self.b], "angles_deg": list(self.angles_deg)}


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
               min_mac: float = PAIR_MIN_MAC) -> list[Pair]:
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


def _split_groups(fa, fb, mac, skip_a, skip_b, cluster_tol,
                  pairs: list[Pair] = ()) -> list[tuple[list[int], list[int]]]:
    """Groups of A and B modes linked by the assignment's pairs, by split cross-MACs between
    close frequencies, or repeated (within ``cluster_tol``) on either side: connected
    components with ≥ 2 modes on a side."""
    fa = np.asarray(fa, float)
    fb = np.asarray(fb, float)
    na, nb = fa.size, fb.size
    parent = list(range(na + nb))

    def find(x):
        while parent[x] != x:
            parent[x] = parent[parent[x]]
            x = parent[x]
        return x

    def join(x, y):
        parent[find(x)] = find(y)

    for i in range(skip_a, na):
        for j in range(skip_b, nb):
            close = abs(fa[i] - fb[j]) <= SPLIT_FREQUENCY * max(abs(fa[i]), 1e-12)
            if close and mac[i, j] >= SPLIT_MAC:
                join(i, na + j)
    for p in pairs:
        if p.mac >= SPLIT_MAC:
            join(p.a, na + p.b)
    for g in find_clusters(fa[skip_a:], cluster_tol):
        for i in g[1:]:
            join(g[0] + skip_a, i + skip_a)
    for g in find_clusters(fb[skip_b:], cluster_tol):
        for j in g[1:]:
            join(na + g[0] + skip_b, na + j + skip_b)
    comps: dict[int, tuple[list[int], list[int]]] = {}
    for i in range(skip_a, na):
        comps.setdefault(find(i), ([], []))[0].append(i)
    for j in range(skip_b, nb):
        comps.setdefault(find(na + j), ([], []))[1].append(j)
    return [(a, b) for a, b in comps.values() if max(len(a), len(b)) >= 2 and a and b]


def compare_modes(fa, shapes_a, fb, shapes_b, skip_a: int = 0, skip_b: int = 0,
                  cluster_tol: float = CLUSTER_TOLERANCE, min_mac: float = PAIR_MIN_MAC) -> Comparison:
    """MAC matrix, pairing and clusters of two sets of modes on the same points.

    Pairs come from an optimal assignment over MAC and frequency; an assignment below
    ``min_mac`` is no match and leaves both modes unpaired. Close modes whose shapes are split
    between partners (cross-MACs ≥ :data:`SPLIT_MAC` within :data:`SPLIT_FREQUENCY`) or that
    repeat within ``cluster_tol`` form a cluster: when both sides hold the same number of
    modes, they are compared as subspaces (principal angles), paired in frequency order, and
    kept paired whatever their single MACs.
    """
    mac = mac_matrix(shapes_a, shapes_b)
    fa = np.asarray(fa, float)
    fb = np.asarray(fb, float)
    pairs = pair_modes(fa, fb, mac, skip_a, skip_b, min_mac=0.0)
    clusters: list[Cluster] = []
    in_cluster: dict[int, int] = {}
    for ga, gb in _split_groups(fa, fb, mac, skip_a, skip_b, cluster_tol, pairs):
        if len(ga) != len(gb):
            continue
        angles = _subspace_deg(np.asarray(shapes_a)[ga], np.asarray(shapes_b)[gb])
        k = len(clusters)
        clusters.append(Cluster(list(ga), list(gb), angles))
        for i in ga:
            in_cluster[i] = k
    # inside a cluster keep the assignment's pairs when they stay within it (the best single
    # MACs); otherwise the single-mode pairing is arbitrary: pair in frequency order
    in_b = {j for cl in clusters for j in cl.b}
    inside = [p for p in pairs if p.a in in_cluster or p.b in in_b]
    pairs = [p for p in pairs if p.a not in in_cluster and p.b not in in_b]
    for k, cl in enumerate(clusters):
        own = [p for p in inside if p.a in cl.a and p.b in cl.b]
        if len(own) == len(cl.a) and len({p.b for p in own}) == len(cl.b):
            chosen = [(p.a, p.b) for p in own]
        else:
            chosen = list(zip(cl.a, cl.b))
        for i, j in chosen:
            pairs.append(Pair(int(i), int(j), float(fa[i]), float(fb[j]), float(mac[i, j]), cluster=k))
    pairs = sorted((p for p in pairs if p.cluster is not None or p.mac >= min_mac), key=lambda p: p.a)
    ua = sorted(set(range(skip_a, len(fa))) - {p.a for p in pairs})
    ub = sorted(set(range(skip_b, len(fb))) - {p.b for p in pairs})
    return Comparison(mac, pairs, clusters, ua, ub)
