"""Mesh topology prepared once per static mesh: point location, interpolation, cell sizes, cell-to-point.

:class:`Mesh` wraps a ``vtkUnstructuredGrid`` that holds topology only. It builds, once:

* a conforming tetrahedral decomposition with face neighbours and a box tree (:mod:`vtkflow.tetmesh`),
  used by the numba point locator of :mod:`vtkflow.kernels` to interpolate point arrays linearly in the
  tetrahedra (exact for fields linear in space, on every cell type);
* the local cell size at each point (the smallest size of the cells that use the point, a cell's size
  being its bounding-box diagonal over sqrt(3)), which bounds integration steps;
* a sparse cell-to-point averaging matrix (each point gets the plain mean of the cells that use it, as VTK's
  ``vtkCellDataToPointData`` does by default).

Nothing here knows about recipes.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import scipy.sparse as sp

from . import _vtk
from ._vtk import vtk_to_numpy
from .kernels import Locator, cell_sizes, fill_columns
from .tetmesh import decompose

__all__ = ["Mesh", "CELL_TYPE_NAMES", "cell_types"]

#: Names of the VTK cell types vtkflow reports.
CELL_TYPE_NAMES = {
    1: "vertex",
    3: "line",
    4: "polyline",
    5: "triangle",
    8: "pixel",
    9: "quad",
    11: "voxel",
    10: "tetra",
    12: "hexahedron",
    13: "wedge",
    14: "pyramid",
    42: "polyhedron",
}


class Mesh:
    """Topology of a static unstructured mesh with its search and interpolation structures.

    Parameters
    ----------
    grid : vtkUnstructuredGrid
        The mesh; its arrays are ignored (a shallow copy of the geometry is kept).
    """

    def __init__(self, grid: Any) -> None:
        topo = _vtk.vtkUnstructuredGrid()
        topo.CopyStructure(grid)
        self.grid = topo
        self.n_points = int(topo.GetNumberOfPoints())
        self.n_cells = int(topo.GetNumberOfCells())
        if self.n_points == 0 or self.n_cells == 0:
            raise ValueError("the mesh has no points or no cells")
        self.points = vtk_to_numpy(topo.GetPoints().GetData()).astype(np.float64, copy=False)
        self.bounds = np.array(topo.GetBounds(), dtype=np.float64).reshape(3, 2)
        cells = topo.GetCells()
        self.offsets = vtk_to_numpy(cells.GetOffsetsArray()).astype(np.int64, copy=False)
        self.connectivity = vtk_to_numpy(cells.GetConnectivityArray()).astype(np.int64, copy=False)
        self.cell_types = cell_types(topo)
        self._to_point: sp.csr_matrix | None = None
        self.tetmesh = decompose(self.points, self.offsets, self.connectivity, self.cell_types)
        # a mesh of tetrahedra only has its sizes from the decomposition's pass over its cells
        sizes = self.tetmesh.sizes
        self.cell_size, self.point_size = sizes if sizes is not None else self._cell_sizes()
        self.locator = Locator(self.tetmesh)
        self._values: np.ndarray | None = None

    # ------------------------------------------------------------------------------------- summaries
    @property
    def diagonal(self) -> float:
        """Length of the bounding box diagonal."""
        return float(np.linalg.norm(self.bounds[:, 1] - self.bounds[:, 0]))

    def cell_type_counts(self) -> dict[str, int]:
        """Number of cells of each type, by name (``tetra``, ``wedge``, ...)."""
        kinds, counts = np.unique(self.cell_types, return_counts=True)
        return {CELL_TYPE_NAMES.get(int(k), f"type {int(k)}"): int(c) for k, c in zip(kinds, counts)}

    def same_topology(self, grid: Any) -> bool:
        """Cheap check that ``grid`` has this mesh's topology: counts, cell types, connectivity and points."""
        if grid.GetNumberOfPoints() != self.n_points or grid.GetNumberOfCells() != self.n_cells:
            return False
        cells = grid.GetCells()
        conn = vtk_to_numpy(cells.GetConnectivityArray())
        if conn.shape != self.connectivity.shape or not np.array_equal(conn, self.connectivity):
            return False
        if not np.array_equal(cell_types(grid), self.cell_types):
            return False
        pts = vtk_to_numpy(grid.GetPoints().GetData())
        return bool(np.array_equal(pts, self.points))

    # ---------------------------------------------------------------------------------- conversions
    def cell_to_point(self, values: np.ndarray) -> np.ndarray:
        """Average cell values onto points: each point gets the mean over the cells that use it.

        Parameters
        ----------
        values : (n_cells,) or (n_cells, k) ndarray

        Returns
        -------
        (n_points,) or (n_points, k) ndarray of float64. A NaN in any adjacent cell makes the point NaN.
        """
        if self._to_point is None:
            ones = np.ones(self.connectivity.size)
            counts = np.bincount(self.connectivity, minlength=self.n_points).astype(np.float64)
            weights = ones / np.maximum(counts, 1.0)[self.connectivity]
            self._to_point = sp.csr_matrix(
                (weights, (self.connectivity, np.repeat(np.arange(self.n_cells), np.diff(self.offsets)))),
                shape=(self.n_points, self.n_cells),
            )
        return np.asarray(self._to_point @ np.asarray(values, dtype=np.float64))

    # -------------------------------------------------------------------------------------- probing
    def set_point_data(self, data: np.ndarray) -> None:
        """Set the point array (``(n_points, k)``) that :meth:`sample` interpolates."""
        data = np.asarray(data, dtype=np.float64).reshape(self.n_points, -1)
        self._values = np.ascontiguousarray(self.tetmesh.extend(data))

    def set_point_columns(self, col: int, data: np.ndarray) -> None:
        """Overwrite columns ``col, col + 1, ..`` of the point array set by :meth:`set_point_data`, in place,
        with ``data`` (``(n_points, k)``; extended to the decomposition's added points)."""
        data = np.asarray(data, dtype=np.float64).reshape(self.n_points, -1)
        fill_columns(self.values, col, data)
        centres = self.tetmesh.centres
        if centres.shape[0]:
            self._values[self.n_points:, col:col + data.shape[1]] = np.asarray(centres @ data)

    @property
    def values(self) -> np.ndarray:
        """The point array set by :meth:`set_point_data`, extended to the decomposition's added points."""
        if self._values is None:
            raise RuntimeError("Mesh.values needs set_point_data first")
        return self._values

    def sample(self, points: np.ndarray, hints: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
        """Interpolate the array set by :meth:`set_point_data` at ``points``.

        Parameters
        ----------
        points : (N, 3) ndarray
        hints : (N,) ndarray of int, optional
            Tetrahedra to start the point location walk from (see :meth:`locate`).

        Returns
        -------
        values : (N, k) ndarray of float64 (zeros where not found)
        inside : (N,) ndarray of bool, False for points outside the mesh
        """
        values, tets = self.sample_cells(points, hints)
        return values, tets >= 0

    def sample_cells(self, points: np.ndarray, hints: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
        """:meth:`sample` with the tetrahedron of the decomposition found at each point (-1 outside) in place
        of the inside mask."""
        if self._values is None:
            raise RuntimeError("Mesh.sample needs set_point_data first")
        tets, bary = self.locator.locate(points, hints)
        return self.locator.interpolate(tets, bary, self._values), tets

    def locate(self, points: np.ndarray, hints: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
        """Containing tetrahedron of the decomposition (-1 outside) and barycentric coordinates."""
        return self.locator.locate(points, hints)

    def contains(self, points: np.ndarray) -> np.ndarray:
        """Which of ``points`` (``(N, 3)``) lie in the mesh (faces, edges and vertices included)."""
        return self.locator.locate(points)[0] >= 0

    def _cell_sizes(self) -> tuple[np.ndarray, np.ndarray]:
        """Size of each cell: its bounding-box diagonal over sqrt(3), the edge of the cube with the same
        diagonal (a hexahedron's edge; common practice for step control); and at each point the smallest
        size of the cells that use it. Zero sizes get the smallest positive size of the mesh, so that no
        step bound is zero (:func:`vtkflow.kernels.cell_sizes`)."""
        return cell_sizes(self.points, self.offsets, self.connectivity)


def cell_types(grid: Any) -> np.ndarray:
    """Cell type of every cell (VTK >= 9.6 returns the array from ``GetCellTypes()``; older VTK from
    ``GetCellTypesArray()``)."""
    try:
        arr = grid.GetCellTypes()
    except TypeError:
        arr = None
    if not hasattr(arr, "GetNumberOfTuples"):
        arr = grid.GetCellTypesArray()
    return vtk_to_numpy(arr).astype(np.uint8)
