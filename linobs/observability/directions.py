"""Vectors in scaled state space as named state participations.

Every vector is normalized to unit 2-norm before it is named.  To keep a
report small enough to store for thousands of operating points, components
with magnitude below :data:`SMALL_COMPONENT` (of the unit vector) are left
out and at most :data:`MAX_COMPONENTS` are kept, largest first; the largest
component is always kept.

An orthonormal basis of a subspace is not unique; :func:`canonical_basis`
picks the one that is easiest to read: its first vector is the projection
onto the subspace of the state that lies most in it, the next one the
projection of the next such state orthogonalized against the first, and so
on (QR with column pivoting of the basis transpose).

References
----------
P. Businger and G. H. Golub (1965), "Linear least squares solutions by
Householder transformations", Numerische Mathematik 7:269-276 (QR with
column pivoting).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import scipy.linalg

from linobs.observability.report import Direction

SMALL_COMPONENT = 1e-3
"""Components below this magnitude (of a unit vector) are omitted from names."""
MAX_COMPONENTS = 12
"""At most this many named components per vector."""


def _keep(values: np.ndarray) -> np.ndarray:
    order = np.argsort(-np.abs(values), kind="stable")
    keep = [i for i in order[:MAX_COMPONENTS] if abs(values[i]) >= SMALL_COMPONENT]
    return np.array(keep or order[:1], dtype=int)


def participation(vector: np.ndarray, names: Sequence[str]) -> dict[str, float]:
    """|component| per state of a (possibly complex) vector, unit 2-norm, largest first."""
    return participations(np.asarray(vector).reshape(-1, 1), names)[0]


def participations(vectors: np.ndarray, names: Sequence[str]) -> list[dict[str, float]]:
    """:func:`participation` of every column of ``vectors`` (one vectorized pass)."""
    mags = np.abs(np.asarray(vectors))
    if mags.size == 0:
        return [{} for _ in range(mags.shape[1] if mags.ndim == 2 else 0)]
    totals = np.linalg.norm(mags, axis=0)
    safe = np.where((totals > 0) & np.isfinite(totals), totals, 1.0)
    mags = mags / safe
    order = np.argsort(-mags, axis=0, kind="stable")[:MAX_COMPONENTS]
    out: list[dict[str, float]] = []
    for col in range(mags.shape[1]):
        if not (totals[col] > 0 and np.isfinite(totals[col])):
            out.append({})
            continue
        rows = order[:, col]
        values = mags[rows, col]
        keep = values >= SMALL_COMPONENT
        keep[0] = True
        out.append({names[r]: float(v) for r, v in zip(rows[keep], values[keep])})
    return out


def signed_direction(vector: np.ndarray, names: Sequence[str]) -> Direction:
    """A real direction as signed components (unit 2-norm, largest component positive)."""
    v = np.real(np.asarray(vector)).reshape(-1).astype(float)
    total = float(np.linalg.norm(v))
    if total == 0.0 or not np.isfinite(total):
        return Direction(components={})
    v = v / total
    big = int(np.argmax(np.abs(v)))
    if v[big] < 0:
        v = -v
    return Direction(components={names[i]: float(v[i]) for i in _keep(v)})


def canonical_basis(basis: np.ndarray) -> np.ndarray:
    """The readable orthonormal basis of span(basis) (see the module notes).

    Parameters
    ----------
    basis : (n, r) array with orthonormal columns

    Returns
    -------
    (n, r) array with orthonormal columns spanning the same subspace, each
    column with its largest component positive.
    """
    basis = np.asarray(basis, dtype=float)
    if basis.shape[1] == 0:
        return basis
    q, _, _ = scipy.linalg.qr(basis.T, mode="economic", pivoting=True)
    rotated = basis @ q
    signs = np.sign(rotated[np.argmax(np.abs(rotated), axis=0), np.arange(rotated.shape[1])])
    signs[signs == 0] = 1.0
    return rotated * signs


def orthonormal_span(vectors: np.ndarray, tol: float) -> np.ndarray:
    """Orthonormal real basis of the span of (possibly complex) column vectors.

    Real and imaginary parts are both kept (a complex pair spans a real plane);
    singular values at or below ``tol`` times the largest are dropped.
    """
    vectors = np.asarray(vectors)
    if vectors.size == 0:
        return np.zeros((vectors.shape[0], 0))
    real = np.hstack([vectors.real, vectors.imag]) if np.iscomplexobj(vectors) else vectors
    u, s, _ = np.linalg.svd(real, full_matrices=False)
    if s.size == 0 or s[0] == 0.0:
        return np.zeros((vectors.shape[0], 0))
    return u[:, s > tol * s[0]]
