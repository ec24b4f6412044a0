"""RK4 and the adaptive Dormand–Prince 5(4) scheme against exact solutions and SciPy's solve_ivp.

Errors are reported per unit time and relative to the cell size h, in the accuracy table that
`make test` prints.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from flows import abc, box_mesh, helix
from vtkflow.mesh import Mesh
from vtkflow.particles import State, Status, TimeField, advance, place

CONFIGS = [("rk4", None, 0.25), ("dopri5", 1e-2, 4.0), ("dopri5", 1e-6, 4.0)]


def run(mesh: Mesh, flow, times, x0, integrator, tolerance, step):
    """Particles from ``x0`` at times[0], advanced interval by interval through snapshots of ``flow``."""
    field = TimeField(mesh)
    s = State.empty(len(x0))
    steps = [0]
    for k in range(len(times) - 1):
        field.load(times[k], flow(mesh.points, times[k]), times[k + 1], flow(mesh.points, times[k + 1]))
        if k == 0:
            place(s, np.arange(len(x0)), x0, np.full(len(x0), times[0]), field)
        advance(s, times[k + 1], field, step, record=lambda i, x, t, v: steps.__setitem__(0, steps[0] + len(i)),
                integrator=integrator, tolerance=tolerance)
    assert np.all(s.status == Status.active)
    return s.x, steps[0]


def reference(flow, x0, t0, t1):
    """SciPy's DOP853 on the analytic field, rtol = atol = 1e-12 (far below every tolerance here)."""
    return np.array([solve_ivp(lambda t, x: flow(x[None, :], t)[0], (t0, t1), p, method="DOP853",
                               rtol=1e-12, atol=1e-12).y[:, -1] for p in x0])


def test_adaptive_error_follows_the_tolerance(accuracy):
    """Solid-body rotation with axial flow (linear in space, so interpolation is exact and only the
    integrator errs): the exact path is a helix. The local error per step is held below the tolerance, so
    the global error stays below tolerance x steps (error accumulation bound, e.g. Hairer, Nørsett &
    Wanner 1993, thm II.3.4) and falls as the tolerance tightens."""
    mesh = Mesh(box_mesh((-1, -1, 0), (1, 1, 2), (10, 10, 10), "tetra"))
    x0 = np.array([[0.8, 0.0, 0.1], [0.5, 0.1, 0.2], [0.0, 0.7, 0.3]])
    r, phase = np.hypot(x0[:, 0], x0[:, 1]), np.arctan2(x0[:, 1], x0[:, 0]) + 2.0
    exact = np.c_[r * np.cos(phase), r * np.sin(phase), x0[:, 2] + 0.1]
    errors = []
    for tol in (1e-2, 1e-4, 1e-6, 1e-8):
        x, steps = run(mesh, helix(2.0, 0.1), [0.0, 1.0], x0, "dopri5", tol, 8.0)
        err = np.abs(x - exact).max()
        accuracy(f"helix, dopri5 tolerance {tol:g}: global error", err, tol * steps, f"{steps} steps")
        assert err < tol * steps
        errors.append(err)
    assert all(b < a / 10 for a, b in zip(errors, errors[1:])), errors


@pytest.mark.parametrize("integrator, tolerance, step", CONFIGS)
def test_steady_abc_against_solve_ivp(integrator, tolerance, step, accuracy):
    """ABC flow (Dombre et al. 1986, J. Fluid Mech. 167) on tetrahedra, h = 0.1, T = 0.25. Bound: the
    interpolation error |u''| h^2 / 8 T (|u''| < 2.8) plus the scheme's own (for dopri5, tolerance per
    step times the steps taken)."""
    flow = abc()
    mesh = Mesh(box_mesh((0, 0, 0), (2, 2, 2), (20, 20, 20), "tetra"))
    x0 = np.array([[0.8, 0.9, 1.0], [1.1, 1.0, 0.9], [1.0, 1.2, 1.1], [0.9, 1.1, 0.8]])
    T, h = 0.25, 0.1
    x, steps = run(mesh, flow, [0.0, T], x0, integrator, tolerance, step)
    err = np.linalg.norm(x - reference(flow, x0, 0.0, T), axis=1).max()
    bound = 2.8 * h**2 / 8 * T + (tolerance or 0.0) * steps / len(x0)
    accuracy(f"ABC, {integrator} {tolerance or ''}: error per unit time / h", err / T / h, bound / T / h, f"{steps} steps")
    assert err < bound


@pytest.mark.parametrize("integrator, tolerance, step", CONFIGS)
def test_unsteady_taylor_green_against_solve_ivp(integrator, tolerance, step, accuracy):
    """Decaying Taylor–Green vortex (Taylor & Green 1937, Proc. R. Soc. A 158): u = (sin x cos y,
    -cos x sin y, 0) exp(-2 nu t), nu = 0.5, sampled every 0.1 on tetrahedra (h = pi/24), T = 1.
    Bound: space |u''| h^2 / 8 T (|u''| <= 2) plus time (linear interpolation of exp(-t) between
    snapshots: dt^2 / 8 max|f''| |u| <= 0.01 / 8) T, plus the scheme's own as above."""

    def flow(x, t):
        e = np.exp(-t)
        return np.stack([np.sin(x[:, 0]) * np.cos(x[:, 1]) * e, -np.cos(x[:, 0]) * np.sin(x[:, 1]) * e,
                         np.zeros(len(x))], axis=1)

    h = np.pi / 24
    mesh = Mesh(box_mesh((0, 0, 0), (np.pi, np.pi, 0.4), (24, 24, 3), "tetra"))
    x0 = np.array([[1.0, 1.2, 0.2], [2.0, 0.8, 0.2], [1.5, 2.2, 0.1], [0.6, 0.6, 0.3]])
    times = np.round(np.arange(0.0, 1.0001, 0.1), 12)
    x, steps = run(mesh, flow, times, x0, integrator, tolerance, step)
    err = np.linalg.norm(x - reference(flow, x0, 0.0, 1.0), axis=1).max()
    bound = 2.0 * h**2 / 8 + 0.01 / 8 + (tolerance or 0.0) * steps / len(x0)
    accuracy(f"Taylor-Green, {integrator} {tolerance or ''}: error per unit time / h", err / h, bound / h, f"{steps} steps")
    assert err < bound

