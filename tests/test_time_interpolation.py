"""Cubic Hermite interpolation in time between snapshots, against linear and against closed forms.

Sources: cubic Hermite interpolation and its error (Burden & Faires, Numerical Analysis, sections 3.1 and
3.4): with slopes from the three-point formulas (second order; Fornberg 1988, Math. Comp. 51) it
reproduces fields quadratic in time exactly; linear interpolation errs by up to max|u''| dt^2 / 8. The
oscillating flow u = (U, V sin(omega t), 0) has a closed-form pathline (tests/flows.py, ``oscillating``).
"""

from __future__ import annotations

import numpy as np
import pytest

import vtkflow
from flows import box_mesh, oscillating, oscillating_position, write_series
from vtkflow.particles import State, TimeField, advance, place, time_slopes


def quadratic_in_time(x: np.ndarray, t: float) -> np.ndarray:
    """A uniform velocity, quadratic in time (this test's choice)."""
    out = np.zeros_like(x)
    out[:, 0] = 0.4 + 0.3 * t - 0.2 * t * t
    out[:, 1] = 0.1 - 0.25 * t * t
    out[:, 2] = 0.05 * t
    return out


def quadratic_position(p0: np.ndarray, t: float) -> np.ndarray:
    return p0 + np.array([0.4 * t + 0.15 * t**2 - 0.2 * t**3 / 3, 0.1 * t - 0.25 * t**3 / 3, 0.025 * t * t])


def _series(tmp_path, flow, times, name="case"):
    write_series(box_mesh((-2, -2, -2), (2, 2, 2), (4, 4, 4)), flow, times, tmp_path / name)
    return vtkflow.Series.open(str(tmp_path / name / "*.vtu"), {"field": "time"}, "U")


def test_slopes_are_exact_for_quadratics_on_uneven_times():
    """The three-point slopes (centred inside, one-sided at both ends) of t^2 on uneven times: 2 t exactly."""
    times = np.array([0.0, 0.3, 0.5, 1.2, 1.25])
    snaps = {k: np.full((2, 3), t * t) for k, t in enumerate(times)}
    for k, t in enumerate(times):
        np.testing.assert_allclose(time_slopes(times, k, snaps.__getitem__), 2 * t, rtol=1e-12, atol=1e-12)


def test_cubic_is_exact_for_velocity_quadratic_in_time(tmp_path, accuracy):
    """Snapshots 0.5 apart of a velocity quadratic in time: the cubic pathline matches the closed form to
    round-off (RK4 integrates a cubic in time exactly); the linear one errs by the interpolation error."""
    series = _series(tmp_path, quadratic_in_time, [0.0, 0.5, 1.0, 1.5, 2.0])
    p0 = np.array([[-1.0, 0.5, -0.5]])
    exact = quadratic_position(p0[0], 2.0)
    err = {}
    for how in ("linear", "cubic"):
        frames = vtkflow.trace(series, "pathline", p0, time_interpolation=how)
        err[how] = np.linalg.norm(frames[-1][1].points[-1] - exact)
    accuracy("velocity quadratic in time, cubic in time (dt = 0.5)", err["cubic"], 1e-12,
             f"linear: {err['linear']:.2e}")
    assert err["cubic"] < 1e-12
    assert err["linear"] > 1e-3


def test_cubic_error_against_linear_on_oscillating_flow(tmp_path, accuracy):
    """u = (U, V sin(omega t), 0) saved every dt: the cubic pathline error is far below the linear one and
    falls faster with dt (third order at least: the slopes are second order; linear is second order)."""
    U, V, omega = 0.3, 0.4, 2.0
    flow = oscillating(U, V, omega)
    p0 = np.array([[-1.5, 0.0, 0.0]])
    errs = {"linear": [], "cubic": []}
    for n in (16, 32):  # dt = 0.25, 0.125: omega dt <= 0.5, the asymptotic range
        times = np.linspace(0.0, 4.0, n + 1)
        series = _series(tmp_path, flow, times, f"case{n}")
        exact = oscillating_position(p0[0], 0.0, 4.0, U, V, omega)[0]
        for how in errs:
            frames = vtkflow.trace(series, "pathline", p0, time_interpolation=how, step=0.005)  # RK4 error far below
            errs[how].append(np.linalg.norm(frames[-1][1].points[-1] - exact))
    lin, cub = errs["linear"], errs["cubic"]
    accuracy("oscillating flow, dt = 0.25: cubic / linear pathline error", cub[0] / lin[0], 0.1,
             f"linear {lin[0]:.2e}, cubic {cub[0]:.2e}")
    accuracy("oscillating flow, cubic error ratio dt 0.25 -> 0.125", 1.0 / (cub[0] / cub[1]), 1.0 / 6.0,
             f"order {np.log2(cub[0] / cub[1]):.2f} (linear {np.log2(lin[0] / lin[1]):.2f})")
    assert cub[0] < 0.1 * lin[0]
    assert cub[0] / cub[1] > 6.0  # third order or better (linear: about 4)


@pytest.mark.parametrize("t_end", [0.37, 1.0])
def test_numba_engine_matches_numpy_twin_with_cubic_time(tmp_path, t_end):
    """The numba engine and its NumPy twin advance the same particles alike with cubic interpolation in
    time (1e-9: both RK4 with the same steps; round-off and step-bookkeeping differences only)."""
    series = _series(tmp_path, oscillating(0.3, 0.4, 2.0), [0.0, 0.5, 1.0, 1.5])
    times = series.times
    field = TimeField(series.mesh)
    field.load(times[1], series.velocity(1), times[2], series.velocity(2),
               time_slopes(times, 1, series.velocity), time_slopes(times, 2, series.velocity))
    pts = np.random.default_rng(5).uniform(-1.5, 0.0, (50, 3))
    ends = []
    for engine in ("numba", "numpy"):
        s = State.empty(len(pts))
        place(s, np.arange(len(pts)), pts, np.full(len(pts), times[1]), field)
        advance(s, times[1] + t_end * (times[2] - times[1]), field, 0.25, engine=engine)
        ends.append(s.x.copy())
    np.testing.assert_allclose(ends[0], ends[1], atol=1e-9)
