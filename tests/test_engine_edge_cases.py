"""Review tests: regressions of bugs found in review (each names the behaviour it holds) and edge cases.

Every check names its reference (closed form, SciPy's ``solve_ivp``, or the specification in the module
docstrings) and the reason for its tolerance. Meshes are small so that each test runs well under 2 s.
"""

from __future__ import annotations

import functools

import numpy as np
import pytest
import pyvista as pv
from scipy.integrate import solve_ivp

from flows import box_mesh, helix, oscillating, polylines_of, run_case, write_series
from vtkflow.mesh import Mesh
from vtkflow.particles import State, Status, TimeField, advance, place


# ------------------------------------------------------------------------------------------- helpers
def cell_mesh(low, high, cells, kind: str) -> pv.UnstructuredGrid:
    """A box filled with true VTK hexahedra (type 12), wedges (13: two per hexahedron) or pyramids (14: six
    per hexahedron, apex at its centre). ``flows.box_mesh(..., 'hexahedron')`` gives voxels (type 11)."""
    low, high, n = np.asarray(low, float), np.asarray(high, float), np.asarray(cells)
    axes = [np.linspace(low[i], high[i], n[i] + 1) for i in range(3)]
    pts = np.stack([a.ravel() for a in np.meshgrid(*axes, indexing="ij")], axis=1)

    def pid(i, j, k):
        return (i * (n[1] + 1) + j) * (n[2] + 1) + k

    i, j, k = (a.ravel() for a in np.meshgrid(*[np.arange(m) for m in n], indexing="ij"))
    hexa = np.stack([pid(i, j, k), pid(i + 1, j, k), pid(i + 1, j + 1, k), pid(i, j + 1, k),
                     pid(i, j, k + 1), pid(i + 1, j, k + 1), pid(i + 1, j + 1, k + 1), pid(i, j + 1, k + 1)], axis=1)
    if kind == "hexahedron":
        conn, ctype = hexa, 12
    elif kind == "wedge":
        conn, ctype = np.concatenate([hexa[:, [0, 1, 3, 4, 5, 7]], hexa[:, [1, 2, 3, 5, 6, 7]]]), 13
    elif kind == "pyramid":
        apex = len(pts) + np.arange(len(hexa))
        pts = np.concatenate([pts, pts[hexa].mean(axis=1)])
        faces = [[0, 3, 2, 1], [4, 5, 6, 7], [0, 1, 5, 4], [1, 2, 6, 5], [2, 3, 7, 6], [3, 0, 4, 7]]
        conn, ctype = np.concatenate([np.column_stack([hexa[:, f], apex]) for f in faces]), 14
    else:
        raise ValueError(kind)
    cells_arr = np.column_stack([np.full(len(conn), conn.shape[1]), conn]).ravel()
    return pv.UnstructuredGrid(cells_arr, np.full(len(conn), ctype, np.uint8), pts)


def loaded(mesh: Mesh, u0, u1, t0=0.0, t1=1.0) -> TimeField:
    f = TimeField(mesh)
    a = np.ascontiguousarray(np.broadcast_to(np.asarray(u0, float), (mesh.n_points, 3)))
    b = np.ascontiguousarray(np.broadcast_to(np.asarray(u1, float), (mesh.n_points, 3)))
    f.load(t0, a, t1, b)
    return f


def released(field: TimeField, x0, t0=0.0) -> State:
    x0 = np.atleast_2d(np.asarray(x0, float))
    s = State.empty(len(x0))
    place(s, np.arange(len(x0)), x0, np.full(len(x0), float(t0)), field)
    return s


@pytest.fixture(scope="module")
def cube() -> Mesh:
    return Mesh(box_mesh((0, 0, 0), (1, 1, 1), (5, 5, 5), "tetra"))


# =============================================================================================== bugs
def test_zero_weight_snapshot_nan_does_not_reach_the_velocity(cube):
    """At t = t0 the later snapshot has weight 0, so u(x, t0) = u0(x) exactly (linear interpolation in
    time, the module docstring's formula); likewise u(x, t1) = u1(x). Exact: a weight of 0 or 1."""
    u0 = np.tile([1.0, 0.0, 0.0], (cube.n_points, 1))
    u1 = np.full_like(u0, np.nan)
    f = TimeField(cube)
    f.load(0.0, u0, 1.0, u1)
    got = f(np.array([[0.5, 0.5, 0.5]]), np.array([0.0]))
    assert got.stop[0] == 0
    np.testing.assert_array_equal(got.v, [[1.0, 0.0, 0.0]])
    f.load(0.0, u1, 1.0, u0)
    got = f(np.array([[0.5, 0.5, 0.5]]), np.array([1.0]))
    np.testing.assert_array_equal(got.v, [[1.0, 0.0, 0.0]])


def _nan_before_t1(x: np.ndarray, t: float) -> np.ndarray:
    """u = (0.5, 0, 0) everywhere, except NaN for x < 0.5 in the snapshot at t = 0 (a region not yet
    defined there)."""
    u = np.zeros_like(x)
    u[:, 0] = 0.5
    if t == 0.0:
        u[x[:, 0] < 0.5] = np.nan
    return u


# the NaN velocity the bug writes makes VTK's XML reader complain about the array's L2_NORM_RANGE key
@pytest.mark.filterwarnings("ignore:The VTK reader")
def test_streamline_at_a_snapshot_ignores_nan_in_the_previous_snapshot(tmp_path):
    """At t = 1 the field is the uniform (0.5, 0, 0) of the snapshot at t = 1: the streamline from
    (0.3, 0.5, 0.5) is the straight segment to the face x = 1 (exact; 1e-9 for the bisection)."""
    mesh = box_mesh((0, 0, 0), (1, 1, 1), (5, 5, 5), "tetra")
    body = "releases:\n  r: {points: [[0.3, 0.5, 0.5]]}\nlines:\n  s: {kind: streamline, release: r}\n"
    manifest, out = run_case(tmp_path, mesh, _nan_before_t1, [0.0, 1.0], body)
    frames = manifest["entries"]["s"]["frames"]
    assert frames[-1]["time"] == 1.0
    line = pv.read(out / frames[-1]["file"])
    assert np.all(line.point_data["status"] == Status.exited)
    assert line.points[:, 0].max() == pytest.approx(1.0, abs=1e-9)
    assert np.all(np.isfinite(line.point_data["velocity"]))


def test_release_at_a_snapshot_ignores_nan_in_the_previous_snapshot(tmp_path, monkeypatch):
    """Released at t = 1 in the uniform (0.5, 0, 0) of the snapshots at t = 1 and 2, the particle is at
    x = 0.3 + 0.5 * 1 = 0.8 at t = 2 (exact kinematics; RK4 is exact for a constant velocity: 1e-9).
    ``advance`` is capped at 200 iterations here (the test needs about 20) so the failure is fast."""
    import vtkflow.lines as lines

    monkeypatch.setattr(lines, "advance", functools.partial(advance, max_iterations=200))
    mesh = box_mesh((0, 0, 0), (1, 1, 1), (5, 5, 5), "tetra")
    body = "releases:\n  r: {points: [[0.3, 0.5, 0.5]]}\nlines:\n  p: {kind: pathline, release: r, start: 1.0}\n"
    manifest, out = run_case(tmp_path, mesh, _nan_before_t1, [0.0, 1.0, 2.0], body)
    frame = pv.read(out / manifest["entries"]["p"]["frames"][-1]["file"])
    assert frame.point_data["status"][-1] == Status.active
    np.testing.assert_allclose(frame.points[-1], [0.8, 0.5, 0.5], atol=1e-9)


@pytest.mark.parametrize("u_start", [0.0, 1e-6])
@pytest.mark.parametrize("x0", [0.7, 0.95])
def test_particle_starting_from_rest_exits_on_the_boundary(cube, u_start, x0):
    """u = (u_s + (1 - u_s) t, 0, 0) on [0, 1] (snapshots (u_s, 0, 0) and (1, 0, 0)): x(t) = x0 + u_s t +
    (1 - u_s) t^2 / 2 (direct integration), so the particle reaches the face x = 1 at the root t* < 1 and
    must stop there, at t*. Tolerance 1e-6: RK4 is exact for this quadratic path; what is left is the exit
    bisection (1e-9) and the straight-line exit time over the last step of at most 1e-3 cells."""
    f = loaded(cube, [u_start, 0.0, 0.0], [1.0, 0.0, 0.0])
    s = released(f, [[x0, 0.5, 0.5]])
    advance(s, 1.0, f, 0.25)
    a, b, c = (1 - u_start) / 2, u_start, x0 - 1.0
    t_star = (-b + np.sqrt(b * b - 4 * a * c)) / (2 * a)
    assert s.status[0] == Status.exited
    assert s.x[0, 0] == pytest.approx(1.0, abs=1e-9)
    assert s.t[0] == pytest.approx(t_star, abs=1e-6)


def test_step_bounded_by_the_cell_size_in_a_flow_starting_from_rest():
    """Solid-body rotation spun up from rest, u = (t / T) (-y, x, 0) on [0, T], T = 2 (snapshots 0 and the
    rotation): linear in space (interpolated exactly by voxels) and in time, so the only error is RK4's.
    Reference: SciPy's solve_ivp (DOP853, rtol = atol = 1e-12) on the analytic field. Tolerance 1e-4 (5e-4
    cells): with arc steps <= 0.25 h = 0.05 on a radius of 0.5, RK4's global error on a rotation is about
    r * theta * dtheta^4 / 120 ~ 1e-6. Each accepted step must also stay within 2 * step * h (spec: a step
    bounded by a fraction of the local cell size; factor 2 allows for the speed growing within a step)."""
    T, h, step = 2.0, 0.2, 0.25
    mesh = Mesh(box_mesh((-1, -1, 0), (1, 1, 0.4), (10, 10, 2), "hexahedron"))
    u1 = helix(1.0, 0.0)(mesh.points, 0.0)
    f = TimeField(mesh)
    f.load(0.0, np.zeros_like(u1), T, u1)
    x0 = np.array([0.5, 0.0, 0.2])
    s = released(f, [x0])
    steps: list[np.ndarray] = [x0[None, :]]
    advance(s, T, f, step, record=lambda i, x, t, v: steps.append(x.copy()))
    ref = solve_ivp(lambda t, x: (t / T) * np.array([-x[1], x[0], 0.0]), (0.0, T), x0,
                    method="DOP853", rtol=1e-12, atol=1e-12).y[:, -1]
    moves = np.linalg.norm(np.diff(np.concatenate(steps), axis=0), axis=1)
    assert moves.max() <= 2 * step * h, moves.max()
    assert np.linalg.norm(s.x[0] - ref) < 1e-4


@pytest.mark.parametrize("kind", ["tetra", "hexahedron", "wedge", "pyramid"])
def test_exit_point_lies_on_a_slanted_boundary(kind):
    """Uniform flow (1, 0.3, 0.1) through a box rotated 30 degrees about z: each particle stops where its
    straight path first crosses a face (exact kinematics: ray against the six planes).

    Tolerance: the bisection places the point to h / 2**40 and point location is exact to round-off
    (barycentric coordinates >= -1e-12), so 1e-9 of the cell edge (h = 0.25) bounds it with room for
    the round-off of the rotation."""
    local = (cell_mesh((0, 0, 0), (1, 1, 1), (4, 4, 4), kind) if kind != "tetra"
             else box_mesh((0, 0, 0), (1, 1, 1), (4, 4, 4), "tetra"))
    c, s_ = np.cos(np.radians(30.0)), np.sin(np.radians(30.0))
    R = np.array([[c, -s_, 0.0], [s_, c, 0.0], [0.0, 0.0, 1.0]])
    rotated = local.copy()
    rotated.points = np.asarray(local.points, dtype=np.float64) @ R.T  # exactly the R the check uses
    mesh = Mesh(rotated)
    u = np.array([1.0, 0.3, 0.1])
    f = loaded(mesh, u, u, 0.0, 10.0)
    p_local = np.random.default_rng(3).uniform(0.15, 0.85, (12, 3))
    s = released(f, p_local @ R.T)
    advance(s, 10.0, f, 0.25)
    d = R.T @ u  # velocity in the box's own axes
    with np.errstate(divide="ignore"):
        t_face = np.where(d > 0, (1.0 - p_local) / d, np.where(d < 0, -p_local / d, np.inf))
    t_exit = t_face.min(axis=1)
    expected = p_local @ R.T + t_exit[:, None] * u
    assert np.all(s.status == Status.exited)
    tol = 1e-9 * 0.25
    assert np.abs(s.x - expected).max() < tol
    assert np.abs(s.t - t_exit).max() < tol


def test_frame_within_round_off_of_the_stop_is_written(tmp_path):
    """frames [0.1, 0.2, 0.1 * 3] (0.1 * 3 = 0.30000000000000004 in floats) with the last snapshot at 0.3:
    frame_times accepts it (within TIME_RTOL of the stop), so three frames are due, for every kind."""
    mesh = box_mesh((0, -1, -0.5), (3, 1, 0.5), (6, 4, 2), "tetra")
    frames = f"[0.1, 0.2, {0.1 * 3!r}]"
    body = (
        "releases:\n  r: {points: [[0.3, 0.0, 0.0]]}\nlines:\n"
        f"  p: {{kind: pathline, release: r, frames: {frames}}}\n"
        f"  s: {{kind: streamline, release: r, frames: {frames}}}\n"
    )
    manifest, _ = run_case(tmp_path, mesh, oscillating(1.0, 0.5, 2.5), [0.0, 0.1, 0.2, 0.3], body)
    for name in ("p", "s"):
        assert len(manifest["entries"][name]["frames"]) == 3, (name, manifest["entries"][name]["frames"])


def test_snapshot_after_the_last_window_is_not_read(tmp_path):
    """Windows end at t = 0.5 (snapshot 1): snapshot 2 is not needed (spec: one pass over the intervals
    the entries use), so a broken third file must not stop the run."""
    from vtkflow.recipe import load_recipe
    from vtkflow.run import run_recipe

    mesh = box_mesh((0, -1, -0.5), (3, 1, 0.5), (6, 4, 2), "tetra")
    paths = write_series(mesh, oscillating(1.0, 0.5, 2.5), [0.0, 0.5, 1.0], tmp_path / "case")
    paths[2].write_text("not a vtu file")
    recipe = tmp_path / "r.yaml"
    recipe.write_text(
        "vtkflow: 1\ndata: {files: 'case/*.vtu', velocity: U, times: [0.0, 0.5, 1.0]}\noutput: out\n"
        "releases:\n  r: {points: [[0.3, 0.0, 0.0]]}\nlines:\n  p: {kind: pathline, release: r, stop: 0.5}\n"
    )
    manifest = run_recipe(load_recipe(recipe), warn=lambda m: None)
    assert [f["time"] for f in manifest["entries"]["p"]["frames"]] == [0.0, 0.5]


def test_velocity_component_arrays_of_wrong_shape_are_an_input_error(tmp_path):
    """errors.py: every user mistake is a VtkflowError (one line, exit code 2); others are bugs."""
    from vtkflow.errors import InputError
    from vtkflow.series import Series

    g = box_mesh((0, 0, 0), (1, 1, 1), (2, 2, 2), "tetra")
    g.point_data["Ux"] = np.zeros(g.n_points)
    g.point_data["Uy"] = np.zeros((g.n_points, 2))
    g.point_data["Uz"] = np.zeros(g.n_points)
    g.save(tmp_path / "a.vtu")
    with pytest.raises(InputError):
        Series.open("*.vtu", [0.0], ["Ux", "Uy", "Uz"], base=tmp_path)


# ================================================================================= edge cases (pass)
@pytest.mark.parametrize("kind", ["hexahedron", "wedge", "pyramid"])
def test_helix_on_true_hexahedra_wedges_and_pyramids(kind):
    """The helix field (-y, x, 0.25) is linear in space, so isoparametric hexahedra (type 12), wedges and
    pyramids interpolate it exactly: particles follow the closed-form helix (flows.helix). Tolerance 1e-4:
    RK4's global error on a rotation, r * theta * dtheta^4 / 120 with arc steps <= 0.25 h (h <= 0.25 here,
    dtheta <= 0.2 rad), is below 2e-5. Also checks the cell type counts the mesh reports."""
    grid = cell_mesh((-1, -1, 0), (1, 1, 2), (8, 8, 8), kind)
    mesh = Mesh(grid)
    n_cells = {"hexahedron": 512, "wedge": 1024, "pyramid": 3072}[kind]
    assert mesh.cell_type_counts() == {kind: n_cells}
    u = helix(1.0, 0.25)(mesh.points, 0.0)
    f = TimeField(mesh)
    f.load(0.0, u, 3.0, u)
    x0 = np.array([[0.5, 0.0, 0.1], [0.0, 0.3, 0.2], [-0.2, -0.6, 0.3]])
    s = released(f, x0)
    advance(s, 3.0, f, 0.25)
    r = np.hypot(x0[:, 0], x0[:, 1])
    angle = np.arctan2(x0[:, 1], x0[:, 0]) + 3.0
    exact = np.stack([r * np.cos(angle), r * np.sin(angle), x0[:, 2] + 0.25 * 3.0], axis=1)
    assert np.all(s.status == Status.active)
    assert np.abs(s.x - exact).max() < 1e-4


def test_zero_velocity_particles_stay_and_reach_the_end(cube):
    """u = 0 in both snapshots: x(t) = x0 (trivially exact), the particle reaches t_end active, even on
    the boundary and at a corner."""
    f = loaded(cube, [0.0, 0.0, 0.0], [0.0, 0.0, 0.0])
    x0 = np.array([[0.5, 0.5, 0.5], [1.0, 0.3, 0.3], [0.0, 0.0, 0.0]])
    s = released(f, x0)
    advance(s, 1.0, f, 0.25)
    assert np.all(s.status == Status.active)
    np.testing.assert_array_equal(s.x, x0)
    np.testing.assert_array_equal(s.t, 1.0)


U, V, OMEGA = 1.0, 0.5, 2.5
RELEASE = np.array([[0.3, -0.3, 0.0], [9.0, 9.0, 9.0], [0.3, 0.1, 0.0]])  # the middle one lies outside


def test_windows_off_snapshot_times_against_the_closed_form(tmp_path):
    """Windows that start and stop between snapshots, releases every 0.13 (never a snapshot time), frames
    every 0.35 and a dropped release point: every vertex against the closed form of flows.oscillating;
    each frame's vertices carry times <= the frame time (particle kinds) and the frames are the planned
    ones. Tolerance: linear interpolation of sin(omega t) in time errs by V omega^2 dt^2 / 8 (Burden &
    Faires thm 3.3), integrated over at most 2 time units."""
    mesh = box_mesh((0, -1, -0.5), (3, 1, 0.5), (6, 4, 2), "tetra")
    times = np.round(np.arange(0.0, 2.0001, 0.05), 12)
    pts = ", ".join(f"[{x}, {y}, {z}]" for x, y, z in RELEASE)
    body = f"""
releases:
  r: {{points: [{pts}]}}
lines:
  a: {{kind: pathline,   release: r, start: 0.237, stop: 1.713}}
  b: {{kind: streakline, release: r, start: 0.5, stop: 1.2, every: 0.13}}
  c: {{kind: timeline,   release: r, start: 0.7, stop: 1.9, every: 0.4, frames: {{every: 0.35}}}}
"""
    manifest, out = run_case(tmp_path, mesh, oscillating(U, V, OMEGA), times, body)
    tol = 2.0 * V * OMEGA**2 * 0.05**2 / 8 + 1e-9
    planned = {
        "a": [0.237] + [round(t, 12) for t in times if 0.237 < t < 1.713] + [1.713],
        "b": [round(t, 12) for t in times if 0.5 <= t <= 1.2],
        "c": [0.7, 1.05, 1.4, 1.75, 1.9],
    }
    for name, entry in manifest["entries"].items():
        np.testing.assert_allclose([f["time"] for f in entry["frames"]], planned[name], atol=1e-12)
        n_instants = {"a": 1, "b": 6, "c": 4}[name]  # 0.5 + 0.13 k <= 1.2: k = 0..5; 0.7 + 0.4 k <= 1.9: k = 0..3
        assert entry["counts"]["dropped_at_release"] == n_instants
        assert entry["counts"]["released"] == 2 * n_instants
        for frame in entry["frames"]:
            p = pv.read(out / frame["file"])
            pid = p.point_data["particle_id"]
            assert not np.any(pid % 3 == 1)  # the dropped release point never appears
            tau, t = p.point_data["release_time"], p.point_data["time"]
            assert t.max() <= frame["time"] + 1e-12 and tau.max() <= frame["time"] + 1e-12
            exact = RELEASE[pid % 3].copy()
            exact[:, 0] += U * (t - tau)
            exact[:, 1] += V / OMEGA * (np.cos(OMEGA * tau) - np.cos(OMEGA * t))
            assert np.abs(p.points - exact).max() <= tol, (name, frame)
            if name != "a":
                np.testing.assert_allclose(t, frame["time"], atol=1e-12)  # streak/time: all at the frame time


def test_streak_and_timeline_order_with_a_dropped_point(tmp_path):
    """Spec: streakline = one polyline per release point, oldest first, the one released at the frame time
    included; timeline = one polyline per release instant in release-point order; particle_id =
    instant * n_points + point. The dropped point (index 1) leaves no polyline and no id."""
    mesh = box_mesh((0, -1, -0.5), (3, 1, 0.5), (6, 4, 2), "tetra")
    pts = ", ".join(f"[{x}, {y}, {z}]" for x, y, z in RELEASE)
    body = f"""
releases:
  r: {{points: [{pts}]}}
lines:
  s: {{kind: streakline, release: r, every: 0.25}}
  t: {{kind: timeline,   release: r, every: 0.25}}
"""
    manifest, out = run_case(tmp_path, mesh, oscillating(U, V, OMEGA), [0.0, 0.5, 1.0], body)
    streak = pv.read(out / manifest["entries"]["s"]["frames"][-1]["file"])
    lines = polylines_of(streak)
    assert len(lines) == 2
    for point, line in zip((0, 2), lines):
        assert streak.point_data["particle_id"][line].tolist() == [k * 3 + point for k in range(5)]
    marks = pv.read(out / manifest["entries"]["t"]["frames"][-1]["file"])
    mlines = polylines_of(marks)
    assert len(mlines) == 5
    for k, line in enumerate(mlines):
        assert marks.point_data["particle_id"][line].tolist() == [3 * k, 3 * k + 2]


def test_entry_results_do_not_depend_on_the_other_entries(tmp_path):
    """The same entries run alone and together with others write byte-identical frames and counts
    (spec: all entries advance in one pass over the snapshots; nothing is shared but the field)."""
    from flows import abc

    mesh = box_mesh((0, 0, 0), (2, 2, 2), (5, 5, 5), "tetra")
    rel = "releases:\n  r: {line: {start: [0.3, 0.4, 0.5], end: [1.7, 1.5, 1.6], count: 5}}\nlines:\n"
    mine = ("  a: {kind: pathline, release: r, start: 0.05, stop: 0.5}\n"
            "  s: {kind: streakline, release: r, every: 0.13}\n")
    others = ("  z: {kind: streamline, release: r, direction: both, length: 0.5}\n"
              "  y: {kind: timeline, release: r, start: 0.2, every: 0.1}\n"
              "  x: {kind: pathline, release: r, start: 0.3}\n")
    m1, o1 = run_case(tmp_path / "alone", mesh, abc(), [0.0, 0.3, 0.6], rel + mine)
    m2, o2 = run_case(tmp_path / "together", mesh, abc(), [0.0, 0.3, 0.6], rel + others + mine)
    for name in ("a", "s"):
        e1, e2 = m1["entries"][name], m2["entries"][name]
        assert e1["counts"] == e2["counts"]
        assert [f["time"] for f in e1["frames"]] == [f["time"] for f in e2["frames"]]
        for f1, f2 in zip(e1["frames"], e2["frames"]):
            assert (o1 / f1["file"]).read_bytes() == (o2 / f2["file"]).read_bytes(), f1["file"]
