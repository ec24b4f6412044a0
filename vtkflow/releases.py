"""Release geometry: where particles and streamlines start.

Each shape is a small pydantic model (its recipe keys) and a vectorised function that turns it into an
``(N, 3)`` array of points. :data:`SHAPES` is the one table of shapes: the recipe schema, the error
messages that list valid shapes and :func:`release_points` all read from it.

Adding a shape: write its model and its function here and add one line to :data:`SHAPES`.
"""

from __future__ import annotations

from typing import Annotated, Any, Callable, NamedTuple

import numpy as np
from pydantic import Field, PositiveFloat, PositiveInt, model_validator

from ._model import Strict

__all__ = [
    "SHAPES",
    "LineShape",
    "PointsShape",
    "CircleShape",
    "PlaneShape",
    "BoxShape",
    "release_points",
    "circle_axes",
]

Vec3 = tuple[float, float, float]


class _Shape(Strict):
    """Base of the shape models (frozen; unknown keys suggest the closest one)."""


class LineShape(_Shape):
    """``count`` points evenly spaced from ``start`` to ``end``, both included."""

    start: Vec3
    end: Vec3
    count: PositiveInt = Field(description="number of points, both ends included")


#: An explicit list of points: ``points: [[x, y, z], ...]``.
PointsShape = Annotated[list[Vec3], Field(min_length=1)]


class CircleShape(_Shape):
    """``count`` points evenly spaced on a circle.

    The first point lies along the in-plane direction ``e1``: the unit vector of ``normal x ez``
    (``ez = (0, 0, 1)``), or of ``normal x ex`` when the normal is parallel to ``ez``. Points then
    go counter-clockwise seen from the tip of ``normal``: ``e2 = normal x e1``.
    """

    center: Vec3
    normal: Vec3
    radius: PositiveFloat
    count: PositiveInt

    @model_validator(mode="after")
    def _normal_not_zero(self) -> "CircleShape":
        if np.linalg.norm(self.normal) == 0.0:
            raise ValueError("normal must not be the zero vector")
        return self


class PlaneShape(_Shape):
    """A ``counts[0]`` x ``counts[1]`` grid on the parallelogram ``origin + a*u + b*v``, a, b in [0, 1].

    Point ``(i, j)`` is ``origin + i/(nu-1) u + j/(nv-1) v``, with ``i`` running fastest.
    A count of 1 along a direction puts the points at ``a = 0`` (or ``b = 0``).
    """

    origin: Vec3
    u: Vec3
    v: Vec3
    counts: tuple[PositiveInt, PositiveInt]


class BoxShape(_Shape):
    """``count`` points drawn uniformly in the axis-aligned box ``[low, high]`` with
    ``numpy.random.default_rng(seed)``."""

    low: Vec3
    high: Vec3
    count: PositiveInt
    seed: int = 0

    @model_validator(mode="after")
    def _ordered(self) -> "BoxShape":
        if any(lo > hi for lo, hi in zip(self.low, self.high)):
            raise ValueError("low must not exceed high in any coordinate")
        return self


def _line(s: LineShape) -> np.ndarray:
    a = np.linspace(0.0, 1.0, s.count) if s.count > 1 else np.zeros(1)
    start, end = np.asarray(s.start), np.asarray(s.end)
    return start + a[:, None] * (end - start)


def _points(s: list[Vec3]) -> np.ndarray:
    return np.asarray(s, dtype=float).reshape(-1, 3)


def circle_axes(normal: Vec3) -> tuple[np.ndarray, np.ndarray]:
    """The in-plane unit vectors ``(e1, e2)`` of a circle with the given normal (see :class:`CircleShape`)."""
    n = np.asarray(normal, dtype=float)
    n = n / np.linalg.norm(n)
    e1 = np.cross(n, [0.0, 0.0, 1.0])
    if np.linalg.norm(e1) < 1e-12:
        e1 = np.cross(n, [1.0, 0.0, 0.0])
    e1 /= np.linalg.norm(e1)
    return e1, np.cross(n, e1)


def _circle(s: CircleShape) -> np.ndarray:
    e1, e2 = circle_axes(s.normal)
    phi = 2.0 * np.pi * np.arange(s.count) / s.count
    return np.asarray(s.center) + s.radius * (np.cos(phi)[:, None] * e1 + np.sin(phi)[:, None] * e2)


def _plane(s: PlaneShape) -> np.ndarray:
    nu, nv = s.counts
    a = np.arange(nu) / (nu - 1) if nu > 1 else np.zeros(1)
    b = np.arange(nv) / (nv - 1) if nv > 1 else np.zeros(1)
    bb, aa = np.meshgrid(b, a, indexing="ij")  # shape (nv, nu): i (along u) runs fastest when raveled
    return (
        np.asarray(s.origin)
        + aa.ravel()[:, None] * np.asarray(s.u)
        + bb.ravel()[:, None] * np.asarray(s.v)
    )


def _box(s: BoxShape) -> np.ndarray:
    rng = np.random.default_rng(s.seed)
    return rng.uniform(np.asarray(s.low), np.asarray(s.high), size=(s.count, 3))


class Shape(NamedTuple):
    """One release shape: the type of its recipe value and the function that makes its points."""

    spec: Any
    points: Callable[[Any], np.ndarray]


SHAPES: dict[str, Shape] = {
    "line": Shape(LineShape, _line),
    "points": Shape(PointsShape, _points),
    "circle": Shape(CircleShape, _circle),
    "plane": Shape(PlaneShape, _plane),
    "box": Shape(BoxShape, _box),
}


def release_points(shape: str, spec: Any) -> np.ndarray:
    """Points of one release shape.

    Parameters
    ----------
    shape : str
        A key of :data:`SHAPES` (``line``, ``points``, ``circle``, ``plane``, ``box``).
    spec : model or list
        The shape's validated recipe value (a model of this module, or the list of ``points``).

    Returns
    -------
    points : (N, 3) ndarray of float64

    Examples
    --------
    >>> release_points("line", LineShape(start=(0, 0, 0), end=(1, 0, 0), count=3))[:, 0]
    array([0. , 0.5, 1. ])
    """
    try:
        entry = SHAPES[shape]
    except KeyError:
        raise ValueError(f"unknown release shape {shape!r}; choose one of {', '.join(sorted(SHAPES))}") from None
    return np.ascontiguousarray(entry.points(spec), dtype=np.float64)
