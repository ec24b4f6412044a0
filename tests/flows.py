"""Analytic flows, small meshes and series writers shared by the tests.

Each flow cites where its closed form comes from; the meshes are plain boxes cut into cells of one
type, so that the tests control the cell size ``h`` their tolerances are stated against.
"""

from __future__ import annotations

from pathlib import Path
from typing import Callable, Sequence

import numpy as np
import pyvista as pv
from vtkmodules.vtkCommonCore import vtkDoubleArray
from vtkmodules.vtkIOXML import vtkXMLUnstructuredGridWriter

Flow = Callable[[np.ndarray, float], np.ndarray]


def box_mesh(low: Sequence[float], high: Sequence[float], cells: Sequence[int], kind: str = "tetra") -> pv.UnstructuredGrid:
    """A box cut into ``cells`` hexahedra per direction, optionally split into tetrahedra.

    kind : 'hexahedron', 'voxel' or 'tetra' (VTK's conforming split of the cubes)
    """
    low, high = np.asarray(low, float), np.asarray(high, float)
    n = np.asarray(cells)
    grid = pv.ImageData(dimensions=tuple(n + 1), spacing=tuple((high - low) / n), origin=tuple(low))
    if kind == "tetra":
        return grid.triangulate().cast_to_unstructured_grid()
    voxels = grid.cast_to_unstructured_grid()
    if kind == "voxel":
        return voxels
    # a voxel lists its corners x fastest (0, 1, 2, 3 = (0,0), (1,0), (0,1), (1,1)); a hexahedron goes round
    conn = np.asarray(voxels.cells_dict[pv.CellType.VOXEL])[:, [0, 1, 3, 2, 4, 5, 7, 6]]
    return pv.UnstructuredGrid({pv.CellType.HEXAHEDRON: conn}, np.asarray(voxels.points))


def write_series(
    mesh: pv.UnstructuredGrid,
    flow: Flow,
    times: Sequence[float],
    folder: Path,
    association: str = "point",
    name: str = "U",
    stem: str = "snap",
    time_field: str | None = "time",
    cell_data: dict | None = None,
) -> list[Path]:
    """Sample ``flow(points, t)`` on ``mesh`` at each time and write one .vtu per time (with ``cell_data``
    arrays added to every file)."""
    folder.mkdir(parents=True, exist_ok=True)
    where = mesh.points if association == "point" else mesh.cell_centers().points
    paths = []
    for k, t in enumerate(times):
        m = mesh.copy(deep=False)
        m.clear_data()
        u = np.asarray(flow(np.asarray(where, float), float(t)), dtype=np.float64)
        (m.point_data if association == "point" else m.cell_data)[name] = u
        for key, values in (cell_data or {}).items():
            m.cell_data[key] = values
        if time_field:
            arr = vtkDoubleArray()
            arr.SetName(time_field)
            arr.InsertNextValue(float(t))
            m.GetFieldData().AddArray(arr)
        p = folder / f"{stem}_{k:04d}.vtu"
        w = vtkXMLUnstructuredGridWriter()
        w.SetFileName(str(p))
        w.SetInputData(m)
        w.Write()
        paths.append(p)
    return paths


# ----------------------------------------------------------------------------------------------- flows
def oscillating(U: float, V: float, omega: float) -> Flow:
    """Uniform flow with an oscillating cross component, ``u = (U, V sin(omega t), 0)``.

    Closed forms (direct integration, e.g. any fluid-mechanics text's kinematics chapter; common practice):
    a particle released at ``(x0, y0)`` at ``tau`` is at ``x0 + U (t - tau)``,
    ``y0 + V/omega (cos(omega tau) - cos(omega t))``; the streamline at ``t`` is straight along
    ``(U, V sin(omega t), 0)``.
    """

    def u(x: np.ndarray, t: float) -> np.ndarray:
        out = np.zeros_like(x)
        out[:, 0] = U
        out[:, 1] = V * np.sin(omega * t)
        return out

    return u


def oscillating_position(p0: np.ndarray, tau: np.ndarray, t: float, U: float, V: float, omega: float) -> np.ndarray:
    """Where a particle released at ``p0`` at time ``tau`` is at time ``t`` in :func:`oscillating`."""
    p0 = np.atleast_2d(p0).astype(float)
    tau = np.asarray(tau, dtype=float)
    out = np.array(np.broadcast_to(p0, np.broadcast_shapes(p0.shape, tau.shape + (3,))), dtype=float)
    out[..., 0] += U * (t - tau)
    out[..., 1] += V / omega * (np.cos(omega * tau) - np.cos(omega * t))
    return out


def abc(A: float = np.sqrt(3.0), B: float = np.sqrt(2.0), C: float = 1.0) -> Flow:
    """Arnold–Beltrami–Childress flow (Dombre, Frisch, Greene, Hénon, Mehr & Soward 1986, J. Fluid Mech. 167):
    ``u = (A sin z + C cos y, B sin x + A cos z, C sin y + B cos x)``."""

    def u(x: np.ndarray, t: float) -> np.ndarray:
        X, Y, Z = x[:, 0], x[:, 1], x[:, 2]
        return np.stack([A * np.sin(Z) + C * np.cos(Y), B * np.sin(X) + A * np.cos(Z), C * np.sin(Y) + B * np.cos(X)], axis=1)

    return u


def lamb_oseen(gamma: float, rc: float, center: Sequence[float] = (0.0, 0.0)) -> Flow:
    """Lamb–Oseen vortex about the z axis (Lamb 1932, *Hydrodynamics*, 6th ed., §334a; Oseen 1912):
    ``u_theta = gamma / (2 pi r) (1 - exp(-r^2 / rc^2))``, steady with a fixed core radius ``rc``."""
    cx, cy = center

    def u(x: np.ndarray, t: float) -> np.ndarray:
        dx, dy = x[:, 0] - cx, x[:, 1] - cy
        r2 = dx * dx + dy * dy
        with np.errstate(invalid="ignore", divide="ignore"):
            f = np.where(r2 > 0, gamma / (2 * np.pi * r2) * (1 - np.exp(-r2 / rc**2)), gamma / (2 * np.pi * rc**2))
        return np.stack([-f * dy, f * dx, np.zeros_like(dx)], axis=1)

    return u


def lamb_oseen_omega(gamma: float, rc: float, r: np.ndarray) -> np.ndarray:
    """Angular velocity ``u_theta / r`` of :func:`lamb_oseen` at radius ``r``."""
    r = np.asarray(r, float)
    return gamma / (2 * np.pi * r**2) * (1 - np.exp(-(r**2) / rc**2))


def helix(omega: float, w: float) -> Flow:
    """Solid-body rotation about z with axial flow, ``u = (-omega y, omega x, w)``: linear in space, so
    every cell type interpolates it exactly; particle paths are helices (common practice)."""

    def u(x: np.ndarray, t: float) -> np.ndarray:
        return np.stack([-omega * x[:, 1], omega * x[:, 0], np.full(len(x), w)], axis=1)

    return u


def write_recipe(path: Path, text: str) -> Path:
    path.write_text(text)
    return path


def run_case(folder: Path, mesh: pv.UnstructuredGrid, flow: Flow, times: Sequence[float], body: str,
             association: str = "point") -> tuple[dict, Path]:
    """Write a series of ``flow`` on ``mesh`` and run a recipe whose ``releases``/``lines`` are ``body``.

    Returns the manifest and the output folder.
    """
    from vtkflow.recipe import load_recipe
    from vtkflow.run import run_recipe

    write_series(mesh, flow, times, folder / "case", association=association)
    recipe = folder / "recipe.yaml"
    recipe.write_text("vtkflow: 1\ndata: {files: 'case/*.vtu', velocity: U}\noutput: out\n" + body)
    manifest = run_recipe(load_recipe(recipe), warn=lambda msg: None)
    return manifest, folder / "out"


def last_frame(out: Path, manifest: dict, entry: str) -> pv.PolyData:
    """The last frame of an entry, read with VTK's XML reader (through PyVista)."""
    return pv.read(out / manifest["entries"][entry]["frames"][-1]["file"])


def polylines_of(mesh: pv.PolyData) -> list[np.ndarray]:
    """Point index arrays of each polyline of a PolyData."""
    lines = np.asarray(mesh.lines)
    out, i = [], 0
    while i < len(lines):
        n = lines[i]
        out.append(lines[i + 1:i + 1 + n])
        i += n + 1
    return out


def distance_to_polyline(points: np.ndarray, line: np.ndarray) -> np.ndarray:
    """Distance of each point to a polyline given by its vertices (M, 3)."""
    a, b = line[:-1], line[1:]
    ab = b - a
    L2 = np.maximum((ab * ab).sum(axis=1), 1e-300)
    p = points[:, None, :]
    s = np.clip(((p - a) * ab).sum(axis=2) / L2, 0.0, 1.0)
    d = np.linalg.norm(p - (a + s[..., None] * ab), axis=2)
    return d.min(axis=1)


def with_(recipe: dict, dotted: str, value) -> dict:
    """A copy of a recipe dict with the key at ``dotted`` (e.g. ``lines.paths.stop``) set to ``value``."""
    import copy

    out = copy.deepcopy(recipe)
    *parents, last = dotted.split(".")
    node = out
    for p in parents:
        node = node[p]
    node[last] = value
    return out
