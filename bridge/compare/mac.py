"""The Modal Assurance Criterion.

MAC(a, b) = |aᴴb|² / ((aᴴa)(bᴴb)) — Allemang and Brown, 1st IMAC (1982).
It measures consistency of two shape vectors, not correctness; pair modes by
MAC and frequency together.
"""

from __future__ import annotations

import numpy as np

__all__ = ["mac_matrix", "auto_mac"]


def _flat(shapes: np.ndarray) -> np.ndarray:
    """Rows scaled to a largest entry of 1: MAC does not depend on scale, and squares of tiny
    or huge entries would under- or overflow."""
    s = np.asarray(shapes)
    s = s.reshape(s.shape[0], -1)
    peak = np.abs(s).max(axis=1, keepdims=True) if s.size else np.ones((s.shape[0], 1))
    return s / np.where(peak > 0, peak, 1.0)


def mac_matrix(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """MAC between every mode of ``a`` (m, ...) and every mode of ``b`` (k, ...): (m, k) in [0, 1].

    Shapes must be sampled at the same points (map them first when meshes differ). A zero
    vector has MAC 0 with everything.
    """
    A = _flat(a)
    B = _flat(b)
    if A.shape[1] != B.shape[1]:
        raise ValueError(f"shapes of different length ({A.shape[1]} and {B.shape[1]}): map them onto "
                         "the same points first")
    cross = np.abs(A.conj() @ B.T) ** 2
    na = np.einsum("ij,ij->i", A.conj(), A).real
    nb = np.einsum("ij,ij->i", B.conj(), B).real
    denom = np.outer(na, nb)
    with np.errstate(divide="ignore", invalid="ignore"):
        mac = np.where(denom > 0, cross / np.where(denom > 0, denom, 1.0), 0.0)
    return np.clip(mac.real, 0.0, 1.0)


def auto_mac(a: np.ndarray) -> np.ndarray:
    """MAC of a set of modes with itself: off-diagonal values near 1 mean aliased or poorly
    separated modes (too coarse a set of points to tell them apart)."""
    return mac_matrix(a, a)
