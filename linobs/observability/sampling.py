"""Sampled-data check: observability lost by pathological sampling.

Sampling with period Ts maps each mode λ of A to μ = e^{λTs} of Φ = e^{ATs}.
Two distinct modes whose real parts are equal and whose imaginary parts
differ by 2πk/Ts (k ≠ 0) land on the same μ; with a single output their two
directions then give proportional output samples and observability of the
sampled system is lost although the continuous one is observable (Kalman,
Ho & Narendra 1963; e.g. an oscillator ω sampled at Ts = π/ω).  With several
outputs such a pair is only a warning sign; the sampled PBH margin decides.

The margin is taken in delta form (Middleton & Goodwin 1990): with
δ = (Φ − I)/Ts and ν = (μ − 1)/Ts,

    sampled margin(λ) = σ_min([νI − δ; C]) / (‖δ‖₂ + ‖C‖₂).

[νI − δ; C] is [μI − Φ; C] with its first block row divided by Ts, so it
loses rank exactly when the PBH test of (Φ, C) fails; but as Ts → 0 it tends
to [λI − A; C], so the sampled margin is comparable with the continuous one
and fast sampling is not mistaken for weak observability (the plain
σ_min([μI − Φ; C]) shrinks like Ts).  δ is computed without cancellation as
A Γ / Ts with Γ = ∫₀^Ts e^{As} ds from one block exponential (Van Loan 1978),
ν with ``expm1``; both come from the continuous eigenvalues (no second
eigen-decomposition).

Pair detection tolerance: |Re(λi − λj)| and |Im(λi − λj) − 2πk/Ts| both at
most √ε · max(|λi|, |λj|, 2π/Ts), the accuracy of eigenvalues that are close
to each other.

References
----------
R. E. Kalman, Y. C. Ho and K. S. Narendra (1963), "Controllability of linear
dynamical systems", Contributions to Differential Equations 1(2):189-213.
M. L. J. Hautus (1969), "Controllability and observability conditions of
linear autonomous systems", Indag. Math. 31:443-448 (the PBH test applied to
(Φ, C)).
R. H. Middleton and G. C. Goodwin (1990), "Digital Control and Estimation: A
Unified Approach", Prentice-Hall (the delta operator).
C. F. Van Loan (1978), "Computing integrals involving the matrix
exponential", IEEE Trans. Automatic Control 23(3):395-404.
"""

from __future__ import annotations

import numpy as np
import scipy.linalg

from linobs.observability.pbh import Normalization, normalized_pair, pbh_margins

PAIR_TOLERANCE = float(np.sqrt(np.finfo(float).eps))
"""Relative tolerance of the pathological-pair test (see the module notes)."""


EPS = float(np.finfo(float).eps)


def pathological_pairs(eigenvalues: np.ndarray, sample_time: float) -> list[tuple[int, int, int]]:
    """Mode pairs (i, j, k), i < j, with Re λi = Re λj and Im(λi − λj) = 2πk/Ts, k ≠ 0.

    Parameters
    ----------
    eigenvalues : (n,) complex array
    sample_time : Ts > 0

    Returns
    -------
    list of (i, j, k)
    """
    lam = np.asarray(eigenvalues, dtype=complex).reshape(-1)
    omega_s = 2.0 * np.pi / sample_time
    pairs: list[tuple[int, int, int]] = []
    if lam.size < 2:
        return pairs
    i, j = np.triu_indices(lam.size, k=1)
    d = lam[i] - lam[j]
    scale = np.maximum(np.maximum(np.abs(lam[i]), np.abs(lam[j])), omega_s) * PAIR_TOLERANCE
    k = np.rint(d.imag / omega_s)
    hit = (k != 0) & (np.abs(d.real) <= scale) & (np.abs(d.imag - k * omega_s) <= scale)
    for a, b, kk in zip(i[hit], j[hit], k[hit]):
        pairs.append((int(a), int(b), int(kk)))
    return pairs


def delta_form(A: np.ndarray, eigenvalues: np.ndarray,
               sample_time: float) -> tuple[np.ndarray, np.ndarray]:
    """δ = (e^{ATs} − I)/Ts and ν = (e^{λTs} − 1)/Ts for every eigenvalue λ of A.

    Parameters
    ----------
    A : (n, n) array
    eigenvalues : (n,) eigenvalues of A
    sample_time : Ts > 0

    Returns
    -------
    (δ, ν)
    """
    n = A.shape[0]
    block = np.zeros((2 * n, 2 * n))
    block[:n, :n] = A * sample_time
    block[:n, n:] = np.eye(n) * sample_time
    gamma = scipy.linalg.expm(block)[:n, n:]          # Γ = ∫₀^Ts e^{As} ds
    delta = A @ gamma / sample_time
    lam = np.asarray(eigenvalues, dtype=complex)
    nu = np.expm1(lam * sample_time) / sample_time
    nu = np.where(lam.imag == 0, nu.real + 0j, nu)
    return delta, nu


def sampled_margins(C: np.ndarray, delta: np.ndarray, nu: np.ndarray,
                    normalization: Normalization = "sum",
                    sample_time: float | None = None) -> np.ndarray:
    """Relative PBH margin of every sampled mode, in delta form (see the module notes).

    Parameters
    ----------
    C : (p, n) scaled output matrix
    delta, nu : from :func:`delta_form`
    normalization : as for the continuous margins (:func:`~linobs.observability.pbh.normalized_pair`)
    sample_time : Ts; with the balanced normalization, a δ whose change over one sample,
        ‖Φ − I‖ = Ts‖δ‖, is at the rounding level of Φ counts as zero (Φ = I: the samples
        cannot tell the modes apart, and δ's rounding noise must not be scaled up to 1)

    Returns
    -------
    (n,) array of margins
    """
    norm_a = None
    if normalization == "balanced" and sample_time is not None and delta.size:
        n = delta.shape[0]
        change = sample_time * float(np.linalg.norm(delta, 2))
        phi = float(np.linalg.norm(np.eye(n) + sample_time * delta, 2))
        if change <= 100.0 * n * EPS * max(1.0, phi):
            norm_a = 0.0
    d_t, c_t, scale, normalizer = normalized_pair(delta, C, normalization, norm_a)
    return pbh_margins(d_t, c_t, nu / scale, normalizer)
