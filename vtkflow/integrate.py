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
frozen (the unit tangent ``sign * u / |u|`` at one time, integrated in arc length, for streamlines).
At most ``max_steps`` accepted steps are taken per call, recorded into per-particle buffers; the Python
wrapper calls again until every particle is done.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

from .kernels import BARY_TOL, _bary, _locate

__all__ = ["advance_particles", "ACTIVE", "EXITED", "STALLED", "NAN"]

# status values (the same as vtkflow.particles.Status)
ACTIVE, EXITED, STALLED, NAN = 0, 1, 2, 3
OUTSIDE = -1


@njit(cache=True, nogil=True)
def _sample(x, t, hint, mesh, field, sign, v_out, bary):
    """Velocity at (x, t) into ``v_out``; returns (tetrahedron or -1, local cell size, stop code)."""
    p0, tinv, nbr, conn, origin, spacing, dims, start, items = mesh
    values, t0, t1, frozen, time, floor = field
    cell = _locate(x, hint, p0, tinv, nbr, origin, spacing, dims, start, items, bary)
    if cell < 0:
        v_out[:] = 0.0
        return -1, 0.0, OUTSIDE
    tt = time if frozen else t
    a = 0.0
    if t1 != t0:
        a = min(max((tt - t0) / (t1 - t0), 0.0), 1.0)
    h = 0.0
    bad = False
    for c in range(3):
        u0 = 0.0
        u1 = 0.0
        for k in range(4):
            u0 += bary[k] * values[conn[cell, k], c]
            u1 += bary[k] * values[conn[cell, k], 3 + c]
        w = 0.0
        if a < 1.0:
            if not np.isfinite(u0):
                bad = True
            w += (1.0 - a) * u0
        if a > 0.0:
            if not np.isfinite(u1):
                bad = True
            w += a * u1
        v_out[c] = w
    for k in range(4):
        h += bary[k] * values[conn[cell, k], 6]
    if bad:
        v_out[:] = 0.0
        return cell, h, NAN
    if frozen:
        speed = np.sqrt(v_out[0] ** 2 + v_out[1] ** 2 + v_out[2] ** 2)
        if not speed > floor:
            v_out[:] = 0.0
            return cell, h, STALLED
        for c in range(3):
            v_out[c] = sign * v_out[c] / speed
    return cell, h, ACTIVE


@njit(cache=True, nogil=True)
def _ray_exit(x, d, cell, mesh, bary):
    """Distance along the unit direction ``d`` from ``x`` (in tetrahedron ``cell``) to the boundary, by
    traversing tetrahedra along the ray; -1.0 if no boundary face is met within MAX_RAY tetrahedra."""
    p0, tinv, nbr, conn, origin, spacing, dims, start, items = mesh
    s_done = 0.0
    t = cell
    for _ in range(100_000):
        _bary(x, t, p0, tinv, bary)
        # rate of change of each barycentric coordinate along d
        r = np.empty(4)
        r[1] = tinv[t, 0, 0] * d[0] + tinv[t, 0, 1] * d[1] + tinv[t, 0, 2] * d[2]
        r[2] = tinv[t, 1, 0] * d[0] + tinv[t, 1, 1] * d[1] + tinv[t, 1, 2] * d[2]
        r[3] = tinv[t, 2, 0] * d[0] + tinv[t, 2, 1] * d[1] + tinv[t, 2, 2] * d[2]
        r[0] = -(r[1] + r[2] + r[3])
        best, f = np.inf, -1
        for k in range(4):
            if r[k] < 0.0:
                s = -max(bary[k], 0.0) / r[k]
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
        x = x + best * d
    return -1.0


@njit(cache=True, nogil=True)
def _advance_one(i, X, T, V, H, C, S, sign, t_end, step, max_steps, mesh, field, params, rec_x, rec_t, rec_v):
    min_step, max_growth = params
    x = X[i].copy()
    t = T[i]
    v = V[i].copy()
    h = H[i]
    cell = C[i]
    cap = np.inf
    n = 0
    k2 = np.empty(3)
    k3 = np.empty(3)
    k4 = np.empty(3)
    kn = np.empty(3)
    y = np.empty(3)
    bary = np.empty(4)
    if cell < 0:  # no hint yet (just released): locate through the bins
        p0, tinv, nbr, conn, origin, spacing, dims, start, items = mesh
        cell = _locate(x, -1, p0, tinv, nbr, origin, spacing, dims, start, items, bary)
        if cell < 0:
            S[i] = EXITED
            C[i] = cell
            return 0
    guard = 0
    while n < max_steps and S[i] == ACTIVE and t < t_end:
        guard += 1
        if guard > 64 * max_steps + 1000:
            break  # no progress: leave it to the caller's guard
        speed = np.sqrt(v[0] ** 2 + v[1] ** 2 + v[2] ** 2)
        dt = step * h / speed if speed > 0.0 else np.inf
        dt = min(dt, cap)
        last = dt >= t_end - t
        if last:
            dt = t_end - t
        for c in range(3):
            y[c] = x[c] + 0.5 * dt * v[c]
        c2, h2, s2 = _sample(y, t + 0.5 * dt, cell, mesh, field, sign, k2, bary)
        c3, c4, s3, s4 = -1, -1, OUTSIDE, OUTSIDE
        if c2 >= 0:
            for c in range(3):
                y[c] = x[c] + 0.5 * dt * k2[c]
            c3, h3, s3 = _sample(y, t + 0.5 * dt, c2, mesh, field, sign, k3, bary)
            if c3 >= 0:
                for c in range(3):
                    y[c] = x[c] + dt * k3[c]
                c4, h4, s4 = _sample(y, t + dt, c3, mesh, field, sign, k4, bary)
        inside = c2 >= 0 and c3 >= 0 and c4 >= 0
        xn = np.empty(3)
        cn, hn, sn = -1, 0.0, OUTSIDE
        tn = t_end if last else t + dt
        if inside:
            for c in range(3):
                xn[c] = x[c] + dt / 6.0 * (v[c] + 2.0 * k2[c] + 2.0 * k3[c] + k4[c])
            cn, hn, sn = _sample(xn, tn, c4, mesh, field, sign, kn, bary)
            inside = cn >= 0
        vmax = speed
        for kv in (k2, k3, k4):
            vmax = max(vmax, np.sqrt(kv[0] ** 2 + kv[1] ** 2 + kv[2] ** 2))
        if not inside:
            if dt * vmax <= min_step * h:
                # to the boundary along the mean velocity of the stages that stayed inside
                wsum = 1.0
                mean = v.copy()
                if c2 >= 0:
                    mean += 2.0 * k2
                    wsum += 2.0
                    if c3 >= 0:
                        mean += 2.0 * k3
                        wsum += 2.0
                        if c4 >= 0:
                            mean += k4
                            wsum += 1.0
                mean /= wsum
                ms = np.sqrt(mean[0] ** 2 + mean[1] ** 2 + mean[2] ** 2)
                if ms > 0.0:
                    d = mean / ms
                    dist = _ray_exit(x, d, cell, mesh, bary)
                    if dist > 0.0:
                        x = x + dist * d
                        t = min(t + dist / ms, t_end)
                        rec_x[i, n] = x
                        rec_t[i, n] = t
                        rec_v[i, n] = v
                        n += 1
                S[i] = EXITED
                break
            cap = 0.5 * dt
            continue
        if dt * vmax > max_growth * step * h:
            cap = step * h / vmax
            continue
        stage_stop = max(max(s2, s3), s4)
        if stage_stop > 0:
            S[i] = stage_stop
            break
        x = xn
        t = tn
        v[:] = kn
        h = hn
        cell = cn
        cap = np.inf
        rec_x[i, n] = x
        rec_t[i, n] = t
        rec_v[i, n] = v
        n += 1
        if sn > 0:
            S[i] = sn
    X[i] = x
    T[i] = t
    V[i] = v
    H[i] = h
    C[i] = cell
    return n


@njit(cache=True, parallel=True)
def _advance_many(rows, X, T, V, H, C, S, signs, t_end, step, max_steps, mesh, field, params, rec_x, rec_t, rec_v, counts):
    for j in prange(rows.shape[0]):
        counts[j] = _advance_one(
            j, X, T, V, H, C, S, signs[j], t_end, step, max_steps, mesh, field, params, rec_x, rec_t, rec_v
        )


def advance_particles(x, t, v, h, cell, status, signs, t_end, step, max_steps, mesh, field, params):
    """Advance the given particles (rows of the arrays, updated in place) by up to ``max_steps`` steps.

    Returns the recorded vertices: ``rec_x (N, max_steps, 3)``, ``rec_t (N, max_steps)``,
    ``rec_v (N, max_steps, 3)`` and ``counts (N,)`` (valid entries per row).
    """
    n = len(t)
    rec_x = np.empty((n, max_steps, 3))
    rec_t = np.empty((n, max_steps))
    rec_v = np.empty((n, max_steps, 3))
    counts = np.zeros(n, np.int64)
    rows = np.arange(n)
    _advance_many(rows, x, t, v, h, cell, status, signs, float(t_end), float(step), int(max_steps), mesh, field,
                  params, rec_x, rec_t, rec_v, counts)
    return rec_x, rec_t, rec_v, counts


__all__ += ["BARY_TOL"]
