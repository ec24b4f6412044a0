"""Tests of the synthetic demo case (mesh, analytic flow, files).

Every check compares with something outside :mod:`vtkflow.demo`: VTK's own cell definitions,
volumes, surfaces and validity checks, SciPy's integrators and root finder, meshio's reader, and
published formulas (sources named beside each check).
"""

from __future__ import annotations

import itertools
import json
import math

import meshio
import numpy as np
import pytest
import pyvista as pv
from scipy.integrate import quad, solve_ivp
from scipy.optimize import brentq
from vtkmodules.util.numpy_support import vtk_to_numpy
from vtkmodules.vtkCommonDataModel import vtkTetra, vtkWedge
from vtkmodules.vtkFiltersCore import vtkCellCenters
from vtkmodules.vtkFiltersGeneral import vtkCellValidator
from vtkmodules.vtkFiltersVerdict import vtkCellSizeFilter
from vtkmodules.vtkIOXML import vtkXMLPolyDataReader, vtkXMLUnstructuredGridReader

from vtkflow import demo
from vtkflow.tetmesh import split_wedges

BOX = demo.DOMAIN_BOUNDS
BOX_VOLUME = (BOX[1] - BOX[0]) * (BOX[3] - BOX[2]) * (BOX[5] - BOX[4])
BOX_AREA = 2.0 * (
    (BOX[1] - BOX[0]) * (BOX[3] - BOX[2])
    + (BOX[1] - BOX[0]) * (BOX[5] - BOX[4])
    + (BOX[3] - BOX[2]) * (BOX[5] - BOX[4])
)


@pytest.fixture(scope="module")
def mesh() -> pv.UnstructuredGrid:
    return demo.build_mesh()


def _vtk_faces(cell_class) -> list[list[int]]:
    """Local vertex ids of each face, as VTK itself defines them for ``cell_class``."""
    cell = cell_class()
    for i in range(cell.GetNumberOfPoints()):
        cell.GetPointIds().SetId(i, i)
    faces = []
    for f in range(cell.GetNumberOfFaces()):
        face = cell.GetFace(f)
        faces.append([face.GetPointId(k) for k in range(face.GetNumberOfPoints())])
    return faces


def _cell_sizes(dataset) -> np.ndarray:
    """Signed cell volumes from VTK's vtkCellSizeFilter."""
    sizes = vtkCellSizeFilter()
    sizes.SetInputData(dataset)
    sizes.ComputeVertexCountOff()
    sizes.ComputeLengthOff()
    sizes.ComputeAreaOff()
    sizes.ComputeVolumeOn()
    sizes.Update()
    return vtk_to_numpy(sizes.GetOutput().GetCellData().GetArray("Volume"))


# ------------------------------------------------------------------------------------------
# Mesh
# ------------------------------------------------------------------------------------------
def test_mesh_size_and_cell_types(mesh):
    assert 50_000 <= mesh.n_cells <= 150_000
    types, counts = np.unique(np.asarray(mesh.celltypes), return_counts=True)
    assert set(types.tolist()) == {pv.CellType.TETRA, pv.CellType.WEDGE}
    assert counts.min() > 0


def test_volumes_positive_and_fill_the_box(mesh):
    volumes = _cell_sizes(mesh)
    assert volumes.min() > 0.0
    # Volume additivity (elementary geometry): a partition of the box into non-overlapping
    # cells has the box's volume. Tolerance: float64 round-off summing ~1e5 terms of ~1e-4
    # (relative 1e-12 is far above it); an overlap or gap of one cell (>= 1e-5) would fail.
    assert volumes.sum() == pytest.approx(BOX_VOLUME, rel=1e-12)


def test_outer_surface_is_exactly_the_box(mesh):
    # VTK's vtkDataSetSurfaceFilter keeps faces used by one cell only. In a conforming mesh
    # these are the box faces, so their area is the box's; a quad cut differently from its
    # two sides (or a tet face against a wedge quad) would add interior faces to the area.
    # Tolerance: float64 round-off over ~2e4 faces.
    surface = mesh.extract_surface(algorithm="dataset_surface")
    assert surface.area == pytest.approx(BOX_AREA, rel=1e-12)
    assert np.allclose(surface.bounds, BOX, atol=0.0, rtol=0.0)


def test_vtk_cell_validator_accepts_a_sample(mesh):
    # VTK's vtkCellValidator also flags inverted wedges (it is slow, ~0.1 ms/cell: sample).
    sample = mesh.extract_cells(np.arange(0, mesh.n_cells, 97))
    assert {pv.CellType.TETRA, pv.CellType.WEDGE} <= set(np.unique(sample.celltypes).tolist())
    validator = vtkCellValidator()
    validator.SetInputData(sample)
    validator.Update()
    states = validator.GetOutput().GetCellData().GetArray("ValidityState")
    bad = [i for i in range(states.GetNumberOfTuples()) if states.GetTuple1(i) != 0]
    assert bad == []


def test_interior_faces_shared_by_exactly_two_cells(mesh):
    cells = mesh.cells_dict
    tets = cells[pv.CellType.TETRA]
    wedges = cells[pv.CellType.WEDGE]
    triangles, quads = [], []
    for cell_conn, faces in ((tets, _vtk_faces(vtkTetra)), (wedges, _vtk_faces(vtkWedge))):
        for face in faces:
            (triangles if len(face) == 3 else quads).append(cell_conn[:, face])
    points = np.asarray(mesh.points)
    box = np.asarray(BOX).reshape(3, 2)
    for group in (np.concatenate(triangles), np.concatenate(quads)):
        unique, counts = np.unique(np.sort(group, axis=1), axis=0, return_counts=True)
        assert counts.max() == 2, "a face is shared by more than two cells"
        boundary = points[unique[counts == 1]]  # (F, k, 3)
        # Each boundary face lies on one box face: all its vertices share a bounding coordinate
        # (exact: boundary nodes are placed on the box planes and never jittered off them).
        on_plane = np.zeros(len(boundary), dtype=bool)
        for axis, side in itertools.product(range(3), range(2)):
            on_plane |= np.all(boundary[:, :, axis] == box[axis, side], axis=1)
        assert on_plane.all(), f"{np.count_nonzero(~on_plane)} unmatched interior faces"


def test_wedge_split_positive_and_volume_preserving_for_every_labelling():
    # All 720 orderings of global vertex ids on one right prism: each gives three tetrahedra of
    # positive volume adding up to the prism (volumes by VTK's vtkCellSizeFilter; splitting rule
    # of Dompierre, Labbe, Vallet & Camarero 1999, Proc. 8th Int. Meshing Roundtable).
    prism = np.array([[0, 0, 0], [0, 1, 0], [0, 0, 1], [1, 0, 0], [1, 1, 0], [1, 0, 1]], float)
    labellings = np.array(list(itertools.permutations(range(6))))  # local vertex i -> label
    offsets = 6 * np.arange(len(labellings))[:, None]
    wedges = labellings + offsets
    points = np.empty((wedges.size, 3))
    points[wedges.ravel()] = np.tile(prism, (len(labellings), 1))
    tets = split_wedges(wedges)
    grid = pv.UnstructuredGrid({pv.CellType.TETRA: tets}, points)
    volumes = _cell_sizes(grid).reshape(-1, 3)
    # Exact arithmetic on unit coordinates: each tet is 1/6, the prism 1/2; tolerance = round-off.
    assert volumes.min() > 0.0
    np.testing.assert_allclose(volumes.sum(axis=1), 0.5, rtol=1e-14)
    # Every tet vertex belongs to its own wedge.
    assert np.all(tets.reshape(-1, 12) // 6 == np.arange(len(wedges))[:, None])


def test_cross_section_triangles_are_made_counter_clockwise():
    # Orientation by the sign of the 2-D cross product (common practice); the input mixes
    # both orientations, the output must be all counter-clockwise and the same triangles.
    yz = np.array([[0.0, 0.0], [1.0, 0.0], [0.0, 1.0], [1.0, 1.0]])
    triangles = np.array([[0, 1, 2], [1, 2, 3], [2, 1, 0], [3, 2, 1]])
    fixed = demo._counter_clockwise(yz, triangles)
    e1, e2 = yz[fixed[:, 1]] - yz[fixed[:, 0]], yz[fixed[:, 2]] - yz[fixed[:, 0]]
    assert np.all(e1[:, 0] * e2[:, 1] - e1[:, 1] * e2[:, 0] > 0.0)
    assert np.array_equal(np.sort(fixed, axis=1), np.sort(triangles, axis=1))


def test_mesh_is_deterministic(mesh):
    again = demo.build_mesh()
    assert np.array_equal(np.asarray(mesh.points), np.asarray(again.points))
    assert np.array_equal(np.asarray(mesh.celltypes), np.asarray(again.celltypes))
    assert np.array_equal(np.asarray(mesh.cell_connectivity), np.asarray(again.cell_connectivity))


# ------------------------------------------------------------------------------------------
# Flow
# ------------------------------------------------------------------------------------------
def test_lamb_oseen_profile():
    # Lamb 1932, Hydrodynamics (6th ed.), art. 334a: v_theta = Gamma/(2 pi r)(1 - exp(-r^2/rc^2)).
    gamma, rc = 0.6, 0.12
    # (a) Circulation around a circle of radius R (Stokes' theorem) equals Gamma (1 - exp(-R^2/rc^2));
    # SciPy quad over the loop; tolerance 1e-9 relative covers quadrature error.
    for radius in (0.05, 0.12, 0.3, 1.0):
        def tangential(phi, radius=radius):
            dy, dz = radius * math.cos(phi), radius * math.sin(phi)
            vy, vz = demo.lamb_oseen_velocity(np.array(dy), np.array(dz), gamma, rc)
            return float(-vy * math.sin(phi) + vz * math.cos(phi)) * radius

        circulation, _ = quad(tangential, 0.0, 2.0 * math.pi, epsabs=1e-13, epsrel=1e-12)
        assert circulation == pytest.approx(gamma * (1.0 - math.exp(-(radius / rc) ** 2)), rel=1e-9)
    # (b) The peak of v_theta sits where d/dr[(1 - exp(-s^2))/s] = 0, i.e. 1 + 2 s^2 = exp(s^2)
    # (s = r/rc; s ~ 1.1209 from memory), found with SciPy's brentq; compared with a fine scan.
    s_peak = brentq(lambda s: 1.0 + 2.0 * s * s - math.exp(s * s), 0.5, 2.0)
    r = np.linspace(1e-6, 4.0 * rc, 400_001)
    _, vz = demo.lamb_oseen_velocity(r, np.zeros_like(r), gamma, rc)
    # Tolerance: the scan's step (1.2e-6) and the flatness of the maximum (error ~ sqrt(eps)).
    assert r[np.argmax(vz)] / rc == pytest.approx(s_peak, abs=1e-4)
    # (c) Solid-body limit on the axis: velocity vanishes, continuous through r -> 0 branch switch.
    vy0, vz0 = demo.lamb_oseen_velocity(np.array([0.0, 1e-9]), np.array([0.0, 0.0]), gamma, rc)
    assert vy0[0] == 0.0 and vz0[0] == 0.0
    assert vz0[1] == pytest.approx(gamma / (2 * math.pi) * 1e-9 / rc**2, rel=1e-6)


def test_wake_velocity_is_solenoidal():
    # Continuity for incompressible flow, div u = 0 (Batchelor 1967, An Introduction to Fluid
    # Dynamics, sec. 2.2). Second-order central differences with h = 1e-4: truncation
    # ~ h^2/6 |u'''| with |u'''| <~ 1e3 near the cores, so < 1e-5; a source term of the
    # flow's own size (velocity gradients ~ 1-7) would exceed it by 5 orders.
    rng = np.random.default_rng(7)
    lo, hi = np.array([0.3, -0.9, -0.7]), np.array([3.7, 0.9, 0.7])
    points = rng.uniform(lo, hi, size=(4000, 3))
    h = 1e-4
    for t in (0.0, 1.3, 3.7):
        divergence = np.zeros(len(points))
        for axis in range(3):
            step = np.zeros(3)
            step[axis] = h
            divergence += (
                demo.wake_velocity(points + step, t)[:, axis] - demo.wake_velocity(points - step, t)[:, axis]
            ) / (2 * h)
        assert np.abs(divergence).max() < 1e-5


def test_vortex_pair_descends_at_the_mutual_induction_speed():
    # A pair of opposite line vortices a distance d apart translates at Gamma/(2 pi d)
    # perpendicular to the line joining them (Lamb 1932, Hydrodynamics, art. 155; from memory).
    # At each axis the field minus free stream, crosswind and gust must be (0, 0, -Gamma/(2 pi d)).
    # Lamb-Oseen correction exp(-d^2/rc^2) ~ 1e-25 is below round-off; tolerance 1e-12.
    x = np.linspace(0.0, 4.0, 9)
    t = 1.7
    y, z = demo.vortex_centres(x, t)
    d = y[:, 0] - y[:, 1]
    assert np.allclose(d, 2 * demo.HALF_SEPARATION, atol=1e-14)
    for side in range(2):
        u = demo.wake_velocity(np.column_stack([x, y[:, side], z]), t)
        u[:, 0] -= demo.U_INF
        u[:, 1] -= demo.CROSSWIND
        u[:, 2] -= demo.gust_velocity(x, t)
        expected = -demo.GAMMA / (2 * math.pi * d)
        np.testing.assert_allclose(u[:, :2], 0.0, atol=1e-12)
        np.testing.assert_allclose(u[:, 2], expected, rtol=1e-12)
    # Downwash between the axes behind a wing lifting in +z (common practice sign convention).
    mid = np.column_stack([x, y.mean(axis=1), z])
    assert np.all(demo.wake_velocity(mid, t)[:, 2] - demo.gust_velocity(x, t) < 0.0)


def test_vortex_axes_are_material_lines():
    # A particle started on an axis stays on it: integrate with SciPy's DOP853 (Hairer, Norsett
    # & Wanner 1993) at rtol 1e-11; position error tolerance 1e-7 (the core is a neutrally stable
    # elliptic point, so integration errors do not grow exponentially).
    for t0, x0, side in ((0.0, 0.0, 0), (0.4, 0.2, 1), (1.1, 0.5, 0)):
        y0, z0 = demo.vortex_centres(np.array([x0]), t0)
        start = [x0, y0[0, side], z0[0]]
        sol = solve_ivp(
            lambda t, p: demo.wake_velocity(p[None, :], t)[0],
            (t0, t0 + 2.5),
            start,
            method="DOP853",
            rtol=1e-11,
            atol=1e-12,
        )
        assert sol.success
        end = sol.y[:, -1]
        y1, z1 = demo.vortex_centres(np.array([end[0]]), sol.t[-1])
        assert end[0] == pytest.approx(x0 + demo.U_INF * 2.5, abs=1e-9)
        assert abs(end[1] - y1[0, side]) < 1e-7
        assert abs(end[2] - z1[0]) < 1e-7


def test_vortex_cores_stay_inside_the_box():
    # Whole core (axis +- 2 rc) inside the box for every snapshot time of the default case.
    x = np.linspace(BOX[0], BOX[1], 401)
    for t in np.arange(41) * 0.1:
        y, z = demo.vortex_centres(x, t)
        margin = 2 * demo.CORE_RADIUS
        assert y.min() - margin > BOX[2] and y.max() + margin < BOX[3]
        assert z.min() - margin > BOX[4] and z.max() + margin < BOX[5]


def test_wake_velocity_rejects_bad_shape():
    with pytest.raises(ValueError):
        demo.wake_velocity(np.zeros((4, 2)), 0.0)


# ------------------------------------------------------------------------------------------
# Files
# ------------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def small_case(tmp_path_factory):
    directory = tmp_path_factory.mktemp("wake")
    return directory, demo.generate(directory, snapshots=3, dt=0.1)


def _read_vtu(path):
    reader = vtkXMLUnstructuredGridReader()
    reader.SetFileName(str(path))
    reader.Update()
    return reader.GetOutput()


def test_generate_writes_readable_snapshots(small_case, mesh):
    directory, paths = small_case
    assert [p.name for p in paths] == ["wake_0000.vtu", "wake_0001.vtu", "wake_0002.vtu"]
    assert not list(directory.glob("*.tmp")) and not list(directory.glob(".*.tmp"))
    for index, path in enumerate(paths):
        grid = _read_vtu(path)
        assert grid.GetNumberOfCells() == mesh.n_cells
        assert grid.GetNumberOfPoints() == mesh.n_points
        u = grid.GetCellData().GetArray("U")
        assert u.GetDataTypeAsString() == "double"
        velocity = vtk_to_numpy(u)
        assert velocity.shape == (mesh.n_cells, 3)
        stamp = grid.GetFieldData().GetArray("time")
        assert stamp.GetDataTypeAsString() == "double" and stamp.GetNumberOfTuples() == 1
        t = stamp.GetTuple1(0)
        assert t == pytest.approx(0.1 * index, abs=1e-15)
        # U is the analytic field at the cell centres as VTK computes them (vtkCellCenters:
        # parametric centres, which are the centroids of straight tetrahedra and prisms).
        centres = vtkCellCenters()
        centres.SetInputData(grid)
        centres.Update()
        xyz = vtk_to_numpy(centres.GetOutput().GetPoints().GetData())
        expected = demo.wake_velocity(xyz, t)
        is_tet = np.asarray(pv.wrap(grid).celltypes) == pv.CellType.TETRA
        # Tetrahedra: centre (0.25, 0.25, 0.25) is exact; round-off ~1e-16 x gradients (<~ 10).
        np.testing.assert_allclose(velocity[is_tet], expected[is_tet], rtol=0.0, atol=1e-12)
        # Wedges: VTK hard-codes the parametric centre as (0.333333, 0.333333, 0.5) (checked with
        # vtkWedge.GetParametricCenter), a 3.3e-7 shift x cell size (< 0.15) x |grad u| (< 7)
        # = 3.5e-7 in velocity; 1e-6 still catches any other centre (half a layer = 0.04 away).
        np.testing.assert_allclose(velocity[~is_tet], expected[~is_tet], rtol=0.0, atol=1e-6)


def test_generate_output_readable_by_meshio(small_case, mesh):
    _, paths = small_case
    read = meshio.read(paths[2])
    assert {block.type: len(block.data) for block in read.cells} == {
        "tetra": int(np.count_nonzero(mesh.celltypes == pv.CellType.TETRA)),
        "wedge": int(np.count_nonzero(mesh.celltypes == pv.CellType.WEDGE)),
    }
    velocity = np.concatenate(read.cell_data["U"])
    assert velocity.shape == (mesh.n_cells, 3) and velocity.dtype == np.float64
    assert read.field_data["time"].tolist() == pytest.approx([0.2], abs=1e-15)
    np.testing.assert_allclose(read.points, mesh.points, rtol=0.0, atol=0.0)


def test_generate_writes_wing_and_marker(small_case):
    directory, _ = small_case
    reader = vtkXMLPolyDataReader()
    reader.SetFileName(str(directory / "wing.vtp"))
    reader.Update()
    wing = pv.wrap(reader.GetOutput())
    assert wing.n_cells > 0
    assert wing.bounds[1] <= BOX[0]  # just upstream of the box
    assert wing.area == pytest.approx(demo.WING_CHORD * 2 * demo.HALF_SEPARATION, rel=1e-12)
    info = json.loads((directory / ".complete").read_text())
    assert info["snapshots"] == 3 and info["dt"] == 0.1
    assert info["files"] == ["wake_0000.vtu", "wake_0001.vtu", "wake_0002.vtu"]


def test_cli_skips_complete_case_and_force_regenerates(tmp_path, capsys):
    assert demo.main([str(tmp_path), "--snapshots", "2"]) == 0
    first = (tmp_path / "wake_0000.vtu").stat().st_mtime_ns
    assert demo.main([str(tmp_path)]) == 0
    assert f"demo case already present: {tmp_path}" in capsys.readouterr().out
    assert (tmp_path / "wake_0000.vtu").stat().st_mtime_ns == first
    assert (tmp_path / "wake_0001.vtu").exists()
    # --force rewrites, and a smaller run drops the stale later snapshot.
    assert demo.main([str(tmp_path), "--snapshots", "1", "--force"]) == 0
    assert sorted(p.name for p in tmp_path.glob("wake_*.vtu")) == ["wake_0000.vtu"]
    assert json.loads((tmp_path / ".complete").read_text())["snapshots"] == 1


def test_incomplete_case_is_regenerated(tmp_path, capsys):
    # A folder with snapshots but no marker (an interrupted run) is not taken as complete.
    (tmp_path / "wake_0000.vtu").write_text("truncated")
    assert demo.main([str(tmp_path), "--snapshots", "1"]) == 0
    assert "already present" not in capsys.readouterr().out
    assert _read_vtu(tmp_path / "wake_0000.vtu").GetNumberOfCells() > 0


@pytest.mark.parametrize("args", [["--snapshots", "0"], ["--dt", "0"], ["--dt", "nan"]])
def test_cli_rejects_bad_arguments(tmp_path, args):
    with pytest.raises(SystemExit) as exc:
        demo.main([str(tmp_path), *args])
    assert exc.value.code == 2
