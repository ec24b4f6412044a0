"""numba kernels over plain arrays: point location in a tetrahedral mesh and barycentric interpolation.

Three layers (as in the project's design notes): private single-point ``@njit`` kernels; a parallel
driver with ``prange`` over points, each point writing only its own rows (so results do not depend on
the number of threads, bitwise); and :class:`Locator`, the Python wrapper that validates and converts.

Point location walks from a starting tetrahedron toward the point through the face with the most
negative barycentric coordinate (after Löhner & Ambrosiano 1990, "A vectorized particle tracer for
unstructured grids", J. Comput. Phys. 91), with a step limit against cycles, and falls back to a search of
the box tree (:class:`vtkflow.tetmesh.BoxTree`: bounding boxes over runs of Morton-ordered tetrahedra)
when the walk fails or reaches a boundary face. No VTK, no I/O.
"""

from __future__ import annotations

import numpy as np
from llvmlite import ir
from numba import get_num_threads, njit, prange, types
from numba.core import cgutils
from numba.extending import intrinsic

from .errors import InputError
from .tetmesh import TREE_FANOUT, TREE_LEAF, BoxTree, MortonIndex, TetMesh, morton_bits, tree_levels, tree_pad

__all__ = ["Locator", "group_order", "shifted_order", "take_rows", "fill_table", "fill_columns", "bounds", "orient_and_order", "cell_sizes", "neighbours", "tet_inverses", "tet_geometry", "BARY_TOL", "MAX_WALK", "FMA"]

#: A point is in a tetrahedron when every barycentric coordinate is >= -BARY_TOL (round-off scale:
#: points on faces, edges and vertices are inside; points a relative 1e-12 beyond are not).
BARY_TOL = 1e-12
#: Longest walk before falling back to the box tree (a guard against cycles on degenerate meshes).
MAX_WALK = 256
#: Floating-point licence of the point location and interpolation kernels (and the engine's): products may
#: be fused with the sums they feed (one rounding instead of two; no reordering, no approximations). The
#: engine's dependency chains are shorter by a few cycles per operation: the transient engine ran 6-12 %
#: faster (benchmarks/transient.py's case, A/B in one process). Every thread runs the same code, so results
#: stay independent of the number of threads; they differ from an unfused build by round-off.
FMA = {"contract"}


@njit(cache=True, fastmath=FMA, nogil=True, inline="always")
def _bary(x0, x1, x2, t, geom):
    """Barycentric coordinates ``(b0, b1, b2, b3)`` of the point ``(x0, x1, x2)`` in tetrahedron ``t``.

    ``geom[t]`` holds the tetrahedron's first vertex (0:3) and its inverse edge matrix, row by row (3:12):
    one contiguous 96-byte record, so that a tetrahedron costs the walk one or two cache lines. The hot
    helpers take and return scalars, never array views or scratch arrays: inlined into a parallel loop,
    a view costs two atomic reference-count updates on memory that the threads share."""
    u = np.uint64(t)  # unsigned: no wrap-around of negative indices
    d0 = x0 - geom[u, 0]
    d1 = x1 - geom[u, 1]
    d2 = x2 - geom[u, 2]
    l1 = geom[u, 3] * d0 + geom[u, 4] * d1 + geom[u, 5] * d2
    l2 = geom[u, 6] * d0 + geom[u, 7] * d1 + geom[u, 8] * d2
    l3 = geom[u, 9] * d0 + geom[u, 10] * d1 + geom[u, 11] * d2
    return 1.0 - l1 - l2 - l3, l1, l2, l3


@njit(cache=True, fastmath=FMA, nogil=True, inline="always")
def _lowest(b0, b1, b2, b3):
    """Index and value of the smallest of four numbers (the first one on ties): the most negative
    barycentric coordinate; the smallest vertex number of a tetrahedron."""
    f, v = 0, b0
    if b1 < v:
        f, v = 1, b1
    if b2 < v:
        f, v = 2, b2
    if b3 < v:
        f, v = 3, b3
    return f, v


@intrinsic
def _prefetch_row(typingctx, arr, row):
    """Ask the processor to bring row ``row`` of ``arr`` into cache: the lines of its first and its last byte
    (all of a row of up to 64 bytes; a 96-byte geometry row that starts late in a line also touches a
    middle line, left to the walk). ``llvm.prefetch``: a hint that never faults, not even out of bounds."""
    if not (isinstance(arr, types.Array) and arr.ndim == 2 and isinstance(row, types.Integer)):
        return None

    def codegen(context, builder, sig, args):
        aryty = sig.args[0]
        ary = context.make_array(aryty)(context, builder, args[0])
        r = context.cast(builder, args[1], sig.args[1], types.intp)
        stride = builder.extract_value(ary.strides, 0)
        addr = builder.add(builder.ptrtoint(ary.data, cgutils.intp_t), builder.mul(r, stride))
        i32, i8p = ir.IntType(32), ir.IntType(8).as_pointer()
        fn = builder.module.declare_intrinsic("llvm.prefetch", fnty=ir.FunctionType(ir.VoidType(), (i8p, i32, i32, i32)))
        read, keep, data = ir.Constant(i32, 0), ir.Constant(i32, 3), ir.Constant(i32, 1)
        builder.call(fn, (builder.inttoptr(addr, i8p), read, keep, data))
        row_bytes = aryty.dtype.bitwidth // 8  # bytes of one item
        end = builder.add(addr, builder.sub(builder.mul(builder.extract_value(ary.shape, 1),
                                                         ir.Constant(cgutils.intp_t, row_bytes)),
                                             ir.Constant(cgutils.intp_t, 1)))
        builder.call(fn, (builder.inttoptr(end, i8p), read, keep, data))
        return context.get_dummy_value()

    return types.void(arr, row), codegen


@njit(cache=True, fastmath=FMA, nogil=True, inline="always")
def _prefetch_exit(t, b0, b1, b2, b3, u0, u1, u2, geom, nbr, conn):
    """Prefetch the tetrahedron that a point at barycentric ``b`` in ``t`` moving along ``u`` enters next:
    the neighbour through the face that the ray meets first (the smallest ``b_k / -rate_k`` over the
    coordinates that fall). It is a hint for the walk that follows; nothing depends on it."""
    r1 = geom[t, 3] * u0 + geom[t, 4] * u1 + geom[t, 5] * u2
    r2 = geom[t, 6] * u0 + geom[t, 7] * u1 + geom[t, 8] * u2
    r3 = geom[t, 9] * u0 + geom[t, 10] * u1 + geom[t, 11] * u2
    f, num, den = -1, 1.0, 0.0  # the best ratio num / den so far (den = 0: none yet)
    for k, bk, rk in ((0, b0, -(r1 + r2 + r3)), (1, b1, r1), (2, b2, r2), (3, b3, r3)):
        if rk < 0.0 and (f < 0 or bk * den < num * -rk):
            f, num, den = k, bk, -rk
    if f >= 0:
        nxt = nbr[t, f]
        if nxt >= 0:
            _prefetch_row(geom, nxt)
            _prefetch_row(conn, nxt)


@njit(cache=True, fastmath=FMA, nogil=True, inline="always")
def _walk(x0, x1, x2, start, geom, nbr):
    """Walk from ``start`` toward the point: ``(tetrahedron, b0, b1, b2, b3)``, the tetrahedron -1 at a
    boundary face, -2 if lost."""
    t = start
    for _ in range(MAX_WALK):
        b0, b1, b2, b3 = _bary(x0, x1, x2, t, geom)
        f, low = _lowest(b0, b1, b2, b3)
        if low >= -BARY_TOL:
            return t, b0, b1, b2, b3
        nxt = nbr[t, f]
        if nxt < 0:
            return -1, b0, b1, b2, b3
        t = nxt
    return -2, 0.0, 0.0, 0.0, 0.0


@njit(cache=True, nogil=True, inline="always")
def _in_box(boxes, j, x0, x1, x2):
    """Whether the point lies in box ``j`` (faces included; False for NaN coordinates)."""
    return (boxes[j, 0] <= x0 and x0 <= boxes[j, 3] and boxes[j, 1] <= x1 and x1 <= boxes[j, 4]
            and boxes[j, 2] <= x2 and x2 <= boxes[j, 5])


@njit(cache=True, fastmath=FMA, nogil=True)  # not inlined: the rare fallback stays out of the hot loop's code
def _search_tree(x0, x1, x2, geom, boxes, levels):
    """The first tetrahedron (in the tree's depth-first order) that contains the point, or -1; with its
    barycentric coordinates. A depth-first walk over the boxes that contain the point, without a stack: the
    tree is implicit (children of box ``i`` are ``TREE_FANOUT i ..``), so the next box is always the next
    sibling, or the parent's next sibling."""
    m = geom.shape[0]
    top = levels.shape[0] - 2
    k, i = top, 0
    while True:
        if _in_box(boxes, levels[k] + i, x0, x1, x2):
            if k > 0:  # down to the first child
                k -= 1
                i *= TREE_FANOUT
                continue
            for t in range(i * TREE_LEAF, min(i * TREE_LEAF + TREE_LEAF, m)):
                b0, b1, b2, b3 = _bary(x0, x1, x2, t, geom)
                if min(min(b0, b1), min(b2, b3)) >= -BARY_TOL:
                    return t, b0, b1, b2, b3
        while True:  # the next sibling, else up a level
            if k == top:
                return -1, 0.0, 0.0, 0.0, 0.0
            if (i + 1) % TREE_FANOUT != 0 and levels[k] + i + 1 < levels[k + 1]:
                i += 1
                break
            k += 1
            i //= TREE_FANOUT


@njit(cache=True, fastmath=FMA, nogil=True, inline="always")
def _locate(x0, x1, x2, hint, geom, nbr, boxes, levels):
    """The tetrahedron containing the point and its barycentric coordinates, ``(t, b0, b1, b2, b3)``:
    a walk from ``hint`` (when >= 0), else or when it fails the box tree; ``t`` is -1 outside."""
    if hint >= 0:
        t, b0, b1, b2, b3 = _walk(x0, x1, x2, hint, geom, nbr)
        if t >= 0:
            return t, b0, b1, b2, b3
    return _search_tree(x0, x1, x2, geom, boxes, levels)


@njit(cache=True, nogil=True, inline="always")
def _morton(x0, x1, x2, lo, scale):
    """The 63-bit Morton code of a point over the box ``lo``, ``scale`` (21 bits per axis, x lowest; clamped
    to the box, NaN to 0; masks as in :func:`vtkflow.tetmesh.morton_order`)."""
    code = np.uint64(0)
    for k, xk in enumerate((x0, x1, x2)):
        s = (xk - lo[k]) * scale[k]
        q = np.uint64(min(s, 2097151.0)) if s >= 0.0 else np.uint64(0)
        code |= _spread21(q) << np.uint64(k)
    return code


@njit(cache=True, parallel=True)
def _point_keys(xs, lo, scale, shift, keys):
    """The leading bits of the Morton code of each point (as the tetrahedra's centroids are coded): a sort
    key, not a test of inclusion."""
    for i in prange(xs.shape[0]):
        keys[i] = np.int64(_morton(xs[i, 0], xs[i, 1], xs[i, 2], lo, scale) >> np.uint64(shift))


@njit(cache=True, fastmath=FMA, parallel=True)
def _locate_many(xs, hints, order, geom, nbr, boxes, levels, tets_out, bary_out):
    for j in prange(order.shape[0]):
        i = order[j]
        t, b0, b1, b2, b3 = _locate(xs[i, 0], xs[i, 1], xs[i, 2], hints[i], geom, nbr, boxes, levels)
        tets_out[i] = t
        if t < 0:
            b0 = b1 = b2 = b3 = 0.0
        bary_out[i, 0], bary_out[i, 1], bary_out[i, 2], bary_out[i, 3] = b0, b1, b2, b3


@njit(cache=True, parallel=True)
def _index_hints(xs, lo, scale, shift, start, order_shift, hints, keys):
    """Each point's start for the walk from a :class:`vtkflow.tetmesh.MortonIndex` (the first tetrahedron of
    its Morton cell, or of the next cell that has one), and its sort key (the code's leading bits)."""
    last = np.int64(start[start.shape[0] - 1] - 1)  # the last tetrahedron
    for i in prange(xs.shape[0]):
        code = _morton(xs[i, 0], xs[i, 1], xs[i, 2], lo, scale)
        hints[i] = min(np.int64(start[np.int64(code >> np.uint64(shift)) + 1]), last)
        keys[i] = np.int64(code >> np.uint64(order_shift))


@njit(cache=True, fastmath=FMA, parallel=True)
def _interpolate(tets, bary, conn, values, out):
    for i in prange(tets.shape[0]):
        t = tets[i]
        for c in range(values.shape[1]):
            acc = 0.0
            if t >= 0:
                for k in range(4):
                    acc += bary[i, k] * values[conn[t, k], c]
            out[i, c] = acc


@njit(cache=True)
def _piece_starts(counts, start):
    """Bucket bounds from per-piece counts ``(pieces, buckets)``; ``counts`` becomes each piece's first place
    in each bucket (pieces in order within a bucket, so every bucket lists its entries in input order)."""
    start[0] = 0
    at = 0  # the running total in a register, not read back from ``start`` (12k buckets: 8 us, was 24 us)
    for b in range(counts.shape[1]):
        for p in range(counts.shape[0]):
            n = counts[p, b]
            counts[p, b] = at
            at += n
        start[b + 1] = at


@njit(cache=True, nogil=True, inline="always")
def _edges(points, a, b, c, d):
    """The edges ``(e1, e2, e3)`` from vertex ``a`` to ``b``, ``c``, ``d``, as nine scalars."""
    return (points[b, 0] - points[a, 0], points[b, 1] - points[a, 1], points[b, 2] - points[a, 2],
            points[c, 0] - points[a, 0], points[c, 1] - points[a, 1], points[c, 2] - points[a, 2],
            points[d, 0] - points[a, 0], points[d, 1] - points[a, 1], points[d, 2] - points[a, 2])


@njit(cache=True, nogil=True, inline="always")
def _triple(points, a, b, c, d):
    """``(e1 x e2) . e3``: six times the signed volume of the tetrahedron ``a, b, c, d``."""
    e1x, e1y, e1z, e2x, e2y, e2z, e3x, e3y, e3z = _edges(points, a, b, c, d)
    return (e1y * e2z - e1z * e2y) * e3x + (e1z * e2x - e1x * e2z) * e3y + (e1x * e2y - e1y * e2x) * e3z


@njit(cache=True, nogil=True, inline="always")
def _sort3(a, b, c):
    """Three values in ascending order (a sorting network)."""
    if a > b:
        a, b = b, a
    if b > c:
        b, c = c, b
    if a > b:
        a, b = b, a
    return a, b, c


@njit(cache=True, parallel=True)
def _geometry(points, tets, geom, boxes, pad):
    """Each tetrahedron's record (first vertex, inverse edge matrix) and, in the same pass, the boxes of
    level 0 of the box tree (one leaf of ``TREE_LEAF`` consecutive tetrahedra per parallel iteration)."""
    m = tets.shape[0]
    for leaf in prange(boxes.shape[0]):
        lo0 = lo1 = lo2 = np.inf
        hi0 = hi1 = hi2 = -np.inf
        for t in range(leaf * TREE_LEAF, min(leaf * TREE_LEAF + TREE_LEAF, m)):
            a, b, c, d = tets[t, 0], tets[t, 1], tets[t, 2], tets[t, 3]
            # edges from the first vertex (scalars: no array per tetrahedron)
            e1x, e1y, e1z, e2x, e2y, e2z, e3x, e3y, e3z = _edges(points, a, b, c, d)
            # rows of the inverse of the edge matrix [e1 e2 e3] (edges as columns): (e2 x e3, e3 x e1, e1 x e2) / det
            r = (e2y * e3z - e2z * e3y, e2z * e3x - e2x * e3z, e2x * e3y - e2y * e3x,
                 e3y * e1z - e3z * e1y, e3z * e1x - e3x * e1z, e3x * e1y - e3y * e1x,
                 e1y * e2z - e1z * e2y, e1z * e2x - e1x * e2z, e1x * e2y - e1y * e2x)
            det = e1x * r[0] + e1y * r[1] + e1z * r[2]
            geom[t, 0], geom[t, 1], geom[t, 2] = points[a, 0], points[a, 1], points[a, 2]
            inv = 1.0 / det if abs(det) > 1e-300 else np.inf  # one division, nine products (not nine divisions)
            for j in range(9):
                geom[t, 3 + j] = r[j] * inv
            for v in (a, b, c, d):  # the vertices themselves (not first vertex + edge: no round-off)
                lo0, hi0 = min(lo0, points[v, 0]), max(hi0, points[v, 0])
                lo1, hi1 = min(lo1, points[v, 1]), max(hi1, points[v, 1])
                lo2, hi2 = min(lo2, points[v, 2]), max(hi2, points[v, 2])
        boxes[leaf, 0], boxes[leaf, 1], boxes[leaf, 2] = lo0 - pad, lo1 - pad, lo2 - pad
        boxes[leaf, 3], boxes[leaf, 4], boxes[leaf, 5] = hi0 + pad, hi1 + pad, hi2 + pad


@njit(cache=True, parallel=True)
def _upper_boxes(boxes, levels):
    """Boxes of levels 1 and up of the box tree, each bounding ``TREE_FANOUT`` boxes of the level below."""
    for k in range(1, levels.shape[0] - 1):
        below, here, above = levels[k - 1], levels[k], levels[k + 1]
        for i in prange(above - here):
            for c in range(3):
                lo, hi = np.inf, -np.inf
                for j in range(below + TREE_FANOUT * i, min(below + TREE_FANOUT * (i + 1), here)):
                    lo, hi = min(lo, boxes[j, c]), max(hi, boxes[j, 3 + c])
                boxes[here + i, c], boxes[here + i, 3 + c] = lo, hi


def _pieces(n: int) -> int:
    """Pieces of ``n`` items for a parallel pass in which each piece (a consecutive run of the input) writes
    its own counts or minima: one per thread. The results do not depend on their number: a counting sort's
    pieces fill each bucket in turn, so every bucket lists its items in input order; minima are exact."""
    return max(1, min(get_num_threads(), n))


#: Runs of buckets the faces are paired in, in parallel (each with its own scratch arrays).
PAIR_CHUNKS = 64


@njit(cache=True, parallel=True)
def _face_pass(tets, slots, entries, fill):
    """Count (``fill`` False: ``slots[p, v] += 1``) or list the tetrahedra of piece ``p`` by the smallest
    vertex ``v`` of their faces, two entries per tetrahedron: with ``i`` the position of its smallest vertex,
    ``8 t + i`` under that vertex (the three faces through it) and ``8 t + 4 + i`` under the smallest vertex
    of the face opposite it. Every face is listed under its smallest vertex, a quarter of the entries of
    one per face; pairing reads the faces' other vertices from the tetrahedra."""
    m = tets.shape[0]
    n_pieces = slots.shape[0]
    for p in prange(n_pieces):
        for t in range(p * m // n_pieces, (p + 1) * m // n_pieces):
            i = _lowest(tets[t, 0], tets[t, 1], tets[t, 2], tets[t, 3])[0]
            v = tets[t, i]
            w = min(min(tets[t, (i + 1) & 3], tets[t, (i + 2) & 3]), tets[t, (i + 3) & 3])
            if fill:
                entries[slots[p, v]] = 8 * t + i
                entries[slots[p, w]] = 8 * t + 4 + i
            slots[p, v] += 1
            slots[p, w] += 1


#: Fibonacci hashing's multiplier, 2**64 over the golden ratio (Knuth 1998, The Art of Computer
#: Programming vol. 3, section 6.4): the face keys' high product bits index the pairing tables.
_GOLDEN = np.uint64(0x9E3779B97F4A7C15)
_EMPTY, _PAIRED = -1, -2  # pairing table slots: never used; held a face that found its twin


@njit(cache=True, nogil=True, inline="always")
def _meet(face, key, table_key, table_face, used, k, mask, shift, nbr):
    """Look ``face`` (its ``key``) up in a pairing table: pair it with the face of equal key that waits
    there, or leave it waiting (its slot noted in ``used[k]``). Returns the new count of used slots."""
    h = np.int64((np.uint64(key) * _GOLDEN) >> shift)
    while True:
        held = table_key[h]
        if held == _EMPTY:  # no earlier face waits: this one does
            table_key[h], table_face[h] = key, face
            used[k] = h
            nbr[face] = -1
            return k + 1
        if held == key:  # the twin
            other = table_face[h]
            nbr[face], nbr[other] = other >> 2, face >> 2
            table_key[h] = _PAIRED
            return k
        h = (h + 1) & mask


@njit(cache=True, parallel=True)
def _pair_faces(tets, entries, start, nbr):
    """Pair the faces with equal vertices within each bucket (both faces of a pair share a bucket, so
    buckets are independent and each thread writes only its own buckets' faces); unpaired faces get -1.

    A bucket's faces, in entry order, are keyed by their two vertices other than the bucket's (one
    number, no sorting: the smaller and the larger of two) and looked up in a small open-addressing hash
    table (linear probing, one table per run of buckets, at most half full): a face meets the earlier
    face of equal key that has no twin yet, or waits in the table. Linear in the bucket's size (a
    pairwise scan was 1.3x slower); where more than two faces share vertices, the first is paired with
    the second, the third with the fourth."""
    n = np.int64(start.shape[0] - 1)
    for r in prange(PAIR_CHUNKS):
        lo, hi = r * n // PAIR_CHUNKS, (r + 1) * n // PAIR_CHUNKS
        width = 0
        for v in range(lo, hi):
            width = max(width, start[v + 1] - start[v])
        bits = 2
        while (1 << bits) < 6 * width:  # up to 3 faces per entry, the table at most half full
            bits += 1
        mask, shift = (1 << bits) - 1, np.uint64(64 - bits)
        table_key, table_face = np.full(1 << bits, _EMPTY, np.int64), np.empty(1 << bits, np.int64)
        used = np.empty(3 * width, np.int64)
        for v in range(lo, hi):
            k = 0
            for e in range(start[v], start[v + 1]):
                code = np.int64(entries[e])
                t, i = code >> 3, code & 3
                if code & 4:  # the face opposite the smallest vertex i (v the smallest of its three)
                    b, c, d = tets[t, (i + 1) & 3], tets[t, (i + 2) & 3], tets[t, (i + 3) & 3]
                    top = np.int64(max(max(b, c), d))
                    key = (np.int64(b) + c + d - v - top) * n + top
                    k = _meet(4 * t + i, key, table_key, table_face, used, k, mask, shift, nbr)
                else:  # the three faces through v = vertex i, opposite vertex f: their others g and 6 - i - f - g
                    for j in range(1, 4):
                        f = (i + j) & 3
                        g = (i + (2 if j == 1 else 1)) & 3
                        b, c = np.int64(tets[t, g]), np.int64(tets[t, 6 - i - f - g])
                        k = _meet(4 * t + f, min(b, c) * n + max(b, c), table_key, table_face, used, k, mask,
                                  shift, nbr)
            for q in range(k):  # clear the slots this bucket used
                table_key[used[q]] = _EMPTY


def neighbours(tets: np.ndarray, n_points: int | None = None) -> np.ndarray:
    """Face neighbours as :func:`vtkflow.tetmesh.face_neighbours` (its NumPy twin), in linear time: faces
    are bucketed by their smallest vertex (a parallel counting sort of two entries per tetrahedron), then
    paired within each small bucket. ``n_points``: the number of points (default: one more than the largest
    vertex number)."""
    tets = _index_table(tets)
    m = len(tets)
    if n_points is None:  # (the Locator knows it: no pass over the table)
        n_points = int(_largest(tets.reshape(-1))) + 1 if m else 0
    # 32-bit entries and neighbours where the numbers fit: half the memory to fill (and fault in)
    idx = np.int32 if max(8 * m, n_points) < 2**31 else np.int64
    if float(n_points) ** 2 >= 2.0**63:
        raise ValueError(f"{n_points} points: face keys need n_points**2 < 2**63")
    # counting sort of the tetrahedra by the smallest vertices of their faces, in parallel over fixed
    # pieces: bucket v is entries[start[v]:start[v + 1]], in tetrahedron order
    slots = np.zeros((_pieces(m), n_points), idx)  # counts, then places: below 2 m
    entries, nbr = np.empty(2 * m, idx), np.empty(4 * m, idx)
    _face_pass(tets, slots, entries, False)
    start = np.empty(n_points + 1, np.int64)
    _piece_starts(slots, start)
    _face_pass(tets, slots, entries, True)
    _pair_faces(tets, entries, start, nbr)
    return nbr.reshape(m, 4)


@njit(cache=True, nogil=True, inline="always")
def _spread21(v):
    """The low 21 bits of ``v`` put three places apart (bit i to bit 3 i); masks as in
    :func:`vtkflow.tetmesh.morton_order`."""
    v = v & np.uint64(0x1FFFFF)
    v = (v | (v << np.uint64(32))) & np.uint64(0x1F00000000FFFF)
    v = (v | (v << np.uint64(16))) & np.uint64(0x1F0000FF0000FF)
    v = (v | (v << np.uint64(8))) & np.uint64(0x100F00F00F00F00F)
    v = (v | (v << np.uint64(4))) & np.uint64(0x10C30C30C30C30C3)
    v = (v | (v << np.uint64(2))) & np.uint64(0x1249249249249249)
    return v


@njit(cache=True, nogil=True)
def _bounds(points, lo, hi):
    # running extremes in local variables, not array elements: no chain through a store and a load at every
    # point (250k points: 0.3 ms, was 1.8 ms)
    lo0 = lo1 = lo2 = np.inf
    hi0 = hi1 = hi2 = -np.inf
    for i in range(points.shape[0]):
        lo0, hi0 = min(lo0, points[i, 0]), max(hi0, points[i, 0])
        lo1, hi1 = min(lo1, points[i, 1]), max(hi1, points[i, 1])
        lo2, hi2 = min(lo2, points[i, 2]), max(hi2, points[i, 2])
    lo[0], lo[1], lo[2] = lo0, lo1, lo2
    hi[0], hi[1], hi[2] = hi0, hi1, hi2


def bounds(points: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Smallest and largest coordinates ``(3,), (3,)`` of ``points`` (N, 3): ``points.min(axis=0)`` and
    ``points.max(axis=0)`` in one pass (NumPy reduces across rows of three slowly)."""
    lo, hi = np.empty(3), np.empty(3)
    _bounds(np.ascontiguousarray(points, dtype=np.float64), lo, hi)
    return lo, hi


@njit(cache=True, nogil=True)
def _largest(a):
    """The largest entry of a 1-D array (not empty)."""
    top = a[0]
    for i in range(1, a.shape[0]):
        top = max(top, a[i])
    return top


@njit(cache=True, nogil=True)
def _steps_equal(a, n):
    """Whether every step ``a[i + 1] - a[i]`` of a 1-D array equals ``n``."""
    for i in range(a.shape[0] - 1):
        if a[i + 1] - a[i] != n:
            return False
    return True


def uniform_cells(offsets: np.ndarray, n: int) -> bool:
    """Whether every cell of a VTK cell array with these ``offsets`` has ``n`` points (one pass, no copies)."""
    return len(offsets) < 2 or bool(_steps_equal(np.ascontiguousarray(offsets), int(n)))


@njit(cache=True, parallel=True)
def _centroid_codes(points, tets, lo, scale, codes, flip, cell_size, point_size, smallest):
    """The Morton code of every tetrahedron's centroid (21 bits per axis over ``lo``, ``scale``) and, from the
    same vertex reads, whether its signed volume is negative (``flip``); unless ``cell_size`` is empty, also
    the sizes of :func:`_cell_sizes` (each tetrahedron a cell; bitwise the same sizes), in pieces."""
    n, n_pieces = tets.shape[0], point_size.shape[0]
    sizes = cell_size.shape[0] > 0
    for p in prange(n_pieces):
        row = point_size[p]
        small = np.inf
        if sizes:
            row[:] = np.inf
        for t in range(p * n // n_pieces, (p + 1) * n // n_pieces):
            a, b, c, d = tets[t, 0], tets[t, 1], tets[t, 2], tets[t, 3]
            ax, ay, az = points[a, 0], points[a, 1], points[a, 2]
            bx, by, bz = points[b, 0], points[b, 1], points[b, 2]
            cx, cy, cz = points[c, 0], points[c, 1], points[c, 2]
            dx, dy, dz = points[d, 0], points[d, 1], points[d, 2]
            codes[t] = _morton(0.25 * (((ax + bx) + cx) + dx), 0.25 * (((ay + by) + cy) + dy),
                               0.25 * (((az + bz) + cz) + dz), lo, scale)
            flip[t] = _triple(points, a, b, c, d) < 0.0
            if sizes:
                size = _box_size(max(max(max(ax, bx), cx), dx) - min(min(min(ax, bx), cx), dx),
                                 max(max(max(ay, by), cy), dy) - min(min(min(ay, by), cy), dy),
                                 max(max(max(az, bz), cz), dz) - min(min(min(az, bz), cz), dz))
                small = _smallest_positive(small, size)
                cell_size[t] = size
                _lower(row, a, size)
                _lower(row, b, size)
                _lower(row, c, size)
                _lower(row, d, size)
        if sizes:
            smallest[p] = small


@njit(cache=True, parallel=True)
def _gather_oriented(tets, order, flip, out):
    """``out[j] = tets[order[j]]``, positively oriented (vertices 1 and 2 swapped where ``flip``)."""
    for j in prange(order.shape[0]):
        t = order[j]
        a, b, c, d = tets[t, 0], tets[t, 1], tets[t, 2], tets[t, 3]
        if flip[t]:
            b, c = c, b
        out[j, 0], out[j, 1], out[j, 2], out[j, 3] = a, b, c, d


def orient_and_order(points: np.ndarray, tets: np.ndarray, sizes: bool = False,
                     index: bool = False) -> tuple[np.ndarray, ...]:
    """The tetrahedra numbered along a Morton curve of their centroids over the bounds of ``points`` (by
    the code's leading :func:`vtkflow.tetmesh.morton_bits` bits, a counting sort) and positively oriented,
    as a new array of 32-bit vertex numbers (64-bit beyond 2**31 points; half the memory to fill, and what the
    engine's kernels use); and the permutation (``tets`` is left as it is). The numba twin of
    :func:`vtkflow.tetmesh.orient_and_order_numpy`.

    With ``sizes``, also :func:`cell_sizes` of the tetrahedra taken as the cells (in the order of ``tets``),
    from the vertex reads of the same pass: ``(tets, order, cell_size, point_size)``. For a mesh of
    tetrahedra only, this saves the size pass over its cells (5-14 ms on 1.2 M tetrahedra). With ``index``,
    the :class:`vtkflow.tetmesh.MortonIndex` of the order comes last (the sort's group bounds, kept)."""
    m = len(tets)
    vertex = np.int32 if len(points) < 2**31 else np.int64
    if m == 0:
        empty = np.zeros((0, 4), vertex), np.zeros(0, np.int64)
        return (*empty, *((np.zeros(0), np.ones(len(points))) if sizes else ()), *((None,) if index else ()))
    codes, flip = np.empty(m, np.uint64), np.empty(m, np.bool_)
    lo, hi = bounds(points)
    scale = (2**21 - 1) / np.maximum(hi - lo, 1e-300)
    # without sizes: no cell sizes, a piece per thread all the same, no point minima
    cs, ps, smallest = _size_arrays(m, len(points)) if sizes else (np.empty(0), np.empty((_pieces(m), 0)), np.empty(0))
    _centroid_codes(points, tets, lo, scale, codes, flip, cs, ps, smallest)
    if sizes:
        _size_floor(cs, ps, smallest)
    bits = morton_bits(m)
    # codes < 2**63: as signed integers they keep their order, and the sort shifts them itself (no key array);
    # its group bounds are the Morton index (as shifted_order, with the bounds kept)
    order, start = _group_order(codes.view(np.int64), 63 - bits, (1 << bits) + 1)
    out = np.empty((m, 4), vertex)
    _gather_oriented(tets, order, flip, out)
    return (out, order, *((cs, ps[0]) if sizes else ()), *((MortonIndex(lo, scale, 63 - bits, start),) if index else ()))


#: Inputs of at least this many values are counting-sorted in parallel pieces (fewer in one piece: no
#: parallel start-up for the engine's small sorts). The order is the same either way.
SORT_PARALLEL = 1 << 17


@njit(cache=True, parallel=True)
def _key_pass(values, shift, slots, order, fill):
    """Count (``fill`` False: ``slots[p, k] += 1``) or place (``order[slots[p, k]] = i``) the values of piece
    ``p`` by the key ``k = (v >> shift) + 1`` (0 for negative values)."""
    n, n_pieces = values.shape[0], slots.shape[0]
    for p in prange(n_pieces):
        for i in range(p * n // n_pieces, (p + 1) * n // n_pieces):
            k = (values[i] >> shift) + 1 if values[i] >= 0 else 0
            if fill:
                order[slots[p, k]] = i
            slots[p, k] += 1


def _group_order(values: np.ndarray, shift: int, n_keys: int) -> tuple[np.ndarray, np.ndarray]:
    """Stable counting sort of ``values`` by the key ``(v >> shift) + 1`` (0 for negative values; keys below
    ``n_keys``): the permutation and the group bounds ``(n_keys + 1,)``."""
    pieces = _pieces(len(values)) if len(values) >= SORT_PARALLEL else 1
    slots = np.zeros((pieces, n_keys), np.int64)
    order = np.empty(len(values), np.int64)
    _key_pass(values, np.int64(shift), slots, order, False)
    start = np.empty(n_keys + 1, np.int64)
    _piece_starts(slots, start)
    _key_pass(values, np.int64(shift), slots, order, True)
    return order, start


@njit(cache=True, parallel=True)
def _take_rows(src, order, out):
    for j in prange(order.shape[0]):
        for c in range(src.shape[1]):
            out[j, c] = src[order[j], c]


def take_rows(order: np.ndarray, *arrays: np.ndarray) -> list[np.ndarray]:
    """``[a[order] for a in arrays]`` (1-D or 2-D arrays), gathered in parallel."""
    out = []
    for a in arrays:
        a2 = np.ascontiguousarray(a).reshape(len(a), -1)
        res = np.empty((len(order), a2.shape[1]), a2.dtype)
        _take_rows(a2, order, res)
        out.append(res.reshape((len(order),) + a.shape[1:]))
    return out


@njit(cache=True, parallel=True)
def _fill_table(table, u0, u1, d0, d1, h):
    slopes = d0.shape[0] > 0
    last = table.shape[1] - 1
    for i in prange(table.shape[0]):
        for c in range(3):
            table[i, c] = u0[i, c]
            table[i, 3 + c] = u1[i, c]
        if slopes:
            for c in range(3):
                table[i, 6 + c] = d0[i, c]
                table[i, 9 + c] = d1[i, c]
        table[i, last] = h[i]


def fill_table(table: np.ndarray, u0: np.ndarray, u1: np.ndarray, h: np.ndarray,
               d0: np.ndarray | None = None, d1: np.ndarray | None = None) -> None:
    """``table[:] = np.hstack([u0, u1, (d0, d1,) h[:, None]])``: the engine's snapshot table, vectors ``(n, 3)``
    and ``h`` ``(n,)``, in one parallel pass that writes each row once (NumPy copies narrow column blocks of
    long tables row by row, about ten times slower; a pass per block took twice as long)."""
    vecs = [u0, u1] + ([d0, d1] if d0 is not None else [])
    v2 = [np.ascontiguousarray(v, dtype=np.float64) for v in vecs]
    n = table.shape[0]
    if any(v.shape != (n, 3) for v in v2) or np.shape(h) != (n,) or table.shape[1] != 3 * len(v2) + 1:
        raise ValueError(f"cannot fill a {table.shape} table with vectors {[v.shape for v in v2]} and h {np.shape(h)}")
    none = np.empty((0, 3))
    _fill_table(table, v2[0], v2[1], v2[2] if len(v2) > 2 else none, v2[3] if len(v2) > 2 else none,
                np.ascontiguousarray(h, dtype=np.float64))


@njit(cache=True, parallel=True)
def _fill_columns(table, col, u):
    for i in prange(u.shape[0]):
        for c in range(u.shape[1]):
            table[i, col + c] = u[i, c]


def fill_columns(table: np.ndarray, col: int, u: np.ndarray) -> None:
    """``table[:len(u), col:col + k] = u`` for ``u`` ``(n, k)``, in one parallel pass (as :func:`fill_table`:
    NumPy copies narrow column blocks of long tables slowly)."""
    u = np.ascontiguousarray(u, dtype=np.float64).reshape(len(u), -1)
    if u.shape[0] > table.shape[0] or not 0 <= col <= table.shape[1] - u.shape[1]:
        raise ValueError(f"cannot put {u.shape} values in columns {col}.. of a {table.shape} table")
    _fill_columns(table, int(col), u)


def shifted_order(values: np.ndarray, shift: int, top: int) -> np.ndarray:
    """:func:`group_order` of the keys ``(values >> shift) + 1``, negative values keyed 0 (first), for
    integers in ``[-1, top]``: the keys are computed in the counting sort itself, no key array."""
    return _group_order(np.ascontiguousarray(values), int(shift), (int(top) >> int(shift)) + 2)[0]


def group_order(keys: np.ndarray, n_keys: int) -> tuple[np.ndarray, np.ndarray]:
    """Permutation that groups ``keys`` (ints in ``[0, n_keys)``) in ascending order, keeping the original
    order within a group, in linear time; and the size of each group ``(n_keys,)``. The twin of
    ``numpy.argsort(keys, kind="stable")``."""
    # key k sorted as k + 1 (the sort's key 0 holds negative values)
    order, start = _group_order(np.ascontiguousarray(keys, dtype=np.int64), 0, int(n_keys) + 1)
    return order, np.diff(start[1:])


@njit(cache=True, nogil=True, inline="always")
def _box_size(e0, e1, e2):
    """The size of a cell whose bounding box has edges ``e``: its diagonal over sqrt(3)."""
    return np.sqrt((e0 ** 2 + e1 ** 2 + e2 ** 2) * (1.0 / 3.0))


@njit(cache=True, nogil=True, inline="always")
def _smallest_positive(small, size):
    """``small`` lowered to ``size`` where ``size`` is positive: the size passes' floor (kept in a local
    variable, not in an array element: no chain through memory from one cell to the next)."""
    return min(small, size) if size > 0.0 else small


@njit(cache=True, nogil=True, inline="always")
def _lower(row, v, size):
    """``row[v] = min(row[v], size)``, stored only when it lowers (most visits do not: fewer stores)."""
    if size < row[v]:
        row[v] = size


@njit(cache=True, parallel=True)
def _cell_sizes(points, offsets, conn, cell_size, point_size, smallest):
    """Cell sizes, and in the same pass the smallest size of the cells at each point: each of the pieces
    ``point_size[p]`` (rows of cells, one per thread) takes the minimum over its own cells (and
    ``smallest[p]`` the smallest positive size); :func:`_size_floor` then reduces them."""
    n, n_pieces = offsets.shape[0] - 1, point_size.shape[0]
    for p in prange(n_pieces):
        row = point_size[p]  # one view per piece
        row[:] = np.inf
        small = np.inf
        for c in range(p * n // n_pieces, (p + 1) * n // n_pieces):
            lo0 = lo1 = lo2 = np.inf
            hi0 = hi1 = hi2 = -np.inf
            for k in range(offsets[c], offsets[c + 1]):  # each point row read once, all three axes
                q = conn[k]
                x, y, z = points[q, 0], points[q, 1], points[q, 2]
                lo0, hi0 = min(lo0, x), max(hi0, x)
                lo1, hi1 = min(lo1, y), max(hi1, y)
                lo2, hi2 = min(lo2, z), max(hi2, z)
            size = _box_size(hi0 - lo0, hi1 - lo1, hi2 - lo2)
            small = _smallest_positive(small, size)
            cell_size[c] = size
            for k in range(offsets[c], offsets[c + 1]):
                _lower(row, conn[k], size)
        smallest[p] = small


@njit(cache=True, parallel=True)
def _size_floor(cell_size, point_size, smallest):
    """Reduce the pieces' point minima into ``point_size[0]`` (a minimum is exact: the result does not depend
    on the number of pieces); sizes that are not positive (and points without cells) then get the smallest
    positive size, 1.0 if there is none."""
    n_pieces = point_size.shape[0]
    floor = smallest.min()
    if not floor < np.inf:
        floor = 1.0
    for i in prange(point_size.shape[1]):
        for p in range(1, n_pieces):
            point_size[0, i] = min(point_size[0, i], point_size[p, i])
        if not (point_size[0, i] > 0.0 and point_size[0, i] < np.inf):
            point_size[0, i] = floor
    for c in prange(cell_size.shape[0]):
        if not cell_size[c] > 0.0:
            cell_size[c] = floor


def _size_arrays(n_cells: int, n_points: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Work arrays of a size pass: cell sizes, point minima (one row per piece: one per thread) and each
    piece's smallest positive size."""
    pieces = _pieces(n_cells)
    return np.empty(n_cells), np.empty((pieces, n_points)), np.empty(pieces)


def cell_sizes(points: np.ndarray, offsets: np.ndarray, conn: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Size of each cell (bounding-box diagonal over sqrt(3)) and, at each point, the smallest size of
    the cells that use it. Sizes that are not positive (degenerate cells; points that no cell uses) get the
    smallest positive size of the mesh (1.0 if none), so that no step bound is zero."""
    cs, ps, smallest = _size_arrays(len(offsets) - 1, len(points))
    _cell_sizes(np.ascontiguousarray(points, dtype=np.float64), offsets, conn, cs, ps, smallest)
    _size_floor(cs, ps, smallest)
    return cs, ps[0]


def _index_table(a: np.ndarray) -> np.ndarray:
    """``a`` as a C-contiguous table of 32- or 64-bit integers, copied only when it is neither."""
    a = np.asarray(a)
    return np.ascontiguousarray(a, dtype=a.dtype if a.dtype in (np.int32, np.int64) else np.int64)


def tet_geometry(points: np.ndarray, tets: np.ndarray) -> tuple[np.ndarray, BoxTree]:
    """Per-tetrahedron records ``(M, 12)`` for point location: the first vertex, then the inverse edge
    matrix row by row (barycentric coordinates are ``tinv @ (x - p0)``); degenerate tetrahedra get infinite
    inverses (they never contain a point). And the box tree over the tetrahedra (built in the same pass;
    :func:`vtkflow.tetmesh.box_tree` is its NumPy twin)."""
    points = np.ascontiguousarray(points, dtype=np.float64)
    levels = tree_levels(len(tets))
    geom = np.empty((len(tets), 12))
    boxes = np.empty((int(levels[-1]), 6))
    _geometry(points, _index_table(tets), geom, boxes, tree_pad(points))
    _upper_boxes(boxes, levels)
    return geom, BoxTree(boxes, levels)


def tet_inverses(points: np.ndarray, tets: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """First vertex ``(M, 3)`` and inverse edge matrix ``(M, 3, 3)`` of each tetrahedron (views of
    :func:`tet_geometry`'s records)."""
    geom = tet_geometry(points, tets)[0]
    return geom[:, :3], geom[:, 3:].reshape(-1, 3, 3)


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
        self.geom, self.tree = tet_geometry(tm.points, tm.tets)
        if len(tm.tets) >= 2**31 or len(tm.points) >= 2**31:
            raise InputError(f"{len(tm.tets)} tetrahedra on {len(tm.points)} points: more than the engine's 32-bit "
                             "topology holds (2**31 - 1)")
        # 32-bit topology for the kernels: half the memory of 64-bit indices, on the walk's every step
        self.nbr = neighbours(tm.tets, len(tm.points)).astype(np.int32, copy=False)
        self.conn = tm.tets.astype(np.int32, copy=False)  # already 32-bit from the decomposition: no copy

    @property
    def p0(self) -> np.ndarray:
        """First vertex of each tetrahedron ``(M, 3)`` (a view of ``geom``)."""
        return self.geom[:, :3]

    @property
    def tinv(self) -> np.ndarray:
        """Inverse edge matrix of each tetrahedron ``(M, 3, 3)`` (a view of ``geom``)."""
        return self.geom[:, 3:].reshape(-1, 3, 3)

    def locate(self, x: np.ndarray, hints: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
        """Containing tetrahedron (-1 outside) and barycentric coordinates of each point.

        Parameters
        ----------
        x : (N, 3) ndarray
        hints : (N,) ndarray of int, optional
            A tetrahedron near each point (e.g. where it was last step) to walk from; -1 for none.
        """
        x = np.ascontiguousarray(x, dtype=np.float64).reshape(-1, 3)
        tree = self.tree
        if hints is None:
            # without hints each point walks from the first tetrahedron of its Morton cell (the ordering's
            # index: no search; else the box tree), the points in Morton order, the order of the tetrahedra.
            # 10k seeds in 1.2 M tetrahedra right after a trace (caches cold): 1.5 ms, against 4.2-4.6 ms
            # walking from the Morton neighbour before and 2.9-5 ms through the tree
            bits = min(morton_bits(len(x)) + 3, 63)  # one octree level finer than a point per cell
            index = self.tm.index
            h, keys = np.empty(len(x), np.int64), np.empty(len(x), np.int64)
            if index is not None and len(index.start) > 1:
                _index_hints(x, index.lo, index.scale, index.shift, index.start, 63 - bits, h, keys)
            else:
                h[:] = -1
                lo, hi = tree.boxes[-1, :3], tree.boxes[-1, 3:]
                _point_keys(x, lo, (2**21 - 1) / np.maximum(hi - lo, 1e-300), 63 - bits, keys)
            order = group_order(keys, 1 << bits)[0]
        else:
            h = np.ascontiguousarray(hints, dtype=np.int64)
            order = np.arange(len(x))
        tets = np.empty(len(x), np.int64)
        bary = np.empty((len(x), 4))
        _locate_many(x, h, order, self.geom, self.nbr, tree.boxes, tree.levels, tets, bary)
        return tets, bary

    def interpolate(self, tets: np.ndarray, bary: np.ndarray, values: np.ndarray) -> np.ndarray:
        """Linear interpolation of point ``values`` ``(n_points_extended, k)`` at located points (zeros outside)."""
        out = np.empty((len(tets), values.shape[1]))
        _interpolate(tets, bary, self.conn, np.ascontiguousarray(values, dtype=np.float64), out)
        return out
