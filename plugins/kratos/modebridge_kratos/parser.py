"""Reader for ``modes.npz``, the file the case's ``run_case.py`` writes after Kratos has solved.

Contents (arrays; units are the job's, mm-t-s-N):

==================== ============== ========================================================
key                  shape          meaning
==================== ============== ========================================================
eigenvalues          (m,)           (rad/s)², as Kratos's eigensolver returned them
frequencies          (m,)           Hz, √|λ| / 2π
node_ids             (n,)           int64, the .mdpa node ids of the rows below
translations         (m, n, 3)      mass-normalised (φᵀMφ = 1 with Kratos's element matrices)
rotations            (m, n, 3)      shells only, same normalisation, rad / (length √mass)
kratos_modal_mass    (m,)           φᵀMφ of the vectors Kratos returned, before normalising
rayleigh_quotient    (m,)           φᵀKφ / φᵀMφ from the element matrices (must equal λ)
kratos_version       ()             Kratos's version string
element_type         ()             Kratos element name
solve_note           ()             how the constrained eigen-problem was solved (optional)
wall_time            ()             s, inside run_case.py
==================== ============== ========================================================

run_case.py writes the file under a temporary name and renames it, so a file that exists is
complete unless something else truncated it; either way a damaged or partial file raises
:class:`~bridge.errors.ResultParseError` naming the path.
"""

from __future__ import annotations

import zipfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from bridge.errors import ResultParseError

__all__ = ["KratosResult", "read_results", "REQUIRED"]

REQUIRED = ("eigenvalues", "node_ids", "translations", "kratos_modal_mass", "rayleigh_quotient")


@dataclass(frozen=True, eq=False)
class KratosResult:
    eigenvalues: np.ndarray  #: (m,) (rad/s)²
    frequencies: np.ndarray  #: (m,) Hz
    node_ids: np.ndarray  #: (n,) int64
    translations: np.ndarray  #: (m, n, 3) 1/√mass
    rotations: np.ndarray | None  #: (m, n, 3) rad/(length √mass)
    kratos_modal_mass: np.ndarray  #: (m,) φᵀMφ of Kratos's own vectors
    rayleigh_quotient: np.ndarray  #: (m,) (rad/s)²
    kratos_version: str
    element_type: str
    note: str = ""  #: how run_case.py solved (empty: Kratos's eigen strategy)

    def __post_init__(self) -> None:
        for name in ("eigenvalues", "frequencies", "node_ids", "translations", "rotations",
                     "kratos_modal_mass", "rayleigh_quotient"):
            a = getattr(self, name)
            if a is not None:
                a.setflags(write=False)


def _load(path: Path) -> dict[str, np.ndarray]:
    if not path.is_file():
        raise ResultParseError("Kratos wrote no results file (did run_case.py finish?)", path=path)
    if path.stat().st_size == 0:
        raise ResultParseError("the results file is empty", path=path)
    try:
        with np.load(path, allow_pickle=False) as data:
            return {k: np.asarray(data[k]) for k in data.files}
    except (zipfile.BadZipFile, EOFError, OSError, ValueError, KeyError) as exc:
        raise ResultParseError(f"the results file is truncated or not an .npz archive ({exc})",
                               path=path) from None


def read_results(path: str | Path) -> KratosResult:
    """Read and validate ``modes.npz``."""
    path = Path(path)
    data = _load(path)
    missing = [k for k in REQUIRED if k not in data]
    if missing:
        raise ResultParseError(f"the results file lacks {', '.join(missing)}", path=path)
    lam = np.asarray(data["eigenvalues"], dtype=np.float64)
    ids = data["node_ids"]
    tr = np.asarray(data["translations"], dtype=np.float64)
    if lam.ndim != 1 or lam.size == 0:
        raise ResultParseError("no eigenvalue in the results file", path=path)
    m = lam.size
    if ids.ndim != 1 or not np.issubdtype(ids.dtype, np.integer):
        raise ResultParseError("node_ids is not a list of integers", path=path)
    n = ids.size
    if tr.shape != (m, n, 3):
        raise ResultParseError(f"translations have shape {tr.shape}, expected {(m, n, 3)}", path=path)
    if np.unique(ids).size != n:
        raise ResultParseError("node_ids repeat", path=path)
    rot = data.get("rotations")
    if rot is not None:
        rot = np.asarray(rot, dtype=np.float64)
        if rot.shape != (m, n, 3):
            raise ResultParseError(f"rotations have shape {rot.shape}, expected {(m, n, 3)}", path=path)
    mm = np.asarray(data["kratos_modal_mass"], dtype=np.float64)
    rq = np.asarray(data["rayleigh_quotient"], dtype=np.float64)
    if mm.shape != (m,) or rq.shape != (m,):
        raise ResultParseError("kratos_modal_mass / rayleigh_quotient do not have one value per mode", path=path)
    for name, a in (("eigenvalues", lam), ("translations", tr), ("rotations", rot),
                    ("kratos_modal_mass", mm), ("rayleigh_quotient", rq)):
        if a is not None and not np.all(np.isfinite(a)):
            raise ResultParseError(f"{name} hold NaN or infinite values", path=path)
    freq = data.get("frequencies")
    freq = (np.sqrt(np.abs(lam)) / (2 * np.pi)) if freq is None else np.asarray(freq, dtype=np.float64)
    if freq.shape != (m,):
        raise ResultParseError("frequencies do not have one value per mode", path=path)
    return KratosResult(
        eigenvalues=lam, frequencies=freq, node_ids=ids.astype(np.int64), translations=tr, rotations=rot,
        kratos_modal_mass=mm, rayleigh_quotient=rq,
        kratos_version=str(data.get("kratos_version", np.array(""))),
        element_type=str(data.get("element_type", np.array(""))),
        note=str(data.get("solve_note", np.array(""))))
