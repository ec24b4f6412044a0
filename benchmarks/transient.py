"""Pathlines in a time-varying flow: vtkflow's ``particles.advance`` against VTK's ``vtkParticleTracer``.

Case: the unit cube cut into ``n**3`` cubes of 5 tetrahedra (n = 34: 196,520 tetrahedra); 20 snapshots on
[0, 1] of an unsteady ABC flow (``_common.abc_unsteady``: the coefficients vary over half a period of the
window); 10,000 particles released at t = 0, uniformly in [0.3, 0.7]^3, followed to t = 1.

* vtkflow: ``Mesh(grid)`` (timed apart), then a ``TimeField`` loaded with the first two snapshots and moved
  on one snapshot per interval (``TimeField.shift``, as ``run.run_recipe`` streams them) and
  ``particles.advance`` (RK4, a quarter cell per step) with a recorder that keeps every vertex, as pathlines
  need; a second vtkflow run interpolates in time by cubic Hermite (with the slopes of
  ``particles.time_slopes``). A run keeps its records until it ends, like a pathline history until it
  joins them; later runs reuse that memory once it is let go (the field's ``OutputPool``), the first run
  of the process pays its page faults (its time is in the log line of the runs);
* VTK: ``vtkParticleTracer`` fed by a small ``VTKPythonAlgorithmBase`` source that announces the snapshot
  times (``TIME_STEPS``) and hands out the requested snapshot (precomputed, so the source costs nothing;
  its time is measured and subtracted anyway), with the mesh declared static, RK4, seeds declared static,
  vorticity off, for each cell locator, and both as a plain ``vtkUnstructuredGrid`` output and wrapped in a
  one-block ``vtkMultiBlockDataSet``. Each configuration runs in its own subprocess under a timeout, so a
  crash or a hang is reported, not suffered.

Figures: wall time, particle steps per second (vtkflow: recorded steps; VTK: two RK4 steps per snapshot
interval and particle, which is what its tracer takes, counted over the intervals each particle was alive
in vtkflow's run), and the end-point error at t = 1 against SciPy's ``solve_ivp`` (DOP853, rtol 1e-10) on
the analytic field for a sample of particles whose exact path stays in the cube. The fastest run counts
on both sides: VTK's configurations run ``--repeat`` times each, and vtkflow's runs are spread over the
time they take (one before the first configuration and one after each), so that both sides see the
machine in the same states: its speed drifts within minutes (1.5x, at times more).

Usage: ``python benchmarks/transient.py [--quick] [--n 34] [--snapshots 20] [--particles 10000] [--json out.json]``.
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _common import (Report, abc_unsteady, add_common_args, box, inside_cube, machine_line, set_threads,  # noqa: E402
                     thread_summary, timed)

CONFIGS = {
    # name: (filter, composite input, cell locator, serial execution)
    "multiblock+static": ("tracer", True, "static", False),
    "multiblock+default": ("tracer", True, "default", False),
    "plain+static": ("tracer", False, "static", False),
    # vtkParticlePathFilter keeps whole paths, as vtkflow's pathlines do; threaded, then serial
    "paths multiblock+static": ("paths", True, "static", False),
    "paths multiblock+static serial": ("paths", True, "static", True),
}
WINDOW = 1.0


def setup(n: int, n_snap: int, n_part: int):
    grid = box(n)
    times = np.linspace(0.0, WINDOW, n_snap)
    P = np.asarray(grid.points, dtype=np.float64)
    snaps = [np.ascontiguousarray(abc_unsteady(P, t)) for t in times]
    seeds = np.random.default_rng(2).uniform(0.3, 0.7, (n_part, 3))
    return grid, times, snaps, seeds


# ---------------------------------------------------------------------------------------- VTK side
def vtk_worker(args) -> None:
    """One VTK configuration (in its own process): writes positions at the window end and timings."""
    set_threads(args.threads)
    from vtkmodules.util.numpy_support import numpy_to_vtk, vtk_to_numpy
    from vtkmodules.util.vtkAlgorithm import VTKPythonAlgorithmBase
    from vtkmodules.vtkCommonCore import vtkPoints
    from vtkmodules.vtkCommonDataModel import vtkMultiBlockDataSet, vtkPolyData, vtkStaticCellLocator, vtkUnstructuredGrid
    from vtkmodules.vtkCommonExecutionModel import vtkStreamingDemandDrivenPipeline as SDDP
    from vtkmodules.vtkFiltersFlowPaths import vtkParticlePathFilter, vtkParticleTracer

    kind, composite, locator, serial = CONFIGS[args.vtk_worker]
    grid, times, snaps, seeds = setup(args.n, args.snapshots, args.particles)
    base = vtkUnstructuredGrid()
    base.ShallowCopy(grid)
    base.GetPointData().Initialize()
    arrays = []
    for u in snaps:
        a = numpy_to_vtk(u, deep=1)
        a.SetName("U")
        arrays.append(a)
    spent = {"t": 0.0, "requests": []}

    class Snapshots(VTKPythonAlgorithmBase):
        def __init__(self):
            VTKPythonAlgorithmBase.__init__(self, nInputPorts=0, nOutputPorts=1,
                                            outputType="vtkMultiBlockDataSet" if composite else "vtkUnstructuredGrid")

        def RequestInformation(self, request, inInfo, outInfo):
            info = outInfo.GetInformationObject(0)
            info.Set(SDDP.TIME_STEPS(), [float(t) for t in times], len(times))
            info.Set(SDDP.TIME_RANGE(), [float(times[0]), float(times[-1])], 2)
            return 1

        def RequestData(self, request, inInfo, outInfo):
            t0 = time.perf_counter()
            info = outInfo.GetInformationObject(0)
            t = info.Get(SDDP.UPDATE_TIME_STEP()) if info.Has(SDDP.UPDATE_TIME_STEP()) else times[0]
            k = int(np.argmin(np.abs(times - t)))
            spent["requests"].append(float(t))
            ug = vtkUnstructuredGrid()
            ug.ShallowCopy(base)
            ug.GetPointData().AddArray(arrays[k])
            ug.GetPointData().SetActiveVectors("U")
            if composite:
                mb = vtkMultiBlockDataSet.GetData(outInfo)
                mb.SetNumberOfBlocks(1)
                mb.SetBlock(0, ug)
            else:  # like a reader: the same output object, new arrays each time step
                vtkUnstructuredGrid.GetData(outInfo).ShallowCopy(ug)
            spent["t"] += time.perf_counter() - t0
            return 1

    pts = vtkPoints()
    pts.SetData(numpy_to_vtk(seeds, deep=1))
    seed_pd = vtkPolyData()
    seed_pd.SetPoints(pts)
    walls, sources = [], []
    for _ in range(args.repeat):  # a fresh pipeline each time; the fastest run counts
        spent["t"] = 0.0
        spent["requests"] = []
        src = Snapshots()
        pt = (vtkParticleTracer if kind == "tracer" else vtkParticlePathFilter)()
        pt.SetInputConnection(0, src.GetOutputPort())
        pt.SetInputData(1, seed_pd)
        pt.SetIntegratorType(vtkParticleTracer.RUNGE_KUTTA4)
        if hasattr(pt, "SetMeshOverTimeToStatic"):
            pt.SetMeshOverTimeToStatic()
        else:  # older VTK
            pt.SetStaticMesh(1)
        if locator == "static" and hasattr(pt, "SetCellLocatorToStaticCellLocator"):
            pt.SetCellLocatorToStaticCellLocator()
        pt.SetStaticSeeds(1)
        pt.SetComputeVorticity(False)
        pt.SetForceSerialExecution(serial)
        pt.SetInputArrayToProcess(0, 0, 0, 0, "U")
        t_all, _ = timed(lambda: pt.UpdateTimeStep(float(times[-1])))
        walls.append(t_all)
        sources.append(spent["t"])
    best = int(np.argmin(np.array(walls) - np.array(sources)))
    out = pt.GetOutput()
    pd = out.GetPointData()
    n_out = out.GetNumberOfPoints()
    X = vtk_to_numpy(out.GetPoints().GetData()).astype(np.float64) if n_out else np.zeros((0, 3))
    inj = vtk_to_numpy(pd.GetArray("InjectedPointId")).astype(np.int64) if n_out else np.zeros(0, np.int64)
    consistent = np.nan
    if kind == "paths" and out.GetNumberOfCells():
        # the last vertex of each path, for the particle injected at its first vertex; a path should be one
        # particle's: its InjectedPointId the same at every vertex
        lines = out.GetLines()
        off = vtk_to_numpy(lines.GetOffsetsArray()).astype(np.int64)
        conn = vtk_to_numpy(lines.GetConnectivityArray()).astype(np.int64)
        first, last = conn[off[:-1]], conn[off[1:] - 1]
        line_of = np.repeat(np.arange(len(off) - 1), np.diff(off))
        same = inj[conn] == inj[first][line_of]
        consistent = float(np.mean(np.logical_and.reduceat(same, off[:-1])))
        X, inj = X[last], inj[first]
    t_all = walls[best]
    spent["t"] = sources[best]
    loc = vtkStaticCellLocator()
    loc.SetDataSet(base)
    t_loc, _ = timed(loc.BuildLocator)
    np.savez(args.out, X=X, inj=inj, wall=t_all, source=spent["t"], requests=np.array(spent["requests"]),
             locator_build=t_loc, output_points=n_out,
             consistent=consistent)


def run_vtk(name: str, args, folder: Path, timeout: float) -> dict:
    out = folder / f"{name.replace('+', '_')}.npz"
    cmd = [sys.executable, __file__, "--vtk-worker", name, "--out", str(out), "--n", str(args.n),
           "--snapshots", str(args.snapshots), "--particles", str(args.particles), "--threads", str(args.threads),
           "--repeat", str(args.repeat)]
    t0 = time.perf_counter()
    try:
        p = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout)
    except subprocess.TimeoutExpired:
        return {"name": name, "failure": f"hang: no result after {timeout:.0f} s (killed)"}
    wall = time.perf_counter() - t0
    if p.returncode != 0:
        tail = (p.stderr or p.stdout).strip().splitlines()[-3:]
        what = f"crash (signal {-p.returncode})" if p.returncode < 0 else f"error (exit {p.returncode})"
        return {"name": name, "failure": f"{what}: {' | '.join(tail)}"}
    r = dict(np.load(out))
    r["name"] = name
    r["process_wall"] = wall
    r["warnings"] = [ln for ln in p.stderr.splitlines() if "Warning" in ln or "ERROR" in ln][:3]
    return r


# ------------------------------------------------------------------------------------ references
def exact_paths(seeds, t_end):
    from scipy.integrate import solve_ivp

    ends, inside = [], []
    for s in seeds:
        sol = solve_ivp(lambda t, x: abc_unsteady(x[None, :], t)[0], (0.0, t_end), s, method="DOP853",
                        rtol=1e-10, atol=1e-12, dense_output=True)
        ends.append(sol.y[:, -1])
        inside.append(bool(inside_cube(sol.sol(np.linspace(0.0, t_end, 400)).T, 1e-3).all()))
    return np.array(ends), np.array(inside)


def later_snapshot_paths(seeds, times):
    """Paths in the field that holds each interval's *later* snapshot for the whole interval (analytic in
    space): what a tracer computes when its earlier snapshot is overwritten by the later one."""
    from scipy.integrate import solve_ivp

    ends = []
    for s in seeds:
        x = np.array(s, float)
        for k in range(len(times) - 1):
            t1 = times[k + 1]
            x = solve_ivp(lambda t, y: abc_unsteady(y[None, :], t1)[0], (times[k], t1), x, method="DOP853",
                          rtol=1e-10, atol=1e-12).y[:, -1]
        ends.append(x)
    return np.array(ends)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    add_common_args(ap)
    ap.add_argument("--n", type=int, default=None, help="cubes per side (5 tetrahedra each); default 34, quick 14")
    ap.add_argument("--snapshots", type=int, default=None, help="default 20, quick 10")
    ap.add_argument("--particles", type=int, default=None, help="default 10000, quick 2000")
    ap.add_argument("--sample", type=int, default=None, help="particles checked against solve_ivp; default 200, quick 30")
    ap.add_argument("--step", type=float, default=0.25, help="vtkflow's RK4 step in cells")
    ap.add_argument("--timeout", type=float, default=None, help="seconds per VTK configuration; default 240, quick 60")
    ap.add_argument("--repeat", type=int, default=3, help="runs per side; the fastest counts (default 3)")
    ap.add_argument("--vtk-worker", default=None, help=argparse.SUPPRESS)
    ap.add_argument("--out", default=None, help=argparse.SUPPRESS)
    args = ap.parse_args()
    args.n = args.n or (14 if args.quick else 34)
    args.snapshots = args.snapshots or (10 if args.quick else 20)
    args.particles = args.particles or (2000 if args.quick else 10_000)
    if args.vtk_worker:
        vtk_worker(args)
        return
    n_sample = min(args.particles, args.sample or (30 if args.quick else 200))
    timeout = args.timeout or (60.0 if args.quick else 240.0)

    set_threads(args.threads)
    from vtkflow.mesh import Mesh
    from vtkflow.particles import State, Status, TimeField, advance, place, time_slopes

    rep = Report("transient")
    rep.say(f"# transient pathlines: {machine_line()}")
    grid, times, snaps, seeds = setup(args.n, args.snapshots, args.particles)
    N = len(seeds)
    rep.say(f"mesh: {grid.n_cells} tetrahedra, {grid.n_points} points; {len(times)} snapshots on [0, {WINDOW:g}]; "
            f"{N} particles released at t = 0; vtkflow RK4 step {args.step} cell")

    # ------------------------------------------------------------------------------------- vtkflow
    t_prep, mesh = timed(lambda: Mesh(grid))
    field = TimeField(mesh)
    # warm-up: load (or compile) the numba kernels, linear and cubic in time, on four particles over a
    # sliver of the first interval
    for slopes in ((), (snaps[0], snaps[1])):
        field.load(times[0], snaps[0], times[1], snaps[1], *slopes)
        w = State.empty(4)
        place(w, np.arange(4), seeds[:4], np.zeros(4), field)
        advance(w, 1e-3 * times[1], field, args.step, lambda *a: None)

    def run_ours(cubic: bool = False):
        chunks: list[int] = []
        kept: list[tuple] = []

        def record(idx, x, t, v):  # what a pathline keeps: every vertex
            chunks.append(len(idx))
            kept.append((idx, x, t))  # the engine hands over arrays of its own

        state = State.empty(N)
        t_load = 0.0
        t0 = time.perf_counter()
        for k in range(len(times) - 1):
            tl = time.perf_counter()
            # as vtkflow's run loads the series: both snapshots of the first interval, then the next one only
            # (the later snapshot becomes the earlier); cubic Hermite in time (vtkflow's option) with the
            # slopes from the neighbouring snapshots
            slope = (lambda j: time_slopes(times, j, snaps.__getitem__)) if cubic else (lambda j: None)  # noqa: E731
            if k == 0:
                field.load(times[0], snaps[0], times[1], snaps[1], *((slope(0), slope(1)) if cubic else ()))
            else:
                field.shift(times[k + 1], snaps[k + 1], slope(k + 1))
            t_load += time.perf_counter() - tl
            if k == 0:
                place(state, np.arange(N), seeds, np.zeros(N), field)
                record(np.arange(N), state.x, state.t, state.v)
            advance(state, times[k + 1], field, args.step, record)
        return time.perf_counter() - t0, t_load, state, chunks

    # vtkflow's runs (linear and cubic in time) are spread over the time VTK's runs take: a pair before VTK's
    # first configuration and one after each, so that both sides see the machine in the same states (its
    # speed drifts within minutes, 1.5x and at times more); the fastest run of each kind counts
    ours, cubic = [run_ours()], [run_ours(True)]
    # every run computes the same paths (bitwise): the first of each kind serves the counts and the errors
    _, _, state, chunks = ours[0]
    _, _, state_cubic, chunks_cubic = cubic[0]
    rep.say(thread_summary())
    exited = state.status == Status.exited
    steps_ours = sum(chunks[1:]) - int(exited.sum())  # every recorded vertex but the releases and exit points
    # snapshot intervals each particle was alive in (entered), from vtkflow's exit times
    t_exit = np.where(exited, state.t, np.inf)
    alive_intervals = np.array([np.count_nonzero(times[:-1] < te) for te in t_exit])
    particle_intervals = int(alive_intervals.sum())

    # ----------------------------------------------------------------------------------------- VTK
    results = {}
    with tempfile.TemporaryDirectory(prefix="vtkflow-bench-") as tmp:
        for name in CONFIGS:
            r = run_vtk(name, args, Path(tmp), timeout)
            ours.append(run_ours())
            cubic.append(run_ours(True))
            results[name] = r
            if "failure" in r:
                rep.say(f"VTK {name}: {r['failure']}")
                continue
            net = float(r["wall"] - r["source"])
            r["net"] = net
            r["steps"] = 2 * particle_intervals
            rep.say(f"VTK {name}: update {float(r['wall']):.3f} s, of which source {float(r['source']):.3f} s; "
                    f"net {net:.3f} s (a static cell locator build alone: {float(r['locator_build']):.3f} s); "
                    f"{len(r['inj'])} particles in the output ({int(r['output_points'])} points); "
                    f"{len(r['requests'])} snapshot requests"
                    + (f"; paths of one particle each: {100 * float(r['consistent']):.1f} %"
                       if np.isfinite(r["consistent"]) else "")
                    + (f"; stderr: {r['warnings']}" if r["warnings"] else ""))

    t_ours, t_load = min((r[0], r[1]) for r in ours)
    t_cubic = min(r[0] for r in cubic)
    rep.say(f"vtkflow: preparation {t_prep:.2f} s; runs {', '.join(f'{r[0]:.3f}' for r in ours)} s -> {t_ours:.3f} s "
            f"(of which loading snapshot pairs {t_load:.3f} s); {steps_ours} RK4 steps, "
            f"{steps_ours / t_ours / 1e6:.3f} M steps/s; {int(exited.sum())} exited; cubic in time: "
            f"{', '.join(f'{r[0]:.3f}' for r in cubic)} s")
    same = all(np.array_equal(r[2].x, state.x) for r in ours) and all(np.array_equal(r[2].x, state_cubic.x) for r in cubic)
    if not same:
        raise RuntimeError("vtkflow's runs differ: they should compute the same paths bitwise")

    # ------------------------------------------------------------------------------------ accuracy
    rng = np.random.default_rng(3)
    pick = np.sort(rng.choice(N, n_sample, replace=False))
    t_ref, (ref, ref_in) = timed(lambda: exact_paths(seeds[pick], WINDOW))
    ok = ref_in & (state.status[pick] == Status.active)
    vtk_pos = {}
    for name, r in results.items():
        if "failure" in r:
            continue
        pos = np.full((N, 3), np.nan)
        pos[r["inj"]] = r["X"]
        vtk_pos[name] = pos
        ok &= np.isfinite(pos[pick, 0])
    later = later_snapshot_paths(seeds[pick][ok], times) if ok.any() else np.zeros((0, 3))
    rep.say(f"accuracy at t = {WINDOW:g}: {ok.sum()} of {n_sample} sampled particles (exact path inside the cube, "
            f"alive at the end on every side); references in {t_ref:.1f} s")
    ok &= state_cubic.status[pick] == Status.active
    err = {"vtkflow": np.linalg.norm(state.x[pick][ok] - ref[ok], axis=1),
           "vtkflow cubic": np.linalg.norm(state_cubic.x[pick][ok] - ref[ok], axis=1)}
    for name, pos in vtk_pos.items():
        err[name] = np.linalg.norm(pos[pick][ok] - ref[ok], axis=1)
    for name, e in err.items():
        if e.size:
            pos = {"vtkflow": state.x, "vtkflow cubic": state_cubic.x}.get(name, vtk_pos.get(name))
            d_later = np.linalg.norm(pos[pick][ok] - later, axis=1)
            rep.say(f"  {name:20s} error median {np.median(e):.3e} max {e.max():.3e}   "
                    f"(distance to the later-snapshot-only paths: median {np.median(d_later):.3e})")

    # ------------------------------------------------------------------------------------- figures
    rate_ours = steps_ours / t_ours
    good = [n for n in ("multiblock+static", "multiblock+default") if n in results and "failure" not in results[n]]
    if good:
        best = min(good, key=lambda n: results[n]["net"])
        rb = results[best]
        rep.add("particle steps/s", rate_ours / 1e6, rb["steps"] / rb["net"] / 1e6, "M/s",
                note=f"VTK {best}; VTK steps: 2 per interval")
        rep.add("particle-intervals/s (pathline throughput)", particle_intervals / t_ours / 1e6,
                particle_intervals / rb["net"] / 1e6, "M/s")
        rep.add("run wall time", t_ours, rb["net"], "s", note="VTK: minus source time")
        rep.add("RK4 steps", steps_ours, rb["steps"], "")
        if err["vtkflow"].size:
            rep.add("end-point error, median", np.median(err["vtkflow"]), np.median(err[best]), "",
                    note=f"{ok.sum()} particles")
            rep.add("end-point error, max", err["vtkflow"].max(), err[best].max(), "")
            steps_cubic = sum(chunks_cubic[1:]) - int((state_cubic.status == Status.exited).sum())
            rep.add("end-point error median, vtkflow cubic in time", np.median(err["vtkflow cubic"]),
                    np.median(err[best]), "", note=f"time {t_cubic:.3f} s, {steps_cubic / t_cubic / 1e6:.2f} M steps/s")
            rep.add("particle steps/s, vtkflow cubic in time", steps_cubic / t_cubic / 1e6,
                    rb["steps"] / rb["net"] / 1e6, "M/s")
    for name, note in (("paths multiblock+static serial", "vtkParticlePathFilter, serial"),
                       ("paths multiblock+static", "vtkParticlePathFilter, threaded")):
        pf = results.get(name, {})
        if "net" in pf:
            wrong = np.isfinite(pf["consistent"]) and pf["consistent"] < 1.0
            rep.add(f"run wall time, VTK keeping whole paths{' (WRONG)' if wrong else ''}", t_ours, pf["net"], "s",
                    note=note + (f": {100 * (1 - float(pf['consistent'])):.0f} % of paths mix particles" if wrong else ""))
    rep.add("preparation (Mesh)", t_prep, None, "s")
    plain = results.get("plain+static", {})
    if "failure" in plain:
        rep.add("VTK plain-grid input", None, None, "", note=plain["failure"][:60])
    elif err.get("plain+static") is not None and err["plain+static"].size and err["vtkflow"].size:
        rep.add("end-point error median, VTK plain-grid input", np.median(err["vtkflow"]),
                np.median(err["plain+static"]), "", note="earlier snapshot lost: see log")
    rep.table()
    rep.write(args.json)


if __name__ == "__main__":
    main()
