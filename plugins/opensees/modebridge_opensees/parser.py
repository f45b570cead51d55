"""Reader of the results file ``model_os.npz`` written by the generated OpenSees script.

Layout (``format_version`` 1; numbers in the job's units, mm, t, s):

==================  ===============  ==================================================
key                 shape, dtype     meaning
==================  ===============  ==================================================
format_version      (), int          1
opensees_version    (), str          ``ops.version()`` of the library that ran
element             (), str          OpenSees element used
eigenvalues         (m,), float      (rad/s)², as ``eigen`` returned them
node_ids            (n,), int        node tags, the rows of the shape arrays
translations        (m, n, 3), float ux uy uz, mass-normalised (φᵀMφ = 1, OpenSees' M)
rotations           (m, n, 3), float rx ry rz (shells only), same normalisation
generalized_mass    (m,), float      φᵀMφ of the raw ``eigen`` vectors, M from inertia forces
orthogonality       (), float        max |φᵢᵀMφⱼ| / √(mᵢmⱼ), i ≠ j, same M (inf if φᵀMφ ≤ 0)
total_mass          (3,), float      rᵀMr per translation, same M
model_mass          (), float        the model's mass as modebridge computed it
mass_verified       (), bool         the inertia-force M passed both checks and was used to
                                     scale the modes; else the modes are ARPACK's as returned
element_factor      (), float        multiple of the element volume the element integrates
                                     over, as measured (E and ρ were divided by it); 1 if not
                                     measured
==================  ===============  ==================================================

See :mod:`.deck` for how the modes are normalised and checked.
"""

from __future__ import annotations

import io
import zipfile
from dataclasses import dataclass
from pathlib import Path
from typing import IO

import numpy as np

from bridge.errors import ResultParseError

from .deck import FORMAT_VERSION, RESULTS_NAME

__all__ = ["OpenSeesResult", "read_npz", "read_results"]

_REQUIRED = ("format_version", "opensees_version", "element", "eigenvalues", "node_ids",
             "translations", "generalized_mass", "orthogonality", "total_mass", "model_mass",
             "mass_verified", "element_factor")


@dataclass(frozen=True, eq=False)
class OpenSeesResult:
    """The contents of one results file (arrays read-only); units as in the module docstring."""

    opensees_version: str
    element: str
    eigenvalues: np.ndarray
    node_ids: np.ndarray
    translations: np.ndarray
    rotations: np.ndarray | None
    generalized_mass: np.ndarray
    orthogonality: float
    total_mass: np.ndarray
    model_mass: float
    mass_verified: bool
    element_factor: float

    def __post_init__(self) -> None:
        for value in vars(self).values():
            if isinstance(value, np.ndarray):
                value.setflags(write=False)

    @property
    def frequencies(self) -> np.ndarray:
        """Hz; 0 for a negative eigenvalue (as CalculiX prints it)."""
        return np.sqrt(np.clip(self.eigenvalues, 0.0, None)) / (2 * np.pi)


def read_results(workdir: str | Path) -> OpenSeesResult:
    """Read ``model_os.npz`` in ``workdir``."""
    path = Path(workdir) / RESULTS_NAME
    try:
        with open(path, "rb") as fh:
            return read_npz(fh, path=path)
    except OSError as exc:
        raise ResultParseError(f"cannot read the OpenSees results: {exc.strerror or exc}",
                               path=path) from None


def read_npz(stream: IO[bytes] | bytes, path: str | Path | None = None) -> OpenSeesResult:
    """Parse a results file from a binary stream (or bytes); raise ResultParseError if unusable."""
    if isinstance(stream, (bytes, bytearray)):
        stream = io.BytesIO(stream)
    try:
        with np.load(stream, allow_pickle=False) as data:
            missing = [k for k in _REQUIRED if k not in data.files]
            if missing:
                raise ResultParseError(f"results file lacks {', '.join(missing)}", path=path)
            arrays = {k: data[k] for k in data.files}
    except ResultParseError:
        raise
    except (zipfile.BadZipFile, EOFError, ValueError, OSError, KeyError) as exc:
        raise ResultParseError(f"not a complete results file (truncated?): {exc}", path=path) from None
    if arrays["format_version"].shape != () or int(arrays["format_version"]) != FORMAT_VERSION:
        raise ResultParseError(f"results format {arrays['format_version']!r}, expected {FORMAT_VERSION}",
                               path=path)
    lam = np.asarray(arrays["eigenvalues"], np.float64)
    ids = np.asarray(arrays["node_ids"])
    tr = np.asarray(arrays["translations"], np.float64)
    rot = arrays.get("rotations")
    gm = np.asarray(arrays["generalized_mass"], np.float64)
    tm = np.asarray(arrays["total_mass"], np.float64)
    m = lam.size
    if lam.ndim != 1 or m == 0:
        raise ResultParseError("no eigenvalue in the results file", path=path)
    if ids.ndim != 1 or not np.issubdtype(ids.dtype, np.integer) or ids.size == 0:
        raise ResultParseError("node_ids is not a list of integer node tags", path=path)
    if np.unique(ids).size != ids.size:
        raise ResultParseError("node_ids lists a node twice", path=path)
    n = ids.size
    if tr.shape != (m, n, 3):
        raise ResultParseError(f"translations have shape {tr.shape}, expected {(m, n, 3)}", path=path)
    if rot is not None:
        rot = np.asarray(rot, np.float64)
        if rot.shape != (m, n, 3):
            raise ResultParseError(f"rotations have shape {rot.shape}, expected {(m, n, 3)}", path=path)
    if gm.shape != (m,) or tm.shape != (3,) or arrays["model_mass"].shape != () \
            or arrays["mass_verified"].shape != () or arrays["orthogonality"].shape != () \
            or arrays["element_factor"].shape != ():
        raise ResultParseError("generalized_mass, total_mass, model_mass, mass_verified, "
                               "orthogonality or element_factor has the wrong shape", path=path)
    for name, arr in (("eigenvalues", lam), ("translations", tr), ("rotations", rot),
                      ("generalized_mass", gm), ("total_mass", tm)):
        if arr is not None and not np.all(np.isfinite(arr)):
            raise ResultParseError(f"{name} holds NaN or infinite values", path=path)
    return OpenSeesResult(
        opensees_version=str(arrays["opensees_version"]), element=str(arrays["element"]),
        eigenvalues=lam, node_ids=ids.astype(np.int64), translations=tr, rotations=rot,
        generalized_mass=gm, orthogonality=float(arrays["orthogonality"]), total_mass=tm,
        model_mass=float(arrays["model_mass"]), mass_verified=bool(arrays["mass_verified"]),
        element_factor=float(arrays["element_factor"]))
