"""Run every benchmark of vtkflow against its peer in the same run, one after the other, and print one table.

Scripts (each also runs on its own; see its docstring):

* ``steady.py``    streamlines on 1.2 M tetrahedra: vtkflow's ``trace_streamlines`` vs VTK's ``vtkStreamTracer``;
* ``transient.py`` 10,000 pathlines through 20 snapshots on 200 k tetrahedra: vtkflow's ``advance`` vs VTK's
  ``vtkParticleTracer`` (and ``vtkParticlePathFilter``), each VTK setup guarded in a subprocess;
* ``prep.py``      vtkflow's mesh preparation vs VTK reading the same mesh from a compressed ``.vtu``;
* ``memory.py``    peak RSS of a recipe run over 20 vs 200 snapshots;
* ``vortex.py``    every vortex criterion per frame on 1.2 M tetrahedra vs VTK's ``vtkGradientFilter`` (gradient,
  vorticity and Q), and the closed-form eigenvalues vs ``numpy.linalg.eigvalsh``;
* ``render.py``    frames per second of the demo's render with 2 worker processes vs 1.

Both sides run on 2 threads (VTK's SMP backend on std::thread, numba's pool). In the final table the
ratio is vtkflow / peer: above 1 is better for rates, below 1 for times, errors and memory; the peer is
VTK's filter, except in ``memory`` where it is the run over the shorter series. Speed and memory goals
live here, never in the tests.

Usage: ``python benchmarks/run_all.py [--quick] [--only steady transient ...]`` (``--quick``: each script's
small version, well under a minute in all).
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
from _common import Figure, format_table  # noqa: E402

SCRIPTS = ["steady", "transient", "prep", "memory", "vortex", "render"]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true", help="the small version of every script")
    ap.add_argument("--only", nargs="+", choices=SCRIPTS, default=SCRIPTS, help="run only these scripts")
    ap.add_argument("--threads", type=int, default=2, help="threads on each side (default 2)")
    ap.add_argument("--json", default=None, help="also write every figure to this JSON file")
    args = ap.parse_args()

    figures: list[Figure] = []
    failed: list[str] = []
    started = time.perf_counter()
    with tempfile.TemporaryDirectory(prefix="vtkflow-bench-") as tmp:
        for name in args.only:
            out = Path(tmp) / f"{name}.json"
            cmd = [sys.executable, str(HERE / f"{name}.py"), "--json", str(out), "--threads", str(args.threads)]
            if args.quick:
                cmd.append("--quick")
            print(f"\n=== {name}.py{' --quick' if args.quick else ''} ===", flush=True)
            t0 = time.perf_counter()
            rc = subprocess.call(cmd)
            took = time.perf_counter() - t0
            if rc != 0 or not out.is_file():
                failed.append(f"{name}.py (exit {rc})")
                print(f"=== {name}.py FAILED (exit {rc}) after {took:.0f} s ===", flush=True)
                continue
            print(f"=== {name}.py done in {took:.0f} s ===", flush=True)
            figures += [Figure(**f) for f in json.loads(out.read_text())["figures"]]
    print(f"\n=== all figures ({time.perf_counter() - started:.0f} s; ratio = vtkflow / peer) ===")
    print(format_table(figures))
    if args.json:
        Path(args.json).write_text(json.dumps([f.__dict__ for f in figures], indent=1))
    if failed:
        print("failed: " + ", ".join(failed))
        sys.exit(1)


if __name__ == "__main__":
    main()
