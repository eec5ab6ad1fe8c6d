"""The finite-horizon observability Gramian together with the transition matrix e^{AT}.

W(T) = ∫₀ᵀ e^{Aᵀt} CᵀC e^{At} dt comes from
:func:`linobs.observability.gramian.finite_gramian` (Van Loan's block
exponential on a short interval, then doubling, so long horizons and fast
modes do not overflow); this module adds Φ = e^{AT} and a clear error when the
model grows without bound over the horizon.

References
----------
Van Loan, C. F. (1978). Computing integrals involving the matrix
exponential. IEEE Transactions on Automatic Control 23(3), 395-404.

Moler, C. & Van Loan, C. (2003). Nineteen dubious ways to compute the
exponential of a matrix, twenty-five years later. SIAM Review 45(1), 3-49
(scaling and squaring).
"""

from __future__ import annotations

import numpy as np
from scipy.linalg import expm

from linobs.errors import ModelError
from linobs.observability.gramian import finite_gramian

__all__ = ["finite_horizon_gramian"]


def finite_horizon_gramian(A: np.ndarray, C: np.ndarray, horizon: float
                           ) -> tuple[np.ndarray, np.ndarray]:
    """The observability Gramian of (A, C) over [0, horizon] and the transition e^{A·horizon}.

    Parameters
    ----------
    A : ndarray, shape (n, n)
    C : ndarray, shape (p, n)
    horizon : float
        T > 0 [s].

    Returns
    -------
    W : ndarray, shape (n, n)
        Symmetric positive semi-definite Gramian.
    Phi : ndarray, shape (n, n)
        e^{A T}.

    Raises
    ------
    ModelError
        The linear model grows so fast that W overflows over the horizon.
    """
    A = np.atleast_2d(np.asarray(A, dtype=float))
    C = np.atleast_2d(np.asarray(C, dtype=float)).reshape(-1, A.shape[0])
    n = A.shape[0]
    if n == 0:
        return np.zeros((0, 0)), np.zeros((0, 0))
    W = finite_gramian(A, C, horizon)  # short-step block exponential, then doubling
    with np.errstate(over="ignore", invalid="ignore"):
        Phi = expm(A * horizon)
    if not (np.all(np.isfinite(W)) and np.all(np.isfinite(Phi))):
        raise ModelError(f"the linear model grows without bound over the {horizon:g} s horizon "
                         f"(the Gramian overflows); shorten the horizon")
    return 0.5 * (W + W.T), Phi
