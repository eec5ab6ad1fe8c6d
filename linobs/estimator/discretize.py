"""Exact sampling of the affine local model and of its process noise.

Zero-order hold
---------------
With the input held over one sample, the affine local model
x' = dx0 + A (x − x0) + B (u − u0) gives exactly (Van Loan 1978, Theorem 1)::

    x[k+1] − x0 = Φ (x[k] − x0) + Γ (u[k] − u0) + Γ₀ dx0,
    Φ = e^{A Ts},   Γ = ∫₀^Ts e^{As} ds B,   Γ₀ = ∫₀^Ts e^{As} ds.

All three come from one matrix exponential of the block upper-triangular
matrix (the brief's [[A, B, dx0], [0, 0, 0], [0, 0, 0]], with the identity in
place of the column dx0 so that Γ₀ itself is returned and Γ₀ dx0 is one
product)::

    exp([[A, B, I], [0, 0, 0], [0, 0, 0]] · Ts) = [[Φ, Γ, Γ₀], [0, I, 0], [0, 0, I]].

Process noise
-------------
A white noise of power spectral density Q_c on the state derivative gives,
sampled, the covariance Q_d = ∫₀^Ts e^{As} Q_c e^{Aᵀs} ds.  Van Loan's
construction::

    exp([[−A, Q_c], [0, Aᵀ]] · Ts) = [[·, F₁₂], [0, F₂₂]],   F₂₂ = Φᵀ,   Q_d = F₂₂ᵀ F₁₂.

Batches
-------
Every function accepts stacks (leading axis = points).  ``scipy.linalg.expm``
accepts stacked (…, m, m) arrays (scipy ≥ 1.9) but loops over them in
Python; :func:`expm_stack` is the scaling-and-squaring method with the
degree-13 Padé approximant (Higham 2005) written with batched products and
one batched solve, every matrix with its own scaling power s = max(0,
⌈log₂(‖M‖₁ / θ₁₃)⌉), θ₁₃ = 5.37 (the squarings run masked, up to the largest
s).  The blocks that enter linearly (B, Q_c) are normalized to unit largest
entry before the exponential and the result scaled back, so that a large
noise level does not inflate ‖M‖ and over-scale the exponential (the
integrals are linear in B and in Q_c).

References
----------
C. F. Van Loan (1978), "Computing integrals involving the matrix exponential",
IEEE Trans. Automatic Control 23(3):395-404.
N. J. Higham (2005), "The scaling and squaring method for the matrix
exponential revisited", SIAM J. Matrix Anal. Appl. 26(4):1179-1193.
"""

from __future__ import annotations

import numpy as np

_PADE13 = np.array([64764752532480000.0, 32382376266240000.0, 7771770303897600.0,
                    1187353796428800.0, 129060195264000.0, 10559470521600.0, 670442572800.0,
                    33522128640.0, 1323241920.0, 40840800.0, 960960.0, 16380.0, 182.0, 1.0])
"""Coefficients of the degree-13 Padé approximant of e^x (Higham 2005, Table 2.3)."""
THETA13 = 5.371920351148152
"""Largest ‖M‖₁ for which the degree-13 approximant meets unit roundoff (Higham 2005)."""


def expm_stack(M: np.ndarray) -> np.ndarray:
    """e^M for every matrix of a stack (k, m, m): scaling and squaring, Padé degree 13.

    Parameters
    ----------
    M : (k, m, m) or (m, m) array, finite

    Returns
    -------
    array of the same shape

    References
    ----------
    N. J. Higham (2005), "The scaling and squaring method for the matrix
    exponential revisited", SIAM J. Matrix Anal. Appl. 26(4):1179-1193
    (Algorithm 2.3, degree 13 only).
    """
    M3, single = _stacked(M)
    k, m, _ = M3.shape
    if k == 0 or m == 0:
        return np.array(M, dtype=float, copy=True)
    norm1 = np.max(np.sum(np.abs(M3), axis=1), axis=1)
    s = np.zeros(k, dtype=int)
    big = norm1 > THETA13
    s[big] = np.ceil(np.log2(norm1[big] / THETA13)).astype(int)
    X = M3 / np.ldexp(1.0, s)[:, None, None]
    b = _PADE13
    eye = np.eye(m)
    X2 = X @ X
    X4 = X2 @ X2
    X6 = X2 @ X4
    U = X @ (X6 @ (b[13] * X6 + b[11] * X4 + b[9] * X2) + b[7] * X6 + b[5] * X4 + b[3] * X2
             + b[1] * eye)
    V = X6 @ (b[12] * X6 + b[10] * X4 + b[8] * X2) + b[6] * X6 + b[4] * X4 + b[2] * X2 + \
        b[0] * eye
    E = np.linalg.solve(V - U, V + U)
    for j in range(int(s.max(initial=0))):
        sel = s > j
        E[sel] = E[sel] @ E[sel]
    return E[0] if single else E


def _unit_scale(M: np.ndarray) -> np.ndarray:
    """Per matrix of a stack, its largest |entry| (1 where it is 0)."""
    size = np.max(np.abs(M), axis=(1, 2), initial=0.0) if M.size else np.ones(M.shape[0])
    return np.where(size > 0, size, 1.0)


def _stacked(M: np.ndarray) -> tuple[np.ndarray, bool]:
    M = np.asarray(M, dtype=float)
    return (M[None], True) if M.ndim == 2 else (M, False)


def zero_order_hold(A: np.ndarray, B: np.ndarray, sample_time: float
                    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Exact zero-order-hold sampling (Φ, Γ, Γ₀) of one model or a stack of models.

    Parameters
    ----------
    A : (n, n) or (k, n, n) array
    B : (n, m) or (k, n, m) array (m may be 0)
    sample_time : Ts > 0

    Returns
    -------
    (Phi, Gamma, Gamma0)
        e^{A Ts}, ∫₀^Ts e^{As} ds B and ∫₀^Ts e^{As} ds, stacked like ``A``.

    References
    ----------
    C. F. Van Loan (1978), "Computing integrals involving the matrix
    exponential", IEEE Trans. Automatic Control 23(3):395-404.
    """
    A3, single = _stacked(A)
    k, n, _ = A3.shape
    B3 = np.asarray(B, dtype=float).reshape(k, n, -1)
    m = B3.shape[2]
    beta = _unit_scale(B3)
    M = np.zeros((k, 2 * n + m, 2 * n + m))
    M[:, :n, :n] = A3
    M[:, :n, n:n + m] = B3 / beta[:, None, None]
    M[:, :n, n + m:] = np.eye(n)
    E = expm_stack(M * float(sample_time))
    Phi, Gamma, Gamma0 = E[:, :n, :n], E[:, :n, n:n + m] * beta[:, None, None], E[:, :n, n + m:]
    if single:
        return Phi[0].copy(), Gamma[0].copy(), Gamma0[0].copy()
    return Phi.copy(), Gamma.copy(), Gamma0.copy()


def process_noise_covariance(A: np.ndarray, Q_continuous: np.ndarray, sample_time: float
                             ) -> np.ndarray:
    """Q_d = ∫₀^Ts e^{As} Q_c e^{Aᵀs} ds by Van Loan's block exponential (stacks allowed).

    Parameters
    ----------
    A : (n, n) or (k, n, n) array
    Q_continuous : (n, n) or (k, n, n) symmetric PSD array (power spectral density)
    sample_time : Ts > 0

    Returns
    -------
    (n, n) or (k, n, n) array, symmetrized.

    References
    ----------
    C. F. Van Loan (1978), "Computing integrals involving the matrix
    exponential", IEEE Trans. Automatic Control 23(3):395-404.
    """
    A3, single = _stacked(A)
    k, n, _ = A3.shape
    Q3 = np.broadcast_to(np.asarray(Q_continuous, dtype=float), (k, n, n))
    size = _unit_scale(Q3)
    M = np.zeros((k, 2 * n, 2 * n))
    M[:, :n, :n] = -A3
    M[:, :n, n:] = Q3 / size[:, None, None]
    M[:, n:, n:] = np.swapaxes(A3, 1, 2)
    E = expm_stack(M * float(sample_time))
    Qd = (np.swapaxes(E[:, n:, n:], 1, 2) @ E[:, :n, n:]) * size[:, None, None]
    Qd = 0.5 * (Qd + np.swapaxes(Qd, 1, 2))
    return Qd[0] if single else Qd


def held_injection_gain(A: np.ndarray, C: np.ndarray, L_continuous: np.ndarray,
                        sample_time: float) -> np.ndarray:
    """The predictor gain of a continuous observer sampled by zero-order hold (stacks allowed).

    The observer x̂' = A x̂ + L_c (y − C x̂) + …, with the output error held over
    the sample, samples exactly to x̂[k+1] = e^{F Ts} x̂[k] + Γ_L (y[k] − …),
    F = A − L_c C, Γ_L = ∫₀^Ts e^{Fs} ds L_c.  Γ_L is the gain returned; the
    predictor update Φ − Γ_L C agrees with e^{F Ts} to second order in Ts
    (both equal I + F Ts + O(Ts²)).

    Parameters
    ----------
    A : (n, n) or (k, n, n)
    C : (p, n) or (k, p, n)
    L_continuous : (n, p) or (k, n, p)
    sample_time : Ts > 0

    Returns
    -------
    Γ_L, shaped like ``L_continuous``.

    References
    ----------
    C. F. Van Loan (1978), "Computing integrals involving the matrix
    exponential", IEEE Trans. Automatic Control 23(3):395-404.
    """
    A3, single = _stacked(A)
    k, n, _ = A3.shape
    L3 = np.asarray(L_continuous, dtype=float).reshape(k, n, -1)
    C3 = np.asarray(C, dtype=float).reshape(k, -1, n)
    F = A3 - L3 @ C3
    _, gain, _ = zero_order_hold(F, L3, sample_time)
    return gain[0] if single else gain
