"""The tetrahedral decomposition and the numba locator against slow, obvious twins.

The twins are brute force: every tetrahedron tested for every point with NumPy (barycentric coordinates
from ``numpy.linalg.solve``), and VTK's own cell volumes for the decomposition.
"""

from __future__ import annotations

import numpy as np
import pytest
import pyvista as pv

from flows import box_mesh
from vtkflow.kernels import BARY_TOL, Locator, group_order
from vtkflow.mesh import Mesh
from vtkflow.tetmesh import decompose, face_neighbours


def naive_locate(points: np.ndarray, tets: np.ndarray, x: np.ndarray) -> np.ndarray:
    """(N, M) barycentric coordinates of every point in every tetrahedron, by linear solves."""
    p = points[tets]
    edges = np.stack([p[:, 1] - p[:, 0], p[:, 2] - p[:, 0], p[:, 3] - p[:, 0]], axis=2)  # (M, 3, 3)
    rhs = x[:, None, :] - p[None, :, 0]  # (N, M, 3)
    lam = np.linalg.solve(np.broadcast_to(edges, rhs.shape[:2] + (3, 3)), rhs[..., None])[..., 0]
    return np.concatenate([1 - lam.sum(axis=2, keepdims=True), lam], axis=2)


def mixed_grid() -> pv.UnstructuredGrid:
    """Hexahedra, wedges, pyramids and tetrahedra sharing faces conformingly: a 2 x 2 x 2 block of cubes
    where one cube is cut into 2 wedges, one into 6 pyramids... kept simple: cubes of each kind meet only
    across faces their cuts agree on (every cut uses the smallest-index rule)."""
    hexes = box_mesh((0, 0, 0), (3, 2, 2), (3, 2, 2), "hexahedron")
    pts = np.asarray(hexes.points)
    conn = np.asarray(hexes.cells_dict[pv.CellType.HEXAHEDRON])
    cells, types = [], []
    extra = [pts]
    for k, h in enumerate(conn):
        kind = k % 4
        if kind == 0:
            cells.append(h)
            types.append(pv.CellType.HEXAHEDRON)
        elif kind == 1:  # two wedges through the diagonal plane (0, 2, 6, 4)
            cells += [h[[0, 1, 2, 4, 5, 6]], h[[0, 2, 3, 4, 6, 7]]]
            types += [pv.CellType.WEDGE] * 2
        else:  # six pyramids to the cube centre
            centre = len(np.concatenate(extra))
            extra.append(pts[h].mean(axis=0, keepdims=True))
            faces = [[0, 3, 2, 1], [4, 5, 6, 7], [0, 1, 5, 4], [1, 2, 6, 5], [2, 3, 7, 6], [3, 0, 4, 7]]
            for f in faces:
                cells.append(np.append(h[f], centre))
                types.append(pv.CellType.PYRAMID)
    flat = np.concatenate([np.append(len(c), c) for c in cells])
    return pv.UnstructuredGrid(flat, np.array(types, np.uint8), np.concatenate(extra))


@pytest.mark.parametrize("make", [lambda: box_mesh((0, 0, 0), (1, 1, 1), (3, 3, 3), "tetra"), mixed_grid])
def test_decomposition_keeps_volume_and_orientation(make):
    """Tetrahedra are positively oriented and their volumes add up to each cell's volume from VTK's
    vtkCellSizeFilter (reference library). Tolerance: round-off."""
    grid = make()
    mesh = Mesh(grid)
    tm = mesh.tetmesh
    p = tm.points[tm.tets]
    vol = np.einsum("ij,ij->i", np.cross(p[:, 1] - p[:, 0], p[:, 2] - p[:, 0]), p[:, 3] - p[:, 0]) / 6
    assert vol.min() > 0
    ref = np.abs(np.asarray(grid.compute_cell_sizes(length=False, area=False)["Volume"]))
    np.testing.assert_allclose(np.bincount(tm.parent, vol, minlength=grid.n_cells), ref, rtol=1e-12, atol=1e-15)


def test_decomposition_is_conforming():
    """Every interior face has exactly one neighbour; the faces without one are exactly the boundary
    (the outer surface area equals the box's, 2 (3*2 + 3*2 + 2*2) = 32)."""
    grid = mixed_grid()
    tm = Mesh(grid).tetmesh
    nbr = face_neighbours(tm.tets)
    opposite = np.array([[1, 2, 3], [0, 2, 3], [0, 1, 3], [0, 1, 2]])
    t, f = np.nonzero(nbr < 0)
    tri = tm.points[tm.tets[t][np.arange(len(t))[:, None], opposite[f]]]
    area = 0.5 * np.linalg.norm(np.cross(tri[:, 1] - tri[:, 0], tri[:, 2] - tri[:, 0]), axis=1)
    assert area.sum() == pytest.approx(32.0, rel=1e-12)
    # symmetric: t's neighbour across a face has t as a neighbour
    tt, ff = np.nonzero(nbr >= 0)
    assert np.all(np.any(nbr[nbr[tt, ff]] == tt[:, None], axis=1))


def test_locate_matches_brute_force_including_faces_edges_and_vertices():
    grid = mixed_grid()
    mesh = Mesh(grid)
    tm = mesh.tetmesh
    rng = np.random.default_rng(5)
    inside = rng.uniform(0, 1, (300, 3)) * [3, 2, 2]
    on_vertices = tm.points[rng.integers(0, len(tm.points), 40)]
    edges = tm.tets[rng.integers(0, len(tm.tets), 40)]
    on_edges = 0.5 * (tm.points[edges[:, 0]] + tm.points[edges[:, 1]])
    faces = tm.tets[rng.integers(0, len(tm.tets), 40)]
    on_faces = tm.points[faces[:, :3]].mean(axis=1)
    outside = np.array([[-0.1, 0.5, 0.5], [3.0 + 1e-9, 1, 1], [1, 1, 2.5], [1.5, -1e-10, 1.0]])
    x = np.concatenate([inside, on_vertices, on_edges, on_faces, outside])
    tets, bary = mesh.locate(x)
    lam = naive_locate(tm.points, tm.tets, x)
    contained = (lam >= -BARY_TOL).all(axis=2)  # (N, M)
    assert np.array_equal(tets >= 0, contained.any(axis=1))
    found = tets >= 0
    assert np.all(contained[np.flatnonzero(found), tets[found]])  # a containing tetrahedron
    np.testing.assert_allclose(bary[found], lam[np.flatnonzero(found), tets[found]], atol=1e-12)
    assert not found[-len(outside):].any()


def test_locate_on_a_graded_l_shaped_mesh_matches_brute_force():
    """Point location on a mesh that is neither convex nor uniform (the box tree's harder case): an L-shaped
    block whose cells grow geometrically along x (an axis-wise monotone map keeps every tetrahedron valid).
    Points in the notch and beyond the ends are outside; walks from random hints cross the notch, fail at
    its faces and fall back to the tree. Reference: the brute-force search over every tetrahedron."""
    grid = box_mesh((0, 0, 0), (2, 2, 1), (8, 8, 3), "tetra")
    centres = np.asarray(grid.cell_centers().points)
    grid = grid.extract_cells(np.flatnonzero(~((centres[:, 0] > 1) & (centres[:, 1] > 1))))
    pts = np.array(grid.points)
    pts[:, 0] = 2.0 * (np.expm1(2.0 * pts[:, 0]) / np.expm1(4.0))  # cells 7x longer at x = 2 than at x = 0
    grid.points = pts
    mesh = Mesh(grid)
    tm = mesh.tetmesh
    rng = np.random.default_rng(11)
    x = np.concatenate([rng.uniform([-0.1, -0.1, -0.1], [2.1, 2.1, 1.1], (400, 3)),
                        tm.points[rng.integers(0, len(tm.points), 40)]])
    lam = naive_locate(tm.points, tm.tets, x)
    contained = (lam >= -BARY_TOL).all(axis=2)
    notch = (x[:, 0] > 2.0 * np.expm1(2.0) / np.expm1(4.0) + 1e-6) & (x[:, 1] > 1 + 1e-6)  # (points: float32)
    assert notch.sum() > 20 and not contained[notch].any()  # the test sees the notch
    for hints in (None, rng.integers(0, len(tm.tets), len(x))):
        tets, bary = mesh.locate(x, hints)
        found = tets >= 0
        assert np.array_equal(found, contained.any(axis=1))
        assert np.all(contained[np.flatnonzero(found), tets[found]])
        np.testing.assert_allclose(bary[found], lam[np.flatnonzero(found), tets[found]], atol=1e-12)


def test_morton_index_bounds_each_cells_tetrahedra_and_location_without_it_agrees():
    """The decomposition's Morton index (the ordering sort's group bounds, kept): every tetrahedron ``t``
    lies in the run ``start[q + 1] <= t < start[q + 2]`` of its centroid's cell ``q``, the code computed
    here with NumPy (``tetmesh.morton_codes``, the twin's). Location without hints walks from
    the index; without an index it searches the box tree: both find a containing tetrahedron (reference:
    the brute-force search), for points inside, on vertices and outside."""
    import dataclasses

    from vtkflow.tetmesh import morton_codes

    mesh = Mesh(box_mesh((0, 0, 0), (2, 1, 1), (9, 5, 4), "hexahedron"))
    tm = mesh.tetmesh
    idx = tm.index
    centroids = tm.points[tm.tets].mean(axis=1)
    cell = (morton_codes(centroids, idx.lo, idx.scale) >> np.uint64(idx.shift)).astype(np.int64)
    t = np.arange(len(tm.tets))
    assert np.all(idx.start[cell + 1] <= t) and np.all(t < idx.start[cell + 2])
    rng = np.random.default_rng(8)
    x = np.concatenate([rng.uniform([-0.1, -0.1, -0.1], [2.1, 1.1, 1.1], (500, 3)), tm.points[:30]])
    lam = naive_locate(tm.points, tm.tets, x)
    contained = (lam >= -BARY_TOL).all(axis=2)
    for loc in (mesh.locator, Locator(dataclasses.replace(tm, index=None))):
        tets, _ = loc.locate(x)
        found = tets >= 0
        assert np.array_equal(found, contained.any(axis=1)) and (~found).sum() > 20
        assert np.all(contained[np.flatnonzero(found), tets[found]])


def test_walking_from_any_hint_finds_the_same_point():
    """The walk (Löhner & Ambrosiano 1990) from random starting tetrahedra reaches a containing one."""
    mesh = Mesh(box_mesh((0, 0, 0), (1, 1, 1), (6, 6, 6), "tetra"))
    rng = np.random.default_rng(2)
    x = rng.uniform(0, 1, (500, 3))
    hints = rng.integers(0, len(mesh.tetmesh.tets), len(x))
    a, bary_a = mesh.locate(x)
    b, bary_b = mesh.locate(x, hints)
    assert (a >= 0).all() and (b >= 0).all()
    # both contain the point (they may differ only for points on shared faces)
    lam = naive_locate(mesh.tetmesh.points, mesh.tetmesh.tets[b], x)
    assert np.all(lam[np.arange(len(x)), np.arange(len(x))] >= -BARY_TOL)


def test_linear_field_exact_and_threads_agree():
    """A linear field is reproduced exactly (round-off) through hexahedra, wedges and pyramids, and the
    result is bitwise the same with 1 and 2 threads (each point writes only its own row)."""
    import numba

    mesh = Mesh(mixed_grid())
    a = np.array([[0.3, -1.2, 0.5], [2.0, 0.1, -0.7], [0.4, 0.9, 1.1]])
    mesh.set_point_data(mesh.points @ a.T + 0.25)
    x = np.random.default_rng(9).uniform(0, 1, (2000, 3)) * [3, 2, 2]
    numba.set_num_threads(1)
    one, ins1 = mesh.sample(x)
    numba.set_num_threads(min(2, numba.config.NUMBA_NUM_THREADS))
    two, ins2 = mesh.sample(x)
    assert ins1.all() and np.array_equal(one, two)
    np.testing.assert_allclose(one, x @ a.T + 0.25, atol=1e-12)


def test_sliver_and_degenerate_tetrahedra():
    """A flat (zero-volume) tetrahedron never contains a point; a sliver 1e-9 thick still locates
    points inside it and rejects points just above it (brute-force twin as reference)."""
    pts = np.array([[0, 0, 0], [1, 0, 0], [0, 1, 0], [0.3, 0.3, 1e-9], [0.5, 0.5, 0.0], [1, 1, 1.0]], float)
    conn = np.array([0, 1, 2, 3, 1, 2, 4, 5])  # a sliver, and a flat one (vertices 1, 2, 4 collinear)
    loc = Locator(decompose(pts, np.array([0, 4, 8]), conn, np.array([10, 10], np.uint8)))
    assert np.isfinite(loc.tinv[0]).all() and not np.isfinite(loc.tinv[1]).all()
    x = np.array([[0.2, 0.2, 1e-10], [0.2, 0.2, 2e-9], [0.6, 0.45, 1e-3]])
    tets, _ = loc.locate(x)
    lam = naive_locate(pts, loc.tm.tets[:1], x)[:, 0]
    assert tets.tolist() == [0, -1, -1]
    assert (lam[0] >= -BARY_TOL).all() and not (lam[1] >= -BARY_TOL).all()


def test_nan_velocity_interpolates_to_nan():
    """NaN values in a tetrahedron's vertices make the interpolated value NaN (the engine then stops
    the particle with status nan)."""
    mesh = Mesh(box_mesh((0, 0, 0), (1, 1, 1), (2, 2, 2), "tetra"))
    v = np.ones((mesh.n_points, 3))
    v[mesh.points[:, 0] > 0.75] = np.nan
    mesh.set_point_data(v)
    values, inside = mesh.sample(np.array([[0.1, 0.5, 0.5], [0.9, 0.5, 0.5]]))
    assert inside.all() and np.isfinite(values[0]).all() and np.isnan(values[1]).all()


def _engine_run(engine: str, threads: int | None = None):
    import numba

    from flows import abc
    from vtkflow.particles import State, TimeField, advance, place

    mesh = Mesh(box_mesh((0, 0, 0), (2, 2, 2), (8, 8, 8), "tetra"))
    u = abc()(mesh.points, 0.0)
    u1 = 1.3 * u
    u1[(mesh.points[:, 0] > 1.75) & (mesh.points[:, 1] < 0.5)] = np.nan  # a NaN corner in the later snapshot
    field = TimeField(mesh)
    field.load(0.0, u, 1.0, u1)
    rng = np.random.default_rng(4)
    x0 = np.concatenate([
        rng.uniform(0.05, 1.95, (200, 3)),            # ordinary points, many of them leave the box
        mesh.points[rng.integers(0, mesh.n_points, 20)],  # on mesh vertices (some on the boundary)
        np.array([[1.0, 1.0, 0.0], [0.0, 0.5, 0.5], [2.0, 2.0, 2.0]]),  # on a face, an edge, a corner
    ])
    s = State.empty(len(x0))
    place(s, np.arange(len(x0)), x0, np.zeros(len(x0)), field)
    if threads is not None:
        numba.set_num_threads(threads)
    advance(s, 0.6, field, 0.25, engine=engine)
    numba.set_num_threads(numba.config.NUMBA_NUM_THREADS)
    return s


def test_numba_engine_matches_its_numpy_twin():
    """The numba RK4 engine and the NumPy twin follow the same rules, so they end in the same state: same
    statuses, positions within 1e-9 (the twin finds exits by bisection to h / 2**40 and the engine by an
    exact ray crossing; elsewhere they differ only in the order of floating-point sums)."""
    fast = _engine_run("numba")
    slow = _engine_run("numpy")
    assert np.array_equal(fast.status, slow.status)
    assert set(np.unique(fast.status)) >= {0, 1, 3}  # active, exited and nan all occur
    np.testing.assert_allclose(fast.x, slow.x, atol=1e-9)
    np.testing.assert_allclose(fast.t, slow.t, atol=1e-9)


def _frozen_run(engine: str):
    """Streamlines (both directions) of the ABC flow frozen at t = 0 on a box, through ``advance`` on a
    :class:`FrozenField`: many reach the arc length limit, many leave the box, one seed sits on a vertex."""
    from flows import abc
    from vtkflow.particles import FrozenField, State, TimeField, advance, place

    mesh = Mesh(box_mesh((0, 0, 0), (2, 2, 2), (8, 8, 8), "tetra"))
    u = abc()(mesh.points, 0.0)
    field = TimeField(mesh)
    field.load(0.0, u, 1.0, 1.3 * u)
    rng = np.random.default_rng(5)
    x0 = np.concatenate([rng.uniform(0.05, 1.95, (150, 3)), mesh.points[[7]]])
    sign = np.where(np.arange(len(x0)) % 2 == 0, 1.0, -1.0)
    frozen = FrozenField(field, 0.25, sign, 1e-6)
    s = State.empty(len(x0))
    rows = np.arange(len(x0))
    place(s, rows, x0, np.zeros(len(x0)), frozen, frozen.directed(frozen.velocity(x0), rows))
    advance(s, 0.8, frozen, 0.25, engine=engine)
    return s


def test_streamline_engine_matches_its_numpy_twin():
    """Streamlines (frozen mode: steps in a pseudo-time, arc length by the scheme's quadrature of the speed,
    the last step brought to the length along the tangent): the numba engine and the NumPy twin end in the
    same state, statuses equal, positions and arc lengths within 1e-9 (exits found by bisection in the twin
    and by an exact ray crossing in the engine; elsewhere only the order of floating-point sums differs)."""
    fast = _frozen_run("numba")
    slow = _frozen_run("numpy")
    assert np.array_equal(fast.status, slow.status)
    assert set(np.unique(fast.status)) >= {0, 1}  # both at the length limit and out of the box
    assert np.all(fast.t[fast.status == 0] == 0.8)  # ended exactly at the length limit
    np.testing.assert_allclose(fast.x, slow.x, atol=1e-9)
    np.testing.assert_allclose(fast.t, slow.t, atol=1e-9)


def test_numba_engine_same_with_one_and_two_threads():
    """Each particle is advanced on its own: results are bitwise the same with 1 and 2 threads."""
    one = _engine_run("numba", threads=1)
    two = _engine_run("numba", threads=2)
    assert np.array_equal(one.x, two.x) and np.array_equal(one.t, two.t) and np.array_equal(one.status, two.status)


def test_numba_box_tree_equals_its_numpy_twin():
    """The locator's box tree (built in the numba geometry pass) equals the vectorised NumPy build, and every
    box holds what it bounds: its tetrahedra's vertices (level 0) or its child boxes (levels above)."""
    from vtkflow.kernels import tet_geometry
    from vtkflow.tetmesh import TREE_FANOUT, TREE_LEAF, box_tree

    tm = Mesh(mixed_grid()).tetmesh
    fast, slow = tet_geometry(tm.points, tm.tets)[1], box_tree(tm.points, tm.tets)
    assert len(fast.levels) >= 3  # a leaf level, an inner level and the top: the test sees every kind
    assert np.array_equal(fast.levels, slow.levels) and np.array_equal(fast.boxes, slow.boxes)
    lo, hi, lv = fast.boxes[:, :3], fast.boxes[:, 3:], fast.levels
    p = tm.points[tm.tets]  # (M, 4, 3)
    leaf = np.arange(len(tm.tets)) // TREE_LEAF
    assert np.all(lo[leaf][:, None] < p) and np.all(p < hi[leaf][:, None])
    for k in range(1, len(lv) - 1):
        child = np.arange(lv[k - 1], lv[k])
        parent = lv[k] + (child - lv[k - 1]) // TREE_FANOUT
        assert np.all(lo[parent] <= lo[child]) and np.all(hi[child] <= hi[parent])
    assert lv[-1] - lv[-2] == 1  # one box at the top


def test_inverse_edge_matrices_match_numpy():
    """The locator's inverse edge matrices equal numpy.linalg.inv of the edge matrices (round-off)."""
    from vtkflow.kernels import tet_inverses

    tm = Mesh(mixed_grid()).tetmesh
    p0, tinv = tet_inverses(tm.points, tm.tets)
    p = tm.points[tm.tets]
    edges = np.stack([p[:, 1] - p[:, 0], p[:, 2] - p[:, 0], p[:, 3] - p[:, 0]], axis=2)
    np.testing.assert_allclose(tinv, np.linalg.inv(edges), rtol=1e-10, atol=1e-12)
    np.testing.assert_array_equal(p0, p[:, 0])


def test_morton_order_interleaves_bits():
    """Z-order of the 2 x 2 x 2 corner cells is x fastest, then y, then z (bit interleaving, x lowest;
    Morton 1966), and a finer grid keeps each octant's points together."""
    from vtkflow.tetmesh import morton_order

    corners = np.array([[x, y, z] for z in (0, 1) for y in (0, 1) for x in (0, 1)], float)
    shuffled = corners[[5, 2, 7, 0, 3, 6, 1, 4]]
    assert np.array_equal(shuffled[morton_order(shuffled)], corners)
    g = np.stack(np.meshgrid(*[np.arange(4.0)] * 3, indexing="ij"), axis=-1).reshape(-1, 3)
    octant = (g[morton_order(g)] >= 2) @ np.array([1, 2, 4])
    assert np.all(np.diff(octant) >= 0)  # octants come one after the other


def test_linear_time_neighbours_equal_their_numpy_twin():
    """The locator's face neighbours (bucketed by smallest vertex, numba) equal the sort-based NumPy
    twin on a conforming mixed mesh and on a tetrahedral box."""
    from vtkflow.kernels import neighbours

    for grid in (mixed_grid(), box_mesh((0, 0, 0), (1, 1, 1), (4, 3, 2), "tetra")):
        tets = Mesh(grid).tetmesh.tets
        assert np.array_equal(neighbours(tets), face_neighbours(tets))
    # a face shared by three tetrahedra (not a conforming mesh): the first two in face order are paired,
    # the third has none; the faces on the far sides have none
    book = np.array([[0, 1, 2, 3], [0, 1, 2, 4], [0, 1, 2, 5]])
    nbr = neighbours(book)
    assert nbr[0, 3] == 1 and nbr[1, 3] == 0 and nbr[2, 3] == -1 and (nbr[:, :3] == -1).all()
    # the counting sorts run in one piece per thread: the same tables with one thread
    from numba import get_num_threads, set_num_threads

    from vtkflow.kernels import SORT_PARALLEL

    tets = Mesh(box_mesh((0, 0, 0), (1, 1, 1), (12, 12, 12), "tetra")).tetmesh.tets
    keys = np.random.default_rng(2).integers(0, 999, SORT_PARALLEL + 7)
    two = neighbours(tets), group_order(keys, 1000)[0]
    was = get_num_threads()
    try:
        set_num_threads(1)
        one = neighbours(tets), group_order(keys, 1000)[0]
    finally:
        set_num_threads(was)
    assert was >= 2 and np.array_equal(one[0], two[0]) and np.array_equal(one[1], two[1])


def test_cell_and_point_sizes_match_numpy():
    """Cell sizes (bounding-box diagonal / sqrt(3)) and point sizes (smallest adjacent cell) from the
    numba loop equal a NumPy computation of the same definition."""
    grid = mixed_grid()
    mesh = Mesh(grid)
    pts = mesh.points[mesh.connectivity]
    lo = np.minimum.reduceat(pts, mesh.offsets[:-1], axis=0)
    hi = np.maximum.reduceat(pts, mesh.offsets[:-1], axis=0)
    cs = np.linalg.norm(hi - lo, axis=1) / np.sqrt(3.0)
    ps = np.full(mesh.n_points, np.inf)
    np.minimum.at(ps, mesh.connectivity, np.repeat(cs, np.diff(mesh.offsets)))
    np.testing.assert_allclose(mesh.cell_size, cs, rtol=1e-14)
    np.testing.assert_allclose(mesh.point_size, ps, rtol=1e-14)
    assert mesh.cell_size[0] == pytest.approx(1.0)  # the unit hexahedron's edge
    # each thread takes the minimum over its own cells, then the threads' minima are reduced: the same
    # point sizes with one thread as with two
    from numba import get_num_threads, set_num_threads

    from vtkflow.kernels import cell_sizes

    was = get_num_threads()
    try:
        set_num_threads(1)
        one = cell_sizes(mesh.points, mesh.offsets, mesh.connectivity)
    finally:
        set_num_threads(was)
    assert was >= 2 and np.array_equal(one[1], mesh.point_size) and np.array_equal(one[0], mesh.cell_size)
    # a degenerate cell (all corners at one point) and a point no cell uses get the smallest positive size
    pts = np.array([[0, 0, 0], [1, 0, 0], [0, 1, 0], [0, 0, 1], [5, 5, 5], [9, 9, 9.0]])
    conn = np.array([0, 1, 2, 3, 4, 4, 4, 4])
    cs, ps = cell_sizes(pts, np.array([0, 4, 8]), conn)
    np.testing.assert_array_equal(cs, [1.0, 1.0])  # unit tetrahedron: diagonal sqrt(3) / sqrt(3)
    np.testing.assert_array_equal(ps, [1.0] * 6)


def test_sizes_of_a_tetrahedral_mesh_come_from_the_ordering_pass():
    """For a mesh of tetrahedra only, the decomposition's ordering pass also gives the cell and point sizes
    (``orient_and_order(..., sizes=True)``, in place of a pass of their own): bitwise equal to
    ``cell_sizes`` over the cells (its twin), a degenerate tetrahedron and a point that no tetrahedron uses
    included, with one thread and with two; ``Mesh`` takes them for a tetrahedral mesh."""
    from numba import get_num_threads, set_num_threads

    from vtkflow.kernels import cell_sizes, orient_and_order

    rng = np.random.default_rng(21)
    pts = rng.normal(size=(300, 3))
    tets = rng.integers(0, 299, (1000, 4))  # point 299 unused
    tets[17] = 5  # all four corners at one point
    want = cell_sizes(pts, np.arange(len(tets) + 1) * 4, tets.ravel())
    was = get_num_threads()
    try:
        for threads in (1, was):
            set_num_threads(threads)
            got = orient_and_order(pts, tets, sizes=True)
            np.testing.assert_array_equal(got[2], want[0])
            np.testing.assert_array_equal(got[3], want[1])
            plain = orient_and_order(pts, tets)
            assert np.array_equal(plain[0], got[0]) and np.array_equal(plain[1], got[1])
    finally:
        set_num_threads(was)
    assert want[0][17] == want[0][want[0] > 0].min() and want[1][299] == want[0][17]  # the floor
    mesh = Mesh(box_mesh((0, 0, 0), (1, 2, 1), (4, 3, 5), "tetra"))
    assert mesh.tetmesh.sizes is not None
    ref = cell_sizes(mesh.points, mesh.offsets, mesh.connectivity)
    assert np.array_equal(mesh.cell_size, ref[0]) and np.array_equal(mesh.point_size, ref[1])
    assert Mesh(box_mesh((0, 0, 0), (1, 1, 1), (2, 2, 2), "hexahedron")).tetmesh.sizes is None


def test_group_order_matches_stable_argsort():
    """The linear-time grouping equals NumPy's stable argsort (its twin), in one piece and, for long inputs,
    in parallel pieces (``kernels.SORT_PARALLEL``)."""
    from vtkflow.kernels import SORT_PARALLEL

    rng = np.random.default_rng(7)
    for n, n_keys in ((5000, 60), (SORT_PARALLEL + 12345, 1000)):
        keys = rng.integers(0, n_keys - 10, n)
        order, sizes = group_order(keys, n_keys)
        np.testing.assert_array_equal(order, np.argsort(keys, kind="stable"))
        np.testing.assert_array_equal(sizes, np.bincount(keys, minlength=n_keys))


def test_shifted_order_matches_stable_argsort_of_the_shifted_keys():
    """``shifted_order`` equals NumPy's stable argsort (its twin) of ``(v >> shift) + 1``, -1 keyed 0."""
    from vtkflow.kernels import shifted_order

    v = np.random.default_rng(8).integers(-1, 10_000, 3000)
    for shift in (0, 3, 7):
        keys = np.where(v >= 0, (v >> shift) + 1, 0)
        np.testing.assert_array_equal(shifted_order(v, shift, 9_999), np.argsort(keys, kind="stable"))


def test_orientation_and_morton_order_match_numpy_twin():
    """The numba orientation fix and Morton numbering (codes, counting sort, one gather) equal their NumPy
    twin (cross-product volumes, stable argsort of the same leading bits), on a box mesh with half of its
    tetrahedra given the wrong orientation; the input is left as it was."""
    from vtkflow.kernels import orient_and_order
    from vtkflow.tetmesh import orient_and_order_numpy

    g = box_mesh((0, 0, 0), (1, 2, 3), (6, 5, 4), "tetra")
    pts = np.asarray(g.points, float)
    tets = np.asarray(g.cells_dict[10], np.int64).copy()
    tets[::2] = tets[::2][:, [0, 2, 1, 3]]
    before = tets.copy()
    fast, order = orient_and_order(pts, tets)
    slow, expect = orient_and_order_numpy(pts, tets)
    np.testing.assert_array_equal(tets, before)
    np.testing.assert_array_equal(fast, slow)
    np.testing.assert_array_equal(order, expect)
    assert sorted(order) == list(range(len(tets)))
    p = pts[fast]
    vol = np.einsum("ij,ij->i", np.cross(p[:, 1] - p[:, 0], p[:, 2] - p[:, 0]), p[:, 3] - p[:, 0])
    assert (vol > 0).all()
    # each tetrahedron keeps its vertices (up to the swap)
    np.testing.assert_array_equal(np.sort(fast, axis=1), np.sort(tets[order], axis=1))


def test_take_rows_is_fancy_indexing():
    """The parallel gather equals NumPy's fancy indexing (its twin) for 1-D and 2-D arrays of any dtype."""
    from vtkflow.kernels import take_rows

    rng = np.random.default_rng(9)
    order = rng.permutation(1000)
    a, b, c = rng.normal(size=(1000, 3)), rng.integers(0, 50, 1000), rng.normal(size=1000)
    for got, ref in zip(take_rows(order, a, b, c), (a[order], b[order], c[order])):
        assert got.dtype == ref.dtype and np.array_equal(got, ref)


def test_fill_table_is_hstack():
    """``fill_table`` equals NumPy's ``np.hstack`` (its twin) with and without the slope columns, and refuses
    arrays that do not fit the table."""
    from vtkflow.kernels import fill_table

    rng = np.random.default_rng(12)
    u0, u1, d0, d1 = (rng.normal(size=(500, 3)) for _ in range(4))
    h = rng.normal(size=500)
    table = np.full((500, 7), np.nan)
    fill_table(table, u0, u1, h)
    np.testing.assert_array_equal(table, np.hstack([u0, u1, h[:, None]]))
    table = np.full((500, 13), np.nan)
    fill_table(table, u0, u1, h, d0, d1)
    np.testing.assert_array_equal(table, np.hstack([u0, u1, d0, d1, h[:, None]]))
    with pytest.raises(ValueError, match="cannot fill"):
        fill_table(table, u0, u1, h)
    with pytest.raises(ValueError, match="cannot fill"):
        fill_table(np.empty((500, 7)), u0[:499], u1, h)


def test_bounds_and_morton_bits():
    """``kernels.bounds`` equals NumPy's per-axis min and max (its twin); ``morton_bits`` takes whole octree
    levels, about one level short of one item per cell."""
    from vtkflow.kernels import bounds
    from vtkflow.tetmesh import morton_bits

    p = np.random.default_rng(12).normal(size=(1001, 3))
    lo, hi = bounds(p)
    assert np.array_equal(lo, p.min(axis=0)) and np.array_equal(hi, p.max(axis=0))
    assert [morton_bits(n) for n in (1, 8, 63, 64, 1_191_640, 2**70)] == [3, 3, 3, 6, 18, 63]


def test_decomposition_rejects_cells_of_the_wrong_size_and_unsupported_types():
    """Bad cell arrays get a one-line error naming the cell type and what was expected, whether the mesh
    has one cell type (checked on the offsets in one pass) or several."""
    from vtkflow.errors import InputError

    pts = np.random.default_rng(0).uniform(size=(8, 3))
    cases = [
        # two tetrahedra with 3 and 5 points: the total is right, the sizes are not
        (np.array([0, 3, 8]), np.arange(8) % 8, [10, 10], "type 10 does not have 4 points"),
        # a tetrahedron and a pyramid of 4 points
        (np.array([0, 4, 8]), np.arange(8), [10, 14], "type 14 does not have 5 points"),
        (np.array([0, 4, 8]), np.arange(8), [10, 42], "cell type 42 is not supported"),
        (np.array([0, 3, 6]), np.arange(6), [5, 5], "no volume cells"),
    ]
    for offsets, conn, types, message in cases:
        with pytest.raises(InputError, match=message):
            decompose(pts, offsets, conn, np.array(types, np.uint8))
