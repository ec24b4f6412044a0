"""Colour maps: vtkflow's own, as control points (position in [0, 1], r, g, b in [0, 1]), and any map
of matplotlib's registry by its name (``viridis``, ``coolwarm``, ...; matplotlib is imported only when
such a name is used).

No rendering import: the recipe validates names with :func:`known` and ``vtkflow.render`` samples the
map into a lookup table. Our control points are chosen for monotonic lightness (sequential maps) or a
light centre (the diverging map).
"""

from __future__ import annotations

import numpy as np

__all__ = ["COLORMAPS", "sample", "known", "choices"]

COLORMAPS: dict[str, tuple[tuple[float, float, float, float], ...]] = {
    # dark to light through reds and oranges
    "ember": ((0.0, 0.05, 0.03, 0.10), (0.35, 0.55, 0.07, 0.12), (0.7, 0.95, 0.50, 0.10), (1.0, 1.0, 0.97, 0.75)),
    # dark blue to pale cyan
    "glacier": ((0.0, 0.03, 0.06, 0.25), (0.45, 0.05, 0.40, 0.60), (1.0, 0.85, 0.98, 0.98)),
    # blue, near-white centre, red: for signed quantities
    "split": ((0.0, 0.15, 0.25, 0.70), (0.5, 0.94, 0.94, 0.92), (1.0, 0.70, 0.10, 0.12)),
    "greys": ((0.0, 0.1, 0.1, 0.1), (1.0, 0.92, 0.92, 0.92)),
}


def _matplotlib_map(name: str):
    try:
        import matplotlib
    except ImportError:
        return None
    try:
        return matplotlib.colormaps[name]
    except KeyError:
        return None


def known(name: str) -> bool:
    """Whether ``name`` is one of vtkflow's maps or a map of matplotlib's registry."""
    return name in COLORMAPS or _matplotlib_map(name) is not None


def choices() -> str:
    """What a recipe may name, for error messages."""
    return ", ".join(COLORMAPS) + ", or a matplotlib colour map name (e.g. viridis, cividis, coolwarm)"


def sample(name: str, n: int = 256) -> np.ndarray:
    """``n`` RGB colours of a map: ours linearly interpolated between its control points, matplotlib's
    sampled at ``n`` evenly spaced positions.

    Returns
    -------
    colours : (n, 3) ndarray of float in [0, 1]
    """
    s = np.linspace(0.0, 1.0, n)
    if name not in COLORMAPS:
        cmap = _matplotlib_map(name)
        if cmap is None:
            raise KeyError(f"unknown colour map {name!r}")
        return np.asarray(cmap(s), dtype=float)[:, :3]
    pts = np.asarray(COLORMAPS[name], dtype=float)
    return np.stack([np.interp(s, pts[:, 0], pts[:, c]) for c in (1, 2, 3)], axis=1)
