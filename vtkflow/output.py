"""Outputs: polyline PolyData, atomic VTP writing, and the run manifest.

Every file is written to a temporary name in its destination folder and renamed into place, so an
interrupted run never leaves a half-written file under a final name.
"""

from __future__ import annotations

import json
import os
import tempfile
from contextlib import contextmanager
from pathlib import Path
from typing import Any, Iterator, Mapping, Sequence

import numpy as np

from . import _vtk
from ._vtk import numpy_to_vtk
from .errors import OutputError

__all__ = ["polylines", "write_vtp", "write_vtu", "write_csv", "read_vtp", "atomic_path", "write_json", "frame_path"]

TMP_SUFFIX = ".part"


def _file_mode() -> int:
    """Mode of new files under the process umask (``mkstemp`` alone would make them owner-only)."""
    mask = os.umask(0)
    os.umask(mask)
    return 0o666 & ~mask


FILE_MODE = _file_mode()


def frame_path(output: Path, entry: str, index: int, suffix: str = ".vtp") -> Path:
    """``<output>/<entry>/<entry>_<NNNN><suffix>``, ``NNNN`` counting frames from 0 within the entry."""
    return output / entry / f"{entry}_{index:04d}{suffix}"


@contextmanager
def atomic_path(path: Path, keep_suffix: bool = False) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; on success rename it to ``path``, on failure remove it.
    With ``keep_suffix`` the temporary name ends in ``path``'s suffix too (for writers that pick the
    format from it)."""
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        suffix = TMP_SUFFIX + (path.suffix if keep_suffix else "")
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=suffix, dir=path.parent)
    except OSError as exc:
        raise OutputError(f"{path.parent}: cannot create or write in this output folder ({exc.strerror or exc})") from None
    os.close(fd)
    try:
        yield Path(tmp)
        os.chmod(tmp, FILE_MODE)
        os.replace(tmp, path)
    except OSError as exc:
        if isinstance(exc, OutputError):
            raise
        raise OutputError(f"{path}: cannot write ({exc.strerror or exc})") from None
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)


def polylines(
    points: np.ndarray,
    lengths: np.ndarray,
    point_arrays: Mapping[str, np.ndarray],
    time: float,
    field_arrays: Mapping[str, np.ndarray] | None = None,
) -> Any:
    """PolyData with consecutive runs of ``points`` joined into polylines.

    Parameters
    ----------
    points : (M, 3) ndarray
    lengths : (L,) ndarray of int
        Vertices per polyline (zeros are skipped); they add up to M.
    point_arrays : mapping of name to (M,) or (M, k) ndarray
    time : float
        Written as the one-value FieldData array ``time``.
    """
    points = np.ascontiguousarray(points, dtype=np.float64).reshape(-1, 3)
    lengths = np.asarray(lengths, dtype=np.int64)
    lengths = lengths[lengths > 0]
    if int(lengths.sum()) != len(points):
        raise ValueError(f"polyline lengths add up to {int(lengths.sum())}, not to the {len(points)} points")
    pd = _vtk.vtkPolyData()
    vpts = _vtk.vtkPoints()
    vpts.SetData(numpy_to_vtk(points, deep=True))
    pd.SetPoints(vpts)
    offsets = np.concatenate([[0], np.cumsum(lengths)]).astype(np.int64)
    cells = _vtk.vtkCellArray()
    cells.SetData(
        numpy_to_vtk(offsets, deep=True, array_type=_vtk.vtkIdTypeArray().GetDataType()),
        numpy_to_vtk(np.arange(len(points), dtype=np.int64), deep=True, array_type=_vtk.vtkIdTypeArray().GetDataType()),
    )
    pd.SetLines(cells)
    for name, values in point_arrays.items():
        values = np.ascontiguousarray(values)
        if len(values) != len(points):
            raise ValueError(f"point array {name!r} has {len(values)} values for {len(points)} points")
        arr = numpy_to_vtk(values, deep=True)
        arr.SetName(name)
        pd.GetPointData().AddArray(arr)
    fields = {"time": np.array([time], dtype=np.float64), **(field_arrays or {})}
    for name, values in fields.items():
        arr = values if hasattr(values, "GetNumberOfValues") else numpy_to_vtk(np.ascontiguousarray(values), deep=True)
        arr.SetName(name)
        pd.GetFieldData().AddArray(arr)
    return pd


def _write_xml(writer: Any, data: Any, path: Path) -> Path:
    """Write ``data`` with a VTK XML ``writer`` (binary, zlib-compressed) atomically."""
    with atomic_path(path) as tmp:
        writer.SetFileName(str(tmp))
        writer.SetInputData(data)
        writer.SetDataModeToBinary()
        writer.SetCompressorTypeToZLib()
        with _vtk.captured_messages() as messages:
            ok = writer.Write() == 1
        if not ok:
            detail = messages[0].strip().splitlines()[-1] if messages else "no detail"
            raise OutputError(f"{path}: VTK could not write the file ({detail})")
    return path


def write_vtp(polydata: Any, path: Path) -> Path:
    """Write PolyData as VTK XML (binary, zlib-compressed) atomically."""
    return _write_xml(_vtk.vtkXMLPolyDataWriter(), polydata, path)


def write_vtu(grid: Any, path: Path) -> Path:
    """Write an unstructured grid as VTK XML (binary, zlib-compressed) atomically."""
    return _write_xml(_vtk.vtkXMLUnstructuredGridWriter(), grid, path)


def write_csv(columns: Sequence[str], rows: Sequence[Sequence[Any]], path: Path) -> Path:
    """Write a table as CSV (header line, then one line per row; floats with full precision) atomically."""
    import csv

    with atomic_path(path) as tmp:
        with open(tmp, "w", newline="") as fh:
            out = csv.writer(fh)
            out.writerow(columns)
            for row in rows:
                out.writerow([repr(float(v)) if isinstance(v, (float, np.floating)) else v for v in row])
    return path


def read_vtp(path: Path) -> Any:
    """Read a VTP file with VTK's XML reader."""
    r = _vtk.vtkXMLPolyDataReader()
    r.SetFileName(str(path))
    r.Update()
    return r.GetOutput()


def write_json(data: Any, path: Path) -> Path:
    """Write JSON atomically (indented, keys in insertion order)."""
    with atomic_path(path) as tmp:
        tmp.write_text(json.dumps(data, indent=2, default=_jsonable) + "\n")
    return path


def _jsonable(obj: Any) -> Any:
    if isinstance(obj, (np.integer,)):
        return int(obj)
    if isinstance(obj, (np.floating,)):
        return float(obj)
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, Path):
        return str(obj)
    raise TypeError(f"not JSON serialisable: {type(obj).__name__}")
