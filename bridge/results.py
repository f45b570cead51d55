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

Integrity (format 2): the attribute ``/modebridge/sha256`` is a SHA-256 over every dataset of
the file (sorted by path: its path, dtype, shape and bytes) and the ``format``, ``format_version``
and ``metadata`` attributes. :func:`load_result` recomputes it and refuses a file that differs
(flipped bits, a hand edit, a truncated copy); it also checks the file's structure (mode count,
point count, finite frequencies) before allocating anything. Files of format 1 carry no checksum
and are read with the structural checks only.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .errors import OutputError, ResultFileError
from .io import atomic_path, ensure_room

__all__ = ["ModalResult", "save_result", "load_result", "result_checksum", "verify_result", "DIRECTIONS", "FORMAT_VERSION"]

DIRECTIONS = ("x", "y", "z", "rx", "ry", "rz")
FORMAT = "modebridge-modal"
FORMAT_VERSION = 2
#: the first format version whose files carry a checksum
CHECKSUM_VERSION = 2


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


def _dataset_names(f) -> list[str]:
    import h5py

    names: list[str] = []
    for top in ("VTKHDF", "modebridge"):
        if top in f:
            f[top].visititems(lambda name, obj, _t=top: names.append(f"{_t}/{name}")
                              if isinstance(obj, h5py.Dataset) else None)
    return sorted(names)


def _attr_text(value) -> bytes:
    if isinstance(value, bytes | np.bytes_):
        return bytes(value)
    return str(value).encode("utf-8")


def _walk(f, consume=None) -> str:
    """SHA-256 over the file's datasets (sorted by path) and its identifying attributes; each
    array read is handed to ``consume(name, array)`` so that a reader reads every byte once."""
    h = hashlib.sha256()
    g = f["modebridge"]
    for key in ("format", "format_version", "metadata"):
        h.update(key.encode() + b"=" + _attr_text(g.attrs.get(key, b"")) + b"\0")
    for name in _dataset_names(f):
        arr = np.ascontiguousarray(f[name][()])
        h.update(f"{name}|{arr.dtype.str}|{arr.shape}".encode() + b"\0")
        h.update(arr.tobytes())
        if consume is not None:
            consume(name, arr)
    return h.hexdigest()


def result_checksum(path: str | Path) -> str | None:
    """The checksum stored in a result file (None for a format-1 file); not verified."""
    import h5py

    try:
        with h5py.File(path, "r") as f:
            value = f["modebridge"].attrs.get("sha256")
    except (OSError, KeyError) as exc:
        raise ResultFileError(f"{path}: unreadable or incomplete result file ({exc})") from None
    return None if value is None else _attr_text(value).decode("ascii", "replace")


def save_result(result: ModalResult, path: str | Path) -> Path:
    """Write ``result`` atomically (a reader never sees half a file)."""
    import h5py

    path = Path(path)
    m = result.n_modes
    n = result.points.shape[0]
    ne, k = result.cells.shape
    # an upper bound of the file's size: HDF5 handles a full disk badly (errors at close, even
    # native crashes), so a file that cannot fit is refused before HDF5 writes a byte
    arrays = [result.points, result.cells, result.shapes, result.rotations, result.participation,
              result.effective_mass, result.total_effective_mass, result.node_ids]
    nbytes = sum(8 * np.asarray(a).size for a in arrays if a is not None) + 8 * (3 * m + 3 * ne) \
        + 4096 * (2 * m + 20) + len(json.dumps(result.metadata, default=str)) + 65536
    ensure_room(path, nbytes)
    with atomic_path(path) as tmp:
        try:
            _write_h5(h5py, tmp, result, m, n, ne, k)
        except (RuntimeError, ValueError, TypeError) as exc:  # HDF5 reports some write faults so
            raise OutputError(f"{path}: cannot write: {' '.join(str(exc).split())[:200]}") from None
    return path


def _write_h5(h5py, tmp, result: ModalResult, m: int, n: int, ne: int, k: int) -> None:
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
        f.flush()
        g.attrs["sha256"] = _walk(f)


def _bad(path, why: str) -> ResultFileError:
    return ResultFileError(f"{path}: {why}")


def load_result(path: str | Path) -> ModalResult:
    """Read a result written by :func:`save_result`; refuse a damaged or inconsistent file."""
    import h5py

    path = Path(path)
    if path.is_dir():
        path = path / "result.vtkhdf"
    if not path.is_file():
        raise ResultFileError(f"{path}: no such result file")
    try:
        with h5py.File(path, "r") as f:
            if "modebridge" not in f or "VTKHDF" not in f:
                raise _bad(path, "not a modebridge result (no /modebridge or /VTKHDF group)")
            g = f["modebridge"]
            if _attr_text(g.attrs.get("format", b"")).decode("utf-8", "replace") != FORMAT:
                raise _bad(path, "not a modebridge result")
            try:
                ver = int(g.attrs["format_version"])
            except (KeyError, TypeError, ValueError):
                raise _bad(path, "format_version missing or not an integer") from None
            if ver > FORMAT_VERSION:
                raise ResultFileError(f"{path}: written by a newer modebridge (format {ver})")
            try:
                meta = json.loads(g.attrs["metadata"])
            except (KeyError, TypeError, ValueError, RecursionError):
                raise _bad(path, "metadata missing or not JSON") from None
            if not isinstance(meta, dict):
                raise _bad(path, f"metadata is a JSON {type(meta).__name__}, not an object")
            v = f["VTKHDF"]
            pd = v["PointData"]
            # the structure first: nothing is allocated from a number that does not hold
            m = meta.get("n_modes")
            if isinstance(m, bool) or not isinstance(m, int):
                raise _bad(path, f"metadata n_modes {m!r} is not an integer")
            nf = g["frequencies"].shape
            if len(nf) != 1 or m != nf[0]:
                raise _bad(path, f"metadata n_modes = {m} but {nf[0] if nf else 0} frequencies are stored")
            n_points = v["NumberOfPoints"][()]
            n = int(n_points[0]) if n_points.size else -1
            if n < 1 or v["Points"].shape != (n, 3):
                raise _bad(path, f"point count {n} does not match the stored points {v['Points'].shape}")
            has_rot = bool(meta.get("has_rotations"))
            for i in range(m):
                for stem in ("mode",) + (("rotation",) if has_rot else ()):
                    key = f"{stem}_{i + 1:03d}"
                    if key not in pd or pd[key].shape != (n, 3):
                        raise _bad(path, f"point array {key} missing or not ({n}, 3)")
            for key in ("total_mass_kg", "normalisation", "reference_point_m"):
                if key not in meta:
                    raise _bad(path, f"metadata lacks '{key}'")
            stored = g.attrs.get("sha256")
            if ver >= CHECKSUM_VERSION and stored is None:
                raise _bad(path, "its checksum is missing: the file is damaged or was edited")
            shapes = np.empty((m, n, 3))
            rotations = np.empty((m, n, 3)) if has_rot else None
            arrays: dict[str, np.ndarray] = {}

            def take(name: str, arr: np.ndarray) -> None:
                leaf = name.rsplit("/", 1)[-1]
                if name.startswith("VTKHDF/PointData/"):
                    stem, _, idx = leaf.rpartition("_")
                    i = int(idx) - 1
                    if stem == "mode" and 0 <= i < m:
                        shapes[i] = arr
                    elif stem == "rotation" and rotations is not None and 0 <= i < m:
                        rotations[i] = arr
                    return
                arrays[name] = arr

            digest = _walk(f, take)
            if stored is not None and _attr_text(stored).decode("ascii", "replace") != digest:
                raise _bad(path, "checksum mismatch: the file is damaged or was edited after it was "
                                 "written (run again to rewrite it)")
            freqs = arrays["modebridge/frequencies"]
            if not np.all(np.isfinite(freqs)):
                raise _bad(path, "holds a frequency that is not a finite number")
            ne = int(arrays["VTKHDF/NumberOfCells"][0])
            conn = arrays["VTKHDF/Connectivity"]
            if ne < 0 or (ne and conn.size % ne):
                raise _bad(path, f"{conn.size} connectivity entries do not split into {ne} cells")
            cells = conn.reshape(ne, -1) if ne else conn.reshape(0, 0)
            types = arrays["VTKHDF/Types"]
            opt = {name: arrays.get(f"modebridge/{name}")
                   for name in ("participation", "effective_mass", "total_effective_mass")}
            total_mass = float(meta.pop("total_mass_kg"))
            normalisation = meta.pop("normalisation")
            ref = np.asarray(meta.pop("reference_point_m"), dtype=np.float64)
            if ref.shape != (3,) or not isinstance(normalisation, str):
                raise _bad(path, "metadata reference_point_m or normalisation of the wrong type")
            for key in ("has_rotations", "n_modes", "units"):
                meta.pop(key, None)
            return ModalResult(
                frequencies=freqs, eigenvalues=arrays["modebridge/eigenvalues"],
                points=arrays["VTKHDF/Points"], node_ids=arrays["modebridge/node_ids"],
                cell_type=int(types[0]) if types.size else 0, cells=cells, shapes=shapes,
                rotations=rotations, total_mass=total_mass, reference_point=ref,
                normalisation=normalisation, metadata=meta, **opt)
    except ResultFileError:
        raise
    except (OSError, KeyError, ValueError, TypeError, IndexError, json.JSONDecodeError) as exc:
        raise ResultFileError(f"{path}: unreadable or incomplete result file "
                              f"({' '.join(str(exc).split()) or type(exc).__name__})") from None


def verify_result(path: str | Path) -> str:
    """Verify a result file's checksum without building the result; return the checksum.
    Raises :class:`ResultFileError` for a damaged, truncated or unchecked (format 1) file."""
    import h5py

    try:
        with h5py.File(path, "r") as f:
            stored = f["modebridge"].attrs.get("sha256")
            if stored is None:
                raise _bad(path, "carries no checksum")
            stored = _attr_text(stored).decode("ascii", "replace")
            if _walk(f) != stored:
                raise _bad(path, "checksum mismatch: the file is damaged")
            return stored
    except ResultFileError:
        raise
    except (OSError, KeyError, ValueError, TypeError) as exc:
        raise ResultFileError(f"{path}: unreadable or incomplete result file ({exc})") from None
