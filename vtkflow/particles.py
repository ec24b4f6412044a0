"""Particle advection: state, fields, and the driver of the numba engine (with its NumPy twin).

The velocity between two snapshots ``t_k < t_k+1`` is linear in time,
``u(x, t) = (1 - a) u_k(x) + a u_k+1(x)`` with ``a = (t - t_k) / (t_k+1 - t_k)``, and each snapshot is
interpolated in space linearly in the tetrahedra of the mesh's conforming decomposition
(:meth:`vtkflow.mesh.Mesh.sample`).
Steps never straddle a snapshot time: the driver advances particles interval by interval.

Every particle carries its own time, so particles released at different instants advance together.
A step whose stages leave the mesh is halved until it is shorter than :data:`MIN_STEP` cells; then the
particle is placed on the boundary (the numba engine: exact ray crossing of a boundary face; the NumPy
twin: bisection) and stops with status ``exited``.

Streamlines use the same integrator on the field frozen at one time (the particle's "time" is then its arc
length), see :func:`trace_streamlines` and :func:`advance_numpy`.
"""

from __future__ import annotations

from dataclasses import dataclass
from enum import IntEnum
from typing import TYPE_CHECKING, Callable, NamedTuple, Optional

import numpy as np

from .kernels import fill_table, shifted_order
from .mesh import Mesh
from .reuse import OutputPool

if TYPE_CHECKING:
    from .integrate import RecordBuffers

__all__ = [
    "Status",
    "Sample",
    "TimeField",
    "time_slopes",
    "FrozenField",
    "advance",
    "advance_numpy",
    "trace_streamlines",
    "StreamlineSet",
    "MIN_STEP",
    "BISECTIONS",
    "STALL_SPEED",
    "MAX_GROWTH",
]

#: Shortest step, in local cell sizes, tried before a particle whose step leaves the mesh is declared exited.
MIN_STEP = 1e-3
#: Bisection steps of the NumPy twin's boundary exit (precision: one cell / 2**BISECTIONS).
BISECTIONS = 40
#: Streamlines stop where the speed falls below this fraction of the largest speed of the field (at the mesh
#: points, at the streamlines' time): a stagnation point stops them, whatever round-off leaves there.
STALL_SPEED = 1e-6
#: The adaptive scheme's default local error per step, as a fraction of the local cell size.
DEFAULT_RTOL = 1e-3
#: Most accepted steps per particle per call of the numba engine (its record buffers are this wide). Streamline
#: calls use the whole width: 128 in place of 64 takes most of the steady benchmark's streamlines (about 115
#: steps) in one call, not two, and its trace ran 2 % faster; pathline calls use as much as particles need.
CHUNK_STEPS = 128
#: A step is redone when the speed met along it exceeds the one it was sized for by this factor.
MAX_GROWTH = 2.0
#: Guard against a runaway loop in one call of :func:`advance` (every iteration advances, shortens or
#: stops each particle, so reaching it means a bug, not a hard case).
MAX_ITERATIONS = 10_000_000


class Status(IntEnum):
    """State of a particle or streamline, written as the ``status`` point array (its integer value)."""

    active = 0  #: still moving (or reached the end of its window)
    exited = 1  #: left the mesh; stopped at the boundary crossing point
    stalled = 2  #: speed below the floor (streamlines)
    nan = 3  #: met a NaN velocity
    dropped = 4  #: release point outside the mesh; never released
    pending = 5  #: not yet released


class Sample(NamedTuple):
    """Velocity sampled at points: ``v (N, 3)``, local cell size ``h (N,)``, ``inside (N,)``, ``stop (N,)``.

    ``stop`` is 0 where the sample is usable, else the :class:`Status` that ends the particle there
    (``nan``, ``stalled``). ``cell``, when the sampler gives it, is the tetrahedron found at each point (-1
    outside): :func:`place` keeps it, so the engine need not locate the particles again.
    """

    v: np.ndarray
    h: np.ndarray
    inside: np.ndarray
    stop: np.ndarray
    cell: Optional[np.ndarray] = None


#: ``field(x, t, idx) -> Sample``: ``idx`` are the particles' row numbers (for per-particle settings).
Sampler = Callable[[np.ndarray, np.ndarray, np.ndarray], Sample]


class TimeField:
    """Velocity between two snapshots, sampled through a :class:`Mesh`: linear in time, or cubic Hermite
    when the time slopes at both snapshots are loaded too.

    Parameters
    ----------
    mesh : Mesh

    Notes
    -----
    Cubic Hermite interpolation on ``[t0, t1]`` with ``s = (t - t0) / (t1 - t0)``:
    ``u = (1 + 2s)(1 - s)^2 u0 + s^2 (3 - 2s) u1 + s (1 - s)^2 (t1 - t0) d0 - s^2 (1 - s) (t1 - t0) d1``
    (e.g. Burden & Faires, Numerical Analysis, section 3.4), ``d0``, ``d1`` the time derivatives at the
    snapshots (see :func:`time_slopes`).
    """

    def __init__(self, mesh: Mesh) -> None:
        self.mesh = mesh
        self.t0 = self.t1 = 0.0
        self.cubic = False
        self._table, self._swapped = None, False  # the point data load set; whether shift swapped its blocks
        self._records = None
        #: memory of the streamline outputs, reused from frame to frame once the caller lets go of it
        self.outputs = OutputPool()

    def record_buffers(self) -> RecordBuffers:
        """The numba engine's record buffers for this field, made once and reused by every call."""
        if self._records is None:
            from .integrate import RecordBuffers

            self._records = RecordBuffers(CHUNK_STEPS)
        return self._records

    def load(self, t0: float, u0: np.ndarray, t1: float, u1: np.ndarray,
             d0: Optional[np.ndarray] = None, d1: Optional[np.ndarray] = None) -> None:
        """Set the bracketing snapshots ``(t0, u0)`` and ``(t1, u1)``, ``u`` of shape ``(n_points, 3)``; with
        the time slopes ``d0``, ``d1`` at them (same shape) the interpolation in time is cubic Hermite."""
        self.t0, self.t1 = float(t0), float(t1)
        self.cubic = d0 is not None and d1 is not None
        # into memory of an earlier load that nothing refers to any more (the mesh keeps the last one: two
        # buffers take turns), not fresh memory at every snapshot pair
        slopes = (d0, d1) if self.cubic else ()
        table = self.outputs.empty("snapshots", (self.mesh.n_points, 3 * (2 + len(slopes)) + 1))
        fill_table(table, u0, u1, self.mesh.point_size, *slopes)
        self.mesh.set_point_data(table)
        self._table, self._swapped = self.mesh.values, False

    def shift(self, t1: float, u1: np.ndarray, d1: Optional[np.ndarray] = None) -> None:
        """Move on to the next interval: the later snapshot becomes the earlier one and ``(t1, u1)`` the later
        (with its time slope ``d1`` when the interpolation in time is cubic). The same field as
        ``load(old t1, old u1, t1, u1, old d1, d1)``, up to round-off, but only the new snapshot is written:
        into the columns of the one that expired, in place (the field's own copy of the old later snapshot
        stays where it is; on the transient benchmark's 40k points, 0.12 ms a snapshot against 0.16 ms)."""
        if self._table is None or self.mesh.values is not self._table:
            raise ValueError("TimeField.shift needs a load first (and the mesh's point data left as load set it)")
        if (d1 is not None) != self.cubic:
            raise ValueError(f"TimeField.shift: the interpolation in time is {'cubic' if self.cubic else 'linear'}: "
                             f"the time slope d1 {'is needed' if self.cubic else 'has no place'}")
        if not float(t1) > self.t1:
            raise ValueError(f"TimeField.shift: the next snapshot time {float(t1):g} must follow {self.t1:g}")
        expired = 3 if self._swapped else 0  # the column block of the earlier snapshot
        self.mesh.set_point_columns(expired, u1)
        if self.cubic:
            self.mesh.set_point_columns(6 + expired, d1)
        self._swapped = not self._swapped
        self.t0, self.t1 = self.t1, float(t1)

    def column_times(self) -> tuple[float, float]:
        """The times of the snapshots in the table's first and second column blocks (and of the slopes in the
        third and fourth): ``(t0, t1)``, or ``(t1, t0)`` after an odd number of :meth:`shift` calls. The
        interpolation weights follow from them whatever their order."""
        return (self.t1, self.t0) if self._swapped else (self.t0, self.t1)

    def kernel_args(self, time: Optional[float] = None, floor: float = 0.0) -> tuple:
        """The plain arrays the numba engine needs: ``(mesh tuple, field tuple)``; with ``time``, the
        frozen field at that time (streamlines)."""
        loc = self.mesh.locator
        mesh = (loc.geom, loc.nbr, loc.conn, loc.tree.boxes, loc.tree.levels)
        frozen = time is not None
        field = (self.mesh.values, *self.column_times(), frozen, float(time or 0.0), float(floor), self.cubic)
        return mesh, field

    def largest_speed(self, time: float) -> float:
        """The largest speed at the mesh points at ``time`` (NaN speeds passed over)."""
        from .integrate import largest_speed

        w = self.weights(np.array([float(time)]))[0][: 4 if self.cubic else 2]
        return largest_speed(self.mesh.values, w)

    def weights(self, t: np.ndarray) -> np.ndarray:
        """Weights ``(N, 4)`` of the table's column blocks at times ``t``: u at ``ta``, u at ``tb``, and the slopes
        at them (0 when linear), ``ta, tb`` the :meth:`column_times`."""
        ta, tb = self.column_times()
        t = np.asarray(t, dtype=float)
        a = np.zeros_like(t) if tb == ta else np.clip((t - ta) / (tb - ta), 0.0, 1.0)
        if not self.cubic:
            return np.stack([1.0 - a, a, 0 * a, 0 * a], axis=1)
        dt = tb - ta
        return np.stack([(1 + 2 * a) * (1 - a) ** 2, a * a * (3 - 2 * a), a * (1 - a) ** 2 * dt, -a * a * (1 - a) * dt], axis=1)

    def release_sample(self, x: np.ndarray, t: np.ndarray) -> Sample:
        """The field at release points as the numba engine samples it: the points located through the box
        tree in Morton order, then one parallel pass of the engine's own sample (``__call__`` is the NumPy
        sampler of the twin engine; on the transient benchmark's 10k releases 2.0 ms in place of its 2.8 ms,
        most of it the location)."""
        from .integrate import NAN, sample_at

        mesh, args = self.kernel_args()
        v, h, code, cell = sample_at(x, t, self.mesh.locator.locate(x)[0], mesh, args)
        return Sample(v, h, cell >= 0, np.where(code == NAN, NAN, 0), cell)

    def __call__(self, x: np.ndarray, t: np.ndarray, idx: Optional[np.ndarray] = None) -> Sample:
        values, cell = self.mesh.sample_cells(x)
        inside = cell >= 0
        w = self.weights(t)
        v = np.zeros((len(x), 3))
        bad = np.zeros(len(x), bool)
        for j in range(4 if self.cubic else 2):
            col = values[:, 3 * j:3 * j + 3]
            used = w[:, j] != 0.0  # a column of zero weight takes no part, not even through 0 * NaN
            v += np.where(used[:, None], w[:, j, None] * col, 0.0)
            bad |= used & ~np.isfinite(col).all(axis=1)
        bad &= inside
        v[bad] = 0.0
        stop = np.where(bad, int(Status.nan), 0)
        return Sample(v, values[:, -1], inside, stop, cell)


def time_slopes(times: np.ndarray, k: int, snapshot: Callable[[int], np.ndarray]) -> np.ndarray:
    """Time derivative of the velocity at snapshot ``k`` from three neighbouring snapshots: the centred
    three-point formula on uneven spacing inside the series, the one-sided one at its ends (both second
    order, exact for fields quadratic in time; e.g. Fornberg 1988, Math. Comp. 51). ``snapshot(j)`` gives
    snapshot ``j``'s point velocity. A series of two snapshots gives their difference quotient."""
    n = len(times)
    if n < 3:
        j0, j1 = 0, min(1, n - 1)
        return (snapshot(j1) - snapshot(j0)) / (times[j1] - times[j0]) if j1 > j0 else np.zeros_like(snapshot(k))
    j = min(max(k - 1, 0), n - 3)  # the three snapshots j, j+1, j+2
    ta, tb, tc = times[j], times[j + 1], times[j + 2]
    t = times[k]
    # derivative at t of the quadratic through (ta, tb, tc): Lagrange basis derivatives
    ca = ((t - tb) + (t - tc)) / ((ta - tb) * (ta - tc))
    cb = ((t - ta) + (t - tc)) / ((tb - ta) * (tb - tc))
    cc = ((t - ta) + (t - tb)) / ((tc - ta) * (tc - tb))
    return ca * snapshot(j) + cb * snapshot(j + 1) + cc * snapshot(j + 2)


class FrozenField:
    """The velocity at one time along each streamline's direction, ``sign * u``: streamlines, each
    particle's "time" its arc length (see :func:`advance_numpy`).

    Parameters
    ----------
    field : TimeField
        Loaded with the snapshots that bracket ``time``.
    time : float
    sign : (N,) ndarray
        +1.0 (forward) or -1.0 (backward) for each streamline.
    floor : float
        Speeds below it stop the streamline (status ``stalled``).
    """

    def __init__(self, field: TimeField, time: float, sign: np.ndarray, floor: float) -> None:
        self.field, self.time, self.sign, self.floor = field, float(time), np.asarray(sign, float), float(floor)

    def kernel_args(self) -> tuple:
        """See :meth:`TimeField.kernel_args`."""
        return self.field.kernel_args(self.time, self.floor)

    def record_buffers(self) -> RecordBuffers:
        """See :meth:`TimeField.record_buffers`."""
        return self.field.record_buffers()

    @property
    def outputs(self) -> OutputPool:
        """See :attr:`TimeField.outputs`."""
        return self.field.outputs

    def velocity(self, x: np.ndarray) -> Sample:
        """The velocity itself (without the sign) at seeds ``x``, as the engine samples it
        (:meth:`TimeField.release_sample`)."""
        return self.field.release_sample(x, np.full(len(x), self.time))

    def __call__(self, x: np.ndarray, s: np.ndarray, idx: np.ndarray) -> Sample:
        # the NumPy sampler: the twin engine's
        return self.directed(self.field(x, np.full(len(x), self.time)), idx)

    def directed(self, got: Sample, idx: np.ndarray) -> Sample:
        """The sample of particles ``idx`` along their direction (``sign`` times the velocity sampled at their
        points), stalled where the speed is at or below the floor."""
        speed = np.linalg.norm(got.v, axis=1)
        slow = got.inside & (got.stop == 0) & ~(speed > self.floor)
        stop = np.where(slow, int(Status.stalled), got.stop)
        v = np.where(slow[:, None], 0.0, got.v * self.sign[idx, None])
        return Sample(v, got.h, got.inside, stop, got.cell)


@dataclass
class State:
    """Particle state, one row per particle: position, own time, velocity and cell size there, status."""

    x: np.ndarray  # (N, 3)
    t: np.ndarray  # (N,)
    v: np.ndarray  # (N, 3)
    h: np.ndarray  # (N,)
    status: np.ndarray  # (N,) int8
    cell: np.ndarray  # (N,) int64: last tetrahedron, where point location starts its walk (-1: none)
    dt: np.ndarray  # (N,) the adaptive scheme's suggested next step (0: none yet)

    @classmethod
    def empty(cls, n: int) -> "State":
        return cls(
            np.zeros((n, 3)),
            np.zeros(n),
            np.zeros((n, 3)),
            np.ones(n),
            np.full(n, int(Status.pending), np.int8),
            np.full(n, -1, np.int64),
            np.zeros(n),
        )


#: ``record(idx, x, t, v)`` after accepted steps: each particle's records in time order (interleaved with other
#: particles'); the arrays are the recorder's to keep (their memory is lent again only once nothing refers to
#: them: the field's :class:`vtkflow.reuse.OutputPool`).
Recorder = Callable[[np.ndarray, np.ndarray, np.ndarray, np.ndarray], None]


def place(state: State, idx: np.ndarray, x: np.ndarray, t: np.ndarray, field: Sampler,
          got: Optional[Sample] = None) -> None:
    """Put particles ``idx`` at ``x`` at times ``t`` and sample the field there (release), or take ``got``,
    the field's sample there when the caller has it."""
    if idx.size == 0:
        return
    if got is None:
        release = getattr(field, "release_sample", None)
        got = release(x, t) if release is not None else field(x, t, idx)
    state.x[idx], state.t[idx], state.v[idx], state.h[idx] = x, t, got.v, got.h
    if got.cell is not None:
        state.cell[idx] = got.cell
    status = np.where(got.stop != 0, got.stop, int(Status.active))
    status[~got.inside] = int(Status.exited)
    state.status[idx] = status


def advance(
    state: State,
    t_end: float,
    field: Sampler,
    step: float,
    record: Optional[Recorder] = None,
    engine: str = "numba",
    max_iterations: int = MAX_ITERATIONS,
    integrator: str = "rk4",
    tolerance: Optional[float] = None,
    runs: bool = False,
) -> None:
    """Advance every active particle whose time is below ``t_end`` to ``t_end`` with classical RK4.

    The work is done by the numba engine (:mod:`vtkflow.integrate`) for a :class:`TimeField` or
    :class:`FrozenField`, and by its NumPy twin :func:`advance_numpy` for any other sampler or with
    ``engine="numpy"``; both follow the same rules (see :func:`advance_numpy`).

    ``integrator="dopri5"`` (numba engine only) uses the adaptive Dormand–Prince 5(4) pair (Dormand &
    Prince 1980, J. Comput. Appl. Math. 6) with its local error per step kept below ``tolerance`` (length
    units; default ``DEFAULT_RTOL`` of the local cell size), the steps still bounded by ``step`` cells.

    ``runs=True`` (numba engine only) hands ``record`` each engine call's records where the engine wrote them,
    ``record(rows, counts, x, t, v)`` (see :func:`vtkflow.integrate.advance_particles`), each call in its own
    slot of the field's record buffers: valid until the field's next ``advance``, and not copied.
    """
    numba_engine = engine != "numpy" and hasattr(field, "kernel_args")
    if integrator != "rk4" and not numba_engine:
        raise ValueError(f"integrator {integrator!r} needs the numba engine")
    if runs and not numba_engine:
        raise ValueError("records handed over as runs need the numba engine")
    if not numba_engine:
        advance_numpy(state, t_end, field, step, record, max_iterations)
        return
    from .integrate import ACTIVE, advance_particles, find_cells  # ACTIVE: a plain int, faster to compare with

    mesh, args = field.kernel_args()
    sign = getattr(field, "sign", None)
    signs = np.ones(len(state.t)) if sign is None else np.ascontiguousarray(sign, dtype=np.float64)
    params = (MIN_STEP, MAX_GROWTH, float(tolerance or 0.0), DEFAULT_RTOL)
    # with a recorder: chunks of up to CHUNK_STEPS steps into the field's buffers, reused from call to call
    # (fresh memory costs page faults), as wide as the steps particles took lately (runs: the full width,
    # each call in its own slot); without: no buffers, no chunks
    buffers = field.record_buffers() if record is not None else None
    for call in range(max_iterations):
        active = np.flatnonzero((state.status == ACTIVE) & (state.t < t_end))
        if active.size == 0:
            return
        # neighbours in memory work together (particles just released are located first, so that they too
        # are ordered from their first step: in release order, the walk's loads miss the caches)
        find_cells(active, state.x, state.cell, mesh)
        active = active[_by_region(state.cell[active], len(mesh[0]))]
        # the engine works on the state's own arrays, row by row
        got = advance_particles(active, state.x, state.t, state.v, state.h, state.cell, state.status, state.dt,
                                signs, t_end, step, _chunk(buffers, runs, call), mesh, args, params, integrator,
                                buffers, call if runs else None, note=call == 0, pool=getattr(field, "outputs", None))
        if got is not None and got[0].size:
            record(*got)
    raise RuntimeError(f"particle advection did not reach t = {t_end} in {max_iterations} rounds")


def _chunk(buffers: Optional[RecordBuffers], runs: bool, call: int) -> int:
    """Most steps per particle in engine call ``call`` of an advance: the first as wide as
    :meth:`RecordBuffers.chunk` suggests, the few particles left for later calls the whole width."""
    if buffers is None:
        return 1 << 40
    return buffers.chunk() if call == 0 and not runs else buffers.width


def _by_region(cells: np.ndarray, n_tets: int) -> np.ndarray:
    """Order of particles by the region of their tetrahedron: the tetrahedra are numbered along a Morton
    curve, so ``cell >> shift`` is a region of space, about one per particle (a linear-time counting
    sort; particles outside the mesh, ``cell = -1``, come first)."""
    shift = max(0, int(n_tets).bit_length() - int(len(cells)).bit_length())
    return shifted_order(cells, shift, n_tets)


def advance_numpy(
    state: State,
    t_end: float,
    field: Sampler,
    step: float,
    record: Optional[Recorder] = None,
    max_iterations: int = MAX_ITERATIONS,
) -> None:
    """The NumPy twin of the numba engine: every active particle to ``t_end`` with classical RK4.

    Parameters
    ----------
    state : State
        Updated in place.
    t_end : float
        Common end time (a snapshot time, a frame time or the window end).
    field : callable
        ``field(x, t) -> Sample``.
    step : float
        Largest step as a fraction of the local cell size: ``dt = step * h / |u|``.
    record : callable, optional
        ``record(idx, x, t, v)`` after each accepted step (for pathlines and streamlines).

    Notes
    -----
    Classical fourth-order Runge–Kutta (Kutta 1901; e.g. Hairer, Nørsett & Wanner 1993, *Solving Ordinary
    Differential Equations I*, Springer, table 1.2 of section II.1). Each particle's step is
    ``min(step * h / |u|, t_end - t)``; it is redone shorter when the speed met along it exceeds
    ``MAX_GROWTH`` times the one it was sized for, and halved when a stage leaves the mesh.

    On a :class:`FrozenField` (streamlines) the particle's "time" is its arc length: the steps are the same,
    ``step * h / |u|`` in a pseudo-time, and the arc length grows by the scheme's own quadrature of the
    speed, ``dt (|k1| + 2 |k2| + 2 |k3| + |k4|) / 6`` (RK4 applied to ``ds/dt = |u|`` alongside the path: as
    accurate as the path). The last step is sized to reach ``t_end`` to first order, and its end point is
    moved the rest along the tangent there (an error of the rest squared times the curvature).
    """
    arc = isinstance(field, FrozenField)
    active = np.flatnonzero((state.status == Status.active) & (state.t < t_end))
    cap = np.full(state.t.size, np.inf)  # per-particle limit on dt after a rejected step
    for _ in range(max_iterations):
        if active.size == 0:
            return
        x, t, k1, h = state.x[active], state.t[active], state.v[active], state.h[active]
        speed = np.linalg.norm(k1, axis=1)
        remaining = t_end - t
        with np.errstate(divide="ignore", invalid="ignore"):
            dt = np.minimum(np.where(speed > 0, step * h / speed, np.inf), cap[active])
        if arc:
            with np.errstate(divide="ignore", invalid="ignore"):
                last = dt * speed >= remaining
                dt = np.where(last, remaining / speed, dt)
        else:
            last = dt >= remaining
            dt = np.where(last, remaining, dt)

        s2 = field(x + 0.5 * dt[:, None] * k1, t + 0.5 * dt, active)
        s3 = field(x + 0.5 * dt[:, None] * s2.v, t + 0.5 * dt, active)
        s4 = field(x + dt[:, None] * s3.v, t + dt, active)
        xn = x + (dt / 6.0)[:, None] * (k1 + 2.0 * s2.v + 2.0 * s3.v + s4.v)
        speeds = [speed] + [np.linalg.norm(sk.v, axis=1) for sk in (s2, s3, s4)]
        if arc:
            tn = t + dt * (speeds[0] + 2.0 * speeds[1] + 2.0 * speeds[2] + speeds[3]) / 6.0
        else:
            tn = np.where(last, t_end, t + dt)
        sn = field(xn, tn, active)
        if arc:
            sn, xn, tn = _to_length(field, active, last, sn, xn, tn, t_end)

        inside = s2.inside & s3.inside & s4.inside & sn.inside
        # the speed met along the step; a step that outran the bound (the flow sped up) is redone
        vmax = np.max(speeds, axis=0)
        too_long = inside & (dt * vmax > MAX_GROWTH * step * h)
        stage_stop = np.maximum.reduce([s2.stop, s3.stop, s4.stop]) * inside
        ok = inside & ~too_long & (stage_stop == 0)

        # accepted steps (the end point may itself carry a stop code: the particle stops there)
        acc = active[ok]
        state.x[acc], state.t[acc], state.v[acc], state.h[acc] = xn[ok], tn[ok], sn.v[ok], sn.h[ok]
        cap[acc] = np.inf
        end_stop = sn.stop[ok]
        state.status[acc[end_stop != 0]] = end_stop[end_stop != 0]
        if record is not None and acc.size:
            record(acc, xn[ok], tn[ok], sn.v[ok])

        # a stage met a stop code (NaN, stall) inside the mesh: stop where the particle is
        halted = inside & ~too_long & (stage_stop != 0)
        state.status[active[halted]] = stage_stop[halted]
        cap[active[too_long]] = step * h[too_long] / vmax[too_long]

        # stages left the mesh: shorter step, or on the boundary if the step is already tiny
        out = ~inside
        tiny = out & (dt * vmax <= MIN_STEP * h)
        cap[active[out & ~tiny]] = 0.5 * dt[out & ~tiny]
        if tiny.any():
            # mean velocity over the stages that stayed inside, with RK4's weights: the exit direction
            w = [(1.0, np.ones(len(active), bool), k1), (2.0, s2.inside, s2.v), (2.0, s3.inside, s3.v), (1.0, s4.inside, s4.v)]
            total = sum(wi * ins for wi, ins, _ in w)
            mean = sum((wi * ins)[:, None] * vi for wi, ins, vi in w) / total[:, None]
            _exit(state, active[tiny], mean[tiny], t_end, field, record, arc)

        active = active[(state.status[active] == Status.active) & (state.t[active] < t_end)]
    raise RuntimeError(f"particle advection did not reach t = {t_end} in {max_iterations} iterations")


def _to_length(field: Sampler, idx: np.ndarray, last: np.ndarray, sn: Sample, xn: np.ndarray, tn: np.ndarray,
               t_end: float) -> tuple[Sample, np.ndarray, np.ndarray]:
    """Arc-length mode: the end points of last steps (``last``, or past ``t_end``; inside and active) moved the
    rest of the way to arc length ``t_end`` along the tangent there, forward or back, and sampled again; where
    that point is outside, the step's end stays (short of ``t_end``: more steps follow)."""
    move = (last | (tn > t_end)) & sn.inside & (sn.stop == 0)
    if not move.any():
        return sn, xn, tn
    m = np.flatnonzero(move)  # only these are sampled again
    v = sn.v[m]
    z = xn[m] + ((t_end - tn[m]) / np.linalg.norm(v, axis=1))[:, None] * v
    sz = field(z, np.full(len(m), t_end), idx[m])
    took = m[sz.inside]
    merged = Sample(*(None if b is None else b.copy() for b in sn))
    for a, b in zip(sz, merged):
        if b is not None:
            b[took] = a[sz.inside]
    xn, tn = xn.copy(), tn.copy()
    xn[took], tn[took] = z[sz.inside], t_end
    return merged, xn, tn


def _exit(
    state: State, idx: np.ndarray, mean: np.ndarray, t_end: float, field: Sampler, record: Optional[Recorder],
    arc: bool = False,
) -> None:
    """Move particles ``idx`` to where they cross the boundary and mark them exited.

    The search runs from the particle along ``mean``, its mean velocity over the stages of the last tried
    step that stayed inside (or the velocity at the particle where that is zero), one local cell size
    ahead, by bisection; the exit time is the distance over that speed, at most ``t_end`` (``arc``: the
    "time" is the arc length, and grows by the distance).
    """
    x, t, h = state.x[idx], state.t[idx], state.h[idx]
    v = np.where(np.linalg.norm(mean, axis=1)[:, None] > 0, mean, state.v[idx])
    speed = np.linalg.norm(v, axis=1)
    direction = np.where(speed[:, None] > 0, v / np.where(speed > 0, speed, 1.0)[:, None], 0.0)
    reach = h  # search one local cell ahead
    lo, hi = np.zeros(idx.size), np.ones(idx.size)
    end_out = ~field(x + reach[:, None] * direction, t, idx).inside
    for _ in range(BISECTIONS):
        mid = 0.5 * (lo + hi)
        inside = field(x + (mid * reach)[:, None] * direction, t, idx).inside
        lo = np.where(inside, mid, lo)
        hi = np.where(inside, hi, mid)
    dist = np.where(end_out, lo * reach, 0.0)
    xe = x + dist[:, None] * direction
    with np.errstate(divide="ignore", invalid="ignore"):
        te = np.minimum(t + (dist if arc else np.where(speed > 0, dist / speed, 0.0)), t_end)
    got = field(xe, te, idx)
    state.x[idx], state.t[idx] = xe, te
    state.v[idx] = np.where(got.inside[:, None], got.v, state.v[idx])
    state.status[idx] = int(Status.exited)
    moved = dist > 0
    if record is not None and moved.any():
        record(idx[moved], xe[moved], te[moved], state.v[idx[moved]])


# ------------------------------------------------------------------------------------------ streamlines
@dataclass
class StreamlineSet:
    """Streamlines of one frame: vertices grouped per release point, backward part reversed, then forward."""

    points: np.ndarray  # (M, 3)
    velocity: np.ndarray  # (M, 3)
    arc_length: np.ndarray  # (M,) signed: negative on the backward part
    seed: np.ndarray  # (M,) release point index of each vertex
    lengths: np.ndarray  # (L,) vertices per streamline, in release-point order
    status: np.ndarray  # (M,) how the vertex's streamline part ended (Status)
    ends: np.ndarray  # (n_directions, L) how each part ended (Status), per seed


def trace_streamlines(
    field: "TimeField",
    time: float,
    seeds: np.ndarray,
    seed_ids: np.ndarray,
    direction: str,
    step: float,
    length: float,
    integrator: str = "rk4",
    tolerance: Optional[float] = None,
) -> StreamlineSet:
    """Streamlines of the velocity frozen at ``time`` from ``seeds``, up to an arc length.

    Parameters
    ----------
    field : TimeField
        Loaded with the snapshots that bracket ``time``.
    time : float
    seeds : (L, 3) ndarray
        Seed points inside the mesh.
    seed_ids : (L,) ndarray of int
        Release point index of each seed (written as ``release_point``).
    direction : {'forward', 'backward', 'both'}
    step : float
        Step as a fraction of the local cell size.
    length : float
        Longest arc length per direction.
    integrator, tolerance
        As for :func:`advance`.
    """
    L = len(seeds)
    signs = {"forward": (1.0,), "backward": (-1.0,), "both": (-1.0, 1.0)}[direction]
    n_dir = len(signs)
    sign = np.repeat(np.asarray(signs), L)  # one row per (direction, seed): all directions advance together
    seeds = np.asarray(seeds, dtype=float).reshape(-1, 3)
    start = np.tile(seeds, (n_dir, 1))
    rows = np.arange(len(sign))
    at_seeds = FrozenField(field, time, sign, 0.0).velocity(seeds)  # sampled once, for every direction
    frozen = FrozenField(field, time, sign, STALL_SPEED * field.largest_speed(time))
    got = Sample(*(None if a is None else np.concatenate([a] * n_dir) for a in at_seeds))

    # each engine call's records as the engine left them (see advance(runs=True)): per particle, a run in
    # arc order; the first "call" is the seed vertex, once per seed (with the forward part when both), the
    # velocity itself (not sign times it, as the engine integrates it)
    calls: list[tuple[np.ndarray, ...]] = []
    state = State.empty(len(sign))
    place(state, rows, start, np.zeros(len(sign)), frozen, frozen.directed(got, rows))
    first = rows[sign > 0] if direction == "both" else rows
    calls.append((first, np.ones(len(first), np.int64), start[first].reshape(-1, 1, 3), np.zeros((len(first), 1)),
                  got.v[first].reshape(-1, 1, 3)))
    advance(state, length, frozen, step, lambda *c: calls.append(c), integrator=integrator, tolerance=tolerance,
            runs=True)

    # per seed by signed arc length, backward part reversed, then forward: every record's place follows from
    # the particles' counts (one parallel pass per call, straight into the outputs; no sort, no copies)
    from .integrate import place_runs

    n_rows = len(sign)
    total = np.zeros(n_rows, np.int64)
    for c in calls:
        total[c[0]] += c[1]  # each particle once per call
    per_part = total.reshape(n_dir, L)
    lengths = per_part.sum(axis=0)
    offset = np.zeros(L, np.int64)
    np.cumsum(lengths[:-1], out=offset[1:])
    base = (offset + np.cumsum(per_part, axis=0) - per_part).reshape(-1)  # the earlier parts of the seed first
    seed_of = np.tile(np.asarray(seed_ids, dtype=np.int64), n_dir)
    # the outputs in memory of earlier frames that the caller has let go of (see vtkflow.reuse)
    pool = field.outputs
    n = int(lengths.sum())
    out = (pool.empty("points", (n, 3)), pool.empty("velocity", (n, 3)), pool.empty("arc", n),
           pool.empty("seed", n, np.int64), pool.empty("status", n, np.int8))
    before = np.zeros(n_rows, np.int64)
    for c in calls:
        place_runs(c, before, base, total, sign, seed_of, state.status, out)
    points, vel, arc, seed, status = out
    return StreamlineSet(
        points=points,
        velocity=vel,
        arc_length=arc,
        seed=seed,
        lengths=lengths,
        status=status,
        ends=state.status.reshape(n_dir, L).copy(),
    )
