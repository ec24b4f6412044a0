"""Vortex criteria per frame: vtkflow's gradient + Q + lambda2 + Delta + swirl + vorticity against VTK's
``vtkGradientFilter`` computing the gradient, vorticity and Q alone, same run, both on 2 threads.

Case: the unit cube cut into ``n**3`` cubes of 5 tetrahedra (n = 62: 1,191,640 tetrahedra, 250,047 points),
the ABC flow (Dombre et al. 1986, J. Fluid Mech. 167) at the points.

* vtkflow, per frame: ``TetMesh.extend`` (values at the added points: none here), the per-tetrahedron
  gradients and their volume-weighted mean at the points (``criteria.GradientOperator``), then every
  criterion and the vorticity in one pass (``criteria.evaluate``). The operator's point-to-tetrahedron
  incidence is built once per mesh and timed apart (like VTK's point-to-cell links, built inside its filter
  on every run).
* VTK: ``vtkGradientFilter`` on the same grid (point velocity ``U``), ``ComputeVorticity`` and
  ``ComputeQCriterion`` on, SMP backend std::thread.
* Eigenvalue stage: ``criteria.sym_eigvals`` (closed form, Smith 1961) against ``numpy.linalg.eigvalsh`` on
  the same tensors S^2 + W^2 at every point.

The fastest of ``--repeat`` runs counts on each side. Agreement of the two Q fields is reported (they use
different gradient recoveries, so they differ by the discretisation error, not by round-off).

Usage: ``python benchmarks/vortex.py [--quick] [--n 62] [--json out.json]``.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _common import Report, abc_unit, add_common_args, box, machine_line, set_threads, thread_summary, timed  # noqa: E402


def vtk_gradient(grid, u: np.ndarray, repeat: int) -> tuple[float, np.ndarray]:
    from vtkmodules.util.numpy_support import numpy_to_vtk, vtk_to_numpy
    from vtkmodules.vtkCommonDataModel import vtkUnstructuredGrid
    from vtkmodules.vtkFiltersGeneral import vtkGradientFilter

    g = vtkUnstructuredGrid()
    g.ShallowCopy(grid)
    arr = numpy_to_vtk(np.ascontiguousarray(u), deep=1)
    arr.SetName("U")
    g.GetPointData().AddArray(arr)
    f = vtkGradientFilter()
    f.SetInputData(g)
    f.SetInputScalars(0, "U")  # point data
    f.SetComputeGradient(True)
    f.SetComputeVorticity(True)
    f.SetComputeQCriterion(True)
    f.SetQCriterionArrayName("Q")
    f.SetVorticityArrayName("vorticity")
    f.SetResultArrayName("gradient")
    best = np.inf
    for _ in range(repeat):
        f.Modified()
        best = min(best, timed(f.Update)[0])
    q = vtk_to_numpy(f.GetOutput().GetPointData().GetArray("Q")).astype(np.float64)
    return best, q


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    add_common_args(ap)
    ap.add_argument("--n", type=int, default=None, help="cubes per side (5 tetrahedra each); default 62, quick 20")
    ap.add_argument("--repeat", type=int, default=3, help="timed runs per side; the fastest counts (default 3)")
    args = ap.parse_args()
    n = args.n or (20 if args.quick else 62)
    set_threads(args.threads)

    from vtkflow.criteria import GradientOperator, evaluate, sym_eigvals
    from vtkflow.mesh import Mesh

    rep = Report("vortex")
    rep.say(f"# vortex criteria: {machine_line()}")
    grid = box(n)
    u = abc_unit(np.asarray(grid.points))
    mesh = Mesh(grid)
    tm = mesh.tetmesh
    rep.say(f"mesh: {len(tm.tets)} tetrahedra, {len(tm.points)} points")

    t_setup, op = timed(lambda: GradientOperator(mesh.locator, len(tm.points)))

    def ours():
        grads = op(tm.extend(u))
        return evaluate(grads), grads

    ours()  # warm-up: loads the compiled kernels
    t_ours, (values, grads) = min((timed(ours) for _ in range(args.repeat)), key=lambda r: r[0])
    t_grad = min(timed(lambda: op(tm.extend(u)))[0] for _ in range(args.repeat))
    rep.say(thread_summary())
    rep.say(f"vtkflow: incidence (once per mesh) {t_setup:.3f} s; per frame {t_ours:.3f} s "
            f"(gradient {t_grad:.3f} s, criteria {t_ours - t_grad:.3f} s)")

    t_vtk, q_vtk = vtk_gradient(grid, u, args.repeat)
    rep.say(f"VTK vtkGradientFilter (gradient, vorticity, Q): {t_vtk:.3f} s")
    q_ours = values["q"][: mesh.n_points]
    scale = np.abs(q_vtk).max()
    diff = np.abs(q_ours - q_vtk) / scale
    rep.say(f"Q agreement (different gradient recoveries): median {np.median(diff):.2e}, max {diff.max():.2e} "
            f"of max |Q| {scale:.3g}")

    s = 0.5 * (grads + grads.transpose(0, 2, 1))
    w = 0.5 * (grads - grads.transpose(0, 2, 1))
    m = np.ascontiguousarray(s @ s + w @ w)
    sym_eigvals(m[:10])
    t_eig = min(timed(lambda: sym_eigvals(m))[0] for _ in range(args.repeat))
    t_lapack, ref = min((timed(lambda: np.linalg.eigvalsh(m)) for _ in range(args.repeat)), key=lambda r: r[0])
    err = np.abs(sym_eigvals(m) - ref).max() / np.abs(ref).max()
    rep.say(f"eigenvalues of {len(m)} tensors: closed form {t_eig:.4f} s, numpy.linalg.eigvalsh {t_lapack:.4f} s; "
            f"largest difference {err:.1e} of the largest eigenvalue")

    rep.add("per frame: all criteria vs VTK gradient+vorticity+Q", t_ours, t_vtk, "s", goal=">= 5x faster",
            invert=True, note="ratio = VTK time / vtkflow time")
    rep.add("  of which the gradient", t_grad, t_vtk, "s", invert=True)
    rep.add("eigenvalue stage vs numpy.linalg.eigvalsh", t_eig, t_lapack, "s", goal=">= 10x faster", invert=True,
            note="ratio = eigvalsh time / vtkflow time")
    rep.add("incidence, once per mesh", t_setup, None, "s")
    rep.table()
    rep.write(args.json)


if __name__ == "__main__":
    main()
