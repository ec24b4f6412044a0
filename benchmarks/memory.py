"""Memory: peak RSS of a recipe run over 20 vs 200 snapshots of the same mesh (vtkflow streams two at a time).

Case: the unit cube cut into ``n**3`` cubes of 5 tetrahedra (n = 22: 53,240 tetrahedra), the unsteady ABC flow
of ``_common.abc_unsteady`` written as one ``.vtu`` per snapshot (tests/flows.py ``write_series``, point
velocity ``U`` and a FieldData ``time``) on the same window [0, 1], once with 20 and once with 200 snapshots.
The same recipe runs on both: pathlines from a 20 x 20 plane released every 0.25 and streaklines from a
50-point rake released every 0.01, frames every 0.1 (so both runs write the same frames). Each run is its
own process (``--worker``): ``resource.getrusage(RUSAGE_SELF).ru_maxrss`` at its end is its peak RSS; the
RSS after the imports (Python, VTK, NumPy, numba, vtkflow) is reported as the floor.

Ratio: peak RSS with 200 snapshots / with 20; the goal is <= 1.2.

Usage: ``python benchmarks/memory.py [--quick] [--n 22] [--snapshots 20 200] [--json out.json]``.
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _common import Report, abc_unsteady, add_common_args, box, machine_line, set_threads, timed  # noqa: E402

RECIPE = """vtkflow: 1
data: {{files: 'case/*.vtu', times: {{field: time}}, velocity: U}}
releases:
  plane: {{plane: {{origin: [0.3, 0.3, 0.5], u: [0.4, 0.0, 0.0], v: [0.0, 0.4, 0.0], counts: [{plane}, {plane}]}}}}
  rake:  {{line: {{start: [0.3, 0.5, 0.3], end: [0.7, 0.5, 0.7], count: {rake}}}}}
lines:
  paths: {{kind: pathline,   release: plane, every: 0.25, frames: {{every: 0.1}}}}
  smoke: {{kind: streakline, release: rake,  every: 0.01, frames: {{every: 0.1}}}}
output: out
"""


def rss_now_mib() -> float:
    with open("/proc/self/statm") as f:
        pages = int(f.read().split()[1])
    return pages * resource.getpagesize() / 2**20


def worker(recipe: str, result: str, threads: int) -> None:
    set_threads(threads)
    from vtkflow.recipe import load_recipe
    from vtkflow.run import run_recipe

    floor = rss_now_mib()
    t, manifest = timed(lambda: run_recipe(load_recipe(Path(recipe)), warn=lambda m: None, render=False))
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # KiB on Linux
    counts = {k: v["counts"] for k, v in manifest["entries"].items()}
    frames = sum(len(v["frames"]) for v in manifest["entries"].values())
    Path(result).write_text(json.dumps({"peak_mib": peak, "floor_mib": floor, "wall": t, "counts": counts,
                                        "frames": frames, "snapshots": manifest["series"]["snapshots"]}))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    add_common_args(ap)
    ap.add_argument("--n", type=int, default=None, help="cubes per side (5 tetrahedra each); default 22, quick 10")
    ap.add_argument("--snapshots", type=int, nargs=2, default=None, help="the two series lengths; default 20 200, quick 10 50")
    ap.add_argument("--timeout", type=float, default=600.0, help="seconds per run")
    ap.add_argument("--worker", default=None, help=argparse.SUPPRESS)
    ap.add_argument("--result", default=None, help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.worker:
        worker(args.worker, args.result, args.threads)
        return
    n = args.n or (10 if args.quick else 22)
    lengths = args.snapshots or ([10, 50] if args.quick else [20, 200])
    plane, rake = (8, 20) if args.quick else (20, 50)

    from flows import write_series

    rep = Report("memory")
    rep.say(f"# memory: {machine_line()}")
    mesh = box(n)
    rep.say(f"mesh: {mesh.n_cells} tetrahedra, {mesh.n_points} points; window [0, 1]; series of {lengths[0]} and "
            f"{lengths[1]} snapshots; pathlines from {plane * plane} points every 0.25, streaklines from {rake} "
            f"points every 0.01, frames every 0.1")
    runs = {}
    with tempfile.TemporaryDirectory(prefix="vtkflow-bench-") as tmp:
        for s in lengths:
            folder = Path(tmp) / f"s{s}"
            t_write, paths = timed(lambda: write_series(mesh, abc_unsteady, np.linspace(0.0, 1.0, s), folder / "case"))
            size = sum(p.stat().st_size for p in paths)
            recipe = folder / "recipe.yaml"
            recipe.write_text(RECIPE.format(plane=plane, rake=rake))
            result = folder / "result.json"
            cmd = [sys.executable, __file__, "--worker", str(recipe), "--result", str(result),
                   "--threads", str(args.threads)]
            try:
                p = subprocess.run(cmd, capture_output=True, text=True, timeout=args.timeout)
            except subprocess.TimeoutExpired:
                rep.say(f"{s} snapshots: no result after {args.timeout:.0f} s")
                continue
            if p.returncode != 0:
                rep.say(f"{s} snapshots: run failed (exit {p.returncode}): {p.stderr.strip().splitlines()[-1:]}")
                continue
            r = json.loads(result.read_text())
            runs[s] = r
            rep.say(f"{s:4d} snapshots ({size / 2**20:.0f} MiB written in {t_write:.1f} s): run {r['wall']:.1f} s, "
                    f"{r['frames']} frames, peak RSS {r['peak_mib']:.0f} MiB (after imports {r['floor_mib']:.0f} MiB); "
                    f"counts {r['counts']}")
    if len(runs) == 2:
        a, b = runs[lengths[0]], runs[lengths[1]]
        rep.add(f"peak RSS, {lengths[1]} / {lengths[0]} snapshots", b["peak_mib"], a["peak_mib"], "MiB", goal="<= 1.2",
                note="peer column: the shorter series")
        inc_a, inc_b = a["peak_mib"] - a["floor_mib"], b["peak_mib"] - b["floor_mib"]
        rep.add("  above the import floor", inc_b, inc_a, "MiB")
        rep.add(f"run wall time, {lengths[1]} / {lengths[0]} snapshots", b["wall"], a["wall"], "s")
    rep.table()
    rep.write(args.json)


if __name__ == "__main__":
    main()
