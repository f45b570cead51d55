"""Participation factors and effective modal masses computed by modebridge itself.

From the mass-normalised translations φ and modebridge's own consistent mass
matrix M (:func:`bridge.fem.scalar_mass_matrix`, plus the added point masses):

    L_i = φ_iᵀ M r,  m_i = φ_iᵀ M φ_i,  Γ_i = L_i / m_i,  m_eff,i = L_i² / m_i

for the rigid-body influence vector r of each translation and of each rotation
about the reference point (u = e × (x − x0)). r is zero on fixed DOF, so
Σ m_eff over all modes is rᵀ M r: the mass on free DOF. Rotary inertia of shell
sections and of added masses is not included (translations only): the rotation
columns are the moments of the translational mass.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .fem import scalar_mass_matrix
from .mesh import Mesh

__all__ = ["MassProperties", "mass_properties", "mass_matrix"]


@dataclass
class MassProperties:
    participation: np.ndarray  #: (m, 6) Γ
    effective_mass: np.ndarray  #: (m, 6) kg, kg·m²
    total_effective_mass: np.ndarray  #: (6,) rᵀMr: mass on free DOF
    modal_mass: np.ndarray  #: (m,) φᵀMφ with modebridge's M (1 for exactly mass-normalised shapes)
    total_mass: float  #: sum of M: structure plus added masses


def mass_properties(mesh: Mesh, shapes: np.ndarray, fixed: np.ndarray, matrix,
                    reference_point=(0.0, 0.0, 0.0)) -> MassProperties:
    """Effective masses from SI shapes (m, n, 3) on ``mesh``; ``fixed`` (n, 6) bool; ``matrix``:
    the model's :func:`mass_matrix` (``run`` assembles it while the solver runs)."""
    x = mesh.points - np.asarray(reference_point, float)
    free = ~fixed[:, :3]
    # rigid-body influence vectors, (6, n, 3)
    R = np.zeros((6, mesh.n_nodes, 3))
    for d in range(3):
        R[d, :, d] = 1.0
    for a in range(3):
        e = np.zeros(3)
        e[a] = 1.0
        R[3 + a] = np.cross(e, x)
    R *= free[None, :, :]
    MR = np.stack([matrix @ R[j] for j in range(6)])  # (6, n, 3)
    L = np.einsum("mnc,jnc->mj", shapes, MR)
    Mphi = np.stack([matrix @ shapes[i] for i in range(shapes.shape[0])]) if shapes.size else shapes
    mm = np.einsum("mnc,mnc->m", shapes, Mphi)
    with np.errstate(divide="ignore", invalid="ignore"):
        gamma = L / mm[:, None]
        meff = L**2 / mm[:, None]
    total = np.einsum("jnc,jnc->j", R, MR)
    return MassProperties(gamma, meff, total, mm, float(matrix.sum()))


def mass_matrix(mesh: Mesh, density, thickness, point_masses: list[tuple[int, float]],
                beam_masses: np.ndarray | None = None):
    """The scalar consistent mass matrix of :func:`mass_properties` (n, n), CSR: the continuum's,
    the beams' (m/6 [2 1; 1 2] per translation) and the point masses (node, kg) on the diagonal.

    ``density`` (kg/m³) and ``thickness`` (m, shells; None for solids) are one value or one per
    element (a mesh of several sections). ``beam_masses`` (nb,): mass of each of ``mesh.beams``."""
    Ms = scalar_mass_matrix(mesh.points, mesh.cells, mesh.family, density, thickness).tocsr()
    if beam_masses is not None and len(beam_masses):
        import scipy.sparse as sp

        b = mesh.beams
        me = np.asarray(beam_masses, float)[:, None, None] * (np.array([[2.0, 1.0], [1.0, 2.0]]) / 6)
        rows = np.repeat(b, 2, axis=1).ravel()
        cols = np.tile(b, (1, 2)).ravel()
        Ms = Ms + sp.csr_matrix((me.ravel(), (rows, cols)), shape=Ms.shape)
    if point_masses:
        idx = np.array([p for p, _ in point_masses], dtype=np.int64)
        val = np.array([m for _, m in point_masses], float)
        add = np.zeros(mesh.n_nodes)
        np.add.at(add, idx, val)
        Ms = Ms + _diag(add)
    return Ms


def _diag(v):
    import scipy.sparse as sp

    return sp.diags(v, format="csr")
