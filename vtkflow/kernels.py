"""numba kernels over plain arrays: point location in a tetrahedral mesh and barycentric interpolation.

Three layers (as in the project's design notes): private single-point ``@njit`` kernels; a parallel
driver with ``prange`` over points, each point writing only its own rows (so results do not depend on
the number of threads, bitwise); and :class:`Locator`, the Python wrapper that validates and converts.

Point location walks from a starting tetrahedron toward the point through the face with the most
negative barycentric coordinate (after Löhner & Ambrosiano 1990, "A vectorized particle tracer for
unstructured grids", J. Comput. Phys. 91), with a step limit against cycles, and falls back to the bin
grid (every tetrahedron whose bounding box overlaps the point's bin) when the walk fails or reaches a
boundary face. No VTK, no I/O.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

from .tetmesh import BinGrid, TetMesh, bin_grid, face_neighbours

__all__ = ["Locator", "BARY_TOL", "MAX_WALK"]

#: A point is in a tetrahedron when every barycentric coordinate is >= -BARY_TOL (round-off scale:
#: points on faces, edges and vertices are inside; points a relative 1e-12 beyond are not).
BARY_TOL = 1e-12
#: Longest walk before falling back to the bin grid (a guard against cycles on degenerate meshes).
MAX_WALK = 256


@njit(cache=True, nogil=True)
def _bary(x, t, p0, tinv, out):
    """Barycentric coordinates of ``x`` in tetrahedron ``t`` into ``out`` (4,); returns the smallest."""
    d0 = x[0] - p0[t, 0]
    d1 = x[1] - p0[t, 1]
    d2 = x[2] - p0[t, 2]
    l1 = tinv[t, 0, 0] * d0 + tinv[t, 0, 1] * d1 + tinv[t, 0, 2] * d2
    l2 = tinv[t, 1, 0] * d0 + tinv[t, 1, 1] * d1 + tinv[t, 1, 2] * d2
    l3 = tinv[t, 2, 0] * d0 + tinv[t, 2, 1] * d1 + tinv[t, 2, 2] * d2
    out[0] = 1.0 - l1 - l2 - l3
    out[1] = l1
    out[2] = l2
    out[3] = l3
    return min(min(out[0], out[1]), min(out[2], out[3]))


@njit(cache=True, nogil=True)
def _walk(x, start, p0, tinv, nbr, bary):
    """Walk from ``start`` toward ``x``: the containing tetrahedron, or -1 at a boundary face, -2 if lost."""
    t = start
    for _ in range(MAX_WALK):
        if _bary(x, t, p0, tinv, bary) >= -BARY_TOL:
            return t
        f = 0
        for i in range(1, 4):
            if bary[i] < bary[f]:
                f = i
        nxt = nbr[t, f]
        if nxt < 0:
            return -1
        t = nxt
    return -2


@njit(cache=True, nogil=True)
def _search_bins(x, origin, spacing, dims, start, items, p0, tinv, bary):
    """The tetrahedron containing ``x`` among those listed in its bin, or -1."""
    idx = np.empty(3, np.int64)
    for k in range(3):
        s = (x[k] - origin[k]) / spacing[k]
        if not (s >= -1e-9 * dims[k] and s <= dims[k] * (1.0 + 1e-9)):
            return -1
        i = int(s)
        idx[k] = min(max(i, 0), dims[k] - 1)
    b = idx[0] + dims[0] * (idx[1] + dims[1] * idx[2])
    best, best_val = -1, -np.inf
    for j in range(start[b], start[b + 1]):
        t = items[j]
        v = _bary(x, t, p0, tinv, bary)
        if v >= -BARY_TOL and v > best_val:
            best, best_val = t, v
    return best


@njit(cache=True, nogil=True)
def _locate(x, hint, p0, tinv, nbr, origin, spacing, dims, start, items, bary):
    if hint >= 0:
        t = _walk(x, hint, p0, tinv, nbr, bary)
        if t >= 0:
            return t
    t = _search_bins(x, origin, spacing, dims, start, items, p0, tinv, bary)
    if t >= 0:
        _bary(x, t, p0, tinv, bary)
    return t


@njit(cache=True, parallel=True)
def _locate_many(xs, hints, p0, tinv, nbr, origin, spacing, dims, start, items, tets_out, bary_out):
    for i in prange(xs.shape[0]):
        bary = np.empty(4)
        t = _locate(xs[i], hints[i], p0, tinv, nbr, origin, spacing, dims, start, items, bary)
        tets_out[i] = t
        for k in range(4):
            bary_out[i, k] = bary[k] if t >= 0 else 0.0


@njit(cache=True, parallel=True)
def _interpolate(tets, bary, conn, values, out):
    for i in prange(tets.shape[0]):
        t = tets[i]
        for c in range(values.shape[1]):
            acc = 0.0
            if t >= 0:
                for k in range(4):
                    acc += bary[i, k] * values[conn[t, k], c]
            out[i, c] = acc


class Locator:
    """Point location and linear interpolation on the tetrahedral decomposition of a mesh.

    Parameters
    ----------
    tm : TetMesh

    Examples
    --------
    >>> loc = Locator(decompose(points, offsets, connectivity, types))   # doctest: +SKIP
    >>> tets, bary = loc.locate(xyz)                                     # doctest: +SKIP
    """

    def __init__(self, tm: TetMesh) -> None:
        self.tm = tm
        pts = tm.points[tm.tets]
        self.p0 = np.ascontiguousarray(pts[:, 0])
        e1, e2, e3 = pts[:, 1] - pts[:, 0], pts[:, 2] - pts[:, 0], pts[:, 3] - pts[:, 0]
        # inverse of the edge matrix [e1 e2 e3] by cross products: its rows are (e2 x e3, e3 x e1, e1 x e2) / det
        rows = np.stack([np.cross(e2, e3), np.cross(e3, e1), np.cross(e1, e2)], axis=1)
        det = np.einsum("ij,ij->i", e1, rows[:, 0])
        ok = np.abs(det) > 1e-300
        tinv = np.full((len(pts), 3, 3), np.inf)  # degenerate tetrahedra never contain a point
        tinv[ok] = rows[ok] / det[ok, None, None]
        self.tinv = tinv
        self.nbr = face_neighbours(tm.tets)
        self.bins: BinGrid = bin_grid(tm.points, tm.tets)
        self.conn = np.ascontiguousarray(tm.tets)

    def locate(self, x: np.ndarray, hints: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
        """Containing tetrahedron (-1 outside) and barycentric coordinates of each point.

        Parameters
        ----------
        x : (N, 3) ndarray
        hints : (N,) ndarray of int, optional
            A tetrahedron near each point (e.g. where it was last step) to walk from; -1 for none.
        """
        x = np.ascontiguousarray(x, dtype=np.float64).reshape(-1, 3)
        h = np.full(len(x), -1, np.int64) if hints is None else np.ascontiguousarray(hints, dtype=np.int64)
        tets = np.empty(len(x), np.int64)
        bary = np.empty((len(x), 4))
        b = self.bins
        _locate_many(x, h, self.p0, self.tinv, self.nbr, b.origin, b.spacing, b.dims, b.start, b.items, tets, bary)
        return tets, bary

    def interpolate(self, tets: np.ndarray, bary: np.ndarray, values: np.ndarray) -> np.ndarray:
        """Linear interpolation of point ``values`` ``(n_points_extended, k)`` at located points (zeros outside)."""
        out = np.empty((len(tets), values.shape[1]))
        _interpolate(tets, bary, self.conn, np.ascontiguousarray(values, dtype=np.float64), out)
        return out
