"""Colour maps of vtkflow, as control points (position in [0, 1], r, g, b in [0, 1]).

Plain data, no rendering import: the recipe validates names against :data:`COLORMAPS` and
``vtkflow.render`` turns the control points into a lookup table. The control points are our own,
chosen for monotonic lightness (sequential maps) or a light centre (the diverging map).
"""

from __future__ import annotations

import numpy as np

__all__ = ["COLORMAPS", "sample"]

COLORMAPS: dict[str, tuple[tuple[float, float, float, float], ...]] = {
    # dark to light through reds and oranges
    "ember": ((0.0, 0.05, 0.03, 0.10), (0.35, 0.55, 0.07, 0.12), (0.7, 0.95, 0.50, 0.10), (1.0, 1.0, 0.97, 0.75)),
    # dark blue to pale cyan
    "glacier": ((0.0, 0.03, 0.06, 0.25), (0.45, 0.05, 0.40, 0.60), (1.0, 0.85, 0.98, 0.98)),
    # blue, near-white centre, red: for signed quantities
    "split": ((0.0, 0.15, 0.25, 0.70), (0.5, 0.94, 0.94, 0.92), (1.0, 0.70, 0.10, 0.12)),
    "greys": ((0.0, 0.1, 0.1, 0.1), (1.0, 0.92, 0.92, 0.92)),
}


def sample(name: str, n: int = 256) -> np.ndarray:
    """``n`` RGB colours of a map, linearly interpolated between its control points.

    Returns
    -------
    colours : (n, 3) ndarray of float in [0, 1]
    """
    pts = np.asarray(COLORMAPS[name], dtype=float)
    s = np.linspace(0.0, 1.0, n)
    return np.stack([np.interp(s, pts[:, 0], pts[:, c]) for c in (1, 2, 3)], axis=1)
