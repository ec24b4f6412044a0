"""numba RK4 particle integration on the tetrahedral decomposition: the fast engine behind
:func:`vtkflow.particles.advance`.

Each particle advances on its own, in its own time, from its last tetrahedron (a walk, see
:mod:`vtkflow.kernels`), so a parallel loop over particles gives results independent of the number of
threads (bitwise). The rules are those of the NumPy twin :func:`vtkflow.particles.advance_numpy`:

* classical RK4 (Kutta 1901) with ``dt = min(step * h / |u|, t_end - t)``;
* a step is redone shorter when the speed met along it exceeds ``MAX_GROWTH`` times the one it was sized
  for, and halved when a stage leaves the mesh; below ``MIN_STEP`` cells, the particle is moved to the
  boundary along its mean stage velocity: the exact crossing of that ray with a boundary face, found by
  traversing the tetrahedra along it;
* a NaN velocity (or, for streamlines, a speed below the floor) stops the particle.

Two modes share the kernel: time-accurate (velocity linear in time between the two loaded snapshots) and
frozen (``sign * u`` at one time, for streamlines: the same steps in a pseudo-time, the particle's "time"
its arc length, grown by the scheme's quadrature of the speed, and the last step's end moved along the
tangent to the length limit; no square root and division per stage, as a unit tangent would need).
At most ``max_steps`` accepted steps are taken per call, recorded into particle-major buffers, one row per
particle (position, time, and the velocity itself, also in frozen mode); the Python wrapper calls again
until every particle is done. The particles of a call are rows of the state arrays, advanced in place.
"""

from __future__ import annotations

import numpy as np
from numba import get_num_threads, njit, prange, types
from numba.extending import overload

from .kernels import FMA, _bary, _locate, _prefetch_exit
from .particles import Status

__all__ = ["advance_particles", "find_cells", "sample_at", "place_runs", "largest_speed", "RecordBuffers", "TABLEAUS"]

# status values as plain ints for the kernels; OUTSIDE marks a sample outside the mesh
ACTIVE, EXITED, STALLED, NAN = int(Status.active), int(Status.exited), int(Status.stalled), int(Status.nan)
OUTSIDE = -1
#: Most tetrahedra a boundary-exit ray crosses before giving up (a guard against cycles).
MAX_RAY = 100_000
#: Meshes of more tetrahedra than this (a 96-byte record each: 32 MiB, the last-level cache of the earlier
#: benchmark host) prefetch the tetrahedron a path enters next; smaller ones do not, their records stay in
#: cache. Measured in CPU time, A/B in one process: steady case (1.19 M tetrahedra) 7 % faster with the
#: prefetch, transient case (197 k tetrahedra) 3-6 % faster without; on a host with 480 MiB of L3, where
#: the whole steady mesh fits, the prefetch still made its kernel 3 % faster.
PREFETCH_TETS = 350_000
#: The engine's mode switches (frozen field; cubic interpolation in time) as values of two integer types:
#: numba compiles each combination of modes on its own (and caches it), the switches constants there, so
#: each mode runs without the others' branches and code (the transient engine ran 6-8 % faster).
ON, OFF = np.uint8(1), np.int8(0)


def _on(switch) -> bool:
    """Whether a mode switch (:data:`ON` or :data:`OFF`) is on; in compiled code, a constant."""
    return isinstance(switch, np.uint8)


@overload(_on, inline="always")
def _on_compiled(switch):
    on = isinstance(switch, types.Integer) and not switch.signed
    return lambda switch: on


@njit(cache=True, fastmath=FMA, nogil=True, inline="always")
def _blend(values, n0, n1, n2, n3, b0, b1, b2, b3, col):
    """The barycentric blend of columns ``col .. col + 2`` of the vertex rows ``n0 .. n3``, summed in pairs:
    two short dependency chains instead of one long one (2-6 % faster, measured)."""
    return ((b0 * values[n0, col] + b1 * values[n1, col]) + (b2 * values[n2, col] + b3 * values[n3, col]),
            (b0 * values[n0, col + 1] + b1 * values[n1, col + 1]) + (b2 * values[n2, col + 1] + b3 * values[n3, col + 1]),
            (b0 * values[n0, col + 2] + b1 * values[n1, col + 2]) + (b2 * values[n2, col + 2] + b3 * values[n3, col + 2]))


@njit(cache=True, fastmath=FMA, nogil=True, inline="always")
def _sample(x0, x1, x2, t, hint, mesh, field, sign, frozen, cubic, need_h=True):
    """Velocity at ``((x0, x1, x2), t)``: ``(tetrahedron or -1, local cell size, stop code, speed, u0, u1, u2)``.
    In frozen mode ``u`` is ``sign`` times the velocity at the frozen time, and a speed at or below the floor
    stalls. The cell size is interpolated only when ``need_h`` (0.0 otherwise), and a snapshot of zero
    weight is not read.
    ``frozen`` and ``cubic`` are the mode switches (:data:`ON`, :data:`OFF`)."""
    geom, nbr, conn, boxes, levels = mesh
    values, t0, t1, time, floor = field
    cell, b0, b1, b2, b3 = _locate(x0, x1, x2, hint, geom, nbr, boxes, levels)
    if cell < 0:
        return -1, 0.0, OUTSIDE, 0.0, 0.0, 0.0, 0.0
    tt = time if _on(frozen) else t
    a = 0.0
    if t1 != t0:
        a = min(max((tt - t0) / (t1 - t0), 0.0), 1.0)
    # unsigned row numbers: no wrap-around of negative indices to compute on every load
    uc = np.uint64(cell)
    n0, n1, n2, n3 = np.uint64(conn[uc, 0]), np.uint64(conn[uc, 1]), np.uint64(conn[uc, 2]), np.uint64(conn[uc, 3])
    # weights of the columns: u(t0) (0..2), u(t1) (3..5) and, cubic, the time slopes at t0 (6..8), t1 (9..11)
    wa, wb, wc, wd = 1.0 - a, a, 0.0, 0.0
    if _on(cubic):  # cubic Hermite basis on [t0, t1] (slopes in time units: scaled by the interval)
        dt01 = t1 - t0
        wa = (1.0 + 2.0 * a) * (1.0 - a) * (1.0 - a)
        wb = a * a * (3.0 - 2.0 * a)
        wc = a * (1.0 - a) * (1.0 - a) * dt01
        wd = -a * a * (1.0 - a) * dt01
    w0 = 0.0
    w1 = 0.0
    w2 = 0.0
    if wc == 0.0 and wd == 0.0 and (wa == 1.0 or wb == 1.0):
        # at a snapshot (streamlines at a saved time, as a rule): its columns alone, no weight on the chain
        # from the sample to the next stage (the steady kernel ran 1-6 % faster; the same results)
        w0, w1, w2 = _blend(values, n0, n1, n2, n3, b0, b1, b2, b3, 0 if wa == 1.0 else 3)
        wa = wb = 0.0
    for col, wgt in ((0, wa), (3, wb), (6, wc), (9, wd)):
        if wgt != 0.0:  # a snapshot (or slope) of zero weight is not read, not even through 0 * NaN
            s0, s1, s2 = _blend(values, n0, n1, n2, n3, b0, b1, b2, b3, col)
            w0 += wgt * s0
            w1 += wgt * s1
            w2 += wgt * s2
    h = 0.0
    if need_h:
        hc = values.shape[1] - 1  # the cell size is the last column
        h = (b0 * values[n0, hc] + b1 * values[n1, hc]) + (b2 * values[n2, hc] + b3 * values[n3, hc])
    if not (np.isfinite(w0) and np.isfinite(w1) and np.isfinite(w2)):
        return cell, h, NAN, 0.0, 0.0, 0.0, 0.0
    speed = np.sqrt(w0 * w0 + w1 * w1 + w2 * w2)
    if _on(frozen):  # the velocity along the streamline's direction (not normalised: see _advance_one)
        if not speed > floor:
            return cell, h, STALLED, 0.0, 0.0, 0.0, 0.0
        w0 *= sign
        w1 *= sign
        w2 *= sign
    # the next tetrahedron along the path, into cache while this one's sample is used (on meshes larger than
    # the caches, the walk's loads are what the engine waits for; on smaller ones the hint only costs)
    if geom.shape[0] > PREFETCH_TETS:
        _prefetch_exit(cell, b0, b1, b2, b3, w0, w1, w2, geom, nbr, conn)
    return cell, h, ACTIVE, speed, w0, w1, w2


@njit(cache=True, fastmath=FMA, nogil=True)
def _ray_exit(x0, x1, x2, d0, d1, d2, cell, geom, nbr):
    """Distance along the unit direction ``d`` from ``x`` (in tetrahedron ``cell``) to the boundary, by
    traversing tetrahedra along the ray; -1.0 if no boundary face is met within MAX_RAY tetrahedra."""
    s_done = 0.0
    t = cell
    for _ in range(MAX_RAY):
        bary = _bary(x0, x1, x2, t, geom)
        # rate of change of each barycentric coordinate along d
        r1 = geom[t, 3] * d0 + geom[t, 4] * d1 + geom[t, 5] * d2
        r2 = geom[t, 6] * d0 + geom[t, 7] * d1 + geom[t, 8] * d2
        r3 = geom[t, 9] * d0 + geom[t, 10] * d1 + geom[t, 11] * d2
        best, f = np.inf, -1
        for k, rk in enumerate((-(r1 + r2 + r3), r1, r2, r3)):
            if rk < 0.0:
                s = -max(bary[k], 0.0) / rk
                if s < best:
                    best, f = s, k
        if f < 0:
            return -1.0
        s_done += best
        nxt = nbr[t, f]
        if nxt < 0:
            return s_done
        # step just past the face into the neighbour, measured from the original x
        t = nxt
        x0, x1, x2 = x0 + best * d0, x1 + best * d1, x2 + best * d2
    return -1.0


# Butcher tableaus: rows of A (stage positions), b (the solution) and e (b minus the embedded solution,
# for the error estimate; zero for RK4). The last stage of both is the sample at the new point, which
# is also the first stage of the next step (FSAL).
# Classical RK4 (Kutta 1901; Hairer, Nørsett & Wanner 1993, Solving ODEs I, table II.1.2).
RK4_C = np.array([0.0, 0.5, 0.5, 1.0])
RK4_A = np.array([[0.0, 0.0, 0.0, 0.0], [0.5, 0.0, 0.0, 0.0], [0.0, 0.5, 0.0, 0.0], [0.0, 0.0, 1.0, 0.0]])
RK4_B = np.array([1.0 / 6.0, 1.0 / 3.0, 1.0 / 3.0, 1.0 / 6.0])
RK4_E = np.zeros(5)
# Dormand & Prince 1980, "A family of embedded Runge-Kutta formulae", J. Comput. Appl. Math. 6, table 2
# (the 5(4) pair "DOPRI5"; coefficients as in Hairer, Nørsett & Wanner 1993, table II.5.2).
DP_C = np.array([0.0, 1.0 / 5.0, 3.0 / 10.0, 4.0 / 5.0, 8.0 / 9.0, 1.0])
DP_A = np.array([
    [0.0, 0.0, 0.0, 0.0, 0.0, 0.0],
    [1.0 / 5.0, 0.0, 0.0, 0.0, 0.0, 0.0],
    [3.0 / 40.0, 9.0 / 40.0, 0.0, 0.0, 0.0, 0.0],
    [44.0 / 45.0, -56.0 / 15.0, 32.0 / 9.0, 0.0, 0.0, 0.0],
    [19372.0 / 6561.0, -25360.0 / 2187.0, 64448.0 / 6561.0, -212.0 / 729.0, 0.0, 0.0],
    [9017.0 / 3168.0, -355.0 / 33.0, 46732.0 / 5247.0, 49.0 / 176.0, -5103.0 / 18656.0, 0.0],
])
DP_B = np.array([35.0 / 384.0, 0.0, 500.0 / 1113.0, 125.0 / 192.0, -2187.0 / 6784.0, 11.0 / 84.0])
# b - b_hat for the six stages and for the FSAL stage at the new point
DP_E = np.array([
    71.0 / 57600.0, 0.0, -71.0 / 16695.0, 71.0 / 1920.0, -17253.0 / 339200.0, 22.0 / 525.0, -1.0 / 40.0,
])
#: Tableaus by integrator name: (c, A, b, e, adaptive).
TABLEAUS = {"rk4": (RK4_C, RK4_A, RK4_B, RK4_E, False), "dopri5": (DP_C, DP_A, DP_B, DP_E, True)}


@njit(cache=True, fastmath=FMA, nogil=True, inline="always")
def _record(i, n, x0, x1, x2, t, v0, v1, v2, rec_x, rec_t, rec_v):
    """Record particle ``i``'s ``n``-th step."""
    rec_x[i, n, 0], rec_x[i, n, 1], rec_x[i, n, 2] = x0, x1, x2
    rec_v[i, n, 0], rec_v[i, n, 1], rec_v[i, n, 2] = v0, v1, v2
    rec_t[i, n] = t


#: Particles per parallel work item (one set of stage work arrays each).
BLOCK = 64


@njit(cache=True, fastmath=FMA, nogil=True, inline="always")
def _advance_one(i, col, X, T, V, H, C, S, D, sign, t_end, step, max_steps, mesh, field, frozen, cubic, params, scheme,
                 rec_x, rec_t, rec_v, k, cells, codes):
    """Advance particle ``i`` (a row of the state arrays, updated in place) by up to ``max_steps`` accepted
    steps, recorded in row ``col`` of the record buffers; returns the number recorded. ``k``, ``cells`` and
    ``codes`` are the stage work arrays. Inlined into :func:`_advance_block`."""
    min_step, max_growth, tol, rel_tol = params
    cc, aa, bb, ee, adaptive = scheme
    geom, nbr, conn, boxes, levels = mesh
    ns = bb.shape[0]
    x0, x1, x2 = X[i, 0], X[i, 1], X[i, 2]
    v0, v1, v2 = V[i, 0], V[i, 1], V[i, 2]
    t = T[i]
    h = H[i]
    cell = C[i]
    n = 0
    if cell < 0:  # no hint yet (just released): locate through the box tree
        cell = _locate(x0, x1, x2, -1, geom, nbr, boxes, levels)[0]
        if cell < 0:
            S[i] = EXITED
            C[i] = cell
            return 0
    cap = D[i] if adaptive and D[i] > 0.0 else np.inf  # the adaptive scheme's suggested step
    recording = rec_x.shape[1] > 0  # without buffers, steps are taken but not recorded
    # recorded velocities are the velocity itself; in frozen mode v is sign times it
    scale = sign if _on(frozen) else 1.0
    guard = 0
    while n < max_steps and S[i] == ACTIVE and t < t_end:
        guard += 1
        if guard > 64 * max_steps + 1000:
            break  # no progress: leave it to the caller's guard
        speed = np.sqrt(v0 * v0 + v1 * v1 + v2 * v2)
        dt = step * h / speed if speed > 0.0 else np.inf
        dt = min(dt, cap)
        if _on(frozen):  # t is the arc length: this step's is about dt * speed
            last = dt * speed >= t_end - t
            if last:
                dt = (t_end - t) / speed
        else:
            last = dt >= t_end - t
            if last:
                dt = t_end - t
        # stages
        k[0, 0], k[0, 1], k[0, 2] = v0, v1, v2
        cells[0] = cell
        codes[0] = ACTIVE
        n_in = 1
        # the latest stage in registers (p, cj): the next stage's position waits on it, not on a store and a
        # load of the stage work arrays (the steady kernel ran 6 % faster, the transient run 2 %; same results)
        p0, p1, p2, cj = v0, v1, v2, cell
        arc = bb[0] * speed  # frozen mode: the step's arc length over dt, by the scheme's quadrature of |v|
        vmax = speed  # the largest speed met along the step
        for j in range(1, ns):
            a0 = a1 = a2 = 0.0
            for m in range(j - 1):
                a0 += aa[j, m] * k[m, 0]
                a1 += aa[j, m] * k[m, 1]
                a2 += aa[j, m] * k[m, 2]
            a0 += aa[j, j - 1] * p0
            a1 += aa[j, j - 1] * p1
            a2 += aa[j, j - 1] * p2
            cj, _, sj, spj, p0, p1, p2 = _sample(x0 + dt * a0, x1 + dt * a1, x2 + dt * a2, t + cc[j] * dt, cj, mesh,
                                                 field, sign, frozen, cubic, False)
            arc += bb[j] * spj
            vmax = max(vmax, spj)
            k[j, 0], k[j, 1], k[j, 2] = p0, p1, p2
            cells[j] = cj
            codes[j] = sj
            if cj < 0:
                break
            n_in += 1
        inside = n_in == ns
        cn, hn, sn, spn, u0, u1, u2 = -1, 0.0, OUTSIDE, 0.0, 0.0, 0.0, 0.0
        tn = t + dt * arc if _on(frozen) else (t_end if last else t + dt)
        y0, y1, y2 = x0, x1, x2
        if inside:
            a0 = a1 = a2 = 0.0
            for m in range(ns - 1):
                a0 += bb[m] * k[m, 0]
                a1 += bb[m] * k[m, 1]
                a2 += bb[m] * k[m, 2]
            a0 += bb[ns - 1] * p0
            a1 += bb[ns - 1] * p1
            a2 += bb[ns - 1] * p2
            y0, y1, y2 = x0 + dt * a0, x1 + dt * a1, x2 + dt * a2
            cn, hn, sn, spn, u0, u1, u2 = _sample(y0, y1, y2, tn, cj, mesh, field, sign, frozen, cubic)
            inside = cn >= 0
            if _on(frozen) and (last or tn > t_end) and inside and sn == ACTIVE:
                # the last step's arc length is t_end - t to first order (and a step sized below it may pass
                # it): the end point is moved the rest along the tangent there (forward or back; an error of
                # order rest^2 times the curvature) and sampled again
                f = (t_end - tn) / spn
                z0, z1, z2 = y0 + f * u0, y1 + f * u1, y2 + f * u2
                cz, hz, sz, spz, w0, w1, w2 = _sample(z0, z1, z2, t_end, cn, mesh, field, sign, frozen, cubic)
                if cz >= 0:
                    y0, y1, y2, cn, hn, sn, spn, u0, u1, u2 = z0, z1, z2, cz, hz, sz, spz, w0, w1, w2
                    tn = t_end
        if not inside:
            if dt * vmax <= min_step * h:
                # to the boundary along the mean velocity of the stages that stayed inside
                m0 = m1 = m2 = wsum = 0.0
                for m in range(n_in):
                    w = abs(bb[m]) if bb[m] != 0.0 else 0.0
                    if m == 0:
                        w = max(w, 1e-300)
                    m0 += w * k[m, 0]
                    m1 += w * k[m, 1]
                    m2 += w * k[m, 2]
                    wsum += w
                m0, m1, m2 = m0 / wsum, m1 / wsum, m2 / wsum
                ms = np.sqrt(m0 * m0 + m1 * m1 + m2 * m2)
                if ms > 0.0:
                    d0, d1, d2 = m0 / ms, m1 / ms, m2 / ms
                    dist = _ray_exit(x0, x1, x2, d0, d1, d2, cell, geom, nbr)
                    if dist > 0.0:
                        x0, x1, x2 = x0 + dist * d0, x1 + dist * d1, x2 + dist * d2
                        t = min(t + (dist if _on(frozen) else dist / ms), t_end)
                        if recording:
                            _record(col, n, x0, x1, x2, t, v0 * scale, v1 * scale, v2 * scale, rec_x, rec_t, rec_v)
                        n += 1
                S[i] = EXITED
                break
            cap = 0.5 * dt
            continue
        if dt * vmax > max_growth * step * h:
            cap = step * h / vmax
            continue
        stage_stop = 0
        for m in range(ns):
            stage_stop = max(stage_stop, codes[m])
        if stage_stop > 0:
            S[i] = stage_stop
            break
        if adaptive:
            # error estimate in length units against tol (absolute) or rel_tol * h (relative to the cell)
            err2 = 0.0
            for c, uc in enumerate((u0, u1, u2)):
                acc = ee[ns] * uc
                for m in range(ns):
                    acc += ee[m] * k[m, c]
                err2 += (dt * acc) ** 2
            err = np.sqrt(err2)
            allowed = tol if tol > 0.0 else rel_tol * h
            factor = 5.0 if err == 0.0 else min(5.0, max(0.2, 0.9 * (allowed / err) ** 0.2))
            if err > allowed:
                cap = dt * factor
                continue
            cap = dt * factor
        else:
            cap = np.inf
        x0, x1, x2 = y0, y1, y2
        v0, v1, v2 = u0, u1, u2
        t = tn
        h = hn
        cell = cn
        if recording:
            _record(col, n, x0, x1, x2, t, v0 * scale, v1 * scale, v2 * scale, rec_x, rec_t, rec_v)
        n += 1
        if sn > 0:
            S[i] = sn
    X[i, 0], X[i, 1], X[i, 2] = x0, x1, x2
    V[i, 0], V[i, 1], V[i, 2] = v0, v1, v2
    T[i] = t
    H[i] = h
    C[i] = cell
    if adaptive:
        D[i] = cap
    return n


@njit(cache=True, fastmath=FMA, nogil=True, _nrt=False)
def _advance_block(lo, hi, rows, X, T, V, H, C, S, D, signs, t_end, step, max_steps, mesh, field, frozen, cubic, params,
                   scheme, rec_x, rec_t, rec_v, counts, k, cells, codes):
    """Advance the particles ``rows[lo:hi]`` one after the other (see :func:`_advance_one`), their records in
    rows ``lo:hi`` of the buffers and their counts in ``counts[lo:hi]``.

    One call per block of particles, not per particle: with a call per particle (its body not inlined),
    passing the thirty-odd arrays and tuples at every call made the transient benchmark's kernel about
    20 % slower (A/B in one process; the paths agree to round-off). Compiled without reference counting
    (``_nrt=False``: no arrays are made here): in a parallel loop, every reference to an array that all
    threads share would cost an atomic update of its count, a full memory barrier on x86. The hot helpers
    it inlines take and return scalars for the same reason."""
    for j in range(lo, hi):
        i = rows[j]
        counts[j] = _advance_one(i, j, X, T, V, H, C, S, D, signs[i], t_end, step, max_steps, mesh, field, frozen,
                                 cubic, params, scheme, rec_x, rec_t, rec_v, k, cells, codes)


@njit(cache=True, parallel=True)
def _advance_many(rows, X, T, V, H, C, S, D, signs, t_end, step, max_steps, mesh, field, frozen, cubic, params, scheme,
                  rec_x, rec_t, rec_v, counts, nt):
    ns = scheme[2].shape[0]
    n = rows.shape[0]
    blocks = (n + BLOCK - 1) // BLOCK
    # the loop hands each of the ``nt`` threads a contiguous run of iterations: iteration q takes block
    # (q % m) * nt + q // m, so that every thread's blocks spread over all the particles (ordered by region,
    # the work per block follows the local speed: contiguous halves differed by up to 13 % on the transient
    # benchmark); any order gives the same results, each particle being advanced on its own
    m = (blocks + nt - 1) // nt
    for q in prange(m * nt):
        b = (q % m) * nt + q // m
        if b >= blocks:
            continue
        k, cells, codes = np.empty((ns, 3)), np.empty(ns, np.int64), np.empty(ns, np.int64)
        _advance_block(b * BLOCK, min((b + 1) * BLOCK, n), rows, X, T, V, H, C, S, D, signs, t_end, step, max_steps,
                       mesh, field, frozen, cubic, params, scheme, rec_x, rec_t, rec_v, counts, k, cells, codes)


@njit(cache=True, fastmath=FMA, parallel=True)
def _find_cells(rows, X, C, mesh):
    geom, nbr, conn, boxes, levels = mesh
    for j in prange(rows.shape[0]):
        i = rows[j]
        if C[i] < 0:
            C[i] = _locate(X[i, 0], X[i, 1], X[i, 2], -1, geom, nbr, boxes, levels)[0]


def find_cells(rows, x, cell, mesh) -> None:
    """Give the particles ``rows`` that have no tetrahedron yet (``cell`` -1, e.g. just released) the one
    containing them, through the box tree, as the engine itself would on their first step (-1 outside):
    with it, they can be ordered by region before their first step."""
    _find_cells(np.ascontiguousarray(rows, dtype=np.int64), x, cell, mesh)


@njit(cache=True, fastmath=FMA, parallel=True)
def _sample_at(X, T, C, mesh, field, cubic, V, H, codes):
    for i in prange(X.shape[0]):
        C[i], H[i], codes[i], _, V[i, 0], V[i, 1], V[i, 2] = _sample(X[i, 0], X[i, 1], X[i, 2], T[i], C[i], mesh, field,
                                                                     1.0, OFF, cubic)


def sample_at(x, t, cell, mesh, field):
    """The velocity at points ``x`` and times ``t`` as the engine samples it (time-accurate mode), walking
    from ``cell`` (a tetrahedron near each point, -1 for none: the box tree). Returns ``(v, h, code,
    cell)``: velocity ``(N, 3)`` (zero where the code is not ``ACTIVE``), local cell size, the sample's stop
    code (``ACTIVE``, ``NAN``, or ``OUTSIDE`` with cell -1) and the containing tetrahedron."""
    x = np.ascontiguousarray(x, dtype=np.float64).reshape(-1, 3)
    n = len(x)
    t = np.ascontiguousarray(np.broadcast_to(np.asarray(t, dtype=np.float64), (n,)))
    cell = np.array(cell, dtype=np.int64).reshape(n)  # a copy: the kernel writes the tetrahedra into it
    values, t0, t1, _, time, floor, cubic = field
    v, h, code = np.empty((n, 3)), np.empty(n), np.empty(n, np.int64)
    _sample_at(x, t, cell, mesh, (values, float(t0), float(t1), float(time), float(floor)), ON if cubic else OFF,
               v, h, code)
    return v, h, code, cell


@njit(cache=True, parallel=True)
def _largest_speeds(values, weights, top):
    """The largest speed (NaN passed over) in each of ``len(top)`` pieces of the table's rows: a maximum is
    exact in any grouping, so the result does not depend on the number of pieces."""
    n, pieces = values.shape[0], top.shape[0]
    for p in prange(pieces):
        best = 0.0
        for i in range(p * n // pieces, (p + 1) * n // pieces):
            u0 = u1 = u2 = 0.0
            for j in range(weights.shape[0]):
                if weights[j] != 0.0:  # a snapshot (or slope) of zero weight takes no part, not even through 0 * NaN
                    u0 += weights[j] * values[i, 3 * j]
                    u1 += weights[j] * values[i, 3 * j + 1]
                    u2 += weights[j] * values[i, 3 * j + 2]
            s2 = u0 * u0 + u1 * u1 + u2 * u2
            if s2 > best:  # False for NaN
                best = s2
        top[p] = best


def largest_speed(values: np.ndarray, weights: np.ndarray) -> float:
    """The largest speed at the points of a snapshot table (``values``: the engine's, see
    :meth:`vtkflow.particles.TimeField.load`) with these weights of its column triples; NaN speeds are
    passed over (0.0 when every speed is NaN). One parallel pass that keeps each piece's largest squared
    speed, no array of speeds (1.2 ms -> 0.4 ms on the steady benchmark's 250k points)."""
    top = np.zeros(max(1, min(get_num_threads(), len(values))))
    _largest_speeds(values, np.ascontiguousarray(weights, dtype=np.float64), top)
    return float(np.sqrt(top.max()))


@njit(cache=True, parallel=True)
def _compact(rec_x, rec_t, rec_v, counts, rows, first, which, x, t, v):
    """Copy the valid records (``counts[i]`` in row ``i``, particle ``rows[i]``) to flat arrays, particle
    by particle: row ``i``'s in time order from ``first[i]``, so that a consumer moving each particle's
    records to its own place writes runs, not scattered rows."""
    for i in prange(counts.shape[0]):
        j = first[i]
        for k in range(counts[i]):
            which[j] = rows[i]
            t[j] = rec_t[i, k]
            for c in range(3):
                x[j, c] = rec_x[i, k, c]
                v[j, c] = rec_v[i, k, c]
            j += 1


@njit(cache=True, parallel=True)
def _place_runs(rows, counts, rec_x, rec_t, rec_v, before, base, total, sign, seed_of, status, points, vel, arc, seed,
                stat):
    for i in prange(rows.shape[0]):
        r = rows[i]  # each row once per call: no two threads write the same places or the same before[r]
        n = counts[i]
        if sign[r] < 0.0:  # reversed: record k to place base + total - 1 - (before + k)
            top = base[r] + total[r] - 1 - before[r]
            for k in range(n):
                for c in range(3):
                    points[top - k, c] = rec_x[i, k, c]
                    vel[top - k, c] = rec_v[i, k, c]
                arc[top - k] = -rec_t[i, k]
            lo = top - n + 1
        else:  # one array at a time: a read and a write stream each (11.1 -> 9.4 ms on the steady benchmark)
            lo = base[r] + before[r]
            for k in range(n):
                points[lo + k, 0], points[lo + k, 1], points[lo + k, 2] = rec_x[i, k, 0], rec_x[i, k, 1], rec_x[i, k, 2]
            for k in range(n):
                vel[lo + k, 0], vel[lo + k, 1], vel[lo + k, 2] = rec_v[i, k, 0], rec_v[i, k, 1], rec_v[i, k, 2]
            for k in range(n):
                arc[lo + k] = rec_t[i, k]
        s, st = seed_of[r], status[r]
        for d in range(lo, lo + n):
            seed[d] = s
        for d in range(lo, lo + n):
            stat[d] = st
        before[r] += n


def place_runs(runs, before, base, total, sign, seed_of, status, out) -> None:
    """Write one engine call's records, as :func:`advance_particles` hands them over uncompacted (``runs``:
    ``(rows, counts, x, t, v)``, row ``i`` of the buffers holding particle ``rows[i]``'s ``counts[i]`` records
    in time order), to their places in a path assembly ``out = (points, velocity, arc, seed, status)``:
    particle ``r``'s ``k``-th record overall (``before[r]`` in earlier calls, advanced here) goes to
    ``base[r] + k``, or to ``base[r] + total[r] - 1 - k`` where ``sign[r] < 0`` (the path reversed, its time
    negated); each place also gets the particle's ``seed_of`` and ``status``. One parallel pass over the
    particles, each copying a run: no sort, no compaction, no joined copies."""
    rows, counts, x, t, v = runs
    _place_runs(np.ascontiguousarray(rows, dtype=np.int64), np.ascontiguousarray(counts, dtype=np.int64), x, t, v,
                before, base, total, sign, seed_of, status, *out)


class RecordBuffers:
    """Record buffers for up to ``width`` steps of ``n`` particles, particle-major (``x[i, k]`` is particle
    ``i``'s ``k``-th record), kept across calls and grown when more particles come. Each particle writes its
    records in a run and the compaction reads them in runs (step-major buffers, read particle by particle,
    took twice as long: every record on another page).

    A call need not use the whole width: :meth:`chunk` suggests one from the steps particles took per call
    lately, so that the records of calls with few steps per particle (pathlines between close snapshots)
    lie close together instead of one per ``width`` records (on the transient benchmark's three steps per
    particle and snapshot interval, 8 wide ran 10-15 % faster than 64 wide). Only the first call of each
    advance is noted (:func:`vtkflow.particles.advance`): the few particles left for a second call take
    few steps there, and noting them made the next interval's first call too narrow (4 wide on the
    transient benchmark: a tenth of the particles needed a second call in every interval).
    """

    #: The narrowest chunk :meth:`chunk` suggests.
    NARROWEST = 4
    #: Chunks are at least this many times the recent mean steps per particle.
    MARGIN = 2.0

    def __init__(self, width: int) -> None:
        self.width = int(width)
        self._slots: list[tuple[np.ndarray, np.ndarray, np.ndarray]] = []
        self._recent = float(width)  # mean steps per particle of the last call

    def chunk(self) -> int:
        """Steps per particle for the next call: the smallest power of two at least :data:`MARGIN` times the
        recent mean (so that most particles finish in one call), between :data:`NARROWEST` and ``width``."""
        w = self.NARROWEST
        while w < self.MARGIN * self._recent and w < self.width:
            w *= 2
        return min(w, self.width)

    def note(self, counts: np.ndarray, width: int) -> None:
        """Remember the steps the particles of a call took (``counts``); a call whose particles mostly used
        the whole ``width`` suggests the full width next."""
        if len(counts):
            mean = float(counts.sum()) / len(counts)
            self._recent = mean if mean < 0.75 * width else float(self.width)

    def take(self, n: int, slot: int = 0, width: int | None = None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Buffers for ``n`` particles of ``width`` records each (default the full width) in ``slot`` (each
        slot its own memory, kept for later calls)."""
        w = self.width if width is None else min(int(width), self.width)
        while len(self._slots) <= slot:
            self._slots.append((np.empty(0), np.empty(0), np.empty(0)))
        x, t, v = self._slots[slot]
        if t.size < w * n:
            x, t, v = self._slots[slot] = np.empty(w * n * 3), np.empty(w * n), np.empty(w * n * 3)
        # contiguous views of the first w * n entries: one compiled layout whatever n
        return x[: w * n * 3].reshape(n, w, 3), t[: w * n].reshape(n, w), v[: w * n * 3].reshape(n, w, 3)


_NO_RECORDS = np.empty((0, 0, 3)), np.empty((0, 0)), np.empty((0, 0, 3))  # nothing recorded


#: Compacted records of at least this many bytes per array come from the caller's pool (smaller ones from
#: ``np.empty``: the allocator recycles small blocks itself); up to :data:`RECORDS_KEPT` buffers per array.
RECORDS_POOLED = 1 << 16
RECORDS_KEPT = 64


def advance_particles(rows, x, t, v, h, cell, status, dt, signs, t_end, step, max_steps, mesh, field, params,
                      integrator="rk4", buffers=None, slot=None, note=True, pool=None):
    """Advance particles ``rows`` of the state arrays (``x``, ``t``, ``v``, ``h``, ``cell``, ``status``, ``dt``,
    ``signs``: one row per particle, updated in place, no copies) by up to ``max_steps`` steps.

    ``dt`` holds each particle's suggested next step for the adaptive scheme.
    With ``buffers`` (a :class:`RecordBuffers` at least ``max_steps`` wide) every accepted step is recorded;
    returns ``(which, x, t, v)``: the records, flat, particle by particle, each particle's in time order
    (``which``: their rows of the state arrays), arrays of the caller's own. With a ``slot`` as well, the
    records stay where the engine wrote them, in that slot of the buffers: returns ``(rows, counts, x, t,
    v)``, the ``counts[i]`` records of particle ``rows[i]`` in row ``i`` of ``x`` ``(n, max_steps, 3)``, ``t``
    and ``v`` (views, valid until the slot is taken again). Without buffers, returns ``None``. ``note``: whether
    the steps of this call inform the buffers' next :meth:`RecordBuffers.chunk`. ``pool``: a
    :class:`vtkflow.reuse.OutputPool` that lends the compacted records memory of earlier ones that nothing
    refers to any more (a pathline history drops its chunks when it joins them; fresh memory costs a page
    fault per 4 KiB page, on the transient benchmark 7.7 ms of a 56 ms run against 2-3 ms reused).
    """
    rows = np.ascontiguousarray(rows, dtype=np.int64)
    n = len(rows)
    rec = _NO_RECORDS if buffers is None else buffers.take(n, slot or 0, max_steps)
    counts = np.zeros(n, np.int64)
    values, t0, t1, frozen, time, floor, cubic = field
    values_at = (values, float(t0), float(t1), float(time), float(floor))
    _advance_many(rows, x, t, v, h, cell, status, dt, signs, float(t_end), float(step), int(max_steps), mesh, values_at,
                  ON if frozen else OFF, ON if cubic else OFF, params, TABLEAUS[integrator], *rec, counts,
                  get_num_threads())
    if buffers is None:
        return None
    if note:
        buffers.note(counts, max_steps)
    if slot is not None:
        return (rows, counts, *rec)
    first = np.zeros(n + 1, np.int64)
    np.cumsum(counts, out=first[1:])
    total = int(first[-1])
    shapes = (("which", total, np.int64), ("x", (total, 3), np.float64), ("t", total, np.float64),
              ("v", (total, 3), np.float64))
    if pool is not None and 8 * total >= RECORDS_POOLED:
        out = tuple(pool.empty("records." + k, s, d, keep=RECORDS_KEPT) for k, s, d in shapes)
    else:
        out = tuple(np.empty(s, d) for _, s, d in shapes)
    _compact(*rec, counts, rows, first, *out)
    return out
