"""Which modes of each node's design pair no gain can move: a batched PBH screen, confirmed by the staircase.

An estimator acts on the pair (F, H) of its error dynamics — (A, C) for a
continuous design, (Φ, C) for a discrete one — and can move exactly the
observable modes: a mode μ with [μI − F; H] rank deficient stays an
eigenvalue of F − L H (and of (I − L C) Φ) for every gain L (Hautus 1969).

The screen follows :mod:`linobs.observability`'s conventions: the pair is
scaled by the nominal values (F̃ = S_x⁻¹ F S_x, H̃ = S_y⁻¹ H S_x), and a mode
is unobservable when the orthogonal staircase finds it in the unobservable
subspace with the rank threshold 100 · n · ε · (‖F̃‖₂ + ‖H̃‖₂), or its PBH
margin σ_min([μI − F̃; H̃]) / (‖F̃‖₂ + ‖H̃‖₂) is below 100 · n · ε.

For speed, the margins of all nodes are computed at once, as square roots of
the smallest eigenvalues of the batched Gram matrices (μI − F̃)ᴴ(μI − F̃) +
H̃ᵀH̃ (accurate to about √ε relative, enough for a screen) relative to
‖F̃‖_F + ‖H̃‖_F (an upper bound of the 2-norm sum); only nodes with
a margin below :data:`SCREEN` (far above the tolerance, so that defective
eigenvalues computed to √ε are still caught) run the staircase, whose
orthogonal rank decisions are the verdict.

A pair is *detectable* when every unobservable mode is stable: Re μ <
−tol · ‖F̃‖₂ (continuous) or |μ| < 1 − tol (discrete).

References
----------
M. L. J. Hautus (1969), "Controllability and observability conditions of
linear autonomous systems", Indag. Math. 31:443-448.
P. Van Dooren (1981), "The generalized eigenstructure problem in linear
system theory", IEEE Trans. Automatic Control 26(1):111-129.
"""

from __future__ import annotations

from typing import Literal, NamedTuple

import numpy as np

from linobs.observability.assessment import default_tolerance
from linobs.observability.pbh import pbh_margins
from linobs.observability.staircase import observability_staircase

SCREEN = 1e-5
"""Nodes with a relative PBH margin below this are examined by the staircase."""

Domain = Literal["discrete", "continuous"]


class PairScreen(NamedTuple):
    """The result for a stack of pairs."""

    eigenvalues: np.ndarray
    """(k, n) complex: eigenvalues of F."""
    margins: np.ndarray
    """(k, n): relative PBH margin of each eigenvalue."""
    unobservable: list[np.ndarray]
    """Per node: the unobservable modes (complex, design domain), empty when observable."""
    dominant_state: list[list[int]]
    """Per node and unobservable mode: the state with the largest share of its eigenvector."""
    mode_states: list[list[list[int]]]
    """Per node and unobservable mode: the states with at least a fifth of the largest share
    of its (scaled) eigenvector, largest first: where the mode lives."""
    detectable: np.ndarray
    """(k,) bool."""


def scaled_pair(F: np.ndarray, H: np.ndarray, sx: np.ndarray, sy: np.ndarray
                ) -> tuple[np.ndarray, np.ndarray]:
    """(S_x⁻¹ F S_x, S_y⁻¹ H S_x) on stacks: F (k, n, n), H (k, p, n), sx (k, n), sy (k, p)."""
    F_s = F * sx[:, None, :] / sx[:, :, None]
    H_s = H * sx[:, None, :] / sy[:, :, None]
    return F_s, H_s


def batched_margins(F: np.ndarray, H: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Eigenvalues and screening PBH margins of every mode of every pair.

    The margins are σ_min([μI − F; H]) / (‖F‖_F + ‖H‖_F): the Frobenius norms
    bound the 2-norms from above, so a screening margin is never larger than
    the analysis' margin (the screen errs on the side of examining a node).

    Returns
    -------
    (eigenvalues (k, n), margins (k, n))
    """
    n = F.shape[1]
    p = H.shape[1]
    lam = np.asarray(np.linalg.eigvals(F), dtype=complex)
    # σ_min² = λ_min((μI − F)ᴴ(μI − F) + HᵀH): squaring loses accuracy only below
    # √ε relative, far under SCREEN (the staircase decides there)
    shifted = -F[:, None, :, :].astype(complex) + lam[:, :, None, None] * np.eye(n)
    gram = np.swapaxes(shifted.conj(), -1, -2) @ shifted + (np.swapaxes(H, 1, 2) @ H)[:, None]
    sigma = np.sqrt(np.clip(np.linalg.eigvalsh(gram)[..., 0], 0.0, None))
    norm = np.linalg.norm(F, axis=(1, 2)) + (np.linalg.norm(H, axis=(1, 2)) if p else 0.0)
    norm = np.where(norm > 0, norm, 1.0)
    return lam, sigma / norm[:, None]


def _stable(mu: np.ndarray, domain: Domain, tol: float, norm: float) -> np.ndarray:
    if domain == "continuous":
        return mu.real < -tol * norm
    return np.abs(mu) < 1.0 - tol


def unobservable_modes(F: np.ndarray, H: np.ndarray, tolerance: float | None = None
                       ) -> np.ndarray:
    """The unobservable modes of one scaled pair (staircase, then PBH; module notes).

    Parameters
    ----------
    F : (n, n);  H : (p, n), both already scaled
    tolerance : relative (default 100 · n · ε)

    Returns
    -------
    complex array of the unobservable eigenvalues (empty when observable).
    """
    n = F.shape[0]
    tol = default_tolerance(n) if tolerance is None else tolerance
    normalizer = float(np.linalg.norm(F, 2) + (np.linalg.norm(H, 2) if H.size else 0.0)) or 1.0
    stair = observability_staircase(F, H, tol * normalizer)
    found = list(np.linalg.eigvals(stair.unobservable_matrix)) \
        if stair.unobservable_dimension else []
    lam = np.linalg.eigvals(F)
    margins = pbh_margins(F, H, lam, normalizer)
    for mu in lam[margins < tol]:
        close = [abs(mu - f) <= 1e-6 * max(abs(mu), 1.0) for f in found]
        if not any(close):
            found.append(mu)
    return np.asarray(found, dtype=complex)


def screen_pairs(F: np.ndarray, H: np.ndarray, sx: np.ndarray | None, sy: np.ndarray | None,
                 domain: Domain) -> PairScreen:
    """Unobservable modes and detectability of a stack of design pairs (module notes).

    Parameters
    ----------
    F : (k, n, n);  H : (k, p, n)
    sx : (k, n), sy : (k, p) positive scale factors; None when the pair is already scaled
    domain : "continuous" (stability Re < 0) or "discrete" (|z| < 1)

    Returns
    -------
    PairScreen
    """
    F_s, H_s = np.asarray(F, dtype=float), np.asarray(H, dtype=float)
    if sx is not None and sy is not None:
        F_s, H_s = scaled_pair(F_s, H_s, sx, sy)
    k, n, _ = F_s.shape
    lam, margins = batched_margins(F_s, H_s)
    tol = default_tolerance(n)
    unobservable: list[np.ndarray] = [np.zeros(0, dtype=complex)] * k
    dominant: list[list[int]] = [[] for _ in range(k)]
    involved: list[list[list[int]]] = [[] for _ in range(k)]
    detectable = np.ones(k, dtype=bool)
    for i in np.flatnonzero(np.min(margins, axis=1) < SCREEN):
        modes = unobservable_modes(F_s[i], H_s[i], tol)
        if modes.size == 0:
            continue
        unobservable[i] = modes
        values, vectors = np.linalg.eig(F_s[i])
        for mu in modes:
            j = int(np.argmin(np.abs(values - mu)))
            share = np.abs(vectors[:, j])
            order = np.argsort(-share, kind="stable")
            dominant[i].append(int(order[0]))
            involved[i].append([int(q) for q in order if share[q] >= 0.2 * share[order[0]]])
        detectable[i] = bool(np.all(_stable(modes, domain, tol,
                                            float(np.linalg.norm(F_s[i], 2)))))
    return PairScreen(eigenvalues=lam, margins=margins, unobservable=unobservable,
                      dominant_state=dominant, mode_states=involved,
                      detectable=detectable)


def mode_text(mu: complex, domain: Domain, sample_time: float) -> str:
    """A mode for a message: the continuous eigenvalue, and z for a discrete design."""
    def fmt(v: complex) -> str:
        v = complex(v)
        return f"{v.real:.6g}" if abs(v.imag) <= 1e-12 * max(abs(v), 1e-300) \
            else f"{v.real:.6g}{v.imag:+.6g}j"
    if domain == "continuous":
        return f"λ = {fmt(mu)} 1/s"
    s = np.log(complex(mu)) / sample_time if mu != 0 else complex(-np.inf)
    return f"z = {fmt(mu)} (λ = {fmt(s)} 1/s)"
