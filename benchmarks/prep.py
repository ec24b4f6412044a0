"""Mesh preparation: vtkflow's ``Mesh(grid)`` against reading the same mesh with VTK's XML reader.

Case: the unit cube cut into ``n**3`` cubes of 5 tetrahedra (n = 62: 1,191,640 tetrahedra, 250,047 points),
written once as a zlib-compressed ``.vtu`` (appended raw binary) with ``vtkXMLUnstructuredGridWriter``.
Peer: reading it back with ``vtkXMLUnstructuredGridReader`` (a fresh reader each time; the file is in the
page cache after writing, which favours the reader). vtkflow: ``Mesh(grid)`` on the grid that was read —
what a run does once per series — and its parts, each timed on its own:

* VTK copy and arrays: the structure copy, points, offsets, connectivity, cell types (``Mesh.__init__``);
* ``tetmesh.decompose`` (conforming tetrahedra, Morton order; for a mesh of tetrahedra only, as here, the
  cell sizes and the smallest size per point come from its ordering pass), ``kernels.neighbours``;
* cell sizes: ``Mesh._cell_sizes`` and the smallest size per point, for meshes of other cells;
* the point locator's records (first vertex, inverse edge matrix) and box tree, one pass
  (``kernels.tet_geometry``).

Ratio: preparation / read; the goal is <= 1.0. The fastest of ``--repeat`` runs counts on both sides (the sides take turns); the
first ``Mesh(grid)`` of the process, which is what a run pays (its large temporaries come fresh from the
operating system), is reported as well.
The box mesh's coordinates are so regular that zlib squeezes them unusually well (reading is then mostly
decompression of little data); a second file with the interior points moved at random by up to a tenth of
the spacing (same topology, coordinates as incompressible as a real mesh's) is read as well, for a second,
more realistic ratio.

Usage: ``python benchmarks/prep.py [--quick] [--n 62] [--json out.json]``.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _common import Report, add_common_args, box, machine_line, set_threads, timed  # noqa: E402


def write_vtu(grid, path: Path) -> float:
    from vtkmodules.vtkIOXML import vtkXMLUnstructuredGridWriter

    w = vtkXMLUnstructuredGridWriter()
    w.SetFileName(str(path))
    w.SetInputData(grid)
    w.SetCompressorTypeToZLib()
    w.SetDataModeToAppended()
    w.EncodeAppendedDataOff()
    t, ok = timed(w.Write)
    if not ok:
        raise RuntimeError(f"{path}: writing failed")
    return t


def read_vtu(path: Path):
    from vtkmodules.vtkIOXML import vtkXMLUnstructuredGridReader

    r = vtkXMLUnstructuredGridReader()
    r.SetFileName(str(path))
    t, _ = timed(r.Update)
    return t, r.GetOutput()


def parts(grid) -> dict[str, float]:
    """Mesh's preparation, piece by piece (the same calls Mesh.__init__ and Locator.__init__ make)."""
    from vtkflow import _vtk
    from vtkflow._vtk import vtk_to_numpy
    from vtkflow.mesh import Mesh, cell_types
    from vtkflow.kernels import neighbours, tet_geometry
    from vtkflow.tetmesh import decompose

    out = {}
    t0 = time.perf_counter()
    m = Mesh.__new__(Mesh)
    topo = _vtk.vtkUnstructuredGrid()
    topo.CopyStructure(grid)
    m.grid = topo
    m.n_points, m.n_cells = int(topo.GetNumberOfPoints()), int(topo.GetNumberOfCells())
    m.points = vtk_to_numpy(topo.GetPoints().GetData()).astype(np.float64, copy=False)
    cells = topo.GetCells()
    m.offsets = vtk_to_numpy(cells.GetOffsetsArray()).astype(np.int64, copy=False)
    m.connectivity = vtk_to_numpy(cells.GetConnectivityArray()).astype(np.int64, copy=False)
    m.cell_types = cell_types(topo)
    out["VTK copy and arrays"] = time.perf_counter() - t0

    # a mesh of tetrahedra only gets its cell and point sizes in the decomposition's ordering pass
    out["tetmesh.decompose (with the sizes of tetrahedra-only meshes)"], tm = timed(
        lambda: decompose(m.points, m.offsets, m.connectivity, m.cell_types))
    if tm.sizes is None:
        t0 = time.perf_counter()
        m._cell_sizes()
        out["cell sizes (Mesh._cell_sizes, per cell and per point)"] = time.perf_counter() - t0

    out["kernels.tet_geometry (records, box tree)"], _ = timed(lambda: tet_geometry(tm.points, tm.tets))
    out["kernels.neighbours"], _ = timed(lambda: neighbours(tm.tets, len(tm.points)))
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    add_common_args(ap)
    ap.add_argument("--n", type=int, default=None, help="cubes per side (5 tetrahedra each); default 62, quick 24")
    ap.add_argument("--repeat", type=int, default=None, help="runs per side, the fastest counts; default 5, quick 2")
    args = ap.parse_args()
    n = args.n or (24 if args.quick else 62)
    repeat = args.repeat or (2 if args.quick else 5)
    set_threads(args.threads)
    from vtkflow.mesh import Mesh

    rep = Report("prep")
    rep.say(f"# mesh preparation: {machine_line()}")
    grid = box(n)
    jittered = grid.copy()
    P = np.array(jittered.points)
    interior = np.all((P > 1e-9) & (P < 1 - 1e-9), axis=1)
    P[interior] += np.random.default_rng(4).uniform(-0.1, 0.1, (int(interior.sum()), 3)) / n
    jittered.points = P
    reads, jreads, preps = [], [], []
    with tempfile.TemporaryDirectory(prefix="vtkflow-bench-") as tmp:
        path, jpath = Path(tmp) / "mesh.vtu", Path(tmp) / "jittered.vtu"
        t_write = write_vtu(grid, path)
        write_vtu(jittered, jpath)
        size, jsize = path.stat().st_size, jpath.stat().st_size
        # the sides take turns, so that both see the machine in the same states (its speed drifts)
        for _ in range(repeat):
            t, read_grid = read_vtu(path)
            reads.append(t)
            jreads.append(read_vtu(jpath)[0])
            t, mesh = timed(lambda: Mesh(read_grid))
            preps.append(t)
            del mesh
    t_read = min(reads)
    t_jread = min(jreads)
    rep.say(f"mesh: {read_grid.GetNumberOfCells()} tetrahedra, {read_grid.GetNumberOfPoints()} points; "
            f".vtu (zlib, appended raw) {size / 2**20:.1f} MiB written in {t_write:.2f} s")
    rep.say(f"VTK read: {', '.join(f'{t:.3f}' for t in reads)} s -> {t_read:.3f} s")
    rep.say(f"VTK read, jittered coordinates ({jsize / 2**20:.1f} MiB): {', '.join(f'{t:.3f}' for t in jreads)} s "
            f"-> {t_jread:.3f} s")
    t_prep = min(preps)
    rep.say(f"vtkflow Mesh(grid): {', '.join(f'{t:.3f}' for t in preps)} s -> {t_prep:.3f} s; "
            f"preparation / read = {t_prep / t_read:.2f}, / jittered read = {t_prep / t_jread:.2f} (goal <= 1.0)")
    pieces = parts(read_grid)
    total = sum(pieces.values())
    pieces["other (Mesh total - parts: allocation, page faults)"] = max(0.0, t_prep - total)
    total = sum(pieces.values())
    rep.say(f"breakdown (one run, sum {total:.3f} s):")
    for k, v in sorted(pieces.items(), key=lambda kv: -kv[1]):
        rep.say(f"  {k:42s} {v:7.3f} s  {100 * v / total:5.1f} %  ({v / t_read:.2f} x read)")

    rep.add("preparation / read", t_prep, t_read, "s", goal="<= 1.0", note="fastest of the runs")
    rep.add("preparation / read, medians (later runs)", float(np.median(preps[1:] or preps)),
            float(np.median(reads[1:] or reads)), "s", note="the spread: fresh memory, huge pages")
    rep.add("preparation / read, first call in the process", preps[0], t_read, "s", goal="<= 1.0",
            note="what a run pays: loading the compiled kernels, fresh memory")
    rep.add("preparation / read (jittered coordinates)", t_prep, t_jread, "s", goal="<= 1.0")
    for k, v in sorted(pieces.items(), key=lambda kv: -kv[1]):
        rep.add(f"  {k}", v, t_read, "s")
    rep.table()
    rep.write(args.json)


if __name__ == "__main__":
    main()
