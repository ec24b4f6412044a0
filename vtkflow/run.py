"""Orchestration of a recipe: open the series, plan every entry, stream the snapshots once, write outputs.

All line entries advance together in one pass over the snapshot intervals: only the mesh and two
snapshots of velocity are in memory at a time. Renders follow, from the files written.
"""

from __future__ import annotations

import os
import re
import sys
import time as _time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Optional, Sequence

import numpy as np

from . import __version__
from .errors import InputError, OutputError, RecipeError
from .lines import LINE_KINDS, STATUS_NAMES, TIME_RTOL, ParticleTracer, StreamlineTracer, entry_window, release_instants
from . import _vtk
from ._vtk import numpy_to_vtk, vtk_to_numpy
from .output import frame_path, write_csv, write_json, write_vtp, write_vtu
from .particles import TimeField, time_slopes
from .recipe import FrameEvery, LineEntry, LoadedRecipe
from .releases import release_points
from .series import Series
from .vortex import CORE_COLUMNS, FRAME_COLUMNS, VortexField, VortexFrame, VortexPlan, VortexTracer, plan_vortex

__all__ = ["open_series", "render_workers", "render_recipe", "plan", "plan_entry", "Plan", "EntryPlan", "run_recipe", "frame_times", "stream", "make_tracer"]

Progress = Callable[[str, int, float], None]
Warn = Callable[[str], None]


def _stderr(msg: str) -> None:
    print(f"vtkflow: warning: {msg}", file=sys.stderr)


def open_series(loaded: LoadedRecipe) -> Series:
    """The series a recipe's ``data`` section names, times and velocity checked."""
    d = loaded.recipe.data
    return Series.open(d.files, d.times, d.velocity, base=loaded.base)


def frame_times(start: float, stop: float, snapshot_times: np.ndarray, spec: Any, key: str) -> np.ndarray:
    """Output frame times of an entry: by default every snapshot time inside ``[start, stop]``, both ends included."""
    eps = TIME_RTOL * max(1.0, float(np.ptp(snapshot_times)) if len(snapshot_times) else 1.0)
    if spec is None:
        inner = snapshot_times[(snapshot_times > start + eps) & (snapshot_times < stop - eps)]
        times = np.concatenate([[start], inner, [stop]])
    elif isinstance(spec, FrameEvery):
        times = np.append(release_instants(start, stop, spec.every), stop)
    else:
        times = np.asarray(sorted(spec), dtype=float)
        outside = times[(times < start - eps) | (times > stop + eps)]
        if outside.size:
            raise RecipeError(f"{key}.frames: frame time {outside[0]:g} lies outside the window [{start:g}, {stop:g}]")
    # merge times closer than eps (e.g. stop == last snapshot time); round-off never leaves the window
    times = np.clip(np.sort(times), start, stop)
    keep = np.concatenate([[True], np.diff(times) > eps])
    return times[keep]


@dataclass
class EntryPlan:
    """What one line entry will do: window, release instants, frames, release points."""

    name: str
    entry: LineEntry
    start: float
    stop: float
    frames: np.ndarray
    instants: np.ndarray
    points: np.ndarray
    inside: np.ndarray

    @property
    def n_dropped(self) -> int:
        return int(np.count_nonzero(~self.inside))


@dataclass
class Plan:
    """Everything a run will do, checked without integrating."""

    series: Series
    entries: list[EntryPlan] = field(default_factory=list)
    releases: dict[str, tuple[np.ndarray, np.ndarray]] = field(default_factory=dict)
    vortices: list[VortexPlan] = field(default_factory=list)

    @property
    def n_frames(self) -> int:
        return sum(len(e.frames) for e in self.entries) + sum(len(v.snapshots) for v in self.vortices)


def plan(loaded: LoadedRecipe, series: Series) -> Plan:
    """Resolve windows, frames and release points of every entry; report bad windows as :class:`RecipeError`."""
    recipe = loaded.recipe
    result = Plan(series)
    for rname, release in recipe.releases.items():
        pts = release_points(release.shape, release.spec)
        result.releases[rname] = (pts, series.mesh.contains(pts))
    for name, entry in recipe.lines.items():
        pts, inside = result.releases[entry.release]
        result.entries.append(plan_entry(name, entry, pts, inside, series.times, f"{loaded.path}: "))
    for name, ventry in recipe.vortices.items():
        result.vortices.append(plan_vortex(name, ventry, series.times, f"{loaded.path}: "))
        if ventry.arrays:
            series.keep_arrays(ventry.arrays, f"vortices.{name}.arrays")
    for name, render in recipe.renders.items():
        if render.movie is not None:  # a missing encoder stops the run here, not after the last frame
            from .movie import encoder_problem

            problem = encoder_problem(render.movie.formats)
            if problem:
                raise InputError(f"renders.{name}.movie: {problem}")
        for i, context in enumerate(render.context):
            path = loaded.base / context
            if not path.is_file():
                raise InputError(f"{path}: no such file (renders.{name}.context.{i})")
    return result


def plan_entry(
    name: str, entry: LineEntry, points: np.ndarray, inside: np.ndarray, times: np.ndarray, where: str = ""
) -> EntryPlan:
    """Window, frames and release instants of one line entry; a window outside ``times`` is a
    :class:`RecipeError` naming ``lines.<name>.start`` or ``.stop`` (after ``where``, e.g. the recipe file)."""
    key = f"lines.{name}"
    start, stop = entry_window(key, entry.start, entry.stop, times, where)
    frames = frame_times(start, stop, times, entry.frames, key)
    particles = LINE_KINDS[entry.kind].particles
    instants = release_instants(start, stop, entry.every) if particles else np.zeros(0)
    return EntryPlan(name, entry, start, stop, frames, instants, points, inside)


def stream(series: Series, tracers: Sequence[Any], emit: Callable[[str], Callable[[int, float, Any], None]],
           last_needed: float, vortices: Sequence[VortexTracer] = (), cubic: bool = False) -> dict[str, int]:
    """One pass over the snapshot intervals: load two snapshots at a time (with ``cubic``, their time slopes
    from four) and advance every tracer; each vortex entry makes its frames from the snapshots as they are read.

    Returns the NaN point counts of the snapshots read, by file label.
    """
    emits = {t.name: emit(t.name) for t in (*tracers, *vortices)}
    if cubic:
        series.keep = max(series.keep, 4)
    field = TimeField(series.mesh)
    times = series.times
    nan_files: dict[str, int] = {}
    frame_of = [{int(k): i for i, k in enumerate(v.plan.snapshots)} for v in vortices]
    seen = -1

    def snapshots_to(k: int) -> None:
        nonlocal seen
        for j in range(seen + 1, k + 1):
            for vortex, frames in zip(vortices, frame_of):
                if j in frames:
                    t = float(times[j])
                    emits[vortex.name](frames[j], t, vortex.frame(frames[j], t, series.velocity(j), series.point_arrays(j)))
        seen = max(seen, k)

    for k in range(max(1, len(series) - 1)):
        k1 = min(k + 1, len(series) - 1)
        t0, t1 = float(times[k]), float(times[k1])
        if k > 0 and t0 >= last_needed:  # every window has ended: later snapshots are not read
            break
        u1 = series.velocity(k1)
        # after the first interval the field keeps the earlier snapshot (shift): each one is read and checked once
        fresh = [(k, series.velocity(k)), (k1, u1)] if k == 0 else [(k1, u1)]
        for j, u in fresh:
            n_nan = int(np.count_nonzero(~np.isfinite(u).all(axis=1)))
            if n_nan:
                nan_files[series.snapshots[j].label] = n_nan
        snapshots_to(k)
        slopes = cubic and k1 > k
        if k == 0:
            u0 = fresh[0][1]
            if slopes:
                field.load(t0, u0, t1, u1, time_slopes(times, k, series.velocity), time_slopes(times, k1, series.velocity))
            else:
                field.load(t0, u0, t1, u1)
        else:  # the later snapshot becomes the earlier one: only the new one is written
            field.shift(t1, u1, time_slopes(times, k1, series.velocity) if slopes else None)
        for tracer in tracers:
            tracer.interval(field, t0, t1, k == 0, emits[tracer.name])
        snapshots_to(k1)
    return nan_files


def make_tracer(p: EntryPlan, series: Series) -> Any:
    """The tracer that computes a planned entry."""
    e = p.entry
    if LINE_KINDS[e.kind].particles:
        return ParticleTracer(
            p.name, e.kind, p.points, p.inside, p.instants, p.frames, (p.start, p.stop), e.step, e.integrator, e.tolerance
        )
    length = e.length if e.length is not None else 2.0 * series.mesh.diagonal
    return StreamlineTracer(
        p.name, p.points, p.inside, p.frames, e.direction or "forward", e.step, length, e.integrator, e.tolerance
    )


def _clear_frames(output: Path, names: Sequence[str], suffix: str, infix: str = "") -> None:
    """Remove frames a previous run left in the entry folders (``<name>_<infix>NNNN<suffix>``), so old and
    new frames never mix."""
    for name in names:
        folder = output / name
        if folder.is_dir():
            rx = re.compile(rf"^{re.escape(name)}_{re.escape(infix)}\d{{4,}}{re.escape(suffix)}$")
            for f in folder.iterdir():
                if rx.match(f.name):
                    f.unlink()


def run_recipe(
    loaded: LoadedRecipe,
    output: Optional[Path] = None,
    progress: Optional[Progress] = None,
    warn: Warn = _stderr,
    render: bool = True,
    workers: int = 0,
) -> dict[str, Any]:
    """Run a recipe: compute every line entry, write its frames, render, and write ``manifest.json``.

    Parameters
    ----------
    loaded : LoadedRecipe
    output : Path, optional
        Output folder; default: the recipe's ``output``, relative to the recipe file.
    progress : callable, optional
        ``progress(what, done, total)`` after each written frame.
    warn : callable
        Receives one-line warnings (release points dropped, NaN velocities).
    render : bool
        Render the ``renders`` section (and its movies).
    workers : int
        Processes that render frames; 0: :func:`render_workers` chooses.

    Returns
    -------
    manifest : dict
        What ``manifest.json`` holds.
    """
    started = _time.perf_counter()
    recipe = loaded.recipe
    out = Path(os.path.normpath(Path(output) if output is not None else loaded.base / recipe.output))
    series = open_series(loaded)
    p = plan(loaded, series)
    for rname, (pts, inside) in p.releases.items():
        dropped = int(np.count_nonzero(~inside))
        if dropped and any(e.entry.release == rname for e in p.entries):
            warn(f"releases.{rname}: {dropped} of {len(pts)} release points lie outside the mesh and are dropped")

    try:
        out.mkdir(parents=True, exist_ok=True)
        # a manifest describes one complete run: the old one goes before any of its frames do
        (out / "manifest.json").unlink(missing_ok=True)
    except OSError as exc:
        key = "--output" if output is not None else "output"
        raise OutputError(f"{out}: cannot use this {key} folder ({exc.strerror or exc})") from None
    _clear_frames(out, [e.name for e in p.entries], ".vtp")
    vortex_names = [v.name for v in p.vortices]
    for suffix, infix in ((".vtp", ""), (".vtp", "lines_"), (".vtu", "volume_")):
        _clear_frames(out, vortex_names, suffix, infix)
    tracers = [make_tracer(e, series) for e in p.entries]
    shared = VortexField(series.mesh) if p.vortices else None
    vortices = [VortexTracer(v, shared) for v in p.vortices]
    frames: dict[str, list[dict[str, Any]]] = {e.name: [] for e in (*p.entries, *p.vortices)}
    total = p.n_frames
    done = 0

    def emit_for(name: str) -> Callable[[int, float, Any], None]:
        def emit(index: int, t: float, result: Any) -> None:
            nonlocal done
            if isinstance(result, VortexFrame):
                frames[name].append(_write_vortex_frame(out, name, result))
            else:
                path = write_vtp(result, frame_path(out, name, index))
                frames[name].append({"index": index, "time": t, "file": str(path.relative_to(out)),
                                     "points": int(result.GetNumberOfPoints())})
            done += 1
            if progress is not None:
                progress(name, done, total)

        return emit

    last_needed = max([e.stop for e in p.entries] + [v.stop for v in p.vortices], default=float(series.times[0]))
    nan_files = stream(series, tracers, emit_for, last_needed, vortices, recipe.data.time_interpolation == "cubic")

    entries: dict[str, Any] = {}
    n_nan_particles = 0
    for e, tracer in zip(p.entries, tracers):
        counts = tracer.counts()
        n_nan_particles += counts["stopped_nan"]
        entries[e.name] = {
            "kind": e.entry.kind,
            "release": e.entry.release,
            "window": [e.start, e.stop],
            "frames": frames[e.name],
            "counts": counts,
        }
    if n_nan_particles:
        where = ", ".join(f"{f} ({n} points)" for f, n in nan_files.items())
        what = "particle or streamline" if n_nan_particles == 1 else "particles or streamlines"
        warn(f"{n_nan_particles} {what} stopped at NaN velocity; NaN values in {where}")

    vortex_entries = {v.plan.name: _finish_vortex(out, v, frames[v.plan.name]) for v in vortices}

    renders: dict[str, Any] = {}
    if render and recipe.renders:
        renders = _render_all(loaded, out, {**entries, **vortex_entries}, series, progress, render_workers(workers))

    manifest = {
        "vtkflow_version": __version__,
        "recipe": str(loaded.path),
        "recipe_sha256": loaded.sha256,
        "output": str(out),
        "series": {
            "snapshots": len(series),
            "time_range": [float(series.times[0]), float(series.times[-1])],
            "mesh": {"points": series.mesh.n_points, "cells": series.mesh.n_cells},
        },
        "status_names": STATUS_NAMES,
        "entries": entries,
        "vortices": vortex_entries,
        "renders": renders,
        "elapsed_seconds": round(_time.perf_counter() - started, 3),
    }
    manifest["report"] = "report.html"
    write_json(manifest, out / "manifest.json")
    _report(out, manifest, loaded)
    return manifest


def _report(out: Path, manifest: dict[str, Any], loaded: LoadedRecipe) -> None:
    from .report import write_report  # matplotlib: only here

    write_report(out, manifest, loaded.path.read_text(errors="replace"))


def render_recipe(
    loaded: LoadedRecipe, output: Optional[Path] = None, progress: Optional[Progress] = None, workers: int = 0
) -> dict[str, Any]:
    """Render the ``renders`` of a recipe again from the frames of an earlier run (its ``manifest.json``),
    without computing; an ``auto`` range found by that run is reused. Returns the updated manifest."""
    import json

    recipe = loaded.recipe
    out = Path(os.path.normpath(Path(output) if output is not None else loaded.base / recipe.output))
    path = out / "manifest.json"
    try:
        manifest = json.loads(path.read_text())
    except (OSError, ValueError) as exc:
        raise InputError(f"{path}: no readable manifest of an earlier run to render from ({exc})") from None
    entries = {**manifest.get("entries", {}), **manifest.get("vortices", {})}
    for name, spec in recipe.renders.items():
        for line in spec.lines:
            if line not in entries:
                raise InputError(f"{path}: renders.{name}.lines: the earlier run has no entry {line!r}")
    series = open_series(loaded)
    plan(loaded, series)  # the same checks as a run (encoders, context files)
    kept = {name: r["range"] for name, r in manifest.get("renders", {}).items() if "range" in r}
    manifest["renders"] = _render_all(loaded, out, entries, series, progress, render_workers(workers), known_ranges=kept)
    manifest["report"] = "report.html"
    write_json(manifest, path)
    _report(out, manifest, loaded)
    return manifest


def _boundary_surface(series: Series, out: Path, name: str, region: Any) -> Path:
    """Write the surface a render draws as boundary: the mesh's outer surface (``region`` True), as
    ``<output>/boundary.vtp``; or the input's surface cells whose cell array ``region.array`` takes one of
    ``region.values``, as ``<output>/<render>/boundary.vtp``. Returns the path."""
    from vtkmodules.vtkFiltersGeometry import vtkGeometryFilter

    geometry = vtkGeometryFilter()
    if region is True:
        geometry.SetInputData(series.mesh.grid)
        path = out / "boundary.vtp"
    else:
        from vtkmodules.vtkFiltersCore import vtkThreshold

        from .series import read_file
        from .tetmesh import SURFACE_TYPES

        key = f"renders.{name}.boundary.array"
        data = read_file(series.snapshots[0])
        if region.array not in data.cell:
            raise InputError(f"{series.snapshots[0].label}: no cell array {region.array!r} for {key}"
                             f" (cell arrays: {', '.join(data.cell) or 'none'})")
        values = np.asarray(data.cell[region.array]).reshape(len(series.mesh.cell_types), -1)[:, 0]
        pick = np.flatnonzero(np.isin(values, region.values) & np.isin(series.mesh.cell_types, list(SURFACE_TYPES)))
        if pick.size == 0:
            raise InputError(f"{series.snapshots[0].label}: no surface cell has {region.array} in {region.values}"
                             f" (renders.{name}.boundary)")
        grid = _vtk.vtkUnstructuredGrid()
        grid.ShallowCopy(series.mesh.grid)
        keep = np.zeros(len(values), np.uint8)
        keep[pick] = 1
        flag = numpy_to_vtk(keep, deep=True)
        flag.SetName("chosen")
        grid.GetCellData().AddArray(flag)
        threshold = vtkThreshold()  # the chosen faces, selected by a 0/1 cell array (no loop over cells)
        threshold.SetInputData(grid)
        threshold.SetInputArrayToProcess(0, 0, 0, 1, "chosen")  # 1: cell data
        threshold.SetLowerThreshold(0.5)
        threshold.SetUpperThreshold(1.5)
        threshold.Update()
        geometry.SetInputData(threshold.GetOutput())
        path = out / name / "boundary.vtp"
    geometry.Update()
    return write_vtp(geometry.GetOutput(), path)


def value_range(files: Sequence[str], name: str) -> list[float]:
    """Smallest and largest value of point array ``name`` (its magnitude for vectors) over ``files``; a
    range of [0, 1] if no file holds a finite value, widened around a single value."""
    from .output import read_vtp

    lo, hi = np.inf, -np.inf
    for f in files:
        arr = read_vtp(Path(f)).GetPointData().GetArray(name)
        if arr is None or arr.GetNumberOfTuples() == 0:
            continue
        v = vtk_to_numpy(arr).astype(np.float64)
        v = np.linalg.norm(v, axis=1) if v.ndim == 2 else v
        v = v[np.isfinite(v)]
        if v.size:
            lo, hi = min(lo, float(v.min())), max(hi, float(v.max()))
    if not np.isfinite(lo):
        return [0.0, 1.0]
    if not hi > lo:
        pad = 0.5 * abs(lo) if lo != 0.0 else 0.5
        lo, hi = lo - pad, hi + pad
    return [lo, hi]


#: Most render processes chosen automatically (each holds a render window and its frame's data).
MAX_AUTO_WORKERS = 4


def render_workers(asked: int = 0) -> int:
    """Render processes: ``asked`` if positive, else one per CPU up to :data:`MAX_AUTO_WORKERS`."""
    return asked if asked > 0 else max(1, min(os.cpu_count() or 1, MAX_AUTO_WORKERS))


def _write_vortex_frame(out: Path, name: str, frame: VortexFrame) -> dict[str, Any]:
    """Write one vortex frame's files; its manifest record."""
    i = frame.index
    record: dict[str, Any] = {"index": i, "time": frame.time, "level": frame.level}
    record["file"] = str(write_vtp(frame.surface, frame_path(out, name, i)).relative_to(out))
    if frame.lines is not None:
        record["lines"] = str(write_vtp(frame.lines, out / name / f"{name}_lines_{i:04d}.vtp").relative_to(out))
    if frame.volume_grid is not None:
        record["volume"] = str(write_vtu(frame.volume_grid, out / name / f"{name}_volume_{i:04d}.vtu").relative_to(out))
    record["cores"] = frame.row[3]
    return record


def _finish_vortex(out: Path, vortex: VortexTracer, frames: list[dict[str, Any]]) -> dict[str, Any]:
    """Write a vortex entry's tables; its manifest entry."""
    name, e = vortex.plan.name, vortex.entry
    table = write_csv(FRAME_COLUMNS, vortex.rows, out / name / f"{name}.csv")
    cores = write_csv(CORE_COLUMNS, vortex.core_rows, out / name / f"{name}_cores.csv")
    return {
        "criterion": e.criterion,
        "level": e.level,
        "level_is": e.level_is,
        "levels_used": vortex.levels,
        "window": [vortex.plan.start, vortex.plan.stop],
        "frames": frames,
        "table": str(table.relative_to(out)),
        "core_table": str(cores.relative_to(out)),
    }


def _render_all(
    loaded: LoadedRecipe, out: Path, entries: dict[str, Any], series: Series, progress: Optional[Progress],
    workers: int = 1, spawn: Optional[bool] = None, known_ranges: Optional[dict[str, Sequence[float]]] = None,
) -> dict[str, Any]:
    """Render every frame of every render, then the movies: in ``workers`` spawned processes when ``spawn``
    (default: when ``workers`` is above 1), else in this process."""
    _clear_frames(out, list(loaded.recipe.renders), ".png")
    jobs: list[tuple[str, dict[str, Any], Any]] = []  # (render, frame record, job arguments)
    ranges: dict[str, list[float]] = {}
    boundary_file: Optional[str] = None
    for name, spec in loaded.recipe.renders.items():
        context = [str(loaded.base / c) for c in spec.context]
        bounds = series.mesh.bounds.tolist()
        frames = []
        for frame in entries[spec.lines[0]]["frames"]:
            layers, names = [str(out / frame["file"])], [spec.lines[0]]
            for other in spec.lines[1:]:
                match = [f for f in entries[other]["frames"] if abs(f["time"] - frame["time"]) <= TIME_RTOL * max(1.0, abs(frame["time"]))]
                if match:
                    layers.append(str(out / match[0]["file"]))
                    names.append(other)
            volume = None
            if spec.slice is not None:
                match = [f for f in entries[spec.slice.entry]["frames"]
                         if abs(f["time"] - frame["time"]) <= TIME_RTOL * max(1.0, abs(frame["time"])) and "volume" in f]
                volume = str(out / match[0]["volume"]) if match else None
            frames.append((frame, layers, names, volume))
        boundary = None
        if spec.boundary is True:
            if boundary_file is None:
                boundary_file = str(_boundary_surface(series, out, name, True))
            boundary = boundary_file
        elif spec.boundary:
            boundary = str(_boundary_surface(series, out, name, spec.boundary))
        if spec.range == "auto":  # a first pass over every file the render draws
            kept = (known_ranges or {}).get(name)
            colored = [n for n in spec.lines if spec.styles.get(n) is None or spec.styles[n].color is None]
            files = [p for _, layers, names, _ in frames for p, n in zip(layers, names) if n in colored]
            ranges[name] = list(kept) if kept else value_range(files, spec.color_by)
            spec = spec.model_copy(update={"range": tuple(ranges[name])})
        else:
            ranges[name] = list(spec.range)
        spec_data = spec.model_dump(mode="json")
        for frame, layers, names, volume in frames:
            png = frame_path(out, name, frame["index"], ".png")
            record = {"index": frame["index"], "time": frame["time"], "file": str(png.relative_to(out))}
            jobs.append((name, record, (layers, str(png), spec_data, bounds, context, names, boundary, volume)))
    total = len(jobs)
    if progress is not None and total:
        progress(jobs[0][0], 0, total)
    if (workers > 1 if spawn is None else spawn) and total > 1:
        import multiprocessing
        from concurrent.futures import ProcessPoolExecutor

        from .render import render_job, worker_setup

        # spawned, not forked: each worker creates its own OpenGL context and keeps one render window
        with ProcessPoolExecutor(max_workers=workers, mp_context=multiprocessing.get_context("spawn"),
                                 initializer=worker_setup) as pool:
            for done, _ in enumerate(pool.map(render_job, [j[2] for j in jobs]), start=1):
                if progress is not None:
                    progress(jobs[done - 1][0], done, total)
    else:
        from .render import render_job  # rendering loads OpenGL: only when asked for

        for done, job in enumerate(jobs, start=1):
            render_job(job[2])
            if progress is not None:
                progress(job[0], done, total)

    result: dict[str, Any] = {}
    for name, spec in loaded.recipe.renders.items():
        images = [record for render, record, _ in jobs if render == name]
        result[name] = {"lines": list(spec.lines), "range": ranges[name], "frames": images}
        if spec.movie is not None:
            from .movie import write_movie

            pngs = [out / f["file"] for f in images]
            movies = {fmt: str(write_movie(pngs, out / name / f"{name}.{fmt}", spec.movie.fps).relative_to(out))
                      for fmt in spec.movie.formats} if pngs else {}
            result[name]["movies"] = movies
    return result
