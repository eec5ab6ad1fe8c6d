"""The observability matrix [C; CA; …; CA^(n−1)]: reported for reference, never the verdict.

Its rank equals n exactly when (A, C) is observable (Kalman 1960), but its
block rows grow or shrink like the powers of A, so in floating point its
singular values span many orders of magnitude and the numerical rank is
unreliable beyond a handful of states (Paige 1981).  The report gives its
singular values, condition number and rank at numpy's default tolerance
(σ_max · max(rows, columns) · ε) so that the engineer can see how far the
textbook test is from the verdict.

References
----------
R. E. Kalman (1960), "On the general theory of control systems", Proc. 1st
IFAC Congress, Moscow, 1:481-492.
C. C. Paige (1981), "Properties of numerical algorithms related to computing
controllability", IEEE Trans. Automatic Control 26(1):130-138.
"""

from __future__ import annotations

import numpy as np

from linobs.observability.report import ObservabilityMatrixInfo


def observability_matrix(A: np.ndarray, C: np.ndarray, blocks: int | None = None) -> np.ndarray:
    """[C; CA; …; CA^(blocks−1)] (``blocks`` defaults to n).

    Parameters
    ----------
    A : (n, n) array
    C : (p, n) array
    blocks : number of block rows

    Returns
    -------
    (blocks·p, n) array
    """
    n = A.shape[0]
    C = np.asarray(C, dtype=float).reshape(-1, n)
    count = n if blocks is None else int(blocks)
    rows = [C]
    with np.errstate(over="ignore", invalid="ignore"):
        for _ in range(1, count):
            rows.append(rows[-1] @ A)
    return np.vstack(rows) if rows else np.zeros((0, n))


def observability_matrix_info(A: np.ndarray, C: np.ndarray) -> ObservabilityMatrixInfo:
    """Singular values, condition number and numpy-default numerical rank of the matrix."""
    O = observability_matrix(A, C)
    if O.size == 0 or not np.all(np.isfinite(O)):
        n = A.shape[0]
        return ObservabilityMatrixInfo(singular_values=[], condition=float("inf") if n else 1.0,
                                       numerical_rank=0)
    s = np.linalg.svd(O, compute_uv=False)
    # numpy.linalg.matrix_rank's default tolerance, applied to the same singular values
    rank = int(np.count_nonzero(s > s[0] * max(O.shape) * np.finfo(float).eps)) if s[0] > 0 else 0
    condition = float(s[0] / s[-1]) if s.size and s[-1] > 0 else float("inf")
    if s.size < A.shape[0]:
        condition = float("inf")
    return ObservabilityMatrixInfo(singular_values=[float(v) for v in s], condition=condition,
                                   numerical_rank=rank)
