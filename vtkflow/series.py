"""A transient series: files, snapshot times, the velocity array, streamed one snapshot at a time.

:class:`Series` reads the mesh topology once (from the first snapshot) and then, per snapshot,
only the velocity: ``series.velocity(k)`` returns point velocity ``(n_points, 3)``. Cell velocity is
averaged onto points. Every later snapshot is checked cheaply to have the same topology.

Readers are chosen by file suffix from :data:`READERS`: VTK's own readers for ``.vtu`` and legacy
``.vtk``; meshio for XDMF time series (one file, many snapshots) and for the other formats it reads.
"""

from __future__ import annotations

import functools
import glob
import os
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable, Sequence

import numpy as np

from . import _vtk
from ._vtk import vtk_to_numpy
from .errors import InputError
from .mesh import Mesh

__all__ = ["Series", "Snapshot", "SnapshotData", "READERS", "read_file", "expand_files", "describe"]


@dataclass
class SnapshotData:
    """What one snapshot holds: its grid (with topology) and its arrays by association."""

    grid: Any  # vtkUnstructuredGrid
    point: dict[str, np.ndarray]
    cell: dict[str, np.ndarray]
    field: dict[str, np.ndarray]
    time: float | None = None  # a time the format carries itself (XDMF)


@dataclass(frozen=True)
class Snapshot:
    """One snapshot: a file and, for multi-step files, the step inside it."""

    path: Path
    step: int = 0

    @property
    def label(self) -> str:
        return f"{self.path}" if self.step == 0 and self.path.suffix.lower() not in _SERIES_SUFFIXES else (
            f"{self.path}[step {self.step}]"
        )


# ------------------------------------------------------------------------------------------- readers
def _arrays(data: Any) -> dict[str, np.ndarray]:
    out = {}
    for i in range(data.GetNumberOfArrays()):
        arr = data.GetArray(i)
        if arr is None or not arr.GetName():
            continue
        out[arr.GetName()] = vtk_to_numpy(arr)
    return out


def _run_reader(reader: Any, path: Path, arrays: bool = True) -> Any:
    """Run a VTK reader on ``path``; any error it reports becomes one :class:`InputError` line."""
    reader.SetFileName(str(path))
    with _vtk.captured_messages() as messages:
        if not arrays:
            reader.UpdateInformation()
            reader.GetPointDataArraySelection().DisableAllArrays()
            reader.GetCellDataArraySelection().DisableAllArrays()
        reader.Update()
    grid = reader.GetOutput()
    errors = [m for m in messages if m.startswith("ERROR")]
    if errors or grid is None or grid.GetNumberOfPoints() == 0:
        detail = _vtk_detail(errors[0]) if errors else "no points read"
        what = "polygonal data" if path.suffix.lower() == ".vtp" else "unstructured grid"
        raise InputError(f"{path}: not a readable, complete {path.suffix} {what} ({detail})")
    return grid


def _vtk_detail(message: str) -> str:
    """The informative part of a VTK error report (its last line, without the object address)."""
    last = message.strip().splitlines()[-1]
    return re.sub(r"^\S+ \(0x[0-9a-f]+\): ", "", last).strip()


def _read_vtk(path: Path, step: int) -> SnapshotData:
    if path.suffix.lower() == ".vtu":
        reader = _vtk.vtkXMLUnstructuredGridReader()
    else:
        reader = _vtk.vtkUnstructuredGridReader()
        reader.ReadAllScalarsOn()
        reader.ReadAllVectorsOn()
        reader.ReadAllFieldsOn()
    grid = _run_reader(reader, path)
    return SnapshotData(grid, _arrays(grid.GetPointData()), _arrays(grid.GetCellData()), _arrays(grid.GetFieldData()))


def _meshio_grid(points: np.ndarray, cells: Any) -> Any:
    import meshio
    import pyvista as pv

    grid = pv.from_meshio(meshio.Mesh(points, cells))
    out = _vtk.vtkUnstructuredGrid()
    out.ShallowCopy(grid)
    return out


def _cell_arrays(cell_data: dict[str, list[np.ndarray]]) -> dict[str, np.ndarray]:
    return {name: np.concatenate([np.asarray(b) for b in blocks]) for name, blocks in cell_data.items()}


class _XdmfSeries:
    """An XDMF time series read with meshio: topology once, then one step at a time.

    Open series are kept by (path, modification time) in a small bounded cache, so that listing the
    steps and reading them share one reader and one topology.
    """

    def __init__(self, path: Path) -> None:
        import meshio

        self.path = path
        self._reader = meshio.xdmf.TimeSeriesReader(str(path))
        points, cells = self._reader.read_points_cells()
        self.grid = _meshio_grid(points, cells)
        self.n_steps = int(self._reader.num_steps)

    @staticmethod
    def open(path: Path) -> "_XdmfSeries":
        return _open_xdmf(path.resolve(), path.stat().st_mtime_ns)

    def read(self, step: int) -> SnapshotData:
        t, point_data, cell_data = self._reader.read_data(step)
        return SnapshotData(
            self.grid,
            {k: np.asarray(v) for k, v in point_data.items()},
            _cell_arrays(cell_data),
            {},
            float(t),
        )


@functools.lru_cache(maxsize=4)
def _open_xdmf(path: Path, mtime_ns: int) -> _XdmfSeries:
    try:
        return _XdmfSeries(path)
    except Exception as exc:  # meshio and h5py raise many kinds on bad input
        raise InputError(f"{path}: not a readable XDMF time series ({exc})") from None


def _read_vtp(path: Path, step: int) -> SnapshotData:
    grid = _run_reader(_vtk.vtkXMLPolyDataReader(), path)
    return SnapshotData(grid, _arrays(grid.GetPointData()), _arrays(grid.GetCellData()), _arrays(grid.GetFieldData()))


def _read_xdmf(path: Path, step: int) -> SnapshotData:
    return _XdmfSeries.open(path).read(step)


def _read_meshio(path: Path, step: int) -> SnapshotData:
    import meshio

    try:
        m = meshio.read(str(path))
    except Exception as exc:
        raise InputError(f"{path}: meshio cannot read it ({exc})") from None
    field = {k: np.atleast_1d(np.asarray(v)) for k, v in m.field_data.items()}
    return SnapshotData(
        _meshio_grid(m.points, m.cells),
        {k: np.asarray(v) for k, v in m.point_data.items()},
        _cell_arrays(m.cell_data),
        field,
    )


_SERIES_SUFFIXES = {".xdmf", ".xmf"}

#: Reader by file suffix; any other suffix goes to meshio.
READERS: dict[str, Callable[[Path, int], SnapshotData]] = {
    ".vtu": _read_vtk,
    ".vtk": _read_vtk,
    ".vtp": _read_vtp,  # for inspecting outputs; a series needs volume cells
    ".xdmf": _read_xdmf,
    ".xmf": _read_xdmf,
}


def read_file(snapshot: Snapshot) -> SnapshotData:
    """Read one snapshot with the reader its suffix selects."""
    path = snapshot.path
    _check_file(path)
    reader = READERS.get(path.suffix.lower(), _read_meshio)
    return reader(path, snapshot.step)


def _check_file(path: Path, key: str | None = None) -> None:
    where = f" (listed in {key})" if key else ""
    if path.is_dir():
        raise InputError(f"{path}: is a folder, not a file{where}")
    if not path.is_file():
        raise InputError(f"{path}: no such file{where}")
    if not os.access(path, os.R_OK):
        raise InputError(f"{path}: not readable (permission denied){where}")


def expand_files(files: str | Sequence[str], base: Path, key: str = "data.files") -> list[Snapshot]:
    """Snapshots of a glob or list of files relative to ``base``; an XDMF file expands to its steps."""
    if isinstance(files, str):
        pattern = files if Path(files).is_absolute() else os.path.join(glob.escape(str(base)), files)
        paths = [Path(p) for p in sorted(glob.glob(pattern))]
        if not paths:
            raise InputError(f"{key}: the pattern {files!r} matches no file (relative to {base})")
    else:
        paths = [Path(f) if Path(f).is_absolute() else base / f for f in files]
        for p in paths:
            _check_file(p, key)
    snapshots: list[Snapshot] = []
    for p in paths:
        if p.suffix.lower() in _SERIES_SUFFIXES:
            snapshots.extend(Snapshot(p, k) for k in range(_XdmfSeries.open(p).n_steps))
        else:
            snapshots.append(Snapshot(p))
    return snapshots


# -------------------------------------------------------------------------------------------- series
class Series:
    """A transient series on one static mesh.

    Parameters
    ----------
    snapshots : list of Snapshot
    times : list of float, or a dict ``{field: name}``, ``{pattern: regex, scale: s}``,
        ``{start: t0, step: dt}``, or None for the times an XDMF file carries.
    velocity : str or (str, str, str)
        A 3-component point or cell array, or three scalar arrays.

    Examples
    --------
    >>> series = Series.open("case/*.vtu", times={"field": "time"}, velocity="U")   # doctest: +SKIP
    >>> t, u = series.times[0], series.velocity(0)                                  # doctest: +SKIP
    """

    def __init__(self, snapshots: list[Snapshot], times: Any, velocity: str | Sequence[str]) -> None:
        if not snapshots:
            raise InputError("data.files: no snapshot files")
        self.snapshots = snapshots
        self.velocity_names = (velocity,) if isinstance(velocity, str) else tuple(velocity)
        first = read_file(snapshots[0])
        if not first.grid.IsA("vtkUnstructuredGrid"):
            raise InputError(f"{snapshots[0].label}: holds {first.grid.GetClassName()}, not a volume mesh (unstructured grid)")
        self.mesh = Mesh(first.grid)
        #: Names of the arrays of the first snapshot, by association (``point``, ``cell``, ``field``).
        self.arrays = {"point": list(first.point), "cell": list(first.cell), "field": list(first.field)}
        self.association = self._association(first, snapshots[0])
        self.times = self._times(times, first)
        #: Snapshots kept in memory (2; 4 for cubic interpolation in time).
        self.keep = 2
        #: Arrays kept besides the velocity (see :meth:`keep_arrays`).
        self.extra_names: tuple[str, ...] = ()
        self._cache: dict[int, tuple[np.ndarray, dict[str, np.ndarray]]] = {0: (self._velocity_of(first, snapshots[0]), {})}

    @classmethod
    def open(cls, files: str | Sequence[str], times: Any, velocity: str | Sequence[str], base: Path | str = ".") -> "Series":
        """Expand ``files`` relative to ``base`` and open the series."""
        return cls(expand_files(files, Path(base)), times, velocity)

    def __len__(self) -> int:
        return len(self.snapshots)

    # ------------------------------------------------------------------------------------- times
    def _times(self, spec: Any, first: SnapshotData) -> np.ndarray:
        n = len(self.snapshots)
        if hasattr(spec, "model_dump"):
            spec = {k: v for k, v in spec.model_dump().items() if v is not None}
        if isinstance(spec, (list, tuple, np.ndarray)):
            times = np.asarray(spec, dtype=np.float64)
            if times.shape != (n,):
                raise InputError(f"data.times: {len(times)} times given for {n} snapshots")
        elif spec is None or "field" in spec:
            name = (spec or {}).get("field", "time")
            times = np.array([self._field_time(k, name, first if k == 0 else None) for k in range(n)])
        elif "pattern" in spec:
            rx = re.compile(spec["pattern"])
            values = []
            for s in self.snapshots:
                m = rx.search(s.path.name)
                if m is None:
                    raise InputError(f"{s.path}: data.times.pattern {spec['pattern']!r} does not match the file name")
                try:
                    values.append(float(m.group(1)))
                except ValueError:
                    raise InputError(f"{s.path}: data.times.pattern group {m.group(1)!r} is not a number") from None
            times = np.asarray(values) * float(spec.get("scale", 1.0))
        else:
            times = float(spec["start"]) + float(spec["step"]) * np.arange(n)
        _check_times(times, self.snapshots)
        return times

    def _field_time(self, k: int, name: str, data: SnapshotData | None) -> float:
        snap = self.snapshots[k]
        if data is None:
            if snap.path.suffix.lower() in _SERIES_SUFFIXES:
                data = read_file(snap)
            else:
                data = _read_field_only(snap)
        if data.time is not None:
            return data.time
        if name not in data.field:
            have = ", ".join(data.field) or "none"
            raise InputError(f"{snap.label}: no FieldData array {name!r} for data.times.field (FieldData arrays: {have})")
        value = np.asarray(data.field[name]).ravel()
        if value.size < 1 or not np.issubdtype(value.dtype, np.number):
            raise InputError(f"{snap.label}: FieldData {name!r} holds no number")
        return float(value[0])

    # ---------------------------------------------------------------------------------- velocity
    def _association(self, data: SnapshotData, snap: Snapshot) -> str:
        names = self.velocity_names
        for assoc, arrays in (("point", data.point), ("cell", data.cell)):
            if all(n in arrays for n in names):
                return assoc
        have = sorted(set(data.point) | set(data.cell))
        raise InputError(
            f"{snap.label}: no point or cell array {' '.join(repr(n) for n in names)} for data.velocity"
            f" (arrays: {', '.join(have) or 'none'})"
        )

    def _velocity_of(self, data: SnapshotData, snap: Snapshot) -> np.ndarray:
        arrays = data.point if self.association == "point" else data.cell
        expected = self.mesh.n_points if self.association == "point" else self.mesh.n_cells
        try:
            if len(self.velocity_names) == 1:
                v = np.asarray(arrays[self.velocity_names[0]], dtype=np.float64)
                if v.ndim != 2 or v.shape[1] != 3:
                    raise InputError(
                        f"{snap.label}: array {self.velocity_names[0]!r} has shape {v.shape}; data.velocity needs 3 components"
                    )
            else:
                cols = [np.asarray(arrays[n], dtype=np.float64) for n in self.velocity_names]
                for n, c in zip(self.velocity_names, cols):
                    if c.ndim != 1 and not (c.ndim == 2 and c.shape[1] == 1):
                        raise InputError(
                            f"{snap.label}: array {n!r} has shape {c.shape}; each of the three data.velocity"
                            " arrays needs one component"
                        )
                v = np.stack([c.reshape(-1) for c in cols], axis=1)
        except KeyError as exc:
            raise InputError(f"{snap.label}: no {self.association} array {exc.args[0]!r} for data.velocity") from None
        if len(v) != expected:
            raise InputError(f"{snap.label}: velocity has {len(v)} values, expected {expected} ({self.association} data)")
        return self.mesh.cell_to_point(v) if self.association == "cell" else np.ascontiguousarray(v)

    def read(self, k: int) -> tuple[float, np.ndarray]:
        """Time and point velocity ``(n_points, 3)`` of snapshot ``k``."""
        return float(self.times[k]), self.velocity(k)

    def velocity(self, k: int) -> np.ndarray:
        """Point velocity ``(n_points, 3)`` of snapshot ``k``; keeps at most the ``keep`` latest in memory."""
        return self._load(k)[0]

    def point_arrays(self, k: int) -> dict[str, np.ndarray]:
        """The arrays asked for with :meth:`keep_arrays` at snapshot ``k``, as point data ``(n_points, ...)``."""
        return self._load(k)[1]

    def keep_arrays(self, names: Sequence[str], key: str) -> None:
        """Also keep these point or cell arrays of each snapshot read (cell arrays averaged onto points);
        an array the first snapshot lacks is an :class:`InputError` naming the recipe ``key``."""
        have = set(self.arrays["point"]) | set(self.arrays["cell"])
        for name in names:
            if name not in have:
                raise InputError(
                    f"{self.snapshots[0].label}: no point or cell array {name!r} for {key}"
                    f" (arrays: {', '.join(sorted(have)) or 'none'})"
                )
        wanted = tuple(dict.fromkeys((*self.extra_names, *names)))
        if wanted != self.extra_names:
            self.extra_names = wanted
            self._cache.clear()

    def _load(self, k: int) -> tuple[np.ndarray, dict[str, np.ndarray]]:
        if k not in self._cache:
            snap = self.snapshots[k]
            data = read_file(snap)
            if not self.mesh.same_topology(data.grid):
                raise InputError(
                    f"{snap.label}: the mesh differs from the first snapshot's ({data.grid.GetNumberOfPoints()} points,"
                    f" {data.grid.GetNumberOfCells()} cells vs {self.mesh.n_points}, {self.mesh.n_cells});"
                    " vtkflow needs one fixed mesh for the whole series"
                )
            self._cache[k] = (self._velocity_of(data, snap), self._extras_of(data, snap))
        self._cache[k] = self._cache.pop(k)  # most recently used last
        while len(self._cache) > self.keep:
            self._cache.pop(next(iter(self._cache)))
        return self._cache[k]

    def _extras_of(self, data: SnapshotData, snap: Snapshot) -> dict[str, np.ndarray]:
        out = {}
        for name in self.extra_names:
            if name in data.point:
                out[name] = np.asarray(data.point[name], dtype=np.float64)
            elif name in data.cell:
                out[name] = self.mesh.cell_to_point(np.asarray(data.cell[name], dtype=np.float64))
            else:
                raise InputError(f"{snap.label}: no point or cell array {name!r} (the first snapshot has it)")
        return out

    def nan_count(self, k: int) -> int:
        """Number of points whose velocity has a NaN in snapshot ``k``."""
        return int(np.count_nonzero(~np.isfinite(self.velocity(k)).all(axis=1)))


def _read_field_only(snap: Snapshot) -> SnapshotData:
    """Read a file for its FieldData only (VTK XML: arrays switched off, so the cost is the topology)."""
    if snap.path.suffix.lower() == ".vtu":
        _check_file(snap.path)
        grid = _run_reader(_vtk.vtkXMLUnstructuredGridReader(), snap.path, arrays=False)
        return SnapshotData(grid, {}, {}, _arrays(grid.GetFieldData()))
    return read_file(snap)


def _check_times(times: np.ndarray, snapshots: Sequence[Snapshot]) -> None:
    if not np.all(np.isfinite(times)):
        raise InputError("data.times: a snapshot time is not finite")
    d = np.diff(times)
    bad = np.flatnonzero(d <= 0)
    if bad.size:
        i = int(bad[0])
        what = "duplicate" if d[i] == 0 else "decreasing"
        raise InputError(
            f"data.times: {what} snapshot times {times[i]:g} ({snapshots[i].label}) and {times[i + 1]:g}"
            f" ({snapshots[i + 1].label}); times must increase strictly"
        )


def describe(snap: Snapshot, data: SnapshotData) -> list[str]:
    """Lines that describe one snapshot: time, bounds, size and cell types, arrays with their ranges."""
    from .mesh import CELL_TYPE_NAMES

    grid = data.grid
    lines = [snap.label]
    if data.time is not None:
        lines.append(f"  time      {data.time:g}")
    b = np.array(grid.GetBounds()).reshape(3, 2)
    lines.append(f"  bounds    x {b[0, 0]:g} .. {b[0, 1]:g}  y {b[1, 0]:g} .. {b[1, 1]:g}  z {b[2, 0]:g} .. {b[2, 1]:g}")
    if grid.IsA("vtkPolyData"):
        parts = {"vertices": grid.GetNumberOfVerts(), "polylines": grid.GetNumberOfLines(),
                 "polygons": grid.GetNumberOfPolys(), "strips": grid.GetNumberOfStrips()}
        names = ", ".join(f"{n} {k}" for k, n in parts.items() if n)
    else:
        from .mesh import cell_types

        kinds, counts = np.unique(cell_types(grid), return_counts=True)
        names = ", ".join(f"{c} {CELL_TYPE_NAMES.get(int(k), f'type {int(k)}')}" for k, c in zip(kinds, counts))
    lines.append(f"  mesh      {grid.GetNumberOfPoints()} points, {grid.GetNumberOfCells()} cells ({names or 'none'})")
    for assoc, arrays in (("point", data.point), ("cell", data.cell), ("field", data.field)):
        for name, a in arrays.items():
            lines.append(f"  {assoc:<6} {name:<16} {_array_summary(np.asarray(a))}")
    return lines


def _array_summary(a: np.ndarray) -> str:
    comps = 1 if a.ndim == 1 else int(np.prod(a.shape[1:]))
    text = f"{comps} comp  {a.dtype}"
    if a.size == 0 or not np.issubdtype(a.dtype, np.number):
        return text
    finite = a[np.isfinite(a)] if np.issubdtype(a.dtype, np.floating) else a
    if finite.size == 0:
        return text + "  all NaN"
    text += f"  {finite.min():g} .. {finite.max():g}"
    n_nan = int(a.size - finite.size)
    if comps > 1:
        mag = np.linalg.norm(a.reshape(len(a), -1), axis=1)
        mag = mag[np.isfinite(mag)]
        if mag.size:
            text += f" (magnitude {mag.min():g} .. {mag.max():g})"
    return text + (f"  {n_nan} NaN values" if n_nan else "")
