"""Sensor placement by Effective Independence (Kammer, J. Guidance Control Dyn. 14(2), 1991).

The candidate sensors are rows of Φ (one row per candidate point and direction, one column
per target mode). The Fisher information matrix of a set is Q = ΦᵀΦ; the effective
independence of row i is Eᵢ = φᵢ Q⁻¹ φᵢᵀ, the diagonal of the projector Φ Q⁻¹ Φᵀ (ΣEᵢ = the
number of modes; Eᵢ = 1 means the modes cannot be told apart without that row; Eᵢ = 0 means
it adds nothing). The row with the smallest Eᵢ is deleted, Q updated, and so on until the
wanted number of sensors remains. Deleting row φ changes Q⁻¹ by the Sherman–Morrison
formula; Q⁻¹ is recomputed from scratch every 64 deletions so round-off cannot build up.
Ties go to the lowest row index. Above ``EXACT_LIMIT`` candidates the lowest 1 % of Eᵢ are
deleted together until ``EXACT_LIMIT`` remain (a common speed-up; the last deletions are one at
a time).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .measured import TestDataError

__all__ = ["EfIResult", "effective_independence", "fisher", "EXACT_LIMIT"]

EXACT_LIMIT = 20000


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

    # batched deletions while the candidate set is very large
    while alive.size > max(EXACT_LIMIT, n_keep):
        Qi = inv(alive)
        E = np.einsum("ij,jk,ik->i", P[alive], Qi, P[alive])
        k = min(alive.size - max(EXACT_LIMIT, n_keep), max(1, alive.size // 100))
        drop = np.argsort(E, kind="stable")[:k]
        deleted.extend(alive[drop].tolist())
        alive = np.delete(alive, drop)
    Qi = inv(alive)
    step = 0
    while alive.size > n_keep:
        if step and step % 64 == 0:
            Qi = inv(alive)
        R = P[alive]
        E = np.einsum("ij,jk,ik->i", R, Qi, R)
        j = int(np.argmin(E))  # first of equal minima: lowest row index (alive stays ascending)
        if E[j] >= 1 - 1e-12:
            raise TestDataError("every remaining candidate is needed to tell the modes apart; cannot delete more")
        v = Qi @ R[j]
        Qi = Qi + np.outer(v, v) / (1.0 - R[j] @ v)
        deleted.append(int(alive[j]))
        alive = np.delete(alive, j)
        step += 1
    Qi = inv(alive)
    E = np.einsum("ij,jk,ik->i", P[alive], Qi, P[alive])
    ld, cond = fisher(phi[alive])
    return EfIResult(alive.copy(), np.array(deleted, dtype=np.int64), E, ld, cond)
