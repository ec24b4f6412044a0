"""Rendering throughput: frames per second of the demo's render at 1280x720 with 1 and with 2 worker processes.

Case: the demo (``python -m vtkflow.demo meshes/wake``, generated if missing) and ``recipes/demo.yaml``.
Its line and vortex entries are computed once (no renders), then the render ``wake`` (streaklines and
timelines with the wing as context, 41 frames) is drawn with 1 worker process and with 2 spawned worker
processes (each creates its own EGL context and keeps one render window, with Mesa's rasteriser on one
thread: the workers fill the CPUs), each timed from the start of the pool to the last PNG written, worker
start-up included; and in this process without workers (Mesa on every CPU), what ``--workers 1`` does.
The peer of the 2-worker figure is the 1-worker run of the same script. Goal: 2 workers at least 1.7x one.
Movies are not part of the timing. ``--frames-times`` repeats the 41 frames to show the steady state.

Usage: ``python benchmarks/render.py [--quick] [--json out.json]`` (``--quick``: 10 frames at 640x360).
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _common import ROOT, Report, add_common_args, machine_line, timed  # noqa: E402


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    add_common_args(ap)
    ap.add_argument("--repeat", type=int, default=2, help="timed runs per setting; the fastest counts (default 2)")
    ap.add_argument("--frames-times", type=int, default=2, help="render the demo's frames this many times (default 2)")
    args = ap.parse_args()

    from vtkflow.recipe import load_recipe
    from vtkflow.run import _render_all, open_series, run_recipe

    rep = Report("render")
    rep.say(f"# rendering: {machine_line()}")
    if not (ROOT / "meshes" / "wake" / "wake_0040.vtu").is_file():
        subprocess.check_call([sys.executable, "-m", "vtkflow.demo", str(ROOT / "meshes" / "wake")])
    loaded = load_recipe(ROOT / "recipes" / "demo.yaml")
    recipe = loaded.recipe
    wake = recipe.renders["wake"].model_copy(update={"movie": None})
    if args.quick:
        wake = wake.model_copy(update={"size": (640, 360)})
    loaded = type(loaded)(recipe.model_copy(update={"renders": {"wake": wake}}), loaded.path, loaded.sha256)
    with tempfile.TemporaryDirectory(prefix="vtkflow-bench-") as tmp:
        out = Path(tmp)
        manifest = run_recipe(loaded, out, warn=lambda m: None, render=False)
        entries = {**manifest["entries"], **manifest["vortices"]}
        if args.quick:
            entries = {k: {**v, "frames": v["frames"][:10]} for k, v in entries.items()}
        first = entries[wake.lines[0]]
        entries[wake.lines[0]] = {**first, "frames": [{**f, "index": i} for i, f in
                                                      enumerate(first["frames"] * max(1, args.frames_times))]}
        series = open_series(loaded)
        n = len(entries[wake.lines[0]]["frames"])
        rep.say(f"render 'wake': {n} frames at {wake.size[0]}x{wake.size[1]}, layers {', '.join(wake.lines)}")
        t = {}
        for label, workers, spawn in (("1 worker", 1, True), ("2 workers", 2, True), ("in-process", 1, False)):
            t[label] = min(timed(lambda: _render_all(loaded, out, entries, series, None, workers, spawn))[0]
                           for _ in range(args.repeat))
            rep.say(f"{label}: {t[label]:.2f} s, {n / t[label]:.2f} frames/s")
    rep.add("frames/s, 2 workers vs 1", n / t["2 workers"], n / t["1 worker"], "1/s", goal=">= 1.7",
            note=f"{wake.size[0]}x{wake.size[1]} demo scene, spawned workers")
    rep.add("frames/s, 2 workers vs in-process", n / t["2 workers"], n / t["in-process"], "1/s",
            note="one process, Mesa on every CPU")
    rep.table()
    rep.write(args.json)


if __name__ == "__main__":
    main()
