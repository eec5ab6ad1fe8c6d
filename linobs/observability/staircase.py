"""Orthogonal observability staircase: the unobservable subspace by orthogonal transformations only.

The observable subspace of (A, C) is range(Cᵀ) + Aᵀ range(Cᵀ) + …, the
controllable subspace of the dual pair (Aᵀ, Cᵀ); the unobservable subspace
is its orthogonal complement.  The staircase builds an orthogonal basis of
it block by block (F = Aᵀ, G = Cᵀ):

1. SVD of G; its numerical rank ρ₁ gives the first block of ρ₁ directions;
   transform F ← UᵀFU with the left singular vectors U.
2. The sub-block of F below the directions found so far, in the columns of
   the last block, is the part of F that leaves the span so far; its SVD and
   rank ρ_k give the next block.
3. Stop when a block has rank 0 (the rest is unobservable) or all n
   directions are found (observable).

Block sizes never grow; once a block has a single column (always, with one
output) the remaining steps are one Hessenberg reduction (LAPACK gehrd) of
the trailing part, which makes the same rank decisions at O(n³) total cost
instead of one SVD and two dense updates per step.

In the final basis Z = [Z_o, Z_u]: ZᵀAZ = [[A_o, 0], [A_uo, A_u]] and
CZ = [C_o, 0], so A Z_u = Z_u A_u and C Z_u = 0: Z_u spans the unobservable
subspace and the eigenvalues of A_u are the unobservable modes.

Rank decisions: a singular value counts when it exceeds ``tolerance``
(absolute, on the scaled system; the analysis passes
``unobservable_tolerance · (‖A‖₂ + ‖C‖₂)``, whose default
``100 · n · ε · (‖A‖₂ + ‖C‖₂)`` is the rounding level of n orthogonal steps).
Every transformation is orthogonal, so the result is exact for a pair
within a small multiple of the tolerance of (A, C) (backward stable),
unlike any rank test of the observability matrix [C; CA; …], whose columns
are scaled by powers of A.

References
----------
P. Van Dooren (1981), "The generalized eigenstructure problem in linear
system theory", IEEE Trans. Automatic Control 26(1):111-129.
C. C. Paige (1981), "Properties of numerical algorithms related to computing
controllability", IEEE Trans. Automatic Control 26(1):130-138.
A. Varga (1981), "Numerically stable algorithm for standard controllability
form determination", Electronics Letters 17(2):74-75.
R. E. Kalman (1963), "Mathematical description of linear dynamical
systems", SIAM J. Control 1(2):152-192 (the decomposition).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
import scipy.linalg


class Staircase(NamedTuple):
    """Result of :func:`observability_staircase` (arrays on the analyzed, scaled system)."""

    transform: np.ndarray
    """Z (n×n orthogonal): observable directions first, unobservable last."""
    observable_dimension: int
    block_sizes: tuple[int, ...]
    """ρ₁, ρ₂, …: directions found per step (observability indices structure)."""
    unobservable_basis: np.ndarray
    """Z_u (n×r), orthonormal columns spanning the unobservable subspace."""
    unobservable_matrix: np.ndarray
    """A_u = Z_uᵀ A Z_u (r×r): A restricted to the unobservable subspace."""
    last_singular_value: float
    """Largest singular value of the block that ended the staircase (0 if none)."""
    tolerance: float

    @property
    def unobservable_dimension(self) -> int:
        return int(self.unobservable_basis.shape[1])


def _single_column_steps(F: np.ndarray, Z: np.ndarray, k0: int, tolerance: float,
                         sizes: list[int]) -> tuple[int, float]:
    """The remaining steps when the last block had one column (updates F, Z, sizes in place).

    With one column per block the staircase is a Hessenberg reduction of the
    trailing part T = F[k0−1:, k0−1:] whose orthogonal factor keeps the first
    direction (Householder reflectors; LAPACK gehrd): the subdiagonal entry
    |H[i+1, i]| is the norm of the i-th new block, the same number the SVD of
    a one-column block gives, so the rank decisions are unchanged.
    """
    j = k0 - 1
    H, Q = scipy.linalg.hessenberg(F[j:, j:], calc_q=True)
    F[j:, j:] = H
    F[:j, j:] = F[:j, j:] @ Q
    Z[:, j:] = Z[:, j:] @ Q
    sub = np.abs(np.diagonal(H, offset=-1))
    small = np.flatnonzero(sub <= tolerance)
    found = int(small[0]) if small.size else sub.size
    sizes.extend([1] * found)
    last = float(sub[found]) if small.size else 0.0
    return k0 + found, last


def observability_staircase(A: np.ndarray, C: np.ndarray, tolerance: float) -> Staircase:
    """Orthogonal observability staircase of (A, C) (see the module notes).

    Parameters
    ----------
    A : (n, n) array
    C : (p, n) array
    tolerance : absolute threshold for the rank decisions

    Returns
    -------
    Staircase
    """
    A = np.asarray(A, dtype=float)
    n = A.shape[0]
    C = np.asarray(C, dtype=float).reshape(-1, n)
    F = A.T.copy()
    Z = np.eye(n)
    block = C.T.copy()          # rows k0:, the block that leaves the span so far
    k0 = 0
    sizes: list[int] = []
    last = 0.0
    while k0 < n:
        if block.size == 0:
            break
        if sizes and sizes[-1] == 1:
            # every later block has rank ≤ 1: finish with one Hessenberg reduction
            k0, last = _single_column_steps(F, Z, k0, tolerance, sizes)
            break
        u, s, _ = np.linalg.svd(block, full_matrices=True)
        rank = int(np.count_nonzero(s > tolerance))
        if rank == 0:
            last = float(s[0]) if s.size else 0.0
            break
        # rotate the remaining directions k0: so that the first `rank` span the block
        F[k0:, :] = u.T @ F[k0:, :]
        F[:, k0:] = F[:, k0:] @ u
        Z[:, k0:] = Z[:, k0:] @ u
        sizes.append(rank)
        start = k0
        k0 += rank
        block = F[k0:, start:k0]
    Z_u = Z[:, k0:]
    A_u = F[k0:, k0:].T.copy()
    return Staircase(transform=Z, observable_dimension=k0, block_sizes=tuple(sizes),
                     unobservable_basis=Z_u, unobservable_matrix=A_u,
                     last_singular_value=last, tolerance=float(tolerance))
