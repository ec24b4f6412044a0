"""The particle engine on edge cases: boundary exits, walls, NaN velocity, release instants, streamline ends."""

from __future__ import annotations

import numpy as np
import pytest

from flows import box_mesh
from vtkflow.lines import release_instants
from vtkflow.mesh import Mesh
from vtkflow.particles import State, Status, TimeField, advance, place, trace_streamlines


def uniform_field(mesh: Mesh, u0, u1=None, t0=0.0, t1=1.0) -> TimeField:
    f = TimeField(mesh)
    a = np.broadcast_to(np.asarray(u0, float), (mesh.n_points, 3))
    b = a if u1 is None else np.broadcast_to(np.asarray(u1, float), (mesh.n_points, 3))
    f.load(t0, np.ascontiguousarray(a), t1, np.ascontiguousarray(b))
    return f


@pytest.fixture(scope="module")
def cube():
    return Mesh(box_mesh((0, 0, 0), (1, 1, 1), (5, 5, 5), "tetra"))


def release(field, x0, t0=0.0):
    x0 = np.atleast_2d(np.asarray(x0, float))
    s = State.empty(len(x0))
    place(s, np.arange(len(x0)), x0, np.full(len(x0), t0), field)
    return s


def test_exit_stops_on_the_boundary_face(cube):
    """Uniform flow (2, 0.5, 0) carries particles through the face x = 1: they stop on it, at the time the
    straight path reaches it (exact kinematics; tolerance 1e-9 of the cell size from the bisection)."""
    field = uniform_field(cube, (2.0, 0.5, 0.0))
    x0 = np.array([[0.1, 0.2, 0.3], [0.5, 0.1, 0.7], [0.9, 0.5, 0.5]])
    s = release(field, x0)
    advance(s, 1.0, field, 0.25)
    assert np.all(s.status == Status.exited)
    np.testing.assert_allclose(s.x[:, 0], 1.0, atol=1e-9)
    t_exit = (1.0 - x0[:, 0]) / 2.0
    np.testing.assert_allclose(s.t, t_exit, atol=1e-9)
    np.testing.assert_allclose(s.x[:, 1], x0[:, 1] + 0.5 * t_exit, atol=1e-9)


def test_flow_along_a_wall_does_not_exit(cube):
    """A particle on the wall y = 0 moving parallel to it stays inside and keeps going (common practice:
    a tangential step is not an exit)."""
    field = uniform_field(cube, (0.3, 0.0, 0.0))
    s = release(field, [[0.1, 0.0, 0.5], [0.2, 0.0, 0.0]])  # on a face, and on an edge
    advance(s, 2.0, field, 0.25)
    assert np.all(s.status == Status.active), s.status
    np.testing.assert_allclose(s.x[:, 0], [0.7, 0.8], atol=1e-12)


def test_nan_velocity_stops_particles(cube):
    """Where the later snapshot holds NaN, particles stop with status nan at their last good position."""
    u0 = np.tile([1.0, 0.0, 0.0], (cube.n_points, 1))
    u1 = u0.copy()
    u1[cube.points[:, 0] > 0.55] = np.nan
    field = TimeField(cube)
    field.load(0.0, u0, 1.0, u1)
    s = release(field, [[0.1, 0.5, 0.5], [0.1, 0.2, 0.2]])
    advance(s, 1.0, field, 0.25)
    assert np.all(s.status == Status.nan)
    assert np.all(s.x[:, 0] < 0.6) and np.all(s.x[:, 0] > 0.1)
    # at t = 0 exactly, the NaN snapshot has zero weight and does not stop a particle
    s0 = release(field, [[0.9, 0.5, 0.5]])
    assert s0.status[0] == Status.active


def test_time_interpolation_is_linear_between_snapshots(cube):
    """u = (1 + t, 0, 0) from snapshots at t = 0 and 1: x(t) = x0 + t + t^2 / 2, integrated exactly by RK4
    (a quadratic in t; Simpson's rule is exact for it). Tolerance: round-off."""
    field = uniform_field(cube, (1.0, 0.0, 0.0), (2.0, 0.0, 0.0))
    s = release(field, [[0.05, 0.5, 0.5]])
    advance(s, 0.5, field, 0.25)
    assert s.status[0] == Status.active
    assert s.x[0, 0] == pytest.approx(0.05 + 0.5 + 0.125, abs=1e-12)


def test_steps_are_bounded_by_the_cell_size(cube):
    recorded = []
    field = uniform_field(cube, (1.0, 0.0, 0.0))
    s = release(field, [[0.05, 0.5, 0.5]])
    advance(s, 0.5, field, 0.25, record=lambda i, x, t, v: recorded.append(x.copy()))
    xs = np.concatenate([[0.05]] + [r[:, 0] for r in recorded])
    assert np.diff(xs).max() <= 0.25 * cube.point_size.max() + 1e-12


@pytest.mark.parametrize(
    "start, stop, every, n",
    [(0.0, 1.0, 0.1, 11), (0.0, 0.3, 0.1, 4), (0.2, 0.7, 0.25, 3), (1.0, 1.0, 0.5, 1), (0.0, 1.0, None, 1)],
)
def test_release_instants(start, stop, every, n):
    """start + k * every for k = 0, 1, ... while <= stop, robust to round-off (0.1 * 3 > 0.3 in floats)."""
    inst = release_instants(start, stop, every)
    assert len(inst) == n and inst[0] == start and inst[-1] <= stop + 1e-12


def test_streamline_both_directions_and_ends(cube):
    """In the uniform field (1, 0, 0) a streamline through (0.5, 0.5, 0.5) runs from face x = 0 to x = 1."""
    field = uniform_field(cube, (1.0, 0.0, 0.0))
    lines = trace_streamlines(field, 0.0, np.array([[0.5, 0.5, 0.5]]), np.array([7]), "both", 0.25, 10.0)
    assert lines.lengths.tolist() == [len(lines.points)]
    np.testing.assert_allclose(lines.points[[0, -1], 0], [0.0, 1.0], atol=1e-9)
    assert np.all(np.diff(lines.points[:, 0]) > 0)
    assert np.all(lines.seed == 7)
    assert np.all(lines.ends == Status.exited)
    np.testing.assert_allclose(lines.velocity, np.tile([1.0, 0.0, 0.0], (len(lines.points), 1)))


def test_streamline_stops_at_stagnation_and_at_length(cube):
    """u = (x - 0.5, -(y - 0.5), 0) stagnates at the centre: a seed there stalls; in uniform flow a short
    length limit ends the streamline at that arc length."""
    pts = cube.points
    f = TimeField(cube)
    u = np.stack([pts[:, 0] - 0.5, -(pts[:, 1] - 0.5), np.zeros(len(pts))], axis=1)
    f.load(0.0, u, 1.0, u)
    lines = trace_streamlines(f, 0.0, np.array([[0.5, 0.5, 0.5]]), np.array([0]), "forward", 0.25, 10.0)
    assert lines.ends[0, 0] == Status.stalled and len(lines.points) == 1
    g = uniform_field(cube, (0.0, 1.0, 0.0))
    lines = trace_streamlines(g, 0.0, np.array([[0.5, 0.1, 0.5]]), np.array([0]), "forward", 0.25, 0.3)
    assert lines.arc_length[-1] == pytest.approx(0.3, abs=1e-12)
    assert lines.ends[0, 0] == Status.active


def test_streamline_arc_length_matches_solve_ivp_in_a_linear_field(cube, accuracy):
    """A linear field is interpolated exactly, so a streamline's end point at arc length L differs from the
    exact one only by RK4's error: against SciPy's solve_ivp (DOP853, rtol 1e-12) on the unit tangent, in
    both directions. RK4 is of order 4 (Kutta 1901; Hairer, Nørsett & Wanner 1993, section II.1), and so is
    the arc length, RK4 applied to ds/dt = |u| alongside the path: measured 1.2e-6 at a quarter cell
    (tolerance 5e-6, about 4x) and a 15x smaller error at half that step (at least 8x asked: order >= 3)."""
    from scipy.integrate import solve_ivp

    def flow(p):
        return np.stack([p[..., 0] - 0.5, -(p[..., 1] - 0.5), np.full(p.shape[:-1], 0.3)], axis=-1)

    f = TimeField(cube)
    u = flow(cube.points)
    f.load(0.0, u, 1.0, u)
    seeds = np.array([[0.4, 0.6, 0.3], [0.6, 0.45, 0.4], [0.55, 0.62, 0.5], [0.62, 0.4, 0.35]])
    length = 0.25
    exact = {}
    for sign in (1.0, -1.0):
        for k, s0 in enumerate(seeds):
            sol = solve_ivp(lambda s, x: sign * flow(x) / np.linalg.norm(flow(x)), (0.0, length), s0,
                            method="DOP853", rtol=1e-12, atol=1e-14)
            exact[sign, k] = sol.y[:, -1]
    worst = []
    for step in (0.25, 0.125):
        lines = trace_streamlines(f, 0.0, seeds, np.arange(len(seeds)), "both", step, length)
        last = np.cumsum(lines.lengths) - 1
        first = last - lines.lengths + 1
        assert np.all(lines.ends == Status.active)  # every part ran its whole length
        np.testing.assert_array_equal(lines.arc_length[last], length)
        np.testing.assert_array_equal(lines.arc_length[first], -length)
        worst.append(max(np.linalg.norm(lines.points[i[k]] - exact[sign, k])
                         for sign, i in ((1.0, last), (-1.0, first)) for k in range(len(seeds))))
    accuracy("streamline at arc length L vs solve_ivp, linear field", worst[0], 5e-6, "step 0.25")
    accuracy("same, error ratio step 0.25 -> 0.125", worst[1] / worst[0], 1 / 8,
             f"order {np.log2(worst[0] / worst[1]):.2f}")
    assert worst[0] < 5e-6
    assert worst[1] < worst[0] / 8


def test_largest_speed_is_that_of_the_blended_field_at_the_points(cube):
    """``TimeField.largest_speed`` (the streamline stall floor's scale) against its NumPy twin: the largest
    norm of ``(1 - a) u0 + a u1`` over the points, NaN rows passed over."""
    rng = np.random.default_rng(8)
    u0, u1 = rng.normal(size=(cube.n_points, 3)), rng.normal(size=(cube.n_points, 3))
    u0[5] = np.nan
    f = TimeField(cube)
    f.load(1.0, u0, 3.0, u1)
    for t in (1.5, 2.0, 2.75):
        a = (t - 1.0) / 2.0
        want = np.nanmax(np.linalg.norm((1 - a) * u0 + a * u1, axis=1))
        assert f.largest_speed(t) == pytest.approx(want, rel=1e-14)  # round-off: same sums, other rounding
    assert f.largest_speed(1.0) == pytest.approx(np.nanmax(np.linalg.norm(u0, axis=1)), rel=1e-14)


@pytest.mark.parametrize("kind", ["tetra", "hexahedron"])
@pytest.mark.parametrize("cubic", [False, True])
def test_release_sample_equals_the_numpy_sampler(kind, cubic):
    """``TimeField.release_sample`` (the engine's own sample, what ``place`` uses) against its twin, the NumPy
    sampler ``TimeField.__call__``: velocity, cell size, inside and NaN stops at random points, some outside
    the mesh and some in cells with a NaN vertex, on tetrahedra and on split hexahedra (added centre points).
    Tolerance 1e-12: the same interpolation, summed in another order."""
    mesh = Mesh(box_mesh((0, 0, 0), (1, 1, 1), (4, 3, 5), kind))
    rng = np.random.default_rng(9)
    u = [rng.normal(size=(mesh.n_points, 3)) for _ in range(4)]
    u[0][7] = np.nan  # a NaN vertex in the earlier snapshot
    f = TimeField(mesh)
    f.load(1.0, u[0], 3.0, u[1], *((u[2], u[3]) if cubic else ()))
    x = rng.uniform(-0.2, 1.2, (400, 3))
    t = rng.uniform(1.0, 3.0, 400)
    t[:50] = 3.0  # the later snapshot alone: the earlier one's NaN takes no part
    got, want = f.release_sample(x, t), f(x, t)
    np.testing.assert_array_equal(got.inside, want.inside)
    assert 0 < got.inside.sum() < len(x)
    ins = got.inside
    np.testing.assert_array_equal(got.stop[ins], want.stop[ins])
    assert (got.stop[ins] == Status.nan).any() and (got.stop[ins] == 0).any()
    np.testing.assert_allclose(got.v[ins], want.v[ins], rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(got.h[ins], want.h[ins], rtol=1e-12)
    np.testing.assert_array_equal(got.cell[ins], want.cell[ins])  # both locate through the same box tree


def test_record_chunks_follow_the_steps_particles_take():
    """The record buffers suggest chunks of the smallest power of two at least twice the recent mean steps
    per particle (at least 4, at most the width), and the full width after a call that mostly filled it."""
    from vtkflow.integrate import RecordBuffers

    b = RecordBuffers(64)
    assert b.chunk() == 64  # nothing known yet
    b.note(np.array([3, 3, 4, 2]), 64)
    assert b.chunk() == 8
    b.note(np.array([0, 1, 0, 1]), 8)
    assert b.chunk() == 4
    b.note(np.array([4, 4, 3, 4]), 4)  # mostly full: the whole width next
    assert b.chunk() == 64
    b.note(np.array([20, 17]), 64)
    assert b.chunk() == 64
    x, t, v = b.take(5, 0, 8)
    assert x.shape == (5, 8, 3) and t.shape == (5, 8) and v.shape == (5, 8, 3)


def test_python_api_traces_with_the_recipe_names(tmp_path):
    """vtkflow.trace gives the same frames as a recipe entry with the same keys (oscillating uniform flow;
    identical computation, so identical points)."""
    import vtkflow
    from flows import oscillating, run_case

    mesh = box_mesh((0, -1, -0.5), (2, 1, 0.5), (10, 10, 5), "tetra")
    body = "releases:\n  r: {line: {start: [0.2, -0.3, 0], end: [0.2, 0.3, 0], count: 3}}\nlines:\n  s: {kind: streakline, release: r, every: 0.1}\n"
    manifest, out = run_case(tmp_path, mesh, oscillating(1.0, 0.5, 2.0), [0.0, 0.25, 0.5], body)
    series = vtkflow.Series.open("case/*.vtu", {"field": "time"}, "U", tmp_path)
    frames = vtkflow.trace(series, "streakline", {"line": {"start": [0.2, -0.3, 0], "end": [0.2, 0.3, 0], "count": 3}}, every=0.1)
    assert [t for t, _ in frames] == [f["time"] for f in manifest["entries"]["s"]["frames"]]
    import pyvista as pv

    last = pv.read(out / manifest["entries"]["s"]["frames"][-1]["file"])
    np.testing.assert_array_equal(frames[-1][1].points, last.points)
    with pytest.raises(vtkflow.RecipeError, match="every"):
        vtkflow.trace(series, "streakline", np.zeros((1, 3)))  # a streakline needs 'every'


def test_particles_are_grouped_by_region_before_each_engine_call():
    """``_by_region`` is a permutation that puts unplaced particles (cell -1) first, then the others by
    ``cell >> shift`` (a stable counting sort: its twin is NumPy's stable argsort of the same keys)."""
    from vtkflow.particles import _by_region

    cells = np.random.default_rng(13).integers(-1, 100_000, 1000)
    order = _by_region(cells, 100_000)
    shift = (100_000).bit_length() - (1000).bit_length()
    keys = np.where(cells >= 0, (cells >> shift) + 1, 0)
    np.testing.assert_array_equal(order, np.argsort(keys, kind="stable"))
    assert (cells[order][: np.count_nonzero(cells < 0)] == -1).all()


def test_just_released_particles_are_located_before_they_are_ordered(cube):
    """``find_cells`` gives the particles without a tetrahedron (cell -1) the one the locator finds (the
    reference: ``Locator.locate``, the box tree without a hint; -1 outside the mesh), and leaves the rows it
    is not given, and those that have a tetrahedron, as they are."""
    from vtkflow.integrate import find_cells

    rng = np.random.default_rng(5)
    x = np.vstack([rng.uniform(0.0, 1.0, (40, 3)), [[1.5, 0.5, 0.5], [-0.1, 0.2, 0.3]]])
    cell = np.full(len(x), -1, np.int64)
    cell[3] = 7  # has a tetrahedron (its hint is kept, right or wrong)
    rows = np.arange(1, len(x))  # row 0 is not among them
    mesh, _ = uniform_field(cube, (1.0, 0.0, 0.0)).kernel_args()
    find_cells(rows, x, cell, mesh)
    want, _ = cube.locator.locate(x)
    assert cell[0] == -1 and cell[3] == 7
    others = np.setdiff1d(rows, [3])
    np.testing.assert_array_equal(cell[others], want[others])
    assert (cell[-2:] == -1).all() and (want[:-2] >= 0).all()


def test_records_are_placed_as_a_sort_by_seed_and_signed_arc_length():
    """``place_runs`` (the streamline assembly) against its obvious twin: NumPy's lexsort of all records by
    (seed, signed arc length), for engine calls that hand over each particle's records as a run in arc
    order (rows of the call in any order, any count up to the width), backward rows (sign -1) reversed and
    before the forward ones."""
    from vtkflow.integrate import place_runs

    rng = np.random.default_rng(3)
    n_seeds, width = 50, 6
    sign = np.repeat([-1.0, 1.0], n_seeds)
    n_rows = len(sign)
    done = np.zeros(n_rows, np.int64)
    calls, flat = [], []
    for _ in range(4):
        rows = rng.permutation(n_rows)[: rng.integers(1, n_rows)]
        counts = rng.integers(0, width + 1, len(rows))
        x, v = rng.normal(size=(len(rows), width, 3)), rng.normal(size=(len(rows), width, 3))
        t = 0.1 * (done[rows, None] + np.arange(width) + 1.0)  # increasing along each row
        calls.append((rows, counts, x, t, v))
        for i, r in enumerate(rows):
            for k in range(counts[i]):
                flat.append((r, x[i, k], t[i, k], v[i, k]))
        done[rows] += counts
    total = done
    per_part = total.reshape(2, n_seeds)
    offset = np.concatenate([[0], np.cumsum(per_part.sum(axis=0))[:-1]])
    base = (offset + np.cumsum(per_part, axis=0) - per_part).reshape(-1)
    seed_of = np.tile(np.arange(n_seeds) + 100, 2)
    status = rng.integers(0, 5, n_rows).astype(np.int8)
    n = int(total.sum())
    out = (np.empty((n, 3)), np.empty((n, 3)), np.empty(n), np.empty(n, np.int64), np.empty(n, np.int8))
    before = np.zeros(n_rows, np.int64)
    for c in calls:
        place_runs(c, before, base, total, sign, seed_of, status, out)

    which = np.array([f[0] for f in flat])
    x, t, v = (np.array([f[j] for f in flat]) for j in (1, 2, 3))
    arc = t * sign[which]
    order = np.lexsort((arc, which % n_seeds))
    np.testing.assert_array_equal(before, total)
    np.testing.assert_array_equal(out[0], x[order])
    np.testing.assert_array_equal(out[1], v[order])
    np.testing.assert_array_equal(out[2], arc[order])
    np.testing.assert_array_equal(out[3], seed_of[which[order]])
    np.testing.assert_array_equal(out[4], status[which[order]])


def test_streamline_outputs_kept_by_the_caller_are_never_overwritten(cube):
    """Streamline outputs reuse the memory of earlier frames only once the caller has let go of it: two
    kept sets from different seeds stay as they were traced, a third reuses a dropped set's memory and
    equals a fresh trace of the same seeds (common practice for buffer pools: a buffer is lent out once)."""
    pts = cube.points
    f = TimeField(cube)
    u = np.stack([-(pts[:, 1] - 0.5), pts[:, 0] - 0.5, np.full(len(pts), 0.2)], axis=1)
    f.load(0.0, u, 1.0, u)
    seeds_a = np.array([[0.3, 0.5, 0.2], [0.6, 0.4, 0.3]])
    seeds_b = np.array([[0.45, 0.6, 0.1], [0.7, 0.5, 0.5], [0.5, 0.3, 0.6]])

    def trace(s):
        return trace_streamlines(f, 0.0, s, np.arange(len(s)), "both", 0.25, 0.6)

    a = trace(seeds_a)
    a_copy = {k: np.array(getattr(a, k)) for k in ("points", "velocity", "arc_length", "seed", "status")}
    b = trace(seeds_b)
    assert not np.shares_memory(a.points, b.points)
    c = trace(seeds_a)  # a and b alive: new memory again
    for k, v in a_copy.items():
        np.testing.assert_array_equal(getattr(a, k), v)
        np.testing.assert_array_equal(getattr(c, k), v)
    kept = b.points[:3]  # a view keeps b's memory from reuse
    del a, b, c
    d = trace(seeds_b)
    assert not np.shares_memory(d.points, kept)
    assert f.outputs.free("velocity")  # b's velocity buffer was dropped: free for the next frame


def test_snapshot_loads_reuse_memory_but_never_a_table_still_held(cube):
    """``TimeField.load`` writes each snapshot pair into memory of an earlier load that nothing refers to
    (two tables take turns), never into a table that a caller still holds."""
    f = uniform_field(cube, (1.0, 0.0, 0.0))
    held = cube.values
    kept = held.copy()
    for k in range(4):
        u = np.full((cube.n_points, 3), float(k + 2))
        f.load(k, u, k + 1, 2 * u)
        np.testing.assert_array_equal(cube.values[:, :3], u)
        np.testing.assert_array_equal(cube.values[:, 3:6], 2 * u)
        np.testing.assert_array_equal(cube.values[:, 6], cube.point_size)
    np.testing.assert_array_equal(held, kept)  # the table held since the first load is untouched
    f.load(9, u, 10, u)
    assert not np.shares_memory(cube.values, held)
    a = cube.values.__array_interface__["data"][0]
    f.load(10, u, 11, u)
    f.load(11, u, 12, u)
    assert cube.values.__array_interface__["data"][0] == a  # memory reused once let go


@pytest.mark.parametrize("kind", ["tetra", "hexahedron"])
@pytest.mark.parametrize("cubic", [False, True])
def test_shift_gives_the_field_that_load_gives(kind, cubic):
    """``TimeField.shift`` (only the new snapshot written, into the expired one's columns, which swaps the
    blocks at every shift) against ``load`` of the same pair, after one and after two shifts (both orders
    of the blocks): the engine's sample, the NumPy sampler, the largest speed and advanced particles, on
    tetrahedra and on split hexahedra (added centre points). ``load`` is the reference (itself checked
    against closed forms in test_time_interpolation.py). Tolerance 1e-12: the same interpolation with the
    weights taken from the other end of the interval (round-off)."""
    grid = box_mesh((0, 0, 0), (1, 1, 1), (4, 3, 5), kind)
    mesh_a, mesh_b = Mesh(grid), Mesh(grid)
    rng = np.random.default_rng(3)
    times = [0.0, 0.5, 1.25, 2.0]
    u = [rng.normal(size=(mesh_a.n_points, 3)) + [2.0, 0.0, 0.0] for _ in times]
    d = [rng.normal(size=(mesh_a.n_points, 3)) for _ in times]
    slope = (lambda k: d[k]) if cubic else (lambda k: None)  # noqa: E731
    pair = (lambda k: (d[k], d[k + 1])) if cubic else (lambda k: ())  # noqa: E731
    shifted, loaded = TimeField(mesh_a), TimeField(mesh_b)
    shifted.load(times[0], u[0], times[1], u[1], *pair(0))
    x = rng.uniform(0.0, 1.0, (300, 3))
    for k in (1, 2):
        shifted.shift(times[k + 1], u[k + 1], slope(k + 1))
        loaded.load(times[k], u[k], times[k + 1], u[k + 1], *pair(k))
        assert (shifted.t0, shifted.t1) == (loaded.t0, loaded.t1)
        assert shifted.column_times() == ((times[k + 1], times[k]) if k == 1 else (times[k], times[k + 1]))
        t = rng.uniform(times[k], times[k + 1], len(x))
        t[:20] = times[k]  # the ends of the interval: one block alone
        t[20:40] = times[k + 1]
        for got, want in ((shifted.release_sample(x, t), loaded.release_sample(x, t)), (shifted(x, t), loaded(x, t))):
            np.testing.assert_allclose(got.v, want.v, rtol=1e-12, atol=1e-12)
            np.testing.assert_array_equal(got.h, want.h)
        mid = 0.5 * (times[k] + times[k + 1])
        assert shifted.largest_speed(mid) == pytest.approx(loaded.largest_speed(mid), rel=1e-12)
        ends = []
        for f in (shifted, loaded):
            s = State.empty(len(x))
            place(s, np.arange(len(x)), x, np.full(len(x), times[k]), f)
            advance(s, times[k + 1], f, 0.25)
            ends.append(s.x.copy())
        np.testing.assert_allclose(ends[0], ends[1], atol=1e-12)


def test_shift_refuses_what_it_cannot_continue(cube):
    """``shift`` needs a loaded pair, a later time, and a slope exactly when the interpolation is cubic."""
    u = np.ones((cube.n_points, 3))
    with pytest.raises(ValueError, match="needs a load first"):
        TimeField(cube).shift(1.0, u)
    f = uniform_field(cube, (1.0, 0.0, 0.0), t0=0.0, t1=1.0)
    with pytest.raises(ValueError, match="must follow"):
        f.shift(1.0, u)
    with pytest.raises(ValueError, match="has no place"):
        f.shift(2.0, u, u)
    f.load(0.0, u, 1.0, u, u, u)
    with pytest.raises(ValueError, match="is needed"):
        f.shift(2.0, u)
    cube.set_point_data(np.zeros((cube.n_points, 13)))  # the mesh's point data replaced behind the field
    with pytest.raises(ValueError, match="needs a load first"):
        f.shift(2.0, u, u)


def test_output_pool_lends_the_smallest_free_buffer_and_keeps_as_many_as_asked():
    from vtkflow.reuse import OutputPool

    def address(x):
        return x.__array_interface__["data"][0]

    pool = OutputPool()
    held = [pool.empty("r", n, keep=4) for n in (400, 100, 200)]
    sizes = {address(a): len(a) for a in held}
    del held
    got = pool.empty("r", 150, keep=4)  # 200 is the smallest of the free buffers that hold 150
    assert sizes[address(got)] == 200
    more = [pool.empty("r", 50, keep=4) for _ in range(3)]  # 100, 400, then a fourth buffer
    assert [sizes.get(address(a)) for a in more] == [100, 400, None]
    extra = pool.empty("r", 50, keep=4)  # four kept, all in use: the oldest is let go, new memory
    assert address(extra) not in {address(a) for a in (got, *more)}
    assert len(pool._buffers["r"]) == 4


def test_pathline_records_are_never_overwritten_while_held_and_reused_once_let_go(cube, monkeypatch):
    """The compacted records ``advance`` hands a recorder come from the field's pool (every size pooled
    here): a recorder that keeps every chunk finds each as it was handed over after later intervals; once it
    drops them, the next run's chunks reuse their memory."""
    from vtkflow import integrate

    monkeypatch.setattr(integrate, "RECORDS_POOLED", 0)
    f = uniform_field(cube, (0.3, 0.1, 0.0), (0.1, 0.3, 0.0), 0.0, 1.0)
    x0 = np.random.default_rng(4).uniform(0.1, 0.5, (200, 3))

    def run():
        chunks = []
        s = State.empty(len(x0))
        place(s, np.arange(len(x0)), x0, np.zeros(len(x0)), f)
        for k in range(1, 5):
            advance(s, 0.25 * k, f, 0.25, lambda *c: chunks.append((c, [a.copy() for a in c])))
        return chunks

    chunks = run()
    assert len(chunks) >= 4
    for held, copy in chunks:
        for a, b in zip(held, copy):
            np.testing.assert_array_equal(a, b)
    pooled = {k: len(v) for k, v in f.outputs._buffers.items() if k.startswith("records.")}
    assert set(pooled) == {"records.which", "records.x", "records.t", "records.v"}
    del chunks, held, a, b
    again = run()
    assert all(any(np.shares_memory(c[1], b) for b in f.outputs._buffers["records.x"]) for c, _ in again)
    assert {k: len(f.outputs._buffers[k]) for k in pooled} == pooled  # lent again: no new buffers


def test_output_pool_lends_a_buffer_only_when_nothing_made_from_it_is_alive():
    from vtkflow._vtk import numpy_to_vtk, vtk_to_numpy
    from vtkflow.reuse import OutputPool

    def address(x):
        return x.__array_interface__["data"][0]

    pool = OutputPool()
    a = pool.empty("x", (100, 3))
    b = pool.empty("x", (100, 3))  # a alive: other memory
    kept = {address(a), address(b)}
    assert len(kept) == 2
    del a, b
    c = pool.empty("x", (80, 3))  # smaller: a view of a kept buffer
    assert address(c) in kept and c.shape == (80, 3)
    arr = numpy_to_vtk(c, deep=False)  # VTK holds a reference to the array it wraps
    del c
    d = pool.empty("x", (80, 3))
    assert address(d) in kept and address(d) != address(vtk_to_numpy(arr))
    e = pool.empty("x", (80, 3))  # both buffers in use: new memory
    assert address(e) not in kept
    big = pool.empty("y", 10, np.int8)
    assert big.dtype == np.int8 and big.shape == (10,)
    assert pool.empty("y", 10, np.float64).dtype == np.float64  # another type: its own buffer
