"""The four line kinds against closed-form solutions and SciPy's ODE solver.

Each check states its source and its tolerance: tolerances are set by the error the method is known to
make (linear interpolation in time between snapshots, linear/trilinear interpolation in space inside
cells), expressed against the snapshot spacing ``dt`` or the cell size ``h``.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from flows import (
    abc,
    box_mesh,
    distance_to_polyline,
    helix,
    lamb_oseen,
    lamb_oseen_omega,
    last_frame,
    oscillating,
    polylines_of,
    run_case,
)

# ----------------------------------------------------------------------------------- unsteady, closed form
U, V, OMEGA = 1.0, 0.5, 2.5
DT_SNAP = 0.05
T_END = 2.0
H = 0.1  # hexahedron edge of the box mesh below (the tetrahedra split these cubes)
RELEASE = np.array([[0.3, -0.3 + 0.2 * i, 0.0] for i in range(4)])
# Linear interpolation of sin(omega t) between snapshots errs by at most V omega^2 dt^2 / 8 (the
# interpolation error bound max|f''| dt^2 / 8, Burden & Faires, Numerical Analysis, thm 3.3); a particle
# integrates that velocity error over at most T_END. The field is uniform in space, so the spatial
# interpolation and RK4 (exact for velocity piecewise linear in time) add only round-off.
TOL_TIME = T_END * V * OMEGA**2 * DT_SNAP**2 / 8 + 1e-9


@pytest.fixture(scope="module")
def oscillating_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("oscillating")
    mesh = box_mesh((0, -1, -0.5), (3, 1, 0.5), (30, 20, 10), "tetra")
    pts = ", ".join(f"[{x}, {y}, {z}]" for x, y, z in RELEASE)
    body = f"""
releases:
  r1: {{points: [{pts}]}}
  seed: {{points: [[0.3, -0.3, 0.0]]}}
lines:
  paths:  {{kind: pathline,   release: r1, start: 0.0, stop: {T_END}}}
  smoke:  {{kind: streakline, release: r1, start: 0.0, stop: {T_END}, every: 0.1}}
  marks:  {{kind: timeline,   release: r1, start: 0.0, stop: {T_END}, every: 0.5}}
  inst:   {{kind: streamline, release: seed, direction: both, frames: [1.0, {T_END}]}}
"""
    times = np.round(np.arange(0.0, T_END + DT_SNAP / 2, DT_SNAP), 12)
    return run_case(folder, mesh, oscillating(U, V, OMEGA), times, body)


def _exact(frame):
    pid = np.asarray(frame.point_data["particle_id"])
    p0 = RELEASE[pid % len(RELEASE)]
    tau = np.asarray(frame.point_data["release_time"])
    t = np.asarray(frame.point_data["time"])
    out = p0.copy()
    out[:, 0] += U * (t - tau)
    out[:, 1] += V / OMEGA * (np.cos(OMEGA * tau) - np.cos(OMEGA * t))
    return out


@pytest.mark.parametrize("entry", ["paths", "smoke", "marks"])
def test_particle_lines_match_closed_form(oscillating_run, entry, accuracy):
    manifest, out = oscillating_run
    frame = last_frame(out, manifest, entry)
    assert frame.field_data["time"][0] == pytest.approx(T_END)
    err = np.abs(frame.points - _exact(frame)).max()
    accuracy(f"oscillating uniform flow, {entry} ({manifest['entries'][entry]['kind']})", err, TOL_TIME, "h = 0.1")
    assert err <= TOL_TIME, f"{entry}: error {err:.2e} > {TOL_TIME:.2e} ({err / H:.1e} cells)"


def test_streakline_and_timeline_layout(oscillating_run):
    manifest, out = oscillating_run
    smoke = last_frame(out, manifest, "smoke")
    lines = polylines_of(smoke)
    assert len(lines) == len(RELEASE)  # one polyline per release point
    n_instants = 21  # 0, 0.1, ..., 2.0
    for i, line in enumerate(lines):
        pid = smoke.point_data["particle_id"][line]
        assert np.all(pid % len(RELEASE) == i)
        assert np.all(np.diff(pid // len(RELEASE)) == 1)  # oldest first, the one released at T_END included
        assert len(line) == n_instants
    marks = last_frame(out, manifest, "marks")
    mlines = polylines_of(marks)
    assert len(mlines) == 5  # release instants 0, 0.5, 1, 1.5, 2
    for k, line in enumerate(mlines):
        pid = marks.point_data["particle_id"][line]
        assert np.array_equal(pid, k * len(RELEASE) + np.arange(len(RELEASE)))  # release-point order
    # the timeline released at t0 is the release line carried along: a rigid translation here
    first = marks.points[mlines[0]]
    assert np.abs((first - first[0]) - (RELEASE - RELEASE[0])).max() < 1e-9


def test_pathline_frames_grow_from_release(oscillating_run):
    manifest, out = oscillating_run
    frames = manifest["entries"]["paths"]["frames"]
    assert len(frames) == 41 and frames[0]["time"] == 0.0 and frames[-1]["time"] == pytest.approx(T_END)
    import pyvista as pv

    first = pv.read(out / frames[0]["file"])
    assert first.n_points == len(RELEASE)  # one vertex per particle at its release frame
    np.testing.assert_allclose(first.points, RELEASE, atol=1e-12)
    last = last_frame(out, manifest, "paths")
    assert last.point_data["particle_id"].dtype == np.int64
    age = last.point_data["age"]
    np.testing.assert_allclose(age, last.point_data["time"] - last.point_data["release_time"], atol=1e-12)


def test_streamline_is_straight(oscillating_run, accuracy):
    manifest, out = oscillating_run
    frame = last_frame(out, manifest, "inst")
    d = np.array([U, V * np.sin(OMEGA * T_END), 0.0])
    d /= np.linalg.norm(d)
    rel = frame.points - np.array([0.3, -0.3, 0.0])
    # a frozen uniform field: the streamline is the straight line along u(T_END) (exact up to round-off)
    off = np.abs(np.cross(rel, d)).max()
    accuracy("oscillating uniform flow, streamline off its straight line", off, 1e-9, "round-off")
    assert off < 1e-9
    arc = frame.point_data["arc_length"]
    assert arc.min() < 0 < arc.max() and np.all(np.diff(arc) > 0)  # backward part reversed, then forward
    assert np.all(frame.point_data["release_point"] == 0)


def test_the_four_kinds_differ_in_unsteady_flow(oscillating_run):
    manifest, out = oscillating_run
    path = last_frame(out, manifest, "paths")
    smoke = last_frame(out, manifest, "smoke")
    inst = last_frame(out, manifest, "inst")
    marks = last_frame(out, manifest, "marks")
    p0 = path.points[polylines_of(path)[0]]
    s0 = smoke.points[polylines_of(smoke)[0]]
    stream = inst.points[polylines_of(inst)[0]]
    gap = 20 * TOL_TIME  # far above the integration error: a real difference of shape
    assert distance_to_polyline(s0, p0).max() > gap
    assert distance_to_polyline(p0, stream).max() > gap
    assert distance_to_polyline(s0, stream).max() > gap
    assert distance_to_polyline(marks.points[polylines_of(marks)[0]], p0).max() > gap


# ------------------------------------------------------------------------------------------ steady flows
@pytest.mark.parametrize("kind", ["tetra", "hexahedron"])
def test_steady_pathline_streakline_streamline_coincide(tmp_path, kind, accuracy):
    """In steady flow the three curves through one release point are the same curve (common practice).

    The helix field is linear in space, so every cell type interpolates it exactly; what remains is the
    RK4 error and the chord error of drawing the curved streamline as straight segments
    (sagitta = ds^2 kappa / 8 with ds <= step * h and curvature kappa = 1 here).
    """
    mesh = box_mesh((-1, -1, 0), (1, 1, 3), (10, 10, 15), kind)
    body = """
releases:
  p: {points: [[0.5, 0.0, 0.2]]}
lines:
  path:   {kind: pathline,   release: p, start: 0.0, stop: 4.0}
  streak: {kind: streakline, release: p, start: 0.0, stop: 4.0, every: 0.1}
  stream: {kind: streamline, release: p, direction: forward}
"""
    manifest, out = run_case(tmp_path, mesh, helix(1.0, 0.5), [0.0, 2.0, 4.0], body)
    path = last_frame(out, manifest, "path").points
    streak = last_frame(out, manifest, "streak").points
    stream = last_frame(out, manifest, "stream").points
    h = 0.2
    sagitta = (0.25 * h) ** 2 / 8
    tol = 2 * sagitta + 1e-6
    gap = max(distance_to_polyline(streak, stream).max(), distance_to_polyline(path, stream).max())
    accuracy(f"steady helix ({kind}), path/streak off the streamline", gap, tol, "h = 0.2")
    assert distance_to_polyline(streak, stream).max() < tol
    assert distance_to_polyline(path, stream).max() < tol
    # and all three lie on the exact helix through the release point: radius 0.5, z = 0.2 + 0.5 * angle
    for pts in (path, streak):
        r = np.hypot(pts[:, 0], pts[:, 1])
        assert np.abs(r - 0.5).max() < 1e-6
    # streakline end = pathline end: the oldest streak particle is the pathline particle
    np.testing.assert_allclose(streak[0], path[-1], atol=1e-9)


@pytest.mark.parametrize("kind", ["tetra", "hexahedron"])
def test_abc_flow_against_solve_ivp(tmp_path, kind, accuracy):
    """ABC flow (Dombre et al. 1986, J. Fluid Mech. 167) pathlines against SciPy's DOP853 on the analytic field.

    Tolerance: linear/trilinear interpolation in a cell of size h errs by at most about |u''| h^2 / 8 in
    velocity (|u''| <= A + C < 2.8 for this flow), integrated over T = 0.25: 2.8 * 0.1^2 / 8 * 0.25 = 8.8e-4,
    rounded up to 0.01 h = 1e-3. (T keeps every particle inside the box: speeds are at most about 3.5.)
    """
    flow = abc()
    mesh = box_mesh((0, 0, 0), (2, 2, 2), (20, 20, 20), kind)
    seeds = np.array([[0.8, 0.9, 1.0], [1.1, 1.0, 0.9], [1.0, 1.2, 1.1], [0.9, 1.1, 0.8]])
    pts = ", ".join(f"[{x}, {y}, {z}]" for x, y, z in seeds)
    T = 0.25
    body = f"""
releases:
  s: {{points: [{pts}]}}
lines:
  p: {{kind: pathline, release: s, start: 0.0, stop: {T}}}
"""
    manifest, out = run_case(tmp_path, mesh, flow, [0.0, T], body)
    frame = last_frame(out, manifest, "p")
    ends = np.array([frame.points[line[-1]] for line in polylines_of(frame)])
    ref = np.array([
        solve_ivp(lambda t, x: flow(x[None, :], t)[0], (0, T), s, method="DOP853", rtol=1e-12, atol=1e-12).y[:, -1]
        for s in seeds
    ])
    err = np.linalg.norm(ends - ref, axis=1).max()
    accuracy(f"ABC flow ({kind}) vs solve_ivp DOP853, T = 0.25", err, 0.01 * 0.1, "h = 0.1")
    assert err < 0.01 * 0.1, f"{kind}: end-point error {err:.2e} ({err / 0.1:.1e} cells)"


def test_abc_error_falls_with_cell_size(tmp_path, accuracy):
    """Second-order convergence of trilinear interpolation: halving h divides the error by about 4
    (interpolation error O(h^2), e.g. Burden & Faires thm 3.3 per direction). Ratio >= 3 accepted."""
    flow = abc()
    seed = np.array([1.0, 1.0, 1.0])
    ref = solve_ivp(lambda t, x: flow(x[None, :], t)[0], (0, 0.25), seed, method="DOP853", rtol=1e-12, atol=1e-12).y[:, -1]
    errs = []
    for n in (8, 16):
        body = "releases:\n  s: {points: [[1.0, 1.0, 1.0]]}\nlines:\n  p: {kind: pathline, release: s, start: 0.0, stop: 0.25, step: 0.1}\n"
        manifest, out = run_case(tmp_path / f"n{n}", box_mesh((0, 0, 0), (2, 2, 2), (n, n, n), "hexahedron"), flow, [0.0, 0.25], body)
        frame = last_frame(out, manifest, "p")
        errs.append(np.linalg.norm(frame.points[-1] - ref))
    accuracy("ABC flow (hexahedra) error at h = 0.25", errs[0], np.inf, "convergence")
    accuracy("ABC flow (hexahedra) error at h = 0.125", errs[1], errs[0] / 3.0, f"ratio {errs[0] / errs[1]:.2f} (>= 3)")
    assert errs[0] / errs[1] > 3.0, errs


def test_lamb_oseen_pathlines_are_circles(tmp_path, accuracy):
    """A steady Lamb–Oseen vortex (Lamb 1932, Hydrodynamics §334a) moves particles on circles at the
    angular rate u_theta(r)/r.

    Tolerance, on the radius and on the distance along the circle: the linear-interpolation error bound
    max|u''| h^2 / 8 (h = 0.08, the cube edge of the tetrahedra; max|u''| from the closed form)
    integrated over T = 2 gives about 0.02 (a quarter cell).
    """
    gamma, rc = 1.0, 0.25
    mesh = box_mesh((-1, -1, 0), (1, 1, 0.32), (25, 25, 4), "tetra")
    radii = np.array([0.3, 0.5, 0.7])
    pts = ", ".join(f"[{r}, 0.0, 0.16]" for r in radii)
    T = 2.0
    body = f"releases:\n  s: {{points: [{pts}]}}\nlines:\n  p: {{kind: pathline, release: s, start: 0.0, stop: {T}}}\n"
    manifest, out = run_case(tmp_path, mesh, lamb_oseen(gamma, rc), [0.0, T], body)
    frame = last_frame(out, manifest, "p")
    r = np.linspace(1e-3, 1.5, 200_001)
    u = gamma / (2 * np.pi * r) * (1 - np.exp(-(r**2) / rc**2))
    tol = np.abs(np.gradient(np.gradient(u, r), r)).max() * 0.08**2 / 8 * T
    worst_r = worst_s = 0.0
    for i, line in enumerate(polylines_of(frame)):
        xy = frame.points[line][:, :2]
        radius = np.hypot(xy[:, 0], xy[:, 1])
        assert np.abs(radius - radii[i]).max() < tol, (radii[i], np.abs(radius - radii[i]).max(), tol)
        angle = np.unwrap(np.arctan2(xy[:, 1], xy[:, 0]))[-1]
        expected = lamb_oseen_omega(gamma, rc, radii[i]) * T
        worst_r = max(worst_r, np.abs(radius - radii[i]).max())
        worst_s = max(worst_s, abs(angle - expected) * radii[i])
        assert abs(angle - expected) * radii[i] < tol, (angle, expected, tol)
        assert expected * radii[i] > 10 * tol  # the particles travel far against the tolerance
    accuracy("Lamb-Oseen vortex, radius drift of pathlines", worst_r, tol, "h = 0.08")
    accuracy("Lamb-Oseen vortex, distance along the circle", worst_s, tol, "h = 0.08")


def test_cell_data_gives_the_same_lines_as_point_data(tmp_path, accuracy):
    """Cell-centred velocity, averaged onto points, gives pathlines within interpolation error of the
    point-data run: averaging cell centres onto a point errs by O(h^2) inside and O(h) on the boundary;
    the particles stay inside, so the gap is bounded by about |u''| h^2 T (0.02 h accepted, h = 0.1)."""
    flow = abc()
    mesh = box_mesh((0, 0, 0), (2, 2, 2), (20, 20, 20), "hexahedron")
    body = "releases:\n  s: {line: {start: [0.8, 0.9, 1.0], end: [1.2, 1.1, 1.0], count: 5}}\nlines:\n  p: {kind: pathline, release: s, start: 0.0, stop: 0.25}\n"
    m_point, out_point = run_case(tmp_path / "point", mesh, flow, [0.0, 0.25], body, association="point")
    m_cell, out_cell = run_case(tmp_path / "cell", mesh, flow, [0.0, 0.25], body, association="cell")
    a = last_frame(out_point, m_point, "p")
    b = last_frame(out_cell, m_cell, "p")
    ends_a = np.array([a.points[line[-1]] for line in polylines_of(a)])
    ends_b = np.array([b.points[line[-1]] for line in polylines_of(b)])
    gap = np.linalg.norm(ends_a - ends_b, axis=1).max()
    accuracy("ABC flow, cell-centred vs point input (end points)", gap, 0.02 * 0.1, "h = 0.1")
    assert 0 < gap < 0.02 * 0.1, gap
