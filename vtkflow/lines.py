"""The four flow-line kinds: pathline, streakline, timeline, streamline.

A tracer follows one recipe entry through the snapshot intervals and hands a PolyData to ``emit`` at each
of its output frames. Particle kinds share :class:`ParticleTracer`; they differ only in how the particles
are joined into polylines at a frame (the ``assemble_*`` functions). :data:`LINE_KINDS` is the one table
of kinds; the recipe's choices and error messages read from it.

Point arrays written: ``velocity``, ``speed``; particle lines add ``particle_id``
(= release_instant_index * n_release_points + release_point_index), ``release_time``, ``age``,
``status`` (:class:`~vtkflow.particles.Status` value) and ``time``; streamlines add ``release_point`` and
``arc_length``. FieldData: ``time``.

Adding a kind: write a tracer (or an ``assemble_*`` function for a particle kind) and add one row to
:data:`LINE_KINDS`.
"""

from __future__ import annotations

from typing import Any, Callable, NamedTuple, Optional

import numpy as np

from .errors import RecipeError
from .kernels import group_order, take_rows
from .particles import State, Status, TimeField, advance, place, trace_streamlines

__all__ = ["LINE_KINDS", "LineKind", "ParticleTracer", "StreamlineTracer", "release_instants", "STATUS_NAMES"]

Emit = Callable[[int, float, Any], None]

#: FieldData ``status_names``: the name of each status value, in value order.
STATUS_NAMES = [s.name for s in Status]

#: Two times closer than this (relative to the snapshot spacing) are the same instant (common practice:
#: absorbs the round-off of ``start + k * every``).
TIME_RTOL = 1e-9


def release_instants(start: float, stop: float, every: Optional[float]) -> np.ndarray:
    """Release instants ``start + k * every`` for k = 0, 1, ... while <= stop (one at ``start`` without ``every``)."""
    if every is None:
        return np.array([start])
    n = int(np.floor((stop - start) / every * (1.0 + TIME_RTOL) + TIME_RTOL)) + 1
    return np.minimum(start + every * np.arange(n), stop)  # round-off never puts the last one past stop


def snap_times(values: np.ndarray, targets: np.ndarray, window: tuple[float, float]) -> np.ndarray:
    """``values`` moved onto the nearest of ``targets`` where they differ by round-off only (``TIME_RTOL``
    of the window length), so that a particle released "at" a frame time is in that frame."""
    if values.size == 0 or targets.size == 0:
        return values
    eps = TIME_RTOL * max(1.0, abs(window[1] - window[0]))
    j = np.clip(np.searchsorted(targets, values), 1, len(targets)) - 1
    out = values.copy()
    for cand in (targets[j], targets[np.minimum(j + 1, len(targets) - 1)]):
        close = np.abs(cand - out) <= eps
        out[close] = cand[close]
    return out


def entry_window(key: str, start: Optional[float], stop: Optional[float], times: np.ndarray,
                 where: str = "") -> tuple[float, float]:
    """An entry's time window: ``start``/``stop`` (default: the first and last snapshot times), clipped to
    the snapshot times; a value outside them is a :class:`RecipeError` naming ``<key>.start`` or ``.stop``."""
    t_first, t_last = float(times[0]), float(times[-1])
    eps = TIME_RTOL * max(1.0, t_last - t_first)
    lo = t_first if start is None else float(start)
    hi = t_last if stop is None else float(stop)
    for k, value in (("start", lo), ("stop", hi)):
        if value < t_first - eps or value > t_last + eps:
            raise RecipeError(f"{where}{key}.{k}: {value:g} lies outside the snapshot times [{t_first:g}, {t_last:g}]")
    return max(lo, t_first), min(hi, t_last)


class _History:
    """Vertices recorded along particle paths, consolidated into flat arrays on demand."""

    def __init__(self) -> None:
        self._chunks: list[tuple[np.ndarray, ...]] = []
        self.ids = np.zeros(0, np.int64)
        self.x = np.zeros((0, 3))
        self.t = np.zeros(0)
        self.v = np.zeros((0, 3))

    def __call__(self, idx: np.ndarray, x: np.ndarray, t: np.ndarray, v: np.ndarray) -> None:
        self._chunks.append((idx.astype(np.int64, copy=False), x, t, v))  # the engines hand over arrays of their own

    def consolidate(self) -> None:
        if self._chunks:
            parts = [(self.ids, self.x, self.t, self.v), *self._chunks]
            self.ids, self.x, self.t, self.v = (np.concatenate(c) for c in zip(*parts))
            self._chunks.clear()


class ParticleTracer:
    """Particles released from fixed points at a series of instants, advanced in the time-varying field.

    Parameters
    ----------
    name : str
    kind : {'pathline', 'streakline', 'timeline'}
    points : (P, 3) ndarray
        Release points.
    inside : (P,) ndarray of bool
        Which release points lie in the mesh (the others are dropped).
    instants : (R,) ndarray
        Release instants.
    frames : (F,) ndarray
        Output frame times, ascending, inside the window.
    window : (start, stop)
    step : float
        Largest step as a fraction of the local cell size.
    integrator : {'rk4', 'dopri5'}
    tolerance : float, optional
        Local error per step of ``dopri5``, in length units.
    """

    def __init__(
        self,
        name: str,
        kind: str,
        points: np.ndarray,
        inside: np.ndarray,
        instants: np.ndarray,
        frames: np.ndarray,
        window: tuple[float, float],
        step: float,
        integrator: str = "rk4",
        tolerance: Optional[float] = None,
    ) -> None:
        self.name, self.kind, self.step = name, kind, step
        self.integrator, self.tolerance = integrator, tolerance
        self.frames, self.window = np.asarray(frames, dtype=float), window
        instants = snap_times(np.asarray(instants, dtype=float), self.frames, window)
        self.n_points = len(points)
        self.release_points = np.asarray(points, dtype=float)
        n = len(instants) * self.n_points
        self.release_time = np.repeat(np.asarray(instants, dtype=float), self.n_points)
        self.point_index = np.tile(np.arange(self.n_points), len(instants))
        self.state = State.empty(n)
        self.state.status[~np.tile(np.asarray(inside, bool), len(instants))] = int(Status.dropped)
        self.history = _History() if kind == "pathline" else None
        self.next_frame = 0

    def interval(self, field: TimeField, t0: float, t1: float, first: bool, emit: Emit) -> None:
        """Advance through ``(t0, t1]`` (``[t0, t1]`` if ``first``), emitting the frames that fall in it."""
        start, stop = self.window
        hi = min(t1, stop)
        if hi < start or (t0 >= stop and not first):
            return
        while self.next_frame < len(self.frames) and self.frames[self.next_frame] <= hi:
            te = float(self.frames[self.next_frame])
            self._go(te, field)
            emit(self.next_frame, te, self.assemble(te))
            self.next_frame += 1
        self._go(hi, field)

    def _go(self, te: float, field: TimeField) -> None:
        s = self.state
        new = np.flatnonzero((s.status == Status.pending) & (self.release_time <= te))
        if new.size:
            place(s, new, self.release_points[self.point_index[new]], self.release_time[new], field)
            if self.history is not None:
                self.history(new, s.x[new], s.t[new], s.v[new])
        advance(s, te, field, self.step, self.history, integrator=self.integrator, tolerance=self.tolerance)

    # ----------------------------------------------------------------------------------- assembling
    def assemble(self, time: float) -> Any:
        if self.kind == "pathline":
            return self._pathlines(time)
        s = self.state
        alive = np.isin(s.status, (Status.active, Status.nan, Status.stalled)) & (self.release_time <= time)
        ids = np.flatnonzero(alive)
        instant = ids // self.n_points
        point = self.point_index[ids]
        # streakline: per release point, oldest first; timeline: per release instant, in release-point order
        group, order_key = (point, instant) if self.kind == "streakline" else (instant, point)
        order = np.lexsort((order_key, group))
        ids, group = ids[order], group[order]
        _, lengths = np.unique(group, return_counts=True)
        return self._polydata(ids, s.x[ids], s.t[ids], s.v[ids], lengths, time)

    def _pathlines(self, time: float) -> Any:
        h = self.history
        assert h is not None
        h.consolidate()
        # vertices were recorded in time order per particle: group them by particle, keeping that order
        order, lengths = group_order(h.ids, len(self.release_time))
        ids, x, t, v = take_rows(order, h.ids, h.x, h.t, h.v)
        lengths = lengths[lengths > 0]
        return self._polydata(ids, x, t, v, lengths, time)

    def _polydata(self, ids: np.ndarray, x: np.ndarray, t: np.ndarray, v: np.ndarray, lengths: np.ndarray, time: float) -> Any:
        from .output import polylines

        rt = self.release_time[ids]
        arrays = {
            "velocity": v,
            "speed": np.linalg.norm(v, axis=1),
            "particle_id": ids.astype(np.int64),
            "release_time": rt,
            "age": t - rt,
            "status": self.state.status[ids].astype(np.int8),
            "time": t,
        }
        return polylines(x, lengths, arrays, time, {"status_names": _status_names()})

    def counts(self) -> dict[str, int]:
        st = self.state.status
        return {
            "released": int(np.count_nonzero((st != Status.pending) & (st != Status.dropped))),
            "exited": int(np.count_nonzero(st == Status.exited)),
            "stopped": int(np.count_nonzero((st == Status.nan) | (st == Status.stalled))),
            "stopped_nan": int(np.count_nonzero(st == Status.nan)),
            "dropped_at_release": int(np.count_nonzero(st == Status.dropped)),
        }


class StreamlineTracer:
    """Streamlines of the frozen field at each output frame, from the release points inside the mesh."""

    def __init__(
        self,
        name: str,
        points: np.ndarray,
        inside: np.ndarray,
        frames: np.ndarray,
        direction: str,
        step: float,
        length: float,
        integrator: str = "rk4",
        tolerance: Optional[float] = None,
    ) -> None:
        self.name, self.kind = name, "streamline"
        self.integrator, self.tolerance = integrator, tolerance
        self.seed_ids = np.flatnonzero(inside)
        self.seeds = np.asarray(points, dtype=float)[self.seed_ids]
        self.n_dropped = int(len(points) - len(self.seed_ids))
        self.frames = np.asarray(frames, dtype=float)
        self.direction, self.step, self.length = direction, step, length
        self.next_frame = 0
        self._ends: list[np.ndarray] = []

    def interval(self, field: TimeField, t0: float, t1: float, first: bool, emit: Emit) -> None:
        while self.next_frame < len(self.frames) and self.frames[self.next_frame] <= t1:
            te = float(self.frames[self.next_frame])
            emit(self.next_frame, te, self.assemble(field, te))
            self.next_frame += 1

    def assemble(self, field: TimeField, time: float) -> Any:
        from .output import polylines

        lines = trace_streamlines(
            field, time, self.seeds, self.seed_ids, self.direction, self.step, self.length, self.integrator, self.tolerance
        )
        self._ends.append(lines.ends)
        arrays = {
            "velocity": lines.velocity,
            "speed": np.linalg.norm(lines.velocity, axis=1),
            "release_point": lines.seed.astype(np.int64),
            "arc_length": lines.arc_length,
            "status": lines.status.astype(np.int8),
        }
        return polylines(lines.points, lines.lengths, arrays, time, {"status_names": _status_names()})

    def counts(self) -> dict[str, int]:
        # one count per streamline: a 'both' streamline is exited or stopped if either of its halves is
        ends = np.concatenate([_per_line(e) for e in self._ends]) if self._ends else np.zeros(0, np.int8)
        return {
            "released": int(len(self.seeds) * len(self._ends)),
            "exited": int(np.count_nonzero(ends == Status.exited)),
            "stopped": int(np.count_nonzero((ends == Status.nan) | (ends == Status.stalled))),
            "stopped_nan": int(np.count_nonzero(ends == Status.nan)),
            "dropped_at_release": self.n_dropped * len(self._ends),
        }


def _per_line(ends: np.ndarray) -> np.ndarray:
    """One status per streamline from the status of each of its halves (``(n_directions, L)``):
    exited if a half exited, else nan or stalled if a half stopped so, else active."""
    out = np.full(ends.shape[1], int(Status.active), dtype=np.int8)
    for status in (Status.stalled, Status.nan, Status.exited):  # later ones take precedence
        out[(ends == status).any(axis=0)] = int(status)
    return out


def _status_names() -> Any:
    from ._vtk import vtkStringArray

    arr = vtkStringArray()
    for n in STATUS_NAMES:
        arr.InsertNextValue(n)
    return arr


class LineKind(NamedTuple):
    """A row of :data:`LINE_KINDS`."""

    particles: bool  #: advected particles (True) or streamlines of the frozen field (False)
    needs_every: bool  #: the recipe must give ``every``
    arrays: tuple[str, ...]  #: point arrays of its output files
    description: str


PARTICLE_ARRAYS = ("velocity", "speed", "particle_id", "release_time", "age", "status", "time")
STREAMLINE_ARRAYS = ("velocity", "speed", "release_point", "arc_length", "status")

LINE_KINDS: dict[str, LineKind] = {
    "pathline": LineKind(True, False, PARTICLE_ARRAYS, "path of each released particle up to the frame time"),
    "streakline": LineKind(True, True, PARTICLE_ARRAYS, "particles released from each point, joined oldest first"),
    "timeline": LineKind(True, True, PARTICLE_ARRAYS, "particles released at one instant, joined in release-point order"),
    "streamline": LineKind(False, False, STREAMLINE_ARRAYS, "curve tangent to the velocity frozen at the frame time"),
}
