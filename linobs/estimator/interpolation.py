"""Interpolation weights of a gain schedule: multilinear cells and Delaunay simplices.

Both rules express the interpolated value at a scheduling value ``s`` as a
convex combination of a few nodes, ``v(s) = Σ_j w_j(s) v_{n_j}``, so that any
node quantity (gain, transition matrix, operating point) is interpolated by
the same weights, and the caller can see which nodes a value depends on.

* :func:`tensor_weights` — the ``2^k`` corners of the grid cell holding ``s``
  and their multilinear weights (products of one-dimensional linear weights);
  the scheduling value is clamped to the grid's box first.
* :class:`Triangulation` — scattered nodes: the Delaunay simplex holding
  ``s`` (coordinates scaled by each axis' range) and its barycentric
  coordinates; outside the convex hull, the nearest node.  One scheduling
  variable: the segments between consecutive sorted nodes.

Weights at or below :data:`WEIGHT_FLOOR` are set to zero (and the rest
renormalized), so that a value exactly at a node or on a shared face does not
depend, through a rounding-level weight, on a node it does not touch.

References
----------
Weiser, A. & Zarantonello, S. E. (1988). A note on piecewise linear and
multilinear table interpolation in many dimensions. Mathematics of
Computation 50(181), 189-196.

Delaunay, B. (1934). Sur la sphère vide. Izvestia Akademii Nauk SSSR,
Otdelenie Matematicheskikh i Estestvennykh Nauk 7, 793-800.

Barber, C. B., Dobkin, D. P. & Huhdanpaa, H. (1996). The Quickhull algorithm
for convex hulls. ACM Transactions on Mathematical Software 22(4), 469-483
(the triangulation, through ``scipy.spatial.Delaunay``).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

__all__ = ["WEIGHT_FLOOR", "Triangulation", "cell_centers", "tensor_edges", "tensor_weights"]

#: Interpolation weights at or below this are treated as exactly zero.
WEIGHT_FLOOR = 1e-12


def _tidy(weights: np.ndarray) -> np.ndarray:
    """Zero the rounding-level weights and renormalize each row to sum to one."""
    w = np.where(weights > WEIGHT_FLOOR, weights, 0.0)
    total = w.sum(axis=1, keepdims=True)
    return w / np.where(total > 0, total, 1.0)


def tensor_weights(axes: Sequence[np.ndarray], S: np.ndarray
                   ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Corner nodes and multilinear weights for scheduling values on a tensor grid.

    Parameters
    ----------
    axes
        The strictly increasing values of each axis (C order: the last axis
        varies fastest in the flat node numbering).
    S
        Scheduling values, shape ``(N, k)``.

    Returns
    -------
    nodes
        Flat node numbers of the cell corners, shape ``(N, 2^q)`` with ``q``
        the number of axes holding two or more values.
    weights
        Their multilinear weights (each row sums to one), same shape.
    outside
        Boolean ``(N,)``: the value lay outside the box and was clamped.

    References
    ----------
    Weiser, A. & Zarantonello, S. E. (1988). A note on piecewise linear and
    multilinear table interpolation in many dimensions. Mathematics of
    Computation 50(181), 189-196.
    """
    S = np.atleast_2d(np.asarray(S, dtype=float))
    shape = tuple(len(a) for a in axes)
    N = S.shape[0]
    outside = np.zeros(N, dtype=bool)
    lows = np.zeros((N, len(axes)), dtype=np.int64)
    fracs = np.zeros((N, len(axes)))
    moving = []
    for d, axis in enumerate(axes):
        v = S[:, d]
        outside |= (v < axis[0]) | (v > axis[-1])
        if len(axis) == 1:
            continue
        moving.append(d)
        v = np.clip(v, axis[0], axis[-1])
        i = np.clip(np.searchsorted(axis, v, side="right") - 1, 0, len(axis) - 2)
        lows[:, d] = i
        fracs[:, d] = (v - axis[i]) / (axis[i + 1] - axis[i])
    count = 1 << len(moving)
    nodes = np.empty((N, count), dtype=np.int64)
    weights = np.ones((N, count))
    strides = np.array([int(np.prod(shape[d + 1:], dtype=np.int64)) for d in range(len(shape))],
                       dtype=np.int64)
    for bits in range(count):
        index = lows.copy()
        for b, d in enumerate(moving):
            up = (bits >> b) & 1
            index[:, d] += up
            weights[:, bits] *= fracs[:, d] if up else 1.0 - fracs[:, d]
        nodes[:, bits] = index @ strides if len(shape) else 0
    return nodes, _tidy(weights), outside


def tensor_edges(shape: Sequence[int]) -> list[tuple[int, int, int]]:
    """Every pair of tensor-grid nodes one step apart along one axis: ``(i, j, axis)``, i < j."""
    shape = tuple(int(n) for n in shape)
    total = int(np.prod(shape, dtype=np.int64)) if shape else 1
    out: list[tuple[int, int, int]] = []
    for i in range(total):
        idx = np.unravel_index(i, shape) if shape else ()
        for d, n in enumerate(shape):
            if idx[d] + 1 < n:
                step = list(idx)
                step[d] += 1
                out.append((i, int(np.ravel_multi_index(step, shape)), d))
    return out


def cell_centers(axes: Sequence[np.ndarray]) -> np.ndarray:
    """The center of every cell of a tensor grid (C order), shape ``(cells, k)``.

    Along an axis with several values the centers are the midpoints of
    consecutive values; an axis with one value contributes that value.  A grid
    whose axes all hold one value has no cells (an empty array).
    """
    if not axes or all(len(a) < 2 for a in axes):
        return np.zeros((0, len(axes)))
    mids = [0.5 * (a[1:] + a[:-1]) if len(a) > 1 else np.asarray(a, dtype=float) for a in axes]
    mesh = np.meshgrid(*mids, indexing="ij")
    return np.stack([m.ravel() for m in mesh], axis=1)


class Triangulation:
    """Simplices over scattered nodes, in coordinates scaled by each axis' range.

    Parameters
    ----------
    points
        Node coordinates, shape ``(M, k)``, ``k ≥ 1``.

    Attributes
    ----------
    simplices
        Node numbers of every simplex, shape ``(S, k + 1)``; empty when the
        nodes span no ``k``-dimensional volume (fewer than ``k + 1`` nodes, or
        all on a lower-dimensional plane), in which case every value takes the
        nearest node and counts as outside.

    References
    ----------
    Delaunay, B. (1934). Sur la sphère vide. Izvestia Akademii Nauk SSSR 7, 793-800.
    Barber, C. B., Dobkin, D. P. & Huhdanpaa, H. (1996). The Quickhull algorithm
    for convex hulls. ACM Transactions on Mathematical Software 22(4), 469-483.
    """

    def __init__(self, points: np.ndarray) -> None:
        pts = np.atleast_2d(np.asarray(points, dtype=float))
        self.points = pts
        self.dims = pts.shape[1]
        self.low = pts.min(axis=0)
        span = np.ptp(pts, axis=0)
        self.scale = np.where(span > 0, span, 1.0)
        self.scaled = (pts - self.low) / self.scale
        self._tri = None
        self._order: np.ndarray | None = None
        if self.dims == 1:
            order = np.argsort(self.scaled[:, 0], kind="stable")
            distinct = np.diff(self.scaled[order, 0]) > 0
            self._order = order
            self.simplices = np.stack([order[:-1], order[1:]], axis=1)[distinct] \
                if len(order) > 1 else np.zeros((0, 2), dtype=np.int64)
        else:
            from scipy.spatial import Delaunay, QhullError

            self.simplices = np.zeros((0, self.dims + 1), dtype=np.int64)
            if len(pts) > self.dims:
                try:
                    self._tri = Delaunay(self.scaled)
                    self.simplices = self._tri.simplices.astype(np.int64)
                except QhullError:  # flat or repeated nodes: no volume to triangulate
                    self._tri = None

    def _nearest(self, Q: np.ndarray) -> np.ndarray:
        d2 = ((Q[:, None, :] - self.scaled[None, :, :]) ** 2).sum(axis=2)
        return np.argmin(d2, axis=1)  # ties: the lowest node number

    def locate(self, S: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Nodes, barycentric weights and outside flags for scheduling values ``S`` (N × k).

        Returns arrays of shapes ``(N, k+1)``, ``(N, k+1)`` and ``(N,)``.  Outside
        the hull the first node is the nearest one (weight one) and the others
        repeat it with weight zero.
        """
        S = np.atleast_2d(np.asarray(S, dtype=float))
        Q = (S - self.low) / self.scale
        N, k = Q.shape
        nodes = np.zeros((N, k + 1), dtype=np.int64)
        weights = np.zeros((N, k + 1))
        inside = np.zeros(N, dtype=bool)
        if len(self.simplices):
            if k == 1:
                lo = self.scaled[self.simplices[:, 0], 0]
                hi = self.scaled[self.simplices[:, 1], 0]
                q = Q[:, 0]
                seg = np.clip(np.searchsorted(lo, q, side="right") - 1, 0, len(lo) - 1)
                inside = (q >= lo[0]) & (q <= hi[-1])
                t = (q - lo[seg]) / (hi[seg] - lo[seg])
                nodes[inside] = self.simplices[seg[inside]]
                weights[inside] = np.stack([1.0 - t, t], axis=1)[inside]
            else:
                simplex = self._tri.find_simplex(Q)
                inside = simplex >= 0
                T = self._tri.transform[simplex[inside]]
                b = np.einsum("nij,nj->ni", T[:, :k], Q[inside] - T[:, k])
                weights[inside] = np.clip(np.concatenate([b, 1.0 - b.sum(axis=1, keepdims=True)],
                                                         axis=1), 0.0, None)
                nodes[inside] = self.simplices[simplex[inside]]
        out = ~inside
        if np.any(out):
            nearest = self._nearest(Q[out])
            nodes[out] = nearest[:, None]
            weights[out] = 0.0
            weights[out, 0] = 1.0
        return nodes, _tidy(weights), out

    def edges(self) -> list[tuple[int, int]]:
        """Every pair of nodes joined by a simplex edge, ``(i, j)`` with i < j, sorted.

        With no simplices (a flat node set) every pair of nodes is returned:
        the nearest-node rule then switches between any two of them.
        """
        M = len(self.points)
        if not len(self.simplices):
            return [(i, j) for i in range(M) for j in range(i + 1, M)]
        pairs = set()
        for simplex in self.simplices:
            s = sorted(int(v) for v in simplex)
            for a in range(len(s)):
                for b in range(a + 1, len(s)):
                    pairs.add((s[a], s[b]))
        return sorted(pairs)

    def centroids(self) -> np.ndarray:
        """The centroid of every simplex, in the original coordinates, shape ``(S, k)``."""
        if not len(self.simplices):
            return np.zeros((0, self.dims))
        return self.points[self.simplices].mean(axis=1)

    def volumes(self) -> np.ndarray:
        """Volume of every simplex in scaled coordinates (proportional to the original ones)."""
        if not len(self.simplices):
            return np.zeros(0)
        corners = self.scaled[self.simplices]
        edges = corners[:, 1:, :] - corners[:, :1, :]
        return np.abs(np.linalg.det(edges)) / float(np.prod(np.arange(1, self.dims + 1)))
