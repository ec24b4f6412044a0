"""Tetrahedral decomposition of a mixed-cell mesh, face neighbours and a box tree for point location, built once.

Every cell is cut into tetrahedra conformingly: each quadrilateral face is split along the diagonal
through its vertex of smallest global index, so the two cells that share it split it the same way
(Dompierre, Labbé, Vallet & Camarero 1999, "How to subdivide pyramids, prisms and hexahedra into
tetrahedra", Proc. 8th International Meshing Roundtable).

* tetrahedron: kept;
* pyramid: two tetrahedra on the split base;
* wedge (prism): three tetrahedra (the rule of the paper above, :func:`split_wedges`);
* vertices, lines and surface cells (boundary faces some meshes carry): left out;
* hexahedron, voxel: a point is added at the cell centre (value: the mean of the eight corners) and
  each of the 12 face triangles is joined to it, twelve tetrahedra.

Linear interpolation in the tetrahedra is exact for fields linear in space, on every cell type.
Everything here is vectorised NumPy; nothing knows about recipes.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from .errors import InputError

__all__ = ["TetMesh", "MortonIndex", "decompose", "orient_and_order_numpy", "morton_order", "morton_codes", "split_wedges", "face_neighbours", "BoxTree", "box_tree", "tree_levels", "tree_pad"]

TETRA, VOXEL, HEXAHEDRON, WEDGE, PYRAMID = 10, 11, 12, 13, 14
#: Cells below three dimensions (vertex, poly-vertex, line, polyline, triangle, strip, polygon, pixel, quad):
#: not decomposed; a mesh may carry them as boundary regions.
SURFACE_TYPES = frozenset({1, 2, 3, 4, 5, 6, 7, 8, 9})

# Rotations/reflections of a VTK wedge that bring each of its six vertices to position 0.
_WEDGE_PERMUTATIONS = np.array(
    [
        [0, 1, 2, 3, 4, 5],
        [1, 2, 0, 4, 5, 3],
        [2, 0, 1, 5, 3, 4],
        [3, 5, 4, 0, 2, 1],
        [4, 3, 5, 1, 0, 2],
        [5, 4, 3, 2, 1, 0],
    ]
)

# Faces of a VTK hexahedron (vertex positions), each a quadrilateral in cyclic order.
_HEX_FACES = np.array(
    [[0, 3, 2, 1], [4, 5, 6, 7], [0, 1, 5, 4], [1, 2, 6, 5], [2, 3, 7, 6], [3, 0, 4, 7]]
)
_VOXEL_TO_HEX = np.array([0, 1, 3, 2, 4, 5, 7, 6])


@dataclass
class TetMesh:
    """A tetrahedral decomposition.

    Attributes
    ----------
    points : (P + C, 3) ndarray
        The mesh points, then one added centre point per hexahedron or voxel.
    tets : (M, 4) ndarray of int32 (int64 beyond 2**31 points)
        Positively oriented tetrahedra.
    parent : (M,) ndarray of int64
        The cell each tetrahedron comes from.
    centres : (C, P) sparse matrix
        Value of each added centre point from the mesh point values (the mean of the cell's corners).
    sizes : (cell_size, point_size) or None
        For a mesh of tetrahedra only: :func:`vtkflow.kernels.cell_sizes` of its cells (in cell order),
        computed in the ordering pass.
    index : MortonIndex or None
        Where the tetrahedra of each Morton cell begin (from the ordering pass).
    """

    points: np.ndarray
    tets: np.ndarray
    parent: np.ndarray
    centres: sp.csr_matrix
    sizes: tuple[np.ndarray, np.ndarray] | None = None
    index: "MortonIndex | None" = None

    @property
    def n_points(self) -> int:
        """Number of points of the original mesh (the added centres come after them)."""
        return self.centres.shape[1]

    def extend(self, values: np.ndarray) -> np.ndarray:
        """Point values of the original mesh, ``(P, k)``, extended to the added centre points."""
        values = np.asarray(values, dtype=np.float64)
        if self.centres.shape[0] == 0:
            return values
        return np.concatenate([values, np.asarray(self.centres @ values)], axis=0)


def split_wedges(wedges: np.ndarray) -> np.ndarray:
    """Split wedges into three tetrahedra each, conformingly (Dompierre et al. 1999).

    Parameters
    ----------
    wedges : (W, 6) ndarray of int
        Vertex ids in VTK_WEDGE order ``[a0, a1, a2, b0, b1, b2]``, ``b_i`` joined to ``a_i``.

    Returns
    -------
    (3 W, 4) ndarray; the tetrahedra of wedge ``i`` are rows ``3 i .. 3 i + 2`` (orientation not fixed).
    """
    perm = _WEDGE_PERMUTATIONS[np.argmin(wedges, axis=1)]
    w = np.take_along_axis(wedges, perm, axis=1)
    a0, a1, a2, b0, b1, b2 = w.T
    # The two quads at a0 are cut through a0; the opposite quad (a1, a2, b2, b1) by its own rule.
    cut_a1_b2 = np.minimum(a1, b2) < np.minimum(a2, b1)
    apex_of_base = np.where(cut_a1_b2, b2, b1)
    third = np.where(cut_a1_b2[:, None], np.column_stack([a0, a1, b2, b1]), np.column_stack([a0, b1, a2, b2]))
    tets = np.stack([np.column_stack([a0, b0, b1, b2]), np.column_stack([a0, a1, a2, apex_of_base]), third], axis=1)
    return tets.reshape(-1, 4)


def _split_quads(quads: np.ndarray) -> np.ndarray:
    """Two triangles per quadrilateral ``(Q, 4)`` (cyclic order), cut through the smallest vertex id."""
    first = np.argmin(quads, axis=1)
    q = np.take_along_axis(quads, (first[:, None] + np.arange(4)) % 4, axis=1)
    return np.stack([q[:, [0, 1, 2]], q[:, [0, 2, 3]]], axis=1).reshape(-1, 3)


def _pyramids(cells: np.ndarray) -> np.ndarray:
    tris = _split_quads(cells[:, :4]).reshape(-1, 2, 3)
    apex = np.repeat(cells[:, 4], 2)
    return np.column_stack([tris.reshape(-1, 3), apex])


def _hexahedra(cells: np.ndarray, centre_ids: np.ndarray) -> np.ndarray:
    quads = cells[:, _HEX_FACES].reshape(-1, 4)  # (6 H, 4)
    tris = _split_quads(quads).reshape(len(cells), 12, 3)
    centre = np.repeat(centre_ids, 12)
    return np.column_stack([tris.reshape(-1, 3), centre])


def decompose(points: np.ndarray, offsets: np.ndarray, connectivity: np.ndarray, types: np.ndarray) -> TetMesh:
    """Cut every cell into tetrahedra (see the module docstring).

    Parameters
    ----------
    points : (P, 3) ndarray
    offsets : (n_cells + 1,) ndarray
        VTK cell offsets into ``connectivity``.
    connectivity : ndarray of int
    types : (n_cells,) ndarray of uint8
        VTK cell types.
    """
    from .kernels import orient_and_order, uniform_cells

    points = np.asarray(points, dtype=np.float64)
    n_cells = len(types)
    supported = {TETRA: 4, PYRAMID: 5, WEDGE: 6, HEXAHEDRON: 8, VOXEL: 8}
    types = np.asarray(types, dtype=np.uint8)
    if n_cells and (types == types[0]).all():  # one type: a comparison (0.08 ms on 1.2 M cells; the count 1.5 ms)
        count = np.zeros(256, np.int64)
        count[types[0]] = n_cells
    else:
        count = np.bincount(types, minlength=256)  # cells of each type, one pass
    for kind in np.flatnonzero(count):
        if int(kind) not in supported and int(kind) not in SURFACE_TYPES:
            raise InputError(f"cell type {int(kind)} is not supported by the particle engine (tetra, pyramid, wedge,"
                             " hexahedron, voxel; vertices, lines and surface cells are kept as boundary regions)")
    if not count[list(supported)].any():
        raise InputError("the mesh has no volume cells (tetra, pyramid, wedge, hexahedron, voxel)")
    tets, parents = [], []
    hex_cells = []
    for kind, n in supported.items():
        if count[kind] == 0:
            continue
        if count[kind] == n_cells:  # a single cell type: the connectivity is already a table
            if not uniform_cells(offsets, n):
                raise InputError(f"a cell of type {kind} does not have {n} points")
            sel = None if kind == TETRA else np.arange(n_cells)  # tetrahedra only: each is its own parent
            cells = np.asarray(connectivity).reshape(n_cells, n)
        else:
            sel = np.flatnonzero(types == kind)
            if np.any(offsets[sel + 1] - offsets[sel] != n):
                raise InputError(f"a cell of type {kind} does not have {n} points")
            cells = connectivity[offsets[sel][:, None] + np.arange(n)]
        if kind == TETRA:
            tets.append(cells)
            parents.append(sel)
        elif kind == PYRAMID:
            tets.append(_pyramids(cells))
            parents.append(np.repeat(sel, 2))
        elif kind == WEDGE:
            tets.append(split_wedges(cells))
            parents.append(np.repeat(sel, 3))
        else:
            hex_cells.append((sel, cells[:, _VOXEL_TO_HEX] if kind == VOXEL else cells))
    n_points = len(points)
    centre_rows = []
    next_id = n_points
    for sel, cells in hex_cells:
        ids = next_id + np.arange(len(sel))
        next_id += len(sel)
        tets.append(_hexahedra(cells, ids))
        parents.append(np.repeat(sel, 12))
        centre_rows.append(cells)
    if centre_rows:
        corners = np.concatenate(centre_rows)
        rows = np.repeat(np.arange(len(corners)), 8)
        centres = sp.csr_matrix((np.full(rows.size, 1.0 / 8.0), (rows, corners.ravel())), shape=(len(corners), n_points))
    else:
        centres = sp.csr_matrix((0, n_points))
    all_points = np.concatenate([points, np.asarray(centres @ points)]) if centres.shape[0] else points
    # one piece: used as it is (a view of the connectivity when the mesh has one cell type); it is not changed
    tet = tets[0] if len(tets) == 1 else np.concatenate(tets) if tets else np.zeros((0, 4), np.int64)
    parent = parents[0] if len(parents) == 1 else np.concatenate(parents) if parents else np.zeros(0, np.int64)
    # positive orientation (two vertices swapped where the signed volume is negative), and the tetrahedra
    # numbered along a Morton (Z-order) curve of their centroids: neighbours in space are then mostly
    # neighbours in memory, which is what point location and interpolation spend time on. Codes, a
    # counting sort and one gather (kernels.orient_and_order); orient_and_order_numpy below is its twin.
    if parent is None:  # tetrahedra only: tetrahedron t is cell order[t]; their sizes from the same pass
        tet, order, cell_size, point_size, index = orient_and_order(all_points, tet, sizes=True, index=True)
        return TetMesh(all_points, tet, order, centres.tocsr(), (cell_size, point_size), index)
    tet, order, index = orient_and_order(all_points, tet, index=True)
    return TetMesh(all_points, tet, np.asarray(parent[order], dtype=np.int64), centres.tocsr(), None, index)


def orient_and_order_numpy(points: np.ndarray, tets: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """NumPy twin of :func:`vtkflow.kernels.orient_and_order`: the tetrahedra in Morton order of their
    centroids over the bounds of ``points``, positively oriented (a new array); and the permutation."""
    p = points[tets]
    centroids = 0.25 * (((p[:, 0] + p[:, 1]) + p[:, 2]) + p[:, 3])
    order = morton_order(centroids, points.min(axis=0), points.max(axis=0))
    out = np.array(tets[order], dtype=np.int64)
    p = p[order]
    vol = np.einsum("ij,ij->i", np.cross(p[:, 1] - p[:, 0], p[:, 2] - p[:, 0]), p[:, 3] - p[:, 0])
    neg = vol < 0
    out[neg] = out[neg][:, [0, 2, 1, 3]]
    return out, order


def morton_bits(n: int) -> int:
    """Leading bits of the 63-bit Morton code that order ``n`` items: whole octree levels, about one level
    short of one item per cell (``3 floor(log2(n) / 3)``, at least 3), so that a counting sort over
    ``2**bits`` keys orders them in linear time; items of one cell keep their order."""
    return int(min(63, max(3, 3 * ((max(int(n), 2).bit_length() - 1) // 3))))


def _spread_bits(v: np.ndarray) -> np.ndarray:
    """Put the low 21 bits of each value three places apart (bit i goes to bit 3 i)."""
    v = v & np.uint64(0x1FFFFF)
    for shift, mask in ((32, 0x1F00000000FFFF), (16, 0x1F0000FF0000FF), (8, 0x100F00F00F00F00F),
                        (4, 0x10C30C30C30C30C3), (2, 0x1249249249249249)):
        v = (v | (v << np.uint64(shift))) & np.uint64(mask)
    return v


def morton_order(xyz: np.ndarray, lo: np.ndarray | None = None, hi: np.ndarray | None = None) -> np.ndarray:
    """Permutation that sorts points ``(N, 3)`` along a Morton (Z-order) curve over the box ``[lo, hi]``
    (default: their bounding box), 21 bits per axis (Morton 1966, IBM technical report; the
    bit-spreading masks are common practice), by the code's leading :func:`morton_bits` bits. Stable:
    points with equal leading bits keep their order."""
    if len(xyz) == 0:
        return np.zeros(0, np.int64)
    lo = xyz.min(axis=0) if lo is None else np.asarray(lo, float)
    hi = xyz.max(axis=0) if hi is None else np.asarray(hi, float)
    code = morton_codes(xyz, lo, (2**21 - 1) / np.maximum(hi - lo, 1e-300))
    return np.argsort(code >> np.uint64(63 - morton_bits(len(xyz))), kind="stable")


def morton_codes(xyz: np.ndarray, lo: np.ndarray, scale: np.ndarray) -> np.ndarray:
    """The 63-bit Morton codes ``(N,)`` of points ``(N, 3)`` over ``lo``, ``scale`` (21 bits per axis, x lowest,
    clamped to the box): the NumPy twin of the kernels' ``_morton``."""
    q = np.clip((np.asarray(xyz, float) - lo) * scale, 0.0, 2**21 - 1).astype(np.uint64)
    return _spread_bits(q[:, 0]) | (_spread_bits(q[:, 1]) << np.uint64(1)) | (_spread_bits(q[:, 2]) << np.uint64(2))


def face_neighbours(tets: np.ndarray) -> np.ndarray:
    """Neighbour across each face: ``nbr[t, i]`` is the tetrahedron sharing the face opposite vertex ``i``
    of ``t``, or -1 on the boundary (or where the mesh is not conforming)."""
    m = len(tets)
    opposite = np.array([[1, 2, 3], [0, 2, 3], [0, 1, 3], [0, 1, 2]])
    faces = np.sort(tets[:, opposite].reshape(-1, 3), axis=1)  # (4 M, 3), row 4 t + i
    n = int(tets.max()) + 1 if m else 1
    if float(n) ** 3 < 2.0**62:  # one int64 key per face: a single sort
        key = (faces[:, 0] * n + faces[:, 1]) * n + faces[:, 2]
        order = np.argsort(key, kind="stable")
        k = key[order]
        same = k[1:] == k[:-1]
    else:
        order = np.lexsort((faces[:, 2], faces[:, 1], faces[:, 0]))
        f = faces[order]
        same = np.all(f[1:] == f[:-1], axis=1)
    a, b = order[:-1][same], order[1:][same]
    nbr = np.full(4 * m, -1, dtype=np.int64)
    nbr[a] = b // 4
    nbr[b] = a // 4
    return nbr.reshape(m, 4)


#: Tetrahedra per leaf of the locator's box tree, and boxes per box of the level above. 8 and 8: the tree
#: is shallow (7 levels over 1.2 M tetrahedra) and a leaf's tetrahedra span a few cache lines; leaves of 4
#: or 16 and fan-outs of 4 located random points as fast (measured, benchmarks/prep.py's mesh).
TREE_LEAF = 8
TREE_FANOUT = 8


@dataclass
class MortonIndex:
    """Where the tetrahedra of each Morton cell begin, from the ordering's counting sort (kept, not
    recomputed): a point's code over ``lo``, ``scale`` (21 bits per axis), shifted right by ``shift``, is
    its cell ``q``, and ``start[q + 1]`` the first tetrahedron whose centroid's code falls in ``q`` or after
    it (the tetrahedra are numbered in that order). A tetrahedron near any point, without a search: the
    walk's start for points located without a hint."""

    lo: np.ndarray
    scale: np.ndarray
    shift: int
    start: np.ndarray


@dataclass
class BoxTree:
    """Bounding boxes over runs of consecutive tetrahedra: the point locator's global search.

    The tetrahedra are numbered along a Morton curve (:func:`decompose`), so a run of consecutive ones is
    compact in space and nothing needs sorting: box ``i`` of level 0 bounds tetrahedra
    ``[TREE_LEAF i, TREE_LEAF (i + 1))``, box ``i`` of level ``k`` bounds boxes ``[TREE_FANOUT i,
    TREE_FANOUT (i + 1))`` of level ``k - 1``, and the top level is one box. Rows
    ``boxes[levels[k]:levels[k + 1]]`` are level ``k``, each ``(lo_x, lo_y, lo_z, hi_x, hi_y, hi_z)``, padded
    by round-off (:func:`tree_pad`) so that a point on a face finds the tetrahedra on both sides.
    """

    boxes: np.ndarray  # (n_boxes, 6)
    levels: np.ndarray  # (n_levels + 1,) int64


def tree_levels(n_tets: int) -> np.ndarray:
    """Row bounds of the levels of a :class:`BoxTree` over ``n_tets`` tetrahedra (at least one level)."""
    sizes = [max(1, -(-int(n_tets) // TREE_LEAF))]
    while sizes[-1] > 1:
        sizes.append(-(-sizes[-1] // TREE_FANOUT))
    levels = np.zeros(len(sizes) + 1, np.int64)
    np.cumsum(sizes, out=levels[1:])
    return levels


def tree_pad(points: np.ndarray) -> float:
    """Round-off padding of the tree's boxes: 1e-9 of the largest extent of the mesh bounds."""
    from .kernels import bounds

    lo, hi = bounds(points)
    return 1e-9 * float(np.max(hi - lo))


def box_tree(points: np.ndarray, tets: np.ndarray) -> BoxTree:
    """The box tree over ``tets`` (vectorised NumPy; the twin of :func:`vtkflow.kernels.tet_geometry`, which
    builds it with the locator's per-tetrahedron records in one pass)."""
    levels = tree_levels(len(tets))
    pad = tree_pad(points)
    boxes = np.empty((int(levels[-1]), 6))
    p = points[tets]
    lo, hi = p.min(axis=1) - pad, p.max(axis=1) + pad
    for k, group in enumerate([TREE_LEAF] + [TREE_FANOUT] * (len(levels) - 2)):
        n = int(levels[k + 1] - levels[k])
        fill = n * group - len(lo)
        lo = np.concatenate([lo, np.full((fill, 3), np.inf)]).reshape(n, group, 3).min(axis=1)
        hi = np.concatenate([hi, np.full((fill, 3), -np.inf)]).reshape(n, group, 3).max(axis=1)
        boxes[levels[k]:levels[k + 1]] = np.hstack([lo, hi])
    return BoxTree(boxes, levels)
