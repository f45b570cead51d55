"""The neutral modal result, and its file format.

A :class:`ModalResult` is in SI: Hz, (rad/s)^2, m, kg. Mode shapes are
mass-normalised (φᵀMφ = 1 with M in kg: shapes are in 1/√kg, displacement per unit modal coordinate).

File format (``result.vtkhdf``, HDF5) — ParaView and VTK open it as an
unstructured grid with one point array per mode:

* ``/VTKHDF``: a VTKHDF 1.0 ``UnstructuredGrid`` (``Points``, ``Types``,
  ``Connectivity``, ``Offsets``), ``PointData/mode_NNN`` (n, 3) translations and,
  where the solver gave them, ``PointData/rotation_NNN``; ``FieldData/frequency_hz``.
* ``/modebridge``: attribute ``format`` = ``"modebridge-modal"``, ``format_version``,
  ``metadata`` (JSON: provenance, checks, mesh statistics, units, normalisation);
  datasets ``frequencies``, ``eigenvalues``, ``node_ids`` and, when known,
  ``participation``, ``effective_mass``, ``total_effective_mass``.

Arrays are stored as float64/int64 and read back bit for bit.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .errors import ResultFileError
from .io import atomic_path

__all__ = ["ModalResult", "save_result", "load_result", "DIRECTIONS", "FORMAT_VERSION"]

DIRECTIONS = ("x", "y", "z", "rx", "ry", "rz")
FORMAT = "modebridge-modal"
FORMAT_VERSION = 1


@dataclass
class ModalResult:
    frequencies: np.ndarray  #: (m,) Hz, ascending
    eigenvalues: np.ndarray  #: (m,) (rad/s)^2
    points: np.ndarray  #: (n, 3) m
    node_ids: np.ndarray  #: (n,) int64
    cell_type: int  #: VTK cell type
    cells: np.ndarray  #: (ne, k) 0-based, VTK node order
    shapes: np.ndarray  #: (m, n, 3) 1/√kg, mass-normalised
    rotations: np.ndarray | None = None  #: (m, n, 3) rad/(m·√kg)
    participation: np.ndarray | None = None  #: (m, 6) √kg (translations), √kg·m (rotations)
    effective_mass: np.ndarray | None = None  #: (m, 6) kg (translations), kg·m² (rotations)
    total_effective_mass: np.ndarray | None = None  #: (6,) kg, kg·m² — mass on the free DOF
    total_mass: float = float("nan")  #: kg, the model's mass (structure + added masses)
    reference_point: np.ndarray = field(default_factory=lambda: np.zeros(3))  #: m, for rotations
    normalisation: str = "mass"
    metadata: dict = field(default_factory=dict)  #: provenance, checks, mesh, units

    @property
    def n_modes(self) -> int:
        return int(self.frequencies.size)

    def effective_mass_fraction(self) -> np.ndarray | None:
        """(m, 3) effective mass per translation direction over the model's total mass."""
        if self.effective_mass is None or not np.isfinite(self.total_mass) or self.total_mass <= 0:
            return None
        return self.effective_mass[:, :3] / self.total_mass


def _ascii_attr(text: str):
    return np.bytes_(text.encode("ascii"))


def save_result(result: ModalResult, path: str | Path) -> Path:
    """Write ``result`` atomically (a reader never sees half a file)."""
    import h5py

    path = Path(path)
    m = result.n_modes
    n = result.points.shape[0]
    ne, k = result.cells.shape
    with atomic_path(path) as tmp:
        with h5py.File(tmp, "w") as f:
            v = f.create_group("VTKHDF")
            v.attrs["Version"] = np.array([1, 0], dtype=np.int64)
            v.attrs["Type"] = _ascii_attr("UnstructuredGrid")
            v.create_dataset("NumberOfPoints", data=np.array([n], dtype=np.int64))
            v.create_dataset("NumberOfCells", data=np.array([ne], dtype=np.int64))
            v.create_dataset("NumberOfConnectivityIds", data=np.array([ne * k], dtype=np.int64))
            v.create_dataset("Points", data=np.asarray(result.points, dtype=np.float64))
            v.create_dataset("Types", data=np.full(ne, result.cell_type, dtype=np.uint8))
            v.create_dataset("Connectivity", data=np.asarray(result.cells, dtype=np.int64).ravel())
            v.create_dataset("Offsets", data=np.arange(ne + 1, dtype=np.int64) * k)
            pd = v.create_group("PointData")
            for i in range(m):
                pd.create_dataset(f"mode_{i + 1:03d}", data=np.asarray(result.shapes[i], dtype=np.float64))
                if result.rotations is not None:
                    pd.create_dataset(f"rotation_{i + 1:03d}", data=np.asarray(result.rotations[i], np.float64))
            fd = v.create_group("FieldData")
            fd.create_dataset("frequency_hz", data=np.asarray(result.frequencies, dtype=np.float64))

            g = f.create_group("modebridge")
            g.attrs["format"] = FORMAT
            g.attrs["format_version"] = FORMAT_VERSION
            meta = dict(result.metadata)
            meta.update({"total_mass_kg": result.total_mass, "normalisation": result.normalisation,
                         "reference_point_m": [float(x) for x in result.reference_point],
                         "has_rotations": result.rotations is not None, "n_modes": m,
                         "units": {"frequency": "Hz", "eigenvalue": "(rad/s)^2", "length": "m", "mass": "kg",
                                   "shape": "1/sqrt(kg)", "rotation": "rad/(m sqrt(kg))"}})
            g.attrs["metadata"] = json.dumps(meta, sort_keys=True)
            g.create_dataset("frequencies", data=np.asarray(result.frequencies, np.float64))
            g.create_dataset("eigenvalues", data=np.asarray(result.eigenvalues, np.float64))
            g.create_dataset("node_ids", data=np.asarray(result.node_ids, np.int64))
            for name in ("participation", "effective_mass", "total_effective_mass"):
                arr = getattr(result, name)
                if arr is not None:
                    g.create_dataset(name, data=np.asarray(arr, np.float64))
    return path


def load_result(path: str | Path) -> ModalResult:
    """Read a result written by :func:`save_result`."""
    import h5py

    path = Path(path)
    if path.is_dir():
        path = path / "result.vtkhdf"
    if not path.is_file():
        raise ResultFileError(f"{path}: no such result file")
    try:
        with h5py.File(path, "r") as f:
            g = f["modebridge"]
            if g.attrs.get("format") != FORMAT:
                raise ResultFileError(f"{path}: not a modebridge result")
            ver = int(g.attrs["format_version"])
            if ver > FORMAT_VERSION:
                raise ResultFileError(f"{path}: written by a newer modebridge (format {ver})")
            meta = json.loads(g.attrs["metadata"])
            v = f["VTKHDF"]
            m = int(meta["n_modes"])
            pd = v["PointData"]
            n = int(v["NumberOfPoints"][0])
            shapes = np.empty((m, n, 3))
            for i in range(m):
                shapes[i] = pd[f"mode_{i + 1:03d}"][()]
            rotations = None
            if meta.get("has_rotations"):
                rotations = np.empty((m, n, 3))
                for i in range(m):
                    rotations[i] = pd[f"rotation_{i + 1:03d}"][()]
            ne = int(v["NumberOfCells"][0])
            conn = v["Connectivity"][()]
            cells = conn.reshape(ne, -1) if ne else conn.reshape(0, 0)
            types = v["Types"][()]
            opt = {name: (g[name][()] if name in g else None)
                   for name in ("participation", "effective_mass", "total_effective_mass")}
            total_mass = float(meta.pop("total_mass_kg"))
            normalisation = meta.pop("normalisation")
            ref = np.asarray(meta.pop("reference_point_m"), dtype=np.float64)
            for key in ("has_rotations", "n_modes", "units"):
                meta.pop(key, None)
            return ModalResult(
                frequencies=g["frequencies"][()], eigenvalues=g["eigenvalues"][()],
                points=v["Points"][()], node_ids=g["node_ids"][()],
                cell_type=int(types[0]) if types.size else 0, cells=cells, shapes=shapes,
                rotations=rotations, total_mass=total_mass, reference_point=ref,
                normalisation=normalisation, metadata=meta, **opt)
    except ResultFileError:
        raise
    except (OSError, KeyError, ValueError, json.JSONDecodeError) as exc:
        raise ResultFileError(f"{path}: unreadable or incomplete result file ({exc})") from None
