"""Shared pieces of the benchmark scripts: thread settings, the analytic flows, the box meshes, figures.

Nothing here is timed. Every script sets both sides to the same number of threads (2 by default: VTK's
SMP backend on ``std::thread``, numba's thread pool) before any work, and reports its figures as a
list of :class:`Figure` rows (vtkflow's value, the peer's value measured in the same run, their ratio),
printed and, with ``--json PATH``, written for ``benchmarks/run_all.py``'s final table.
"""

from __future__ import annotations

import json
import os
import sys
import time
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any, Callable, Optional, Sequence

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))  # tests/flows.py: box meshes, the ABC flow, series writer

THREADS = 2


def set_threads(n: int = THREADS) -> None:
    """Both sides on ``n`` threads: VTK's SMP backend (std::thread) and numba's pool."""
    from vtkmodules.vtkCommonCore import vtkSMPTools

    vtkSMPTools.SetBackend("STDThread")
    vtkSMPTools.Initialize(n)
    import numba

    numba.set_num_threads(n)


def thread_summary() -> str:
    from vtkmodules.vtkCommonCore import vtkSMPTools
    import numba

    return (f"VTK SMP backend {vtkSMPTools.GetBackend()} x {vtkSMPTools.GetEstimatedNumberOfThreads()} threads; "
            f"numba {numba.get_num_threads()} threads ({numba.threading_layer() if _numba_ran() else 'pool not started'})")


def _numba_ran() -> bool:
    import numba

    try:
        numba.threading_layer()
        return True
    except ValueError:
        return False


def box(n: int, kind: str = "tetra") -> Any:
    """The unit cube cut into ``n**3`` cubes, each split into 5 tetrahedra (tests/flows.py ``box_mesh``)."""
    from flows import box_mesh

    return box_mesh((0.0, 0.0, 0.0), (1.0, 1.0, 1.0), (n, n, n), kind)


# ------------------------------------------------------------------------------------------- flows
# Arnold-Beltrami-Childress flow (Dombre, Frisch, Greene, Henon, Mehr & Soward 1986, J. Fluid Mech. 167),
# scaled to the unit cube: u(x) = ABC(2 pi x), one period per cube side.
ABC_A, ABC_B, ABC_C = np.sqrt(3.0), np.sqrt(2.0), 1.0


def abc_unit(x: np.ndarray) -> np.ndarray:
    """Steady ABC flow on the unit cube, ``(N, 3) -> (N, 3)``."""
    X, Y, Z = (2.0 * np.pi * np.asarray(x, float)).T
    return np.stack([ABC_A * np.sin(Z) + ABC_C * np.cos(Y),
                     ABC_B * np.sin(X) + ABC_A * np.cos(Z),
                     ABC_C * np.sin(Y) + ABC_B * np.cos(X)], axis=1)


#: The unsteady flow of the transient and memory benchmarks: the ABC flow above with coefficients that
#: vary over half a period of the window (this benchmark's choice), scaled so that particles travel about
#: a third of the cube in one time unit: A(t) = A (1 + 0.5 s), B(t) = B (1 - 0.3 s), C(t) = C (1 + 0.4 s),
#: s = sin(pi t / PERIOD_HALF), u = SCALE * ABC_{A(t),B(t),C(t)}(2 pi x).
SCALE = 0.15
PERIOD_HALF = 1.0


def abc_unsteady(x: np.ndarray, t: float) -> np.ndarray:
    s = np.sin(np.pi * t / PERIOD_HALF)
    A, B, C = ABC_A * (1 + 0.5 * s), ABC_B * (1 - 0.3 * s), ABC_C * (1 + 0.4 * s)
    X, Y, Z = (2.0 * np.pi * np.asarray(x, float)).T
    return SCALE * np.stack([A * np.sin(Z) + C * np.cos(Y),
                             B * np.sin(X) + A * np.cos(Z),
                             C * np.sin(Y) + B * np.cos(X)], axis=1)


def inside_cube(p: np.ndarray, margin: float = 0.0) -> np.ndarray:
    p = np.asarray(p)
    return np.all((p >= margin) & (p <= 1.0 - margin), axis=-1)


# ------------------------------------------------------------------------------------------ figures
@dataclass
class Figure:
    """One row of the final table: what, vtkflow's value, the peer's value, their ratio, a goal."""

    bench: str
    what: str
    ours: Optional[float]
    peer: Optional[float] = None
    ratio: Optional[float] = None
    unit: str = ""
    goal: str = ""
    note: str = ""


@dataclass
class Report:
    bench: str
    figures: list[Figure] = field(default_factory=list)
    lines: list[str] = field(default_factory=list)

    def add(self, what: str, ours: Optional[float], peer: Optional[float] = None, unit: str = "",
            ratio: Optional[float] = None, goal: str = "", note: str = "", invert: bool = False) -> Figure:
        """A figure; the ratio is ours / peer (peer / ours with ``invert``) unless given."""
        if ratio is None and ours is not None and peer is not None and ours != 0 and peer != 0:
            ratio = (peer / ours) if invert else (ours / peer)
        fig = Figure(self.bench, what, _f(ours), _f(peer), _f(ratio), unit, goal, note)
        self.figures.append(fig)
        return fig

    def say(self, line: str = "") -> None:
        print(line, flush=True)
        self.lines.append(line)

    def table(self) -> None:
        self.say()
        self.say(format_table(self.figures))

    def write(self, path: Optional[str]) -> None:
        if path:
            Path(path).write_text(json.dumps({"bench": self.bench, "figures": [asdict(f) for f in self.figures],
                                              "lines": self.lines}, indent=1))


def _f(v: Any) -> Optional[float]:
    if v is None:
        return None
    v = float(v)
    return v if np.isfinite(v) else None


def fmt(v: Optional[float]) -> str:
    if v is None:
        return "-"
    a = abs(v)
    if a == 0:
        return "0"
    if a >= 1e5 or a < 1e-3:
        return f"{v:.3g}"
    if a >= 100:
        return f"{v:.0f}"
    if a >= 10:
        return f"{v:.1f}"
    return f"{v:.3g}"


def format_table(figs: Sequence[Figure]) -> str:
    rows = [("bench", "figure", "vtkflow", "peer", "ratio", "unit", "goal", "note")]
    for f in figs:
        rows.append((f.bench, f.what, fmt(f.ours), fmt(f.peer), fmt(f.ratio), f.unit, f.goal, f.note))
    widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    out = []
    for j, r in enumerate(rows):
        out.append("  ".join(c.ljust(w) for c, w in zip(r, widths)).rstrip())
        if j == 0:
            out.append("  ".join("-" * w for w in widths))
    return "\n".join(out)


def timed(fn: Callable[[], Any]) -> tuple[float, Any]:
    t0 = time.perf_counter()
    out = fn()
    return time.perf_counter() - t0, out


def add_common_args(ap: Any) -> None:
    ap.add_argument("--quick", action="store_true", help="a small version (well under 30 s) to smoke-test the script")
    ap.add_argument("--json", default=None, help="also write the figures to this JSON file (for run_all.py)")
    ap.add_argument("--threads", type=int, default=THREADS, help="threads on each side (default 2)")


def caches() -> str:
    """The CPU's data caches as Linux lists them (``L1 48K, L2 2048K, L3 491520K``), or '' where it does not:
    the ratios against VTK move with them (the last-level cache decides whether a mesh's records fit)."""
    found = {}
    for d in sorted(Path("/sys/devices/system/cpu/cpu0/cache").glob("index*")):
        try:
            kind, level, size = ((d / f).read_text().strip() for f in ("type", "level", "size"))
        except OSError:
            continue
        if kind in ("Data", "Unified"):
            found[f"L{level}"] = size
    return ", ".join(f"{k} {v}" for k, v in sorted(found.items()))


def machine_line() -> str:
    import platform

    import numba
    import scipy
    import vtkmodules

    try:
        from vtkmodules.vtkCommonCore import vtkVersion

        vtk_version = vtkVersion.GetVTKVersion()
    except Exception:  # pragma: no cover
        vtk_version = getattr(vtkmodules, "__version__", "?")
    cache = caches()
    return (f"{platform.node()} {platform.machine()} {os.cpu_count()} CPUs{' (' + cache + ')' if cache else ''}; "
            f"Python {platform.python_version()}, "
            f"NumPy {np.__version__}, numba {numba.__version__}, SciPy {scipy.__version__}, VTK {vtk_version}")
