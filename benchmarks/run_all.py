"""Benchmarks of vtkflow's engine against VTK's stream tracer, in the same run (figures, never tests).

Steady ABC flow (Dombre et al. 1986, J. Fluid Mech. 167) on a tetrahedral box mesh; streamlines from
the same seeds with RK4 at a quarter cell per step, both ways:

* vtkflow: ``particles.trace_streamlines`` (RK4 vectorised over seeds in NumPy, numba point location and
  interpolation on the tetrahedral decomposition);
* peer: VTK's ``vtkStreamTracer`` (RK4, step in cell-length units), threads as VTK's SMP backend allows.

Reported: velocity evaluations per second on each side and their ratio, and the end-point error of both
against SciPy's ``solve_ivp`` (DOP853, rtol 1e-12) after the same arc length.

Usage: ``python benchmarks/run_all.py [--cells N] [--seeds N]``.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
import pyvista as pv
from scipy.integrate import solve_ivp
from vtkmodules.util.numpy_support import numpy_to_vtk, vtk_to_numpy
from vtkmodules.vtkFiltersFlowPaths import vtkStreamTracer

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
from flows import abc, box_mesh  # noqa: E402

from vtkflow.mesh import Mesh  # noqa: E402
from vtkflow.particles import TimeField, trace_streamlines  # noqa: E402


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--cells", type=int, default=24, help="hexahedra per direction before the tet split")
    ap.add_argument("--seeds", type=int, default=10_000)
    ap.add_argument("--length", type=float, default=1.0)
    args = ap.parse_args()

    flow = abc()
    grid = box_mesh((0, 0, 0), (2 * np.pi, 2 * np.pi, 2 * np.pi), (args.cells,) * 3, "tetra")
    u = flow(np.asarray(grid.points), 0.0)
    rng = np.random.default_rng(1)
    seeds = rng.uniform(2.0, 4.3, (args.seeds, 3))
    print(f"mesh: {grid.n_cells} tetrahedra; {args.seeds} seeds; arc length {args.length}")

    # vtkflow
    mesh = Mesh(grid)
    field = TimeField(mesh)
    field.load(0.0, u, 1.0, u)
    calls = {"n": 0}
    sample = mesh.sample

    def counting(points):
        calls["n"] += len(points)
        return sample(points)

    trace_streamlines(field, 0.0, seeds[:4], np.arange(4), "forward", 0.25, 0.05)  # compile / load kernels
    mesh.sample = counting  # type: ignore[method-assign]
    t0 = time.perf_counter()
    lines = trace_streamlines(field, 0.0, seeds, np.arange(len(seeds)), "forward", 0.25, args.length)
    t_ours = time.perf_counter() - t0
    ends = lines.points[np.cumsum(lines.lengths) - 1]
    rate_ours = calls["n"] / t_ours

    # VTK's stream tracer
    g = grid.copy()
    g.point_data["U"] = u
    g.set_active_vectors("U")
    src = pv.PolyData(seeds)
    st = vtkStreamTracer()
    st.SetInputData(g)
    st.SetSourceData(src)
    st.SetIntegratorTypeToRungeKutta4()
    st.SetIntegrationStepUnit(vtkStreamTracer.CELL_LENGTH_UNIT)
    st.SetInitialIntegrationStep(0.25)
    st.SetMaximumPropagation(args.length)
    st.SetMaximumNumberOfSteps(1_000_000)
    st.SetIntegrationDirectionToForward()
    st.SetComputeVorticity(False)
    t0 = time.perf_counter()
    st.Update()
    t_vtk = time.perf_counter() - t0
    out = pv.wrap(st.GetOutput())
    n_steps = out.n_points - out.n_cells
    rate_vtk = 4 * n_steps / t_vtk  # RK4: four evaluations per step
    seed_ids = np.asarray(out.point_data["SeedIds"]) if "SeedIds" in out.point_data else None
    vtk_ends = np.full((len(seeds), 3), np.nan)
    for cid in range(out.n_cells):
        ids = out.get_cell(cid).point_ids
        sid = int(out.cell_data["SeedIds"][cid]) if "SeedIds" in out.cell_data else cid
        vtk_ends[sid] = out.points[ids[-1]]
    del seed_ids

    # reference: the same arc length along the analytic field
    def unit(s, x):
        v = flow(x[None, :], 0.0)[0]
        return v / np.linalg.norm(v)

    ref = np.array([solve_ivp(unit, (0, args.length), s, method="DOP853", rtol=1e-12, atol=1e-12).y[:, -1] for s in seeds])
    err_ours = np.nanmax(np.linalg.norm(ends - ref, axis=1))
    err_vtk = np.nanmax(np.linalg.norm(vtk_ends - ref, axis=1))
    print(f"vtkflow : {t_ours:7.2f} s  {rate_ours / 1e6:6.3f} M evaluations/s  max end error {err_ours:.2e}")
    print(f"VTK     : {t_vtk:7.2f} s  {rate_vtk / 1e6:6.3f} M evaluations/s  max end error {err_vtk:.2e}")
    print(f"ratio vtkflow/VTK evaluations per second: {rate_ours / rate_vtk:.2f}")


if __name__ == "__main__":
    main()
