"""Reading series: times from every source, velocity association, cell-to-point, formats, topology."""

from __future__ import annotations

import meshio
import numpy as np
import pytest
from vtkmodules.util.numpy_support import vtk_to_numpy
from vtkmodules.vtkFiltersCore import vtkCellDataToPointData

from flows import abc, box_mesh, helix, write_series
from vtkflow.errors import InputError
from vtkflow.mesh import Mesh
from vtkflow.series import Series


@pytest.fixture(scope="module")
def mixed_mesh():
    """A small mesh with all four 3D cell types: tetra, pyramid, wedge, hexahedron (hand-built)."""
    import pyvista as pv

    pts = np.array(
        [
            [0, 0, 0], [1, 0, 0], [1, 1, 0], [0, 1, 0], [0, 0, 1], [1, 0, 1], [1, 1, 1], [0, 1, 1],  # hex 0-7
            [2, 0, 0], [2, 1, 0], [2, 0, 1], [2, 1, 1],  # wedge beside the hex: 1,8,2 / 5,10,6 ... see cells
            [0.5, 0.5, 2.0],  # pyramid apex on top of the hex
            [0.5, -1.0, 0.5],  # tet below
        ],
        dtype=float,
    )
    cells = [
        (12, [0, 1, 2, 3, 4, 5, 6, 7]),
        (13, [1, 8, 9, 5, 10, 11]),  # wedge: triangles (1, 8, 9) and (5, 10, 11)
        (14, [4, 5, 6, 7, 12]),
        (10, [0, 1, 4, 13]),
    ]
    conn = np.concatenate([[len(c)] + c for _, c in cells])
    types = np.array([t for t, _ in cells], dtype=np.uint8)
    return pv.UnstructuredGrid(conn, types, pts)


def test_cell_to_point_matches_vtk_filter(mixed_mesh):
    """Our sparse averaging equals VTK's vtkCellDataToPointData (reference library) on mixed cells."""
    rng = np.random.default_rng(3)
    values = rng.normal(size=(mixed_mesh.n_cells, 3))
    grid = mixed_mesh.copy()
    grid.cell_data["U"] = values
    f = vtkCellDataToPointData()
    f.SetInputData(grid)
    f.Update()
    ref = vtk_to_numpy(f.GetOutput().GetPointData().GetArray("U"))
    ours = Mesh(mixed_mesh).cell_to_point(values)
    np.testing.assert_allclose(ours, ref, rtol=1e-12, atol=1e-12)


def test_linear_field_interpolated_exactly_on_every_cell_type(mixed_mesh):
    """Tetra (linear), pyramid, wedge and hexahedron interpolation functions reproduce a linear field
    exactly (a property of isoparametric elements; e.g. Zienkiewicz & Taylor, The Finite Element Method,
    vol. 1). Tolerance: round-off."""
    mesh = Mesh(mixed_mesh)
    a = np.array([[0.3, -1.2, 0.5], [2.0, 0.1, -0.7], [0.4, 0.9, 1.1]])
    mesh.set_point_data(mesh.points @ a.T + 0.25)
    rng = np.random.default_rng(0)
    # random points inside each cell: convex combinations of its vertices
    pts = []
    for cid in range(mixed_mesh.n_cells):
        ids = mesh.connectivity[mesh.offsets[cid]:mesh.offsets[cid + 1]]
        w = rng.dirichlet(np.ones(len(ids)), size=20)
        pts.append(w @ mesh.points[ids])
    pts = np.concatenate(pts)
    values, inside = mesh.sample(pts)
    assert inside.all()
    np.testing.assert_allclose(values, pts @ a.T + 0.25, atol=1e-10)


def test_points_outside_are_flagged(mixed_mesh):
    mesh = Mesh(mixed_mesh)
    inside = mesh.contains(np.array([[0.5, 0.5, 0.5], [5.0, 5.0, 5.0], [1.5, 0.2, 0.5], [-0.5, 0.5, 0.5]]))
    assert inside.tolist() == [True, False, True, False]


@pytest.fixture
def small(tmp_path):
    mesh = box_mesh((0, 0, 0), (1, 1, 1), (4, 4, 4), "tetra")
    return mesh, tmp_path


def test_times_from_every_source(small):
    mesh, tmp = small
    times = [0.0, 0.25, 0.5]
    paths = write_series(mesh, helix(1.0, 0.0), times, tmp / "a", stem="step")
    base = tmp / "a"
    assert np.allclose(Series.open("*.vtu", {"field": "time"}, "U", base).times, times)
    assert np.allclose(Series.open("*.vtu", [1.0, 2.0, 3.0], "U", base).times, [1, 2, 3])
    assert np.allclose(Series.open("*.vtu", {"start": 1.0, "step": 0.5}, "U", base).times, [1.0, 1.5, 2.0])
    s = Series.open("*.vtu", {"pattern": r"step_(\d+)", "scale": 0.1}, "U", base)
    assert np.allclose(s.times, [0.0, 0.1, 0.2])
    s = Series.open([p.name for p in paths], None, "U", base)  # default: FieldData 'time'
    assert np.allclose(s.times, times)


def test_velocity_from_three_components_and_cell_data(small):
    mesh, tmp = small
    grid = mesh.copy()
    grid.clear_data()
    u = abc()(np.asarray(grid.points), 0.0)
    grid.point_data["ux"], grid.point_data["uy"], grid.point_data["uz"] = u[:, 0], u[:, 1], u[:, 2]
    grid.cell_data["Uc"] = abc()(np.asarray(grid.cell_centers().points), 0.0)
    grid.save(tmp / "one.vtu")
    s = Series.open(["one.vtu"], [0.0], ["ux", "uy", "uz"], tmp)
    assert s.association == "point"
    np.testing.assert_allclose(s.velocity(0), u)
    c = Series.open(["one.vtu"], [0.0], "Uc", tmp)
    assert c.association == "cell"
    np.testing.assert_allclose(c.velocity(0), Mesh(grid).cell_to_point(grid.cell_data["Uc"]))


def test_changed_topology_is_a_clear_error(small):
    mesh, tmp = small
    write_series(mesh, helix(1.0, 0.0), [0.0], tmp / "c", stem="s0")
    other = box_mesh((0, 0, 0), (1, 1, 1), (5, 4, 4), "tetra")
    write_series(other, helix(1.0, 0.0), [1.0], tmp / "c", stem="s1")
    s = Series.open("*.vtu", {"field": "time"}, "U", tmp / "c")
    with pytest.raises(InputError, match=r"s1_0000\.vtu: the mesh differs from the first snapshot"):
        s.velocity(1)


def test_streams_at_most_two_snapshots(small):
    mesh, tmp = small
    write_series(mesh, helix(1.0, 0.0), [0.0, 1.0, 2.0, 3.0], tmp / "d")
    s = Series.open("*.vtu", {"field": "time"}, "U", tmp / "d")
    for k in range(4):
        s.velocity(k)
        assert len(s._cache) <= 2


def test_xdmf_time_series_through_meshio(tmp_path, monkeypatch):
    """An XDMF time series written by meshio is read with its own times and point velocity."""
    monkeypatch.chdir(tmp_path)  # meshio's writer puts the .h5 beside the working folder
    mesh = box_mesh((0, 0, 0), (1, 1, 1), (3, 3, 3), "tetra")
    points = np.asarray(mesh.points)
    cells = [("tetra", np.asarray(mesh.cells_dict[10]))]
    path = tmp_path / "series.xdmf"
    flow = helix(2.0, 0.3)
    with meshio.xdmf.TimeSeriesWriter(str(path)) as w:
        w.write_points_cells(points, cells)
        for t in (0.0, 0.5, 1.0):
            w.write_data(t, point_data={"U": flow(points, t) * (1 + t)})
    s = Series.open(str(path.name), None, "U", tmp_path)
    assert len(s) == 3
    np.testing.assert_allclose(s.times, [0.0, 0.5, 1.0])
    np.testing.assert_allclose(s.velocity(2), flow(s.mesh.points, 1.0) * 2.0, atol=1e-12)


def test_meshio_reads_the_series_inputs(small):
    """The input series vtkflow writes for its tests (and the demo) is readable by meshio too."""
    mesh, tmp = small
    paths = write_series(mesh, helix(1.0, 0.0), [0.0], tmp / "e")
    m = meshio.read(paths[0])
    assert m.points.shape == (mesh.n_points, 3)
    assert m.point_data["U"].shape == (mesh.n_points, 3)
