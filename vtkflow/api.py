"""The Python API: the recipe's flow lines from a notebook or a script, with the recipe's names.

>>> import vtkflow
>>> series = vtkflow.Series.open("case/*.vtu", {"field": "time"}, "U")            # doctest: +SKIP
>>> frames = vtkflow.trace(series, "streakline", {"line": {"start": [0, 0, 0],
...                        "end": [0, 1, 0], "count": 10}}, every=0.01)             # doctest: +SKIP
>>> t, lines = frames[-1]                                                         # doctest: +SKIP
"""

from __future__ import annotations

from typing import Any, Optional, Sequence, Union

import numpy as np

from .errors import RecipeError
from pydantic import ValidationError

from .recipe import LineEntry, Release, _best_error
from .releases import release_points
from .run import make_tracer, plan_entry, stream
from .series import Series

__all__ = ["trace"]


def trace(
    series: Series,
    kind: str,
    release: Union[dict, np.ndarray, Sequence[Sequence[float]]],
    *,
    start: Optional[float] = None,
    stop: Optional[float] = None,
    every: Optional[float] = None,
    direction: Optional[str] = None,
    frames: Any = None,
    step: float = 0.25,
    length: Optional[float] = None,
    integrator: str = "rk4",
    tolerance: Optional[float] = None,
    time_interpolation: str = "linear",
) -> list[tuple[float, Any]]:
    """Compute one line entry over a series and return its frames as ``(time, pyvista.PolyData)``.

    Parameters
    ----------
    series : Series
    kind : {'pathline', 'streakline', 'timeline', 'streamline'}
    release : dict or (N, 3) array
        A release shape as in a recipe (``{"line": {"start": ..., "end": ..., "count": ...}}``,
        ``{"points": [...]}``, ``{"circle": ...}``, ``{"plane": ...}``, ``{"box": ...}``) or the points.
    start, stop, every, direction, frames, step, length, integrator, tolerance
        As the keys of a recipe's line entry, with the same defaults.
    time_interpolation : {'linear', 'cubic'}
        As the recipe's ``data.time_interpolation``.

    Returns
    -------
    list of (float, pyvista.PolyData)
        One item per output frame, with the point arrays of the output files.
    """
    import pyvista as pv

    fields = {"kind": kind, "release": "release", "start": start, "stop": stop, "every": every,
              "direction": direction, "frames": frames, "step": step, "length": length,
              "integrator": integrator, "tolerance": tolerance}
    try:
        entry = LineEntry.model_validate({k: v for k, v in fields.items() if v is not None})
        if isinstance(release, dict):
            spec = Release.model_validate(release)
            points = release_points(spec.shape, spec.spec)
        else:
            points = np.asarray(release, dtype=np.float64).reshape(-1, 3)
    except ValidationError as exc:
        loc, msg = _best_error(exc)
        raise RecipeError(f"trace: {loc + ': ' if loc else ''}{msg}") from None
    except ValueError as exc:
        raise RecipeError(f"trace: release: {exc}") from None
    p = plan_entry("trace", entry, points, series.mesh.contains(points), series.times)
    tracer = make_tracer(p, series)
    out: list[tuple[float, Any]] = []

    def emit(name: str):
        def keep(index: int, time: float, polydata: Any) -> None:
            out.append((time, pv.wrap(polydata)))

        return keep

    if time_interpolation not in ("linear", "cubic"):
        raise RecipeError(f"trace: time_interpolation: choose linear or cubic, not {time_interpolation!r}")
    stream(series, [tracer], emit, p.stop, cubic=time_interpolation == "cubic")
    return out
