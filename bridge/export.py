"""Export a neutral result to other tools' formats.

* ``vtu`` — VTK XML unstructured grid, written with VTK's own writer: one point array per
  mode (``mode_001`` … translations, ``rotation_001`` … where the result has rotations) and
  the frequencies as field data (``frequency_hz``, ``eigenvalue_rad2_s2``). meshio's VTU
  writer drops field data; VTK's keeps it, and both pyvista and meshio read it back.
* ``xdmf`` — XDMF 3 with an HDF5 heavy-data file beside it (meshio), one point array per
  mode. XDMF via meshio carries no field data, so the frequencies go into a sidecar JSON.
* ``csv`` — the table of modes: frequency, eigenvalue, effective masses per direction, their
  fractions of the model's mass and the cumulative fractions.

``vtu`` and ``xdmf`` also write ``<file name>.json`` (``modes.vtu.json``) beside the file: frequencies, units,
normalisation, array names and the result's provenance. Every file is written atomically.
Values are SI, as in the result (m, Hz, (rad/s)², kg, kg·m²; shapes in 1/√kg).
"""

from __future__ import annotations

import csv
import io
import json
import os
import shutil
import tempfile
from pathlib import Path

import numpy as np

from .checks import rigid_body_count
from .elements import FamilyView
from .errors import BridgeError, ExitCode
from .io import atomic_path, atomic_write_text, guard_output
from .results import DIRECTIONS, ModalResult, load_result

__all__ = ["ExportError", "FORMATS", "export_result", "write_vtu", "write_xdmf", "write_csv", "csv_text",
           "CSV_COLUMNS", "MESHIO_CELL_TYPES"]

FORMATS = ("vtu", "xdmf", "csv")

#: VTK cell type → meshio cell type name (meshio keeps VTK's node order for these); derived from
#: the element-family registry (bridge/elements.py)
MESHIO_CELL_TYPES = FamilyView(lambda f: f.meshio_type, key=lambda f: f.vtk_type)
#: VTK_VERTEX: the cells of a model without continuum (every reference point a vertex)
_VERTEX = 1


def _meshio_type(vtk_type: int) -> str:
    return "vertex" if vtk_type == _VERTEX else MESHIO_CELL_TYPES[vtk_type]

#: columns of the CSV table, with units in the names
CSV_COLUMNS = (["mode", "frequency_hz", "eigenvalue_rad2_s2", "rigid_body"]
               + [f"m_eff_{d}_kg" for d in "xyz"] + [f"m_eff_{d}_kgm2" for d in ("rx", "ry", "rz")]
               + [f"fraction_{d}" for d in "xyz"] + [f"cumulative_{d}" for d in "xyz"])


class ExportError(BridgeError):
    """A result cannot be written in the asked format."""

    exit_code = ExitCode.EXPORT


def _mode_names(result: ModalResult) -> list[str]:
    return [f"mode_{i + 1:03d}" for i in range(result.n_modes)]


def _sidecar(result: ModalResult, fmt: str, files: list[str]) -> dict:
    names = _mode_names(result)
    return {
        "format": f"modebridge-modes-{fmt}",
        "files": files,
        "frequencies_hz": [float(f) for f in result.frequencies],
        "eigenvalues_rad2_s2": [float(x) for x in result.eigenvalues],
        "point_arrays": {"translations": names,
                         "rotations": [n.replace("mode", "rotation") for n in names] if result.rotations is not None
                         else []},
        "units": {"length": "m", "frequency": "Hz", "eigenvalue": "(rad/s)^2", "shape": "1/sqrt(kg)",
                  "rotation": "rad/(m sqrt(kg))"},
        "normalisation": result.normalisation,
        "total_mass_kg": float(result.total_mass),
        "provenance": result.metadata.get("provenance", {}),
    }


def _write_sidecar(result: ModalResult, target: Path, fmt: str, files: list[str]) -> Path:
    side = target.with_name(target.name + ".json")  # modes.vtu.json: never shared by two formats
    atomic_write_text(side, json.dumps(_sidecar(result, fmt, files), indent=2, sort_keys=True))
    return side


def _vtk_grid(result: ModalResult):
    from vtkmodules.util.numpy_support import numpy_to_vtk, numpy_to_vtkIdTypeArray
    from vtkmodules.vtkCommonCore import vtkPoints
    from vtkmodules.vtkCommonDataModel import vtkCellArray, vtkUnstructuredGrid

    ne, k = result.cells.shape
    grid = vtkUnstructuredGrid()
    pts = vtkPoints()
    pts.SetData(numpy_to_vtk(np.ascontiguousarray(result.points, dtype=np.float64), deep=True))
    grid.SetPoints(pts)
    offsets = numpy_to_vtkIdTypeArray(np.arange(ne + 1, dtype=np.int64) * k, deep=True)
    conn = numpy_to_vtkIdTypeArray(np.ascontiguousarray(result.cells, dtype=np.int64).ravel(), deep=True)
    cells = vtkCellArray()
    cells.SetData(offsets, conn)
    grid.SetCells(int(result.cell_type), cells)

    def _add(target, name: str, arr: np.ndarray) -> None:
        v = numpy_to_vtk(np.ascontiguousarray(arr, dtype=np.float64), deep=True)
        v.SetName(name)
        target.AddArray(v)

    pd = grid.GetPointData()
    for i, name in enumerate(_mode_names(result)):
        _add(pd, name, result.shapes[i])
        if result.rotations is not None:
            _add(pd, name.replace("mode", "rotation"), result.rotations[i])
    fd = grid.GetFieldData()
    _add(fd, "frequency_hz", np.asarray(result.frequencies, float))
    _add(fd, "eigenvalue_rad2_s2", np.asarray(result.eigenvalues, float))
    return grid


def write_vtu(result: ModalResult, path: str | Path) -> list[Path]:
    """VTU with one point array per mode and the frequencies as field data, plus the sidecar."""
    from vtkmodules.vtkIOXML import vtkXMLUnstructuredGridWriter

    path = Path(path)
    _check_cells(result)
    grid = _vtk_grid(result)
    with atomic_path(path) as tmp:
        w = vtkXMLUnstructuredGridWriter()
        w.SetFileName(str(tmp))
        w.SetInputData(grid)
        w.SetDataModeToAppended()
        w.EncodeAppendedDataOff()
        w.SetCompressorTypeToZLib()
        if w.Write() != 1:
            raise ExportError(f"{path}: VTK could not write the file")
    return [path, _write_sidecar(result, path, "vtu", [path.name])]


def write_xdmf(result: ModalResult, path: str | Path) -> list[Path]:
    """XDMF + HDF5 (meshio) with one point array per mode, plus the sidecar with the frequencies."""
    import meshio

    path = Path(path)
    if path.suffix.lower() != ".xdmf":
        raise ExportError(f"{path}: an XDMF file name ends in .xdmf")
    _check_cells(result)
    point_data = {}
    for i, name in enumerate(_mode_names(result)):
        point_data[name] = np.asarray(result.shapes[i], float)
        if result.rotations is not None:
            point_data[name.replace("mode", "rotation")] = np.asarray(result.rotations[i], float)
    mesh = meshio.Mesh(np.asarray(result.points, float),
                       [(_meshio_type(result.cell_type), np.asarray(result.cells, np.int64))],
                       point_data=point_data)
    h5 = path.with_suffix(".h5")
    path.parent.mkdir(parents=True, exist_ok=True)
    # meshio names the HDF5 file after the XDMF file and refers to it by name: write both under
    # their final names in a temporary folder beside the target, then move the data in first
    tmpdir = Path(tempfile.mkdtemp(prefix=f".{path.stem}.", dir=path.parent))
    try:
        meshio.write(tmpdir / path.name, mesh, file_format="xdmf", data_format="HDF", compression="gzip")
        os.replace(tmpdir / h5.name, h5)
        os.replace(tmpdir / path.name, path)
    except (OSError, ValueError) as exc:
        raise ExportError(f"{path}: could not write XDMF ({' '.join(str(exc).split())})") from None
    finally:
        shutil.rmtree(tmpdir, ignore_errors=True)
    return [path, h5, _write_sidecar(result, path, "xdmf", [path.name, h5.name])]


def csv_text(result: ModalResult) -> str:
    """The table of modes as CSV (columns :data:`CSV_COLUMNS`); empty cells where a value is unknown."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(CSV_COLUMNS)
    rigid = rigid_body_count(result.frequencies, result.eigenvalues)
    em = result.effective_mass
    frac = result.effective_mass_fraction()
    cum = np.cumsum(frac, axis=0) if frac is not None else None
    for i in range(result.n_modes):
        row = [i + 1, repr(float(result.frequencies[i])), repr(float(result.eigenvalues[i])), int(i < rigid)]
        row += [repr(float(x)) for x in em[i]] if em is not None else [""] * len(DIRECTIONS)
        row += [repr(float(x)) for x in frac[i]] if frac is not None else [""] * 3
        row += [repr(float(x)) for x in cum[i]] if cum is not None else [""] * 3
        w.writerow(row)
    return buf.getvalue()


def write_csv(result: ModalResult, path: str | Path) -> list[Path]:
    path = Path(path)
    atomic_write_text(path, csv_text(result))
    return [path]


def _check_cells(result: ModalResult) -> None:
    if (result.cell_type not in MESHIO_CELL_TYPES and result.cell_type != _VERTEX) or result.cells.ndim != 2 \
            or result.cells.size == 0:
        raise ExportError(f"cells of VTK type {result.cell_type} cannot be exported "
                          f"(known: {', '.join(map(str, sorted(MESHIO_CELL_TYPES)))})")


_WRITERS = {"vtu": write_vtu, "xdmf": write_xdmf, "csv": write_csv}
_SUFFIX = {"vtu": ".vtu", "xdmf": ".xdmf", "csv": ".csv"}


def export_result(result: ModalResult | str | Path, fmt: str, out: str | Path | None = None) -> list[Path]:
    """Write ``result`` (a ModalResult, a result file or a solver folder) as ``fmt``; returns the
    files written. ``out`` defaults to ``modes.<fmt>`` beside the result file."""
    fmt = fmt.lower()
    if fmt not in _WRITERS:
        raise ExportError(f"unknown export format '{fmt}'; accepted: {', '.join(FORMATS)}")
    source = None
    if not isinstance(result, ModalResult):
        source = Path(result)
        result = load_result(source)
    if out is None:
        if source is None:
            raise ExportError("give the output path")
        folder = source if source.is_dir() else source.parent
        out = folder / f"modes{_SUFFIX[fmt]}"
    out = Path(out)
    if out.is_dir():
        raise ExportError(f"{out}: is a folder; give a file name")
    # never onto the result read, a model or another result, nor through a link (bridge.io)
    inputs = [source / "result.vtkhdf" if source.is_dir() else source] if source is not None else []
    targets = [out, out.with_name(out.name + ".json")] + ([out.with_suffix(".h5")] if fmt == "xdmf" else [])
    for t in targets:
        guard_output(t, inputs, what="export")
    return _WRITERS[fmt](result, out)
