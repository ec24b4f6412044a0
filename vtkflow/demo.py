"""Synthetic demo case: a meandering trailing-vortex pair behind a small wing in a gusting crosswind.

The case is our own scenario, synthesised from an analytic unsteady flow so that it needs no
solver and no downloaded data. It consists of

* a conforming, unstructured, mixed-cell 3-D mesh of the box
  ``x in [0, 4]``, ``y in [-1, 1]``, ``z in [-0.75, 0.75]`` (tetrahedra in the upstream third,
  wedges downstream), built by :func:`build_mesh`;
* the analytic velocity field :func:`wake_velocity` (free stream, two counter-rotating
  Lamb--Oseen vortices whose axes meander, drift with the crosswind and descend under their mutual
  induction, plus a convected vertical gust);
* snapshots ``wake_0000.vtu``, ``wake_0001.vtu``, ... with the velocity as the cell array ``U`` and
  the time as the field array ``time``, and a flat-plate wing surface ``wing.vtp`` just upstream of
  the box, written by :func:`generate`.

Run ``python -m vtkflow.demo DIR [--snapshots 41] [--dt 0.1] [--force]``.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import re
import sys
import time as _time

from pathlib import Path

import numpy as np
import pyvista as pv
from scipy.spatial import Delaunay
from vtkmodules.util.numpy_support import numpy_to_vtk
from vtkmodules.vtkCommonDataModel import vtkDataObject, vtkUnstructuredGrid
from vtkmodules.vtkIOXML import vtkXMLPolyDataWriter, vtkXMLUnstructuredGridWriter, vtkXMLWriter

from .output import atomic_path
from .tetmesh import split_wedges

__all__ = [
    "U_INF",
    "GAMMA",
    "CORE_RADIUS",
    "HALF_SEPARATION",
    "Z_ORIGIN",
    "CROSSWIND",
    "DESCENT_SPEED",
    "GUST_AMPLITUDE",
    "GUST_WAVELENGTH",
    "GUST_PERIOD",
    "MEANDER_Y",
    "MEANDER_Z",
    "DOMAIN_BOUNDS",
    "lamb_oseen_velocity",
    "vortex_centres",
    "gust_velocity",
    "wake_velocity",
    "build_mesh",
    "build_wing",
    "snapshot_name",
    "generate",
    "main",
]

# --------------------------------------------------------------------------------------------
# Flow parameters (dimensionless: lengths in wing spans-ish, velocities in units of U_INF)
# --------------------------------------------------------------------------------------------
U_INF = 1.0
"""Free-stream speed along +x."""
GAMMA = 0.6
"""Circulation magnitude of each trailing vortex; +GAMMA at y > 0, -GAMMA at y < 0 (lifting wing)."""
CORE_RADIUS = 0.12
"""Lamb--Oseen core radius r_c."""
HALF_SEPARATION = 0.45
"""Nominal |y| of the vortex axes at the wing trailing edge x = 0."""
Z_ORIGIN = 0.0
"""Nominal z of the vortex axes at x = 0 (the wing plane)."""
CROSSWIND = 0.03
"""Uniform crosswind speed along +y."""
DESCENT_SPEED = GAMMA / (2.0 * math.pi * 2.0 * HALF_SEPARATION)
"""Speed at which the pair descends: each vortex sits in the other's field Gamma/(2 pi d), d = 0.9."""
GUST_AMPLITUDE = 0.04
"""Amplitude A of the vertical gust."""
GUST_WAVELENGTH = 2.0
"""Wavelength of the convected gust pattern along x."""
GUST_PERIOD = 2.5
"""Period of the gust's temporal modulation."""
MEANDER_Y: tuple[tuple[float, float, float], ...] = ((0.05, 1.6, 0.3), (0.02, 0.7, 1.1))
"""Lateral meander of both axes: (amplitude, wavelength, phase) of sinusoids in x - U_INF t."""
MEANDER_Z: tuple[tuple[float, float, float], ...] = ((0.04, 2.3, 0.8), (0.015, 0.9, 2.0))
"""Vertical meander of both axes: (amplitude, wavelength, phase) of sinusoids in x - U_INF t."""

# --------------------------------------------------------------------------------------------
# Mesh parameters
# --------------------------------------------------------------------------------------------
DOMAIN_BOUNDS = (0.0, 4.0, -1.0, 1.0, -0.75, 0.75)
"""(xmin, xmax, ymin, ymax, zmin, zmax) of the meshed box."""
N_LAYERS = 48
"""Number of cell layers along x."""
N_TET_LAYERS = 16
"""The first (upstream) layers whose wedges are split into three tetrahedra each."""
N_NODES_Y = 33
"""Cross-section nodes across y (including both boundary nodes)."""
N_NODES_Z = 25
"""Cross-section nodes across z (including both boundary nodes)."""
CLUSTER_RATIO = 2.5
"""Node density near the vortex paths relative to the far field (per direction)."""
JITTER = 0.25
"""Random node displacement as a fraction of the local node spacing (keeps nodes ordered)."""
SEED = 20240601
"""Seed of the jitter's numpy.random.default_rng; fixed so the mesh is deterministic."""

WING_CHORD = 0.35
"""Chord of the flat-plate wing, which spans x in [-WING_CHORD, 0] at z = Z_ORIGIN."""

SNAPSHOT_PATTERN = "wake_{:04d}.vtu"
COMPLETE_MARKER = ".complete"
WING_FILE = "wing.vtp"
_SNAPSHOT_RE = re.compile(r"^wake_\d{4,}\.vtu$")

# --------------------------------------------------------------------------------------------
# Flow
# --------------------------------------------------------------------------------------------
def lamb_oseen_velocity(
    dy: np.ndarray, dz: np.ndarray, gamma: float, core_radius: float
) -> tuple[np.ndarray, np.ndarray]:
    """In-plane velocity of a Lamb--Oseen vortex whose axis points along +x.

    Tangential velocity ``v_theta(r) = gamma / (2 pi r) * (1 - exp(-r**2 / core_radius**2))``
    (Lamb 1932, *Hydrodynamics*, 6th ed., art. 334a), counter-clockwise about +x for
    ``gamma > 0``.

    Parameters
    ----------
    dy, dz : numpy.ndarray
        Offsets of the evaluation points from the vortex axis (broadcastable).
    gamma : float
        Circulation.
    core_radius : float
        Core radius r_c (> 0).

    Returns
    -------
    tuple of numpy.ndarray
        ``(v_y, v_z)``; both vanish on the axis (the solid-body limit is used for tiny r).
    """
    dy = np.asarray(dy, dtype=float)
    dz = np.asarray(dz, dtype=float)
    r2 = dy * dy + dz * dz
    s = r2 / core_radius**2
    small = s < 1e-8
    # (1 - exp(-s)) / r^2, with its series 1/rc^2 (1 - s/2) where s is tiny.
    factor = np.where(
        small,
        (1.0 - 0.5 * s) / core_radius**2,
        -np.expm1(-s) / np.where(small, 1.0, r2),
    )
    scale = gamma / (2.0 * math.pi) * factor
    return -scale * dz, scale * dy


def _meander(xi: np.ndarray, modes: tuple[tuple[float, float, float], ...]) -> np.ndarray:
    """Sum of sinusoids ``a sin(2 pi xi / wavelength + phase)`` over ``modes``."""
    out = np.zeros_like(xi)
    for amplitude, wavelength, phase in modes:  # a handful of modes, not a per-point loop
        out += amplitude * np.sin(2.0 * math.pi * xi / wavelength + phase)
    return out


def gust_velocity(x: np.ndarray, t: float) -> np.ndarray:
    """Vertical gust ``w_g(x, t) = A sin(k (x - U_INF t)) sin(omega t)``.

    ``A = GUST_AMPLITUDE``, ``k = 2 pi / GUST_WAVELENGTH``, ``omega = 2 pi / GUST_PERIOD``.

    Parameters
    ----------
    x : numpy.ndarray
        Streamwise coordinates.
    t : float
        Time.

    Returns
    -------
    numpy.ndarray
        ``w_g`` with the shape of ``x``.
    """
    k = 2.0 * math.pi / GUST_WAVELENGTH
    omega = 2.0 * math.pi / GUST_PERIOD
    return GUST_AMPLITUDE * np.sin(k * (np.asarray(x, dtype=float) - U_INF * t)) * math.sin(omega * t)


def vortex_centres(x: np.ndarray, t: float) -> tuple[np.ndarray, np.ndarray]:
    """Positions of the two vortex axes in the cross-section at streamwise stations ``x``.

    With ``xi = x - U_INF t`` (the meander is convected with the free stream) and
    ``tau = x / U_INF`` (the age of the vortex segment since it left the wing at x = 0)::

        y_pm(x, t) = +-HALF_SEPARATION + CROSSWIND tau + sum_j a_j sin(2 pi xi / l_j + p_j)
        z(x, t)    = Z_ORIGIN - DESCENT_SPEED tau + sum_j b_j sin(2 pi xi / m_j + q_j)
                     + (A / omega) sin(k xi) [cos(omega (t - tau)) - cos(omega t)]

    The last term is the displacement accumulated in the gust since the segment was shed. Every
    term moves with the local fluid velocity of :func:`wake_velocity`, so each axis is a material
    line of the flow (a particle started on an axis stays on it).

    Parameters
    ----------
    x : numpy.ndarray
        Streamwise stations.
    t : float
        Time.

    Returns
    -------
    tuple of numpy.ndarray
        ``(y, z)``: ``y`` has shape ``x.shape + (2,)`` with the positive-circulation axis (y > 0)
        first; both axes share ``z`` (shape ``x.shape``).
    """
    x = np.asarray(x, dtype=float)
    xi = x - U_INF * t
    tau = x / U_INF
    y_common = CROSSWIND * tau + _meander(xi, MEANDER_Y)
    k = 2.0 * math.pi / GUST_WAVELENGTH
    omega = 2.0 * math.pi / GUST_PERIOD
    gust_shift = (GUST_AMPLITUDE / omega) * np.sin(k * xi) * (np.cos(omega * (t - tau)) - math.cos(omega * t))
    z = Z_ORIGIN - DESCENT_SPEED * tau + _meander(xi, MEANDER_Z) + gust_shift
    y = np.stack([y_common + HALF_SEPARATION, y_common - HALF_SEPARATION], axis=-1)
    return y, z


def wake_velocity(points: np.ndarray, t: float) -> np.ndarray:
    """Analytic unsteady velocity of the demo wake.

    ``u = (U_INF, CROSSWIND, w_g(x, t)) + sum_{s=+-} LO(y - y_s(x, t), z - z_c(x, t); s GAMMA)``

    where ``LO`` is the in-plane Lamb--Oseen velocity of :func:`lamb_oseen_velocity`
    (axis along x, ``v_theta = Gamma/(2 pi r) (1 - exp(-r^2/r_c^2))``, r_c = ``CORE_RADIUS``),
    ``y_s, z_c`` are the meandering axis positions of :func:`vortex_centres` and ``w_g`` is the
    gust of :func:`gust_velocity`. The +GAMMA vortex sits at y > 0, giving downwash between the
    axes as behind a wing lifting in +z.

    Every x = const slice carries a planar divergence-free field and ``u`` is uniform, so the field
    is exactly solenoidal.

    Parameters
    ----------
    points : numpy.ndarray
        ``(N, 3)`` positions.
    t : float
        Time.

    Returns
    -------
    numpy.ndarray
        ``(N, 3)`` float64 velocities.

    Raises
    ------
    ValueError
        If ``points`` is not an ``(N, 3)`` array.
    """
    p = np.asarray(points, dtype=float)
    if p.ndim != 2 or p.shape[1] != 3:
        raise ValueError(f"points must have shape (N, 3), got {p.shape}")
    x, y, z = p[:, 0], p[:, 1], p[:, 2]
    yc, zc = vortex_centres(x, t)
    dz = z - zc
    vy_pos, vz_pos = lamb_oseen_velocity(y - yc[:, 0], dz, GAMMA, CORE_RADIUS)
    vy_neg, vz_neg = lamb_oseen_velocity(y - yc[:, 1], dz, -GAMMA, CORE_RADIUS)
    u = np.empty_like(p)
    u[:, 0] = U_INF
    u[:, 1] = CROSSWIND + vy_pos + vy_neg
    u[:, 2] = gust_velocity(x, t) + vz_pos + vz_neg
    return u


# --------------------------------------------------------------------------------------------
# Mesh
# --------------------------------------------------------------------------------------------
def _graded_nodes(lo: float, hi: float, n: int, centres: list[float], width: float) -> np.ndarray:
    """``n`` nodes on ``[lo, hi]`` with density raised by CLUSTER_RATIO near ``centres``.

    The node positions invert the normalised cumulative density
    ``1 + (CLUSTER_RATIO - 1) sum_c exp(-((s - c)/width)^2)``.
    """
    s = np.linspace(lo, hi, 4001)
    density = 1.0 + (CLUSTER_RATIO - 1.0) * sum(np.exp(-(((s - c) / width) ** 2)) for c in centres)
    cum = np.concatenate([[0.0], np.cumsum(0.5 * (density[1:] + density[:-1]) * np.diff(s))])
    nodes = np.interp(np.linspace(0.0, cum[-1], n), cum, s)
    nodes[0], nodes[-1] = lo, hi
    return nodes


def _local_spacing(nodes: np.ndarray) -> np.ndarray:
    """Smaller of the two neighbouring gaps at each node (the one-sided gap at the ends)."""
    gaps = np.diff(nodes)
    return np.minimum(np.concatenate([[gaps[0]], gaps]), np.concatenate([gaps, [gaps[-1]]]))


def _cross_section() -> tuple[np.ndarray, np.ndarray]:
    """Jittered, graded node set of the y-z rectangle and its Delaunay triangles.

    Returns
    -------
    tuple of numpy.ndarray
        ``(yz, triangles)``: ``(M, 2)`` node coordinates (boundary nodes on the boundary) and
        ``(T, 3)`` triangles, counter-clockwise in the (y, z) plane (normal +x).
    """
    x0, x1, y0, y1, z0, z1 = DOMAIN_BOUNDS
    length = x1 - x0
    # Cluster around the mean paths of the axes over the box (drift and descent at mid-length).
    y_mid = CROSSWIND * 0.5 * length / U_INF
    z_mid = Z_ORIGIN - DESCENT_SPEED * 0.5 * length / U_INF
    ys = _graded_nodes(y0, y1, N_NODES_Y, [y_mid - HALF_SEPARATION, y_mid + HALF_SEPARATION], 0.22)
    zs = _graded_nodes(z0, z1, N_NODES_Z, [z_mid], 0.35)
    rng = np.random.default_rng(SEED)
    jy = JITTER * _local_spacing(ys)[:, None] * rng.uniform(-1.0, 1.0, (ys.size, zs.size))
    jz = JITTER * _local_spacing(zs)[None, :] * rng.uniform(-1.0, 1.0, (ys.size, zs.size))
    # Nodes on y = const boundaries move only along z and vice versa; corners stay put.
    jy[[0, -1], :] = 0.0
    jz[:, [0, -1]] = 0.0
    yy, zz = np.meshgrid(ys, zs, indexing="ij")
    yz = np.column_stack([(yy + jy).ravel(), (zz + jz).ravel()])
    tri = Delaunay(yz)
    if len(tri.coplanar):
        raise RuntimeError("cross-section triangulation dropped nodes")  # pragma: no cover
    return yz, _counter_clockwise(yz, tri.simplices)


def _counter_clockwise(yz: np.ndarray, triangles: np.ndarray) -> np.ndarray:
    """Copy of ``triangles`` with every triangle counter-clockwise in the (y, z) plane.

    SciPy does not promise an orientation for Delaunay simplices, so it is imposed here.
    """
    out = np.array(triangles, dtype=np.int64)
    e1 = yz[out[:, 1]] - yz[out[:, 0]]
    e2 = yz[out[:, 2]] - yz[out[:, 0]]
    clockwise = e1[:, 0] * e2[:, 1] - e1[:, 1] * e2[:, 0] < 0.0
    out[clockwise] = out[clockwise][:, [0, 2, 1]]
    return out


def build_mesh() -> pv.UnstructuredGrid:
    """Build the demo's conforming tetrahedron/wedge mesh of :data:`DOMAIN_BOUNDS`.

    A jittered, graded node set of the y-z rectangle (finer around the paths of the vortex axes)
    is Delaunay-triangulated and extruded along x into ``N_LAYERS`` layers of wedges; the first
    ``N_TET_LAYERS`` layers are split into tetrahedra (see :func:`vtkflow.tetmesh.split_wedges`). Tetrahedra
    and wedges meet at whole x = const triangles, so the mesh is conforming. Deterministic.

    Returns
    -------
    pyvista.UnstructuredGrid
        Tetrahedra first, then wedges, each group ordered by layer.
    """
    x0, x1 = DOMAIN_BOUNDS[0], DOMAIN_BOUNDS[1]
    yz, triangles = _cross_section()
    n_section = yz.shape[0]
    xs = np.linspace(x0, x1, N_LAYERS + 1)
    points = np.column_stack(
        [np.repeat(xs, n_section), np.tile(yz[:, 0], xs.size), np.tile(yz[:, 1], xs.size)]
    )
    offsets = (np.arange(N_LAYERS, dtype=np.int64) * n_section)[:, None, None]
    wedges = np.concatenate([triangles[None] + offsets, triangles[None] + offsets + n_section], axis=2)
    tets = split_wedges(wedges[:N_TET_LAYERS].reshape(-1, 6))
    kept = wedges[N_TET_LAYERS:].reshape(-1, 6)
    return pv.UnstructuredGrid({pv.CellType.TETRA: tets, pv.CellType.WEDGE: kept}, points)


def build_wing() -> pv.PolyData:
    """Flat-plate wing surface just upstream of the box, for context in renders.

    Returns
    -------
    pyvista.PolyData
        A 2 x 8 grid of quads on ``x in [-WING_CHORD, 0]``, ``y in [-HALF_SEPARATION,
        HALF_SEPARATION]``, ``z = Z_ORIGIN``, normals +z.
    """
    xs = np.linspace(-WING_CHORD, 0.0, 3)
    ys = np.linspace(-HALF_SEPARATION, HALF_SEPARATION, 9)
    xx, yy = np.meshgrid(xs, ys, indexing="ij")
    points = np.column_stack([xx.ravel(), yy.ravel(), np.full(xx.size, Z_ORIGIN)])
    i, j = np.meshgrid(np.arange(xs.size - 1), np.arange(ys.size - 1), indexing="ij")
    n0 = (i * ys.size + j).ravel()
    quads = np.column_stack([n0, n0 + ys.size, n0 + ys.size + 1, n0 + 1])  # counter-clockwise from +z
    faces = np.column_stack([np.full(len(quads), 4), quads]).ravel()
    return pv.PolyData(points, faces=faces)


# --------------------------------------------------------------------------------------------
# Files
# --------------------------------------------------------------------------------------------
def snapshot_name(index: int) -> str:
    """File name of snapshot ``index`` (``wake_0000.vtu``, ...)."""
    return SNAPSHOT_PATTERN.format(index)


def _cell_centres(grid: pv.UnstructuredGrid) -> np.ndarray:
    """Vertex means of the cells (the centroids, for these straight tetrahedra and prisms)."""
    points = np.asarray(grid.points)
    centres = np.empty((grid.n_cells, 3))
    for cell_type, conn in grid.cells_dict.items():  # two cell types, not a per-cell loop
        centres[grid.celltypes == cell_type] = points[conn].mean(axis=1)
    return centres


def _write_atomically(writer: vtkXMLWriter, data: vtkDataObject, path: Path) -> None:
    """Write ``data`` with ``writer`` (binary, zlib) under a temporary name next to ``path``, then rename."""
    with atomic_path(path) as tmp:
        writer.SetInputData(data)
        writer.SetFileName(str(tmp))
        writer.SetDataModeToBinary()
        writer.SetCompressorTypeToZLib()
        if writer.Write() != 1 or writer.GetErrorCode() != 0:
            raise OSError(f"VTK could not write {path}")


def _write_text_atomically(text: str, path: Path) -> None:
    """Write ``text`` under a temporary name next to ``path``, then rename."""
    with atomic_path(path) as tmp:
        tmp.write_text(text, encoding="utf-8")


def _cell_counts(grid: pv.UnstructuredGrid) -> dict[str, int]:
    types = np.asarray(grid.celltypes)
    return {
        "tetra": int(np.count_nonzero(types == pv.CellType.TETRA)),
        "wedge": int(np.count_nonzero(types == pv.CellType.WEDGE)),
    }


def _check_arguments(snapshots: int, dt: float) -> None:
    if int(snapshots) != snapshots or snapshots < 1:
        raise ValueError(f"snapshots must be a positive integer, got {snapshots!r}")
    if not (math.isfinite(dt) and dt > 0.0):
        raise ValueError(f"dt must be a positive finite number, got {dt!r}")


def generate(directory: str | os.PathLike[str], snapshots: int = 41, dt: float = 0.1) -> list[Path]:
    """Write the demo case into ``directory`` (created if needed), replacing any earlier one.

    Writes ``wing.vtp``, the snapshots ``wake_0000.vtu`` ... at ``t = i * dt`` (rounded to 12
    decimals) and, last, the ``.complete`` marker (JSON with the parameters). Every file is
    written atomically. The marker is removed first, so an interrupted run leaves no marker
    behind; stale ``wake_*.vtu`` files beyond ``snapshots`` are removed.

    Parameters
    ----------
    directory : str or os.PathLike
        Output folder.
    snapshots : int, default 41
        Number of snapshots (>= 1).
    dt : float, default 0.1
        Time step between snapshots (> 0).

    Returns
    -------
    list of pathlib.Path
        The snapshot files in time order.
    """
    _check_arguments(snapshots, dt)
    out = Path(directory)
    out.mkdir(parents=True, exist_ok=True)
    (out / COMPLETE_MARKER).unlink(missing_ok=True)
    names = [snapshot_name(i) for i in range(int(snapshots))]
    for stale in out.iterdir():
        if _SNAPSHOT_RE.match(stale.name) and stale.name not in names:
            stale.unlink()

    _write_atomically(vtkXMLPolyDataWriter(), build_wing(), out / WING_FILE)

    mesh = build_mesh()
    centres = _cell_centres(mesh)
    grid = vtkUnstructuredGrid()
    grid.ShallowCopy(mesh)  # topology built once; only U and time change per snapshot
    writer = vtkXMLUnstructuredGridWriter()
    paths = []
    for index, name in enumerate(names):
        t = round(index * dt, 12)  # 0.3, not 0.30000000000000004, in the files
        velocity = numpy_to_vtk(np.ascontiguousarray(wake_velocity(centres, t)), deep=True)
        velocity.SetName("U")
        grid.GetCellData().AddArray(velocity)
        stamp = numpy_to_vtk(np.array([t], dtype=np.float64), deep=True)
        stamp.SetName("time")
        grid.GetFieldData().AddArray(stamp)
        path = out / name
        _write_atomically(writer, grid, path)
        paths.append(path)

    marker = {
        "case": "meandering trailing-vortex pair (vtkflow demo)",
        "snapshots": int(snapshots),
        "dt": float(dt),
        "t_end": round((int(snapshots) - 1) * dt, 12),
        "files": names,
        "wing": WING_FILE,
        "cells": _cell_counts(mesh),
        "points": int(mesh.n_points),
        "bounds": list(DOMAIN_BOUNDS),
        "seed": SEED,
        "flow": {
            "U_inf": U_INF,
            "gamma": GAMMA,
            "core_radius": CORE_RADIUS,
            "half_separation": HALF_SEPARATION,
            "crosswind": CROSSWIND,
            "descent_speed": DESCENT_SPEED,
            "gust_amplitude": GUST_AMPLITUDE,
            "gust_wavelength": GUST_WAVELENGTH,
            "gust_period": GUST_PERIOD,
            "meander_y": [list(m) for m in MEANDER_Y],
            "meander_z": [list(m) for m in MEANDER_Z],
        },
    }
    _write_text_atomically(json.dumps(marker, indent=2) + "\n", out / COMPLETE_MARKER)
    return paths


def main(argv: list[str] | None = None) -> int:
    """Command line: ``python -m vtkflow.demo DIR [--snapshots N] [--dt DT] [--force]``.

    Returns
    -------
    int
        Exit status (0 on success or when a complete case is already present).
    """
    parser = argparse.ArgumentParser(
        prog="python -m vtkflow.demo",
        description="Write the synthetic trailing-vortex demo case (VTU snapshots + wing.vtp).",
    )
    parser.add_argument("directory", type=Path, help="output folder")
    parser.add_argument("--snapshots", type=int, default=41, help="number of snapshots (default 41)")
    parser.add_argument("--dt", type=float, default=0.1, help="time between snapshots (default 0.1)")
    parser.add_argument("--force", action="store_true", help="regenerate even if the case is complete")
    args = parser.parse_args(argv)
    try:
        _check_arguments(args.snapshots, args.dt)
    except ValueError as exc:
        parser.error(str(exc))

    if (args.directory / COMPLETE_MARKER).exists() and not args.force:
        print(f"demo case already present: {args.directory}")
        return 0

    start = _time.perf_counter()
    paths = generate(args.directory, snapshots=args.snapshots, dt=args.dt)
    elapsed = _time.perf_counter() - start
    info = json.loads((args.directory / COMPLETE_MARKER).read_text(encoding="utf-8"))
    counts = info["cells"]
    print(f"demo case written: {args.directory}")
    print(
        f"  mesh: {sum(counts.values())} cells ({counts['tetra']} tetra, {counts['wedge']} wedge), "
        f"{info['points']} points"
    )
    print(f"  snapshots: {len(paths)} (t = 0 .. {info['t_end']:g}, dt = {args.dt:g})")
    print(f"  elapsed: {elapsed:.1f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
