"""Vortex entries: per frame, the criteria from the velocity gradient, an isosurface at the entry's level,
core lines, and one table row.

The numerics live in :mod:`vtkflow.criteria` (gradients, criteria, core lines, enclosed volume, all on the
mesh's tetrahedral decomposition); this module turns one snapshot into one frame's outputs:

* the triangulated isosurface of the criterion at the level (VTK's ``vtkContour3DLinearGrid`` on the
  decomposition, threaded), with point arrays for the criterion, ``speed``, ``vorticity_magnitude`` and the
  input arrays asked for; pieces of smaller area than ``min_area`` removed on request;
* the core lines (Sujudi & Haimes 1995) with their swirling strength;
* the criteria on the mesh itself, on request, for a viewer;
* the frame's figures: level used, number and length of core lines, volume inside the isosurface.

Only one frame's arrays are alive at a time.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Optional

import numpy as np

from . import _vtk
from ._vtk import numpy_to_vtk, vtk_to_numpy
from .criteria import CRITERIA, GradientOperator, core_lines, evaluate, join_gaps, volume_inside
from .errors import RecipeError
from .lines import TIME_RTOL, entry_window
from .output import polylines
from .recipe import VortexEntry

__all__ = ["VortexPlan", "VortexField", "VortexTracer", "VortexFrame", "plan_vortex", "resolve_level",
           "FRAME_COLUMNS", "CORE_COLUMNS"]

VTK_TETRA = 10
#: Core-line pieces whose ends are closer than this many (median) cell sizes are joined (see criteria.join_gaps).
JOIN_GAP = 2.0
#: Columns of ``<entry>.csv``, one row per frame.
FRAME_COLUMNS = ("frame", "time", "level", "cores", "core_length", "volume", "peak", "max_strength")
#: Columns of ``<entry>_cores.csv``, one row per core line per frame.
CORE_COLUMNS = ("frame", "time", "core", "vertices", "length", "centroid_x", "centroid_y", "centroid_z",
                "mean_strength", "max_strength")


@dataclass
class VortexPlan:
    """What one vortex entry will do: its window and the snapshots it makes frames of."""

    name: str
    entry: VortexEntry
    start: float
    stop: float
    snapshots: np.ndarray  # snapshot indices, one frame each
    times: np.ndarray


def plan_vortex(name: str, entry: VortexEntry, times: np.ndarray, where: str = "") -> VortexPlan:
    """Frames of a vortex entry: every ``every``-th snapshot inside its window; a window outside the
    snapshot times (or holding none) is a :class:`RecipeError` naming ``vortices.<name>.start``/``stop``."""
    key = f"vortices.{name}"
    start, stop = entry_window(key, entry.start, entry.stop, times, where)
    eps = TIME_RTOL * max(1.0, float(times[-1] - times[0]))
    inside = np.flatnonzero((times >= start - eps) & (times <= stop + eps))[:: entry.every]
    if inside.size == 0:
        raise RecipeError(f"{where}{key}: no snapshot time lies in the window [{start:g}, {stop:g}]")
    return VortexPlan(name, entry, start, stop, inside, np.asarray(times, dtype=float)[inside])


def resolve_level(entry: VortexEntry, values: np.ndarray) -> float:
    """The absolute level an entry asks for, given the frame's criterion values."""
    c = CRITERIA[entry.criterion]
    if entry.level_is == "absolute":
        return float(entry.level)
    if entry.level_is == "scaled":
        assert entry.reference is not None
        return float(entry.level) * (entry.reference.velocity / entry.reference.length) ** c.power
    finite = values[np.isfinite(values)]
    if finite.size == 0:
        return float("nan")
    if entry.level_is == "fraction":
        return float(entry.level) * float(finite.max() if c.inside > 0 else finite.min())
    return float(np.percentile(finite, entry.level))


class VortexField:
    """Per-mesh state shared by every vortex entry: the gradient operator and the decomposition as a VTK
    grid (for contouring). Built on first use, once per run."""

    def __init__(self, mesh: Any) -> None:
        _vtk.use_threads()
        self.mesh = mesh
        self.tm = mesh.tetmesh
        self.locator = mesh.locator
        self.points = self.tm.points
        self.gradient = GradientOperator(self.locator, len(self.points))
        self.cell = float(np.median(mesh.cell_size))
        grid = _vtk.vtkUnstructuredGrid()
        pts = _vtk.vtkPoints()
        pts.SetData(numpy_to_vtk(np.ascontiguousarray(self.points), deep=True))
        grid.SetPoints(pts)
        id_type = _vtk.vtkIdTypeArray().GetDataType()
        cells = _vtk.vtkCellArray()
        conn = np.ascontiguousarray(self.tm.tets, dtype=np.int64)
        cells.SetData(numpy_to_vtk(np.arange(0, 4 * len(conn) + 1, 4, dtype=np.int64), deep=True, array_type=id_type),
                      numpy_to_vtk(conn.ravel(), deep=True, array_type=id_type))
        grid.SetCells(VTK_TETRA, cells)
        self.tetgrid = grid

    def fields(self, u: np.ndarray, extras: dict[str, np.ndarray]) -> "FrameFields":
        """Criteria, speed and extras at every point of the decomposition, from point velocity ``u``."""
        ue = self.tm.extend(u)
        tet_grads, vols = self.gradient.tet_gradients(ue)
        grads = self.gradient.from_tets(tet_grads, vols)
        values = evaluate(grads)
        values["speed"] = np.linalg.norm(ue, axis=1)
        ext = {name: self.tm.extend(a.reshape(len(u), -1)) for name, a in extras.items()}
        return FrameFields(ue, tet_grads, values, ext)


@dataclass
class FrameFields:
    velocity: np.ndarray  # (P + C, 3)
    tet_grads: np.ndarray  # (M, 3, 3)
    values: dict[str, np.ndarray]  # criteria, vorticity, speed at the decomposition's points
    extras: dict[str, np.ndarray]


@dataclass
class VortexFrame:
    """One frame's outputs: surface and core lines (PolyData), the criteria on the mesh (or None), and figures."""

    index: int
    time: float
    level: float
    surface: Any
    lines: Optional[Any]
    volume_grid: Optional[Any]
    row: tuple
    cores: list[tuple] = field(default_factory=list)


class VortexTracer:
    """Frames of one vortex entry, made from the snapshots it plans."""

    def __init__(self, plan: VortexPlan, shared: VortexField) -> None:
        self.plan, self.name, self.entry, self.shared = plan, plan.name, plan.entry, shared
        self.criterion = CRITERIA[plan.entry.criterion]
        self.held: Optional[float] = None
        self.levels: list[float] = []
        self.rows: list[tuple] = []
        self.core_rows: list[tuple] = []

    def frame(self, index: int, time: float, u: np.ndarray, extras: dict[str, np.ndarray]) -> VortexFrame:
        """Everything of frame ``index`` (snapshot time ``time``) from point velocity ``u``."""
        e, shared = self.entry, self.shared
        f = shared.fields(u, {k: extras[k] for k in e.arrays})
        values = f.values[e.criterion]
        level = self.held if self.held is not None else resolve_level(e, values)
        if e.hold and self.held is None:
            self.held = level
        self.levels.append(level)

        surface = self._surface(f, values, level, time)
        lines, cores = self._core_lines(f, index, time, level)
        volume = volume_inside(shared.points, shared.locator.conn, values, level, self.criterion.inside)
        finite = values[np.isfinite(values)]
        peak = float(finite.max() if self.criterion.inside > 0 else finite.min()) if finite.size else float("nan")
        strengths = [c[-1] for c in cores]
        row = (index, time, level, len(cores), float(sum(c[4] for c in cores)), volume, peak,
               float(max(strengths)) if strengths else 0.0)
        self.rows.append(row)
        self.core_rows.extend(cores)
        grid = self._volume_grid(f, time, level) if e.volume else None
        return VortexFrame(index, time, level, surface, lines, grid, row, cores)

    # --------------------------------------------------------------------------------------- parts
    def _surface(self, f: FrameFields, values: np.ndarray, level: float, time: float) -> Any:
        surface = _vtk.vtkPolyData()  # no level (a frame without finite values): an empty surface
        if np.isfinite(level):
            g = _vtk.vtkUnstructuredGrid()
            g.ShallowCopy(self.shared.tetgrid)
            pd = g.GetPointData()
            arrays = {self.entry.criterion: values, "speed": f.values["speed"],
                      "vorticity_magnitude": f.values["vorticity_magnitude"], **f.extras}
            for name, a in arrays.items():
                arr = numpy_to_vtk(np.ascontiguousarray(a), deep=True)
                arr.SetName(name)
                pd.AddArray(arr)
            pd.SetActiveScalars(self.entry.criterion)
            from vtkmodules.vtkFiltersCore import vtkContour3DLinearGrid  # a large module: loaded when first needed

            contour = vtkContour3DLinearGrid()
            contour.SetInputData(g)
            contour.SetInputArrayToProcess(0, 0, 0, 0, self.entry.criterion)
            contour.SetValue(0, level)
            contour.SetInterpolateAttributes(True)
            contour.SetComputeScalars(True)
            contour.Update()
            surface.ShallowCopy(contour.GetOutput())
        if self.entry.min_area is not None and surface.GetNumberOfCells():
            surface = _drop_small_pieces(surface, float(self.entry.min_area))
        for name, value in (("time", time), ("level", level)):
            arr = numpy_to_vtk(np.array([value], dtype=np.float64), deep=True)
            arr.SetName(name)
            surface.GetFieldData().AddArray(arr)
        return surface

    def _core_lines(self, f: FrameFields, index: int, time: float, level: float) -> tuple[Optional[Any], list[tuple]]:
        spec = self.entry.core_lines
        if spec is None:
            return None, []
        loc = self.shared.locator
        xs, lengths, strength = core_lines(self.shared.points, loc.conn, loc.nbr, f.tet_grads, f.velocity,
                                           spec.min_strength)
        xs, lengths, strength = join_gaps(xs, lengths, strength, JOIN_GAP * self.shared.cell)
        keep_x, keep_s, keep_n, cores = [], [], [], []
        first = 0
        for n in lengths:
            x, s = xs[first:first + n], strength[first:first + n]
            first += n
            seg = np.linalg.norm(np.diff(x, axis=0), axis=1)
            length = float(seg.sum())
            if n < 2 or length < spec.min_length or length == 0.0:
                continue
            mid = 0.5 * (x[1:] + x[:-1])
            centroid = (seg[:, None] * mid).sum(axis=0) / length
            core = len(cores)
            cores.append((index, time, core, int(n), length, *map(float, centroid), float(s.mean()), float(s.max())))
            keep_x.append(x)
            keep_s.append(s)
            keep_n.append(n)
        pts = np.concatenate(keep_x) if keep_x else np.zeros((0, 3))
        arrays = {
            "swirl": np.concatenate(keep_s) if keep_s else np.zeros(0),
            "core_id": np.repeat(np.arange(len(keep_n)), keep_n).astype(np.int64),
        }
        field_arrays = {"level": np.array([level], dtype=np.float64)}
        return polylines(pts, np.asarray(keep_n, dtype=np.int64), arrays, time, field_arrays), cores

    def _volume_grid(self, f: FrameFields, time: float, level: float) -> Any:
        mesh = self.shared.mesh
        g = _vtk.vtkUnstructuredGrid()
        g.ShallowCopy(mesh.grid)
        n = mesh.n_points
        for name in ("q", "lambda2", "delta", "swirl", "vorticity", "vorticity_magnitude", "speed"):
            arr = numpy_to_vtk(np.ascontiguousarray(f.values[name][:n]), deep=True)
            arr.SetName(name)
            g.GetPointData().AddArray(arr)
        for name, value in (("time", time), ("level", level)):
            arr = numpy_to_vtk(np.array([value], dtype=np.float64), deep=True)
            arr.SetName(name)
            g.GetFieldData().AddArray(arr)
        return g


def _drop_small_pieces(surface: Any, min_area: float) -> Any:
    """The surface without its connected pieces of area below ``min_area``."""
    from vtkmodules.vtkFiltersCore import vtkPolyDataConnectivityFilter

    conn = vtkPolyDataConnectivityFilter()
    conn.SetInputData(surface)
    conn.SetExtractionModeToAllRegions()
    conn.ColorRegionsOn()
    conn.Update()
    out = conn.GetOutput()
    region = vtk_to_numpy(out.GetPointData().GetArray("RegionId")).astype(np.int64)
    pts = vtk_to_numpy(out.GetPoints().GetData()).astype(np.float64)
    polys = out.GetPolys()
    offsets = vtk_to_numpy(polys.GetOffsetsArray())
    tri = vtk_to_numpy(polys.GetConnectivityArray()).astype(np.int64)
    if not np.all(np.diff(offsets) == 3):
        return surface
    tri = tri.reshape(-1, 3)
    area = 0.5 * np.linalg.norm(np.cross(pts[tri[:, 1]] - pts[tri[:, 0]], pts[tri[:, 2]] - pts[tri[:, 0]]), axis=1)
    piece = region[tri[:, 0]]
    total = np.bincount(piece, area)
    keep = total[piece] >= min_area
    used = np.unique(tri[keep])
    remap = np.full(len(pts), -1, np.int64)
    remap[used] = np.arange(len(used))
    result = _vtk.vtkPolyData()
    vp = _vtk.vtkPoints()
    vp.SetData(numpy_to_vtk(np.ascontiguousarray(pts[used]), deep=True))
    result.SetPoints(vp)
    id_type = _vtk.vtkIdTypeArray().GetDataType()
    cells = _vtk.vtkCellArray()
    new = remap[tri[keep]].ravel()
    cells.SetData(numpy_to_vtk(np.arange(0, len(new) + 1, 3, dtype=np.int64), deep=True, array_type=id_type),
                  numpy_to_vtk(np.ascontiguousarray(new), deep=True, array_type=id_type))
    result.SetPolys(cells)
    src = out.GetPointData()
    for i in range(src.GetNumberOfArrays()):
        a = src.GetArray(i)
        if a is None or a.GetName() == "RegionId":
            continue
        values = vtk_to_numpy(a)[used]
        arr = numpy_to_vtk(np.ascontiguousarray(values), deep=True)
        arr.SetName(a.GetName())
        result.GetPointData().AddArray(arr)
    return result
