"""Velocity gradients and vortex criteria on the tetrahedral decomposition, in numba.

Gradient: the velocity is linear in each tetrahedron of the mesh's conforming decomposition
(:mod:`vtkflow.tetmesh`), so each tetrahedron has one exact gradient of that interpolant; the gradient at
a point is the volume-weighted mean over the tetrahedra that share it (gradient recovery by averaging,
common practice). Exact for velocity fields linear in space; first order in the cell size on general
meshes and second order where the tetrahedra around a point are symmetric (interior points of uniform
meshes; measured in ``tests/test_vortex.py``); one-sided, first order, on the boundary.

Criteria at each point, from the gradient ``A = grad u`` (``A[i, j] = du_i / dx_j``), its symmetric part
``S`` and antisymmetric part ``W``:

* ``q``: Q = (|W|^2 - |S|^2) / 2, vortex where Q > 0 (Hunt, Wray & Moin 1988, "Eddies, streams, and
  convergence zones in turbulent flows", Center for Turbulence Research report CTR-S88);
* ``lambda2``: the middle eigenvalue of S^2 + W^2, vortex where lambda2 < 0 (Jeong & Hussain 1995,
  "On the identification of a vortex", J. Fluid Mech. 285);
* ``delta``: the discriminant (Q_A/3)^3 + (R_A/2)^2 of the characteristic equation of A, written for its
  deviatoric part (the two agree when the trace vanishes), vortex where delta > 0: A has complex
  eigenvalues (Chong, Perry & Cantwell 1990, "A general classification of three-dimensional flow fields",
  Phys. Fluids A 2);
* ``swirl``: lambda_ci, the imaginary part of A's complex eigenvalue pair, 0 where all are real
  (Zhou, Adrian, Balachandar & Kendall 1999, J. Fluid Mech. 387);
* vorticity, the curl of u, and its magnitude.

Eigenvalues come in closed form: symmetric 3x3 by the trigonometric method of Smith 1961 ("Eigenvalues of
a symmetric 3 x 3 matrix", Commun. ACM 4(4), 168), the general cubic by Cardano's formula. No LAPACK.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numba import njit, prange

from .kernels import _sort3, _triple

__all__ = ["CRITERIA", "Criterion", "GradientOperator", "evaluate", "sym_eigvals", "core_lines", "volume_inside", "FIELDS"]


@dataclass(frozen=True)
class Criterion:
    """A vortex criterion: which side of the level is inside a core, and its units as a power of
    (velocity / length), for levels normalised by a reference velocity and length."""

    name: str
    inside: int  # +1: value > level is inside; -1: value < level is inside
    power: int  # units: (U/L) ** power
    source: str


#: The criteria by recipe name (``vortices.<entry>.criterion``).
CRITERIA = {
    "q": Criterion("q", +1, 2, "Hunt, Wray & Moin 1988, CTR-S88"),
    "lambda2": Criterion("lambda2", -1, 2, "Jeong & Hussain 1995, J. Fluid Mech. 285"),
    "delta": Criterion("delta", +1, 6, "Chong, Perry & Cantwell 1990, Phys. Fluids A 2"),
    "swirl": Criterion("swirl", +1, 1, "Zhou, Adrian, Balachandar & Kendall 1999, J. Fluid Mech. 387"),
}
#: Every point array :func:`evaluate` returns.
FIELDS = ("q", "lambda2", "delta", "swirl", "vorticity", "vorticity_magnitude")


# ------------------------------------------------------------------------------------------ gradient
@njit(cache=True, parallel=True)
def _tet_gradients(geom, conn, u, grads, vols):
    """Gradient of the linear interpolant of ``u`` in each tetrahedron, and its volume."""
    for t in prange(conn.shape[0]):
        a = conn[t, 0]
        for i in range(3):
            for j in range(3):
                g = 0.0
                for r in range(3):
                    g += (u[conn[t, r + 1], i] - u[a, i]) * geom[t, 3 + 3 * r + j]
                grads[t, i, j] = g
        # volume = |det(edges)| / 6 = 1 / (6 |det(inverse)|); degenerate tetrahedra (infinite inverse) weigh 0
        d = (geom[t, 3] * (geom[t, 7] * geom[t, 11] - geom[t, 8] * geom[t, 10])
             - geom[t, 4] * (geom[t, 6] * geom[t, 11] - geom[t, 8] * geom[t, 9])
             + geom[t, 5] * (geom[t, 6] * geom[t, 10] - geom[t, 7] * geom[t, 9]))
        vols[t] = 1.0 / (6.0 * abs(d)) if np.isfinite(d) and d != 0.0 else 0.0
        if not np.isfinite(vols[t]):
            vols[t] = 0.0


@njit(cache=True)
def _incidence(conn, n_points, start, items):
    """Tetrahedra around each point, CSR: ``items[start[p]:start[p + 1]]``."""
    start[:] = 0
    for t in range(conn.shape[0]):
        for k in range(4):
            start[conn[t, k] + 1] += 1
    for p in range(n_points):
        start[p + 1] += start[p]
    fill = start[:-1].copy()
    for t in range(conn.shape[0]):
        for k in range(4):
            p = conn[t, k]
            items[fill[p]] = t
            fill[p] += 1


@njit(cache=True, parallel=True)
def _point_gradients(start, items, grads, vols, out):
    for p in prange(start.shape[0] - 1):
        w = 0.0
        acc = np.zeros((3, 3))
        for j in range(start[p], start[p + 1]):
            t = items[j]
            v = vols[t]
            w += v
            for a in range(3):
                for b in range(3):
                    acc[a, b] += v * grads[t, a, b]
        for a in range(3):
            for b in range(3):
                out[p, a, b] = acc[a, b] / w if w > 0.0 else 0.0


class GradientOperator:
    """Point gradients of point fields on a tetrahedral decomposition; the incidence is built once.

    Parameters
    ----------
    locator : vtkflow.kernels.Locator
        Holds the decomposition's per-tetrahedron geometry (``geom``) and connectivity (``conn``).
    n_points : int
        Points of the decomposition (mesh points and added centre points).
    """

    def __init__(self, locator, n_points: int) -> None:
        self.geom, self.conn = locator.geom, locator.conn
        self.n_points = int(n_points)
        self.start = np.empty(self.n_points + 1, np.int64)
        self.items = np.empty(4 * len(self.conn), np.int32)
        _incidence(self.conn, self.n_points, self.start, self.items)

    def tet_gradients(self, u: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Per-tetrahedron gradients ``(M, 3, 3)`` and volumes ``(M,)`` of point field ``u`` ``(n_points, 3)``."""
        grads = np.empty((len(self.conn), 3, 3))
        vols = np.empty(len(self.conn))
        _tet_gradients(self.geom, self.conn, np.ascontiguousarray(u, dtype=np.float64), grads, vols)
        return grads, vols

    def from_tets(self, grads: np.ndarray, vols: np.ndarray) -> np.ndarray:
        """Point gradients from per-tetrahedron gradients and volumes (the volume-weighted mean around each point)."""
        out = np.empty((self.n_points, 3, 3))
        _point_gradients(self.start, self.items, grads, vols, out)
        return out

    def __call__(self, u: np.ndarray) -> np.ndarray:
        """Point gradients ``(n_points, 3, 3)``, ``out[p, i, j] = du_i/dx_j`` at point ``p``."""
        return self.from_tets(*self.tet_gradients(u))


# ---------------------------------------------------------------------------------------- eigenvalues
@njit(cache=True, nogil=True, inline="always")
def _sym_eig3(a00, a01, a02, a11, a12, a22):
    """Eigenvalues of a symmetric 3x3 matrix, descending (Smith 1961, Commun. ACM 4(4), 168)."""
    p1 = a01 * a01 + a02 * a02 + a12 * a12
    q = (a00 + a11 + a22) / 3.0
    b00, b11, b22 = a00 - q, a11 - q, a22 - q
    p2 = b00 * b00 + b11 * b11 + b22 * b22 + 2.0 * p1
    if p2 == 0.0:
        return q, q, q
    p = np.sqrt(p2 / 6.0)
    # r = det((A - q I) / p) / 2, in [-1, 1] up to round-off
    det = b00 * (b11 * b22 - a12 * a12) - a01 * (a01 * b22 - a12 * a02) + a02 * (a01 * a12 - b11 * a02)
    r = det / (2.0 * p * p * p)
    r = min(max(r, -1.0), 1.0)
    phi = np.arccos(r) / 3.0
    e1 = q + 2.0 * p * np.cos(phi)
    e3 = q + 2.0 * p * np.cos(phi + 2.0 * np.pi / 3.0)
    e2 = 3.0 * q - e1 - e3
    # sort, largest first (round-off can swap neighbours when two are equal)
    e3, e2, e1 = _sort3(e1, e2, e3)
    return e1, e2, e3


@njit(cache=True, parallel=True)
def _sym_eigvals(m, out):
    for i in prange(m.shape[0]):
        e1, e2, e3 = _sym_eig3(m[i, 0, 0], 0.5 * (m[i, 0, 1] + m[i, 1, 0]), 0.5 * (m[i, 0, 2] + m[i, 2, 0]),
                               m[i, 1, 1], 0.5 * (m[i, 1, 2] + m[i, 2, 1]), m[i, 2, 2])
        out[i, 0], out[i, 1], out[i, 2] = e3, e2, e1


def sym_eigvals(m: np.ndarray) -> np.ndarray:
    """Eigenvalues of symmetric 3x3 matrices ``(N, 3, 3)``, ascending ``(N, 3)`` (as ``numpy.linalg.eigvalsh``)."""
    m = np.ascontiguousarray(m, dtype=np.float64).reshape(-1, 3, 3)
    out = np.empty((len(m), 3))
    _sym_eigvals(m, out)
    return out


@njit(cache=True, nogil=True, inline="always")
def _cubic_discriminant(a):
    """Depressed cubic of the characteristic equation of the 3x3 matrix ``a``: returns (delta, swirl,
    real eigenvalue) with delta = (q/2)^2 + (p/3)^3 for mu^3 + p mu + q = 0, lambda = mu + tr(a)/3; swirl
    is the imaginary part of the complex pair (0 when delta <= 0)."""
    i1 = a[0, 0] + a[1, 1] + a[2, 2]
    i2 = (a[0, 0] * a[1, 1] - a[0, 1] * a[1, 0] + a[0, 0] * a[2, 2] - a[0, 2] * a[2, 0]
          + a[1, 1] * a[2, 2] - a[1, 2] * a[2, 1])
    i3 = (a[0, 0] * (a[1, 1] * a[2, 2] - a[1, 2] * a[2, 1]) - a[0, 1] * (a[1, 0] * a[2, 2] - a[1, 2] * a[2, 0])
          + a[0, 2] * (a[1, 0] * a[2, 1] - a[1, 1] * a[2, 0]))
    p = i2 - i1 * i1 / 3.0
    q = -2.0 * i1 * i1 * i1 / 27.0 + i1 * i2 / 3.0 - i3
    delta = (0.5 * q) ** 2 + (p / 3.0) ** 3
    if delta > 0.0:
        s = np.sqrt(delta)
        c = np.cbrt(-0.5 * q + s)
        d = np.cbrt(-0.5 * q - s)
        return delta, 0.5 * np.sqrt(3.0) * abs(c - d), c + d + i1 / 3.0
    return delta, 0.0, np.nan


@njit(cache=True, parallel=True)
def _evaluate(grad, q_out, l2_out, delta_out, swirl_out, vort_out, vmag_out):
    for p in prange(grad.shape[0]):
        a = grad[p]
        # S (symmetric) and W (antisymmetric) parts
        s00, s11, s22 = a[0, 0], a[1, 1], a[2, 2]
        s01, s02, s12 = 0.5 * (a[0, 1] + a[1, 0]), 0.5 * (a[0, 2] + a[2, 0]), 0.5 * (a[1, 2] + a[2, 1])
        w01, w02, w12 = 0.5 * (a[0, 1] - a[1, 0]), 0.5 * (a[0, 2] - a[2, 0]), 0.5 * (a[1, 2] - a[2, 1])
        s2 = s00 * s00 + s11 * s11 + s22 * s22 + 2.0 * (s01 * s01 + s02 * s02 + s12 * s12)
        w2 = 2.0 * (w01 * w01 + w02 * w02 + w12 * w12)
        q_out[p] = 0.5 * (w2 - s2)
        # M = S^2 + W^2 (symmetric); W = [[0, w01, w02], [-w01, 0, w12], [-w02, -w12, 0]]
        m00 = s00 * s00 + s01 * s01 + s02 * s02 - w01 * w01 - w02 * w02
        m11 = s01 * s01 + s11 * s11 + s12 * s12 - w01 * w01 - w12 * w12
        m22 = s02 * s02 + s12 * s12 + s22 * s22 - w02 * w02 - w12 * w12
        m01 = s00 * s01 + s01 * s11 + s02 * s12 - w02 * w12
        m02 = s00 * s02 + s01 * s12 + s02 * s22 + w01 * w12
        m12 = s01 * s02 + s11 * s12 + s12 * s22 - w01 * w02
        _, e2, _ = _sym_eig3(m00, m01, m02, m11, m12, m22)
        l2_out[p] = e2
        delta, swirl, _ = _cubic_discriminant(a)
        delta_out[p] = delta
        swirl_out[p] = swirl
        wx, wy, wz = a[2, 1] - a[1, 2], a[0, 2] - a[2, 0], a[1, 0] - a[0, 1]
        vort_out[p, 0], vort_out[p, 1], vort_out[p, 2] = wx, wy, wz
        vmag_out[p] = np.sqrt(wx * wx + wy * wy + wz * wz)


def evaluate(grad: np.ndarray) -> dict[str, np.ndarray]:
    """Every criterion and the vorticity from point gradients ``(N, 3, 3)``, in one parallel pass.

    Returns a dict with the :data:`FIELDS`: ``q``, ``lambda2``, ``delta``, ``swirl`` and
    ``vorticity_magnitude`` ``(N,)``, ``vorticity`` ``(N, 3)``.
    """
    grad = np.ascontiguousarray(grad, dtype=np.float64).reshape(-1, 3, 3)
    n = len(grad)
    out = {name: np.empty(n) for name in ("q", "lambda2", "delta", "swirl", "vorticity_magnitude")}
    out["vorticity"] = np.empty((n, 3))
    _evaluate(grad, out["q"], out["lambda2"], out["delta"], out["swirl"], out["vorticity"], out["vorticity_magnitude"])
    return out


# ----------------------------------------------------------------------------------------- core lines
@njit(cache=True, parallel=True)
def _core_segments(points, conn, grads, u, min_strength, hit_face, hit_x, strength):
    """Sujudi & Haimes 1995 (AIAA paper 95-1715) in each tetrahedron: where the velocity's reduced part
    (its component normal to the real eigenvector of the tetrahedron's constant gradient) vanishes.

    The reduced velocity is linear in the tetrahedron; its zero crosses a face where the origin lies in
    the triangle of the face's projected vertex velocities. A tetrahedron with complex eigenvalues,
    swirling strength >= ``min_strength`` and exactly two such faces holds a core segment: its two face
    numbers (``4 t + f``, face opposite vertex ``f``) go to ``hit_face[t]`` and the points to ``hit_x[t]``."""
    for t in prange(conn.shape[0]):
        hit_face[t, 0] = -1
        hit_face[t, 1] = -1
        a = grads[t]
        delta, swirl, lr = _cubic_discriminant(a)
        strength[t] = swirl
        if not (delta > 0.0 and swirl > 0.0 and swirl >= min_strength):
            continue
        # real eigenvector: the largest cross product of two rows of (a - lr I)
        b = a.copy()
        for i in range(3):
            b[i, i] -= lr
        best = -1.0
        e = np.zeros(3)
        for r0, r1 in ((0, 1), (0, 2), (1, 2)):
            cx = b[r0, 1] * b[r1, 2] - b[r0, 2] * b[r1, 1]
            cy = b[r0, 2] * b[r1, 0] - b[r0, 0] * b[r1, 2]
            cz = b[r0, 0] * b[r1, 1] - b[r0, 1] * b[r1, 0]
            n2 = cx * cx + cy * cy + cz * cz
            if n2 > best:
                best = n2
                e[0], e[1], e[2] = cx, cy, cz
        if not best > 0.0:
            continue
        e /= np.sqrt(best)
        # an orthonormal basis (p, q) of the plane normal to e
        k = 0 if abs(e[0]) < 0.6 else 1
        p = np.zeros(3)
        p[k] = 1.0
        p -= (p[0] * e[0] + p[1] * e[1] + p[2] * e[2]) * e
        p /= np.sqrt(p[0] ** 2 + p[1] ** 2 + p[2] ** 2)
        q = np.array([e[1] * p[2] - e[2] * p[1], e[2] * p[0] - e[0] * p[2], e[0] * p[1] - e[1] * p[0]])
        w = np.empty((4, 2))
        for j in range(4):
            v = conn[t, j]
            w[j, 0] = u[v, 0] * p[0] + u[v, 1] * p[1] + u[v, 2] * p[2]
            w[j, 1] = u[v, 0] * q[0] + u[v, 1] * q[1] + u[v, 2] * q[2]
        n_hit = 0
        for f in range(4):
            i, j, m = (f + 1) % 4, (f + 2) % 4, (f + 3) % 4
            bx, by = w[j, 0] - w[i, 0], w[j, 1] - w[i, 1]
            cx, cy = w[m, 0] - w[i, 0], w[m, 1] - w[i, 1]
            d = bx * cy - by * cx
            if d == 0.0:
                continue
            px, py = -w[i, 0], -w[i, 1]
            beta = (px * cy - py * cx) / d
            gamma = (bx * py - by * px) / d
            alpha = 1.0 - beta - gamma
            if alpha >= 0.0 and beta >= 0.0 and gamma >= 0.0:
                if n_hit < 2:
                    hit_face[t, n_hit] = 4 * t + f
                    for c in range(3):
                        hit_x[t, n_hit, c] = (alpha * points[conn[t, i], c] + beta * points[conn[t, j], c]
                                              + gamma * points[conn[t, m], c])
                n_hit += 1
        if n_hit != 2:  # none, or a degenerate crossing through an edge or vertex: no segment here
            hit_face[t, 0] = -1
            hit_face[t, 1] = -1


@njit(cache=True)
def _chain(n_nodes, ea, eb):
    """Join edges ``(ea[i], eb[i])`` between nodes into polylines: chains end at nodes of degree other than 2;
    closed loops repeat their first node at the end. Returns (node sequence, nodes per polyline)."""
    n_edges = ea.shape[0]
    deg = np.zeros(n_nodes, np.int64)
    for i in range(n_edges):
        deg[ea[i]] += 1
        deg[eb[i]] += 1
    start = np.zeros(n_nodes + 1, np.int64)
    for v in range(n_nodes):
        start[v + 1] = start[v] + deg[v]
    adj = np.empty(2 * n_edges, np.int64)
    fill = start[:-1].copy()
    for i in range(n_edges):
        adj[fill[ea[i]]] = i
        fill[ea[i]] += 1
        adj[fill[eb[i]]] = i
        fill[eb[i]] += 1
    used = np.zeros(n_edges, np.bool_)
    seq = np.empty(2 * n_edges + n_nodes, np.int64)
    lengths = np.empty(n_edges + 1, np.int64)
    n_seq = 0
    n_lines = 0
    for sweep in range(2):  # open chains first (from nodes of degree != 2), then closed loops
        for v0 in range(n_nodes):
            if sweep == 0 and deg[v0] == 2:
                continue
            for s in range(start[v0], start[v0 + 1]):
                if used[adj[s]]:
                    continue
                first = n_seq
                seq[n_seq] = v0
                n_seq += 1
                cur, edge = v0, adj[s]
                while edge >= 0:
                    used[edge] = True
                    cur = eb[edge] if ea[edge] == cur else ea[edge]
                    seq[n_seq] = cur
                    n_seq += 1
                    edge = -1
                    if deg[cur] == 2:
                        for s2 in range(start[cur], start[cur + 1]):
                            if not used[adj[s2]]:
                                edge = adj[s2]
                                break
                lengths[n_lines] = n_seq - first
                n_lines += 1
    return seq[:n_seq], lengths[:n_lines]


def core_lines(points: np.ndarray, conn: np.ndarray, nbr: np.ndarray, tet_grads: np.ndarray, u: np.ndarray,
               min_strength: float = 0.0) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Vortex core lines by the reduced-velocity (eigenvector) method of Sujudi & Haimes 1995.

    Parameters
    ----------
    points : (P, 3) ndarray
        Points of the tetrahedral decomposition.
    conn, nbr : (M, 4) ndarray of int
        Tetrahedra and their face neighbours.
    tet_grads : (M, 3, 3) ndarray
        Constant velocity gradient of each tetrahedron (:meth:`GradientOperator.tet_gradients`).
    u : (P, 3) ndarray
        Point velocity.
    min_strength : float
        Tetrahedra with a smaller swirling strength hold no segment.

    Returns
    -------
    vertices : (V, 3) ndarray
        Polyline vertices, one per crossed face (the mean of the points the two tetrahedra sharing the
        face put on it).
    lengths : (L,) ndarray of int
        Vertices per polyline.
    strength : (V,) ndarray
        Mean swirling strength of the tetrahedra whose segments meet at each vertex.
    """
    m = len(conn)
    hit_face = np.empty((m, 2), np.int64)
    hit_x = np.empty((m, 2, 3))
    strength = np.empty(m)
    _core_segments(np.ascontiguousarray(points, dtype=np.float64), conn, np.ascontiguousarray(tet_grads),
                   np.ascontiguousarray(u, dtype=np.float64), float(min_strength), hit_face, hit_x, strength)
    tets = np.flatnonzero(hit_face[:, 0] >= 0)
    if tets.size == 0:
        return np.zeros((0, 3)), np.zeros(0, np.int64), np.zeros(0)
    faces = hit_face[tets].ravel()
    # one key per geometric face: the smaller of its two (tetrahedron, face) numbers
    t, f = faces // 4, faces % 4
    n = nbr[t, f].astype(np.int64)
    back = np.argmax(nbr[np.maximum(n, 0)] == t[:, None], axis=1)
    key = np.where(n >= 0, np.minimum(faces, 4 * np.maximum(n, 0) + back), faces)
    nodes, node_of = np.unique(key, return_inverse=True)
    count = np.bincount(node_of, minlength=len(nodes)).astype(float)
    xs = np.stack([np.bincount(node_of, hit_x[tets].reshape(-1, 3)[:, c], len(nodes)) for c in range(3)], axis=1)
    xs /= count[:, None]
    st = np.bincount(node_of, np.repeat(strength[tets], 2), len(nodes)) / count
    pairs = node_of.reshape(-1, 2)
    seq, lengths = _chain(len(nodes), pairs[:, 0].copy(), pairs[:, 1].copy())
    return xs[seq], lengths, st[seq]


# -------------------------------------------------------------------------------------------- volume
@njit(cache=True, nogil=True, inline="always")
def _tet_volume(p, a, b, c, d):
    return abs(_triple(p, a, b, c, d)) / 6.0


@njit(cache=True, parallel=True)
def _volume_inside(points, conn, g):
    """Volume where the linear interpolant of ``g`` is positive, exactly, summed over the tetrahedra."""
    total = 0.0
    for t in prange(conn.shape[0]):
        v = np.empty(4, np.int64)
        for k in range(4):
            v[k] = conn[t, k]
        pos = 0
        for k in range(4):
            if g[v[k]] > 0.0:
                pos += 1
        vol = 0.0
        if pos == 4:
            vol = _tet_volume(points, v[0], v[1], v[2], v[3])
        elif pos == 1 or pos == 3:
            # the lone vertex cuts a corner tetrahedron: fraction = product of the edge fractions
            lone_pos = pos == 1
            lone = 0
            for k in range(4):
                if (g[v[k]] > 0.0) == lone_pos:
                    lone = k
            frac = 1.0
            for k in range(4):
                if k != lone:
                    frac *= g[v[lone]] / (g[v[lone]] - g[v[k]])
            full = _tet_volume(points, v[0], v[1], v[2], v[3])
            vol = full * frac if lone_pos else full * (1.0 - frac)
        elif pos == 2:
            # a prism with ends (a, p_ac, p_ad) and (b, p_bc, p_bd), cut into three tetrahedra
            ia, ib, ic, id_ = -1, -1, -1, -1
            for k in range(4):
                if g[v[k]] > 0.0:
                    if ia < 0:
                        ia = k
                    else:
                        ib = k
                elif ic < 0:
                    ic = k
                else:
                    id_ = k
            q = np.empty((6, 3))
            for c in range(3):
                q[0, c] = points[v[ia], c]
                q[3, c] = points[v[ib], c]
            for (s, o, row) in ((ia, ic, 1), (ia, id_, 2), (ib, ic, 4), (ib, id_, 5)):
                r = g[v[s]] / (g[v[s]] - g[v[o]])
                for c in range(3):
                    q[row, c] = points[v[s], c] + r * (points[v[o], c] - points[v[s], c])
            vol = (_tet_volume(q, 0, 1, 2, 3) + _tet_volume(q, 1, 2, 3, 4) + _tet_volume(q, 2, 3, 4, 5))
        total += vol
    return total


def volume_inside(points: np.ndarray, conn: np.ndarray, values: np.ndarray, level: float, inside: int) -> float:
    """Volume of the region where ``inside * (values - level) > 0``, with ``values`` linear in each tetrahedron."""
    g = inside * (np.asarray(values, dtype=np.float64) - level)
    return float(_volume_inside(np.ascontiguousarray(points, dtype=np.float64), conn, g))


def join_gaps(xs: np.ndarray, lengths: np.ndarray, strength: np.ndarray, gap: float
              ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Join core-line pieces whose ends lie within ``gap`` of each other, nearest pairs first.

    The reduced-velocity method works cell by cell with each cell's own eigenvector, so where the
    eigenvector turns from cell to cell the crossing points two neighbours put on their shared face differ
    and a line breaks into pieces (a known property of the method, Sujudi & Haimes 1995); bridging gaps of
    about a cell restores the line. Each end joins at most one other end, and no loop is closed.
    """
    from scipy.spatial import cKDTree

    n = len(lengths)
    if n < 2:
        return xs, lengths, strength
    first = np.concatenate([[0], np.cumsum(lengths)[:-1]])
    last = first + lengths - 1
    ends = np.concatenate([xs[first], xs[last]])  # end e: piece e % n, at its start (e < n) or end
    pairs = np.array(sorted(cKDTree(ends).query_pairs(gap, output_type="ndarray").tolist(),
                            key=lambda p: float(np.linalg.norm(ends[p[0]] - ends[p[1]]))), dtype=np.int64).reshape(-1, 2)
    partner = np.full(2 * n, -1, np.int64)
    root = np.arange(n)

    def find(i: int) -> int:
        while root[i] != i:
            root[i] = root[root[i]]
            i = root[i]
        return i

    for a, b in pairs:  # few pieces (tens to hundreds per frame): a plain loop over candidate joins
        if partner[a] >= 0 or partner[b] >= 0:
            continue
        ra, rb = find(a % n), find(b % n)
        if ra == rb:
            continue
        partner[a], partner[b] = b, a
        root[ra] = rb
    out_x, out_s, out_n = [], [], []
    done = np.zeros(n, bool)
    for start in range(n):
        # begin at a piece with a free end (every group has one: no loops are made)
        if done[start] or (partner[start] >= 0 and partner[start + n] >= 0):
            continue
        piece, forward = start, partner[start] < 0  # walk away from the free end
        xs_g, st_g = [], []
        while True:
            done[piece] = True
            sl = slice(first[piece], last[piece] + 1)
            px, ps = (xs[sl], strength[sl]) if forward else (xs[sl][::-1], strength[sl][::-1])
            xs_g.append(px)
            st_g.append(ps)
            exit_end = piece + n if forward else piece
            nxt = partner[exit_end]
            if nxt < 0:
                break
            piece, forward = nxt % n, nxt < n
        out_x.append(np.concatenate(xs_g))
        out_s.append(np.concatenate(st_g))
        out_n.append(len(out_x[-1]))
    # closed loops from the chaining itself are pieces with no partners: already handled above
    return np.concatenate(out_x), np.asarray(out_n, dtype=np.int64), np.concatenate(out_s)
