"""Sensor placement by Effective Independence (Kammer, J. Guidance Control Dyn. 14(2), 1991).

The candidate sensors are rows of Φ (one row per candidate point and direction, one column
per target mode). The Fisher information matrix of a set is Q = ΦᵀΦ; the effective
independence of row i is Eᵢ = φᵢ Q⁻¹ φᵢᵀ, the diagonal of the projector Φ Q⁻¹ Φᵀ (ΣEᵢ = the
number of modes; Eᵢ = 1 means the modes cannot be told apart without that row; Eᵢ = 0 means
it adds nothing). The row with the smallest Eᵢ is deleted, Q updated, and so on until the
wanted number of sensors remains. Deleting row φ changes Q⁻¹ by the Sherman–Morrison
formula; Q⁻¹ is recomputed from scratch every 64 deletions so round-off cannot build up.
Every Eᵢ follows by the same update, (φᵢ·Q⁻¹φ)²/(1 − E) added, so a step costs one pass over
the candidates. Ties go to the lowest row index. Above ``EXACT_LIMIT`` candidates the lowest 5 % of Eᵢ are
deleted together until ``EXACT_LIMIT`` remain (a common speed-up; the last deletions are one at
a time).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .measured import TestDataError

__all__ = ["EfIResult", "effective_independence", "fisher", "EXACT_LIMIT"]

EXACT_LIMIT = 5000


@dataclass
class EfIResult:
    kept: np.ndarray  #: (N,) indices of the chosen rows, ascending
    deleted: np.ndarray  #: row indices in the order they were deleted
    effective_independence: np.ndarray  #: (N,) Eᵢ of the chosen rows at the end
    log10_det: float  #: log10 det Q of the chosen set
    condition: float  #: cond(Q) = λmax / λmin of the chosen set


def fisher(phi: np.ndarray) -> tuple[float, float]:
    """(log10 det Q, cond Q) of the Fisher information Q = ΦᵀΦ of a set of rows."""
    Q = phi.T @ phi
    lam = np.linalg.eigvalsh(Q)
    if lam[0] <= 0:
        return float("-inf"), float("inf")
    return float(np.sum(np.log10(lam))), float(lam[-1] / lam[0])


def effective_independence(phi: np.ndarray, n_keep: int) -> EfIResult:
    phi = np.asarray(phi, float)
    n, m = phi.shape
    if n_keep < m:
        raise TestDataError(f"{n_keep} sensors cannot tell {m} modes apart: give at least as many sensors as modes")
    if n_keep > n:
        raise TestDataError(f"{n_keep} sensors asked for, but only {n} candidate sensor positions")
    # scale columns to unit norm: E does not depend on it, round-off does
    col = np.linalg.norm(phi, axis=0)
    if np.any(col == 0):
        raise TestDataError(f"mode(s) {(np.flatnonzero(col == 0) + 1).tolist()} of the targets are zero at every "
                            "candidate: choose other candidates or modes")
    P = phi / col
    alive = np.arange(n)
    deleted: list[int] = []

    def inv(rows):
        Q = P[rows].T @ P[rows]
        lam = np.linalg.eigvalsh(Q)
        if lam[0] <= 1e-12 * lam[-1]:
            raise TestDataError(f"the target modes are not independent on the {len(rows)} candidate sensors "
                                "(their Fisher information is singular): add candidates or drop modes")
        return np.linalg.inv(Q)

    def effind(R, Qi):
        return np.einsum("ij,ij->i", R @ Qi, R)

    # batched deletions while the candidate set is very large
    while alive.size > max(EXACT_LIMIT, n_keep):
        E = effind(P[alive], inv(alive))
        k = min(alive.size - max(EXACT_LIMIT, n_keep), max(1, alive.size // 20))
        drop = np.argpartition(E, k - 1)[:k]
        deleted.extend(alive[drop].tolist())
        alive = np.delete(alive, drop)
    # one at a time; E kept up to date by the same rank-one update:
    # E'ᵢ = Eᵢ + (φᵢ·v)² / (1 − Eⱼ), v = Q⁻¹φⱼ, for the deleted row j
    R = P[alive]
    active = np.ones(alive.size, bool)
    Qi = inv(alive)
    E = effind(R, Qi)
    for step in range(alive.size - n_keep):
        if step and step % 64 == 0:
            Qi = inv(alive[active])
            E = np.where(active, effind(R, Qi), np.inf)
        j = int(np.argmin(E))  # first of equal minima: lowest row index (alive is ascending)
        if E[j] >= 1 - 1e-12:
            raise TestDataError("every remaining candidate is needed to tell the modes apart; cannot delete more")
        v = Qi @ R[j]
        d = 1.0 - E[j]
        Qi = Qi + np.outer(v, v) / d
        E = E + (R @ v) ** 2 / d
        E[j] = np.inf
        active[j] = False
        deleted.append(int(alive[j]))
    alive = alive[active]
    E = effind(P[alive], inv(alive))
    ld, cond = fisher(phi[alive])
    return EfIResult(alive.copy(), np.array(deleted, dtype=np.int64), E, ld, cond)
