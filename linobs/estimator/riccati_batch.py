"""Algebraic Riccati equations for a whole grid at once: the structure-preserving doubling algorithm.

The estimator needs, per node, the stabilizing solution of the filter
Riccati equations (prior covariance P)::

    discrete:    P = Φ P Φᵀ − Φ P Cᵀ (C P Cᵀ + R)⁻¹ C P Φᵀ + Q
    continuous:  0 = A P + P Aᵀ − P Cᵀ R⁻¹ C P + Q

Both are the "control" forms X = ÂᵀX(I + ĜX)⁻¹Â + Ĥ and ÂᵀX + XÂ − XĜX + Ĥ = 0
with Â = Φᵀ (or Aᵀ), Ĝ = Cᵀ R⁻¹ C, Ĥ = Q.  The doubling iteration works on a
stack of nodes with batched solves only (no Python loop over nodes):

Discrete (Chu, Fan, Lin & Wang 2004), from A₀ = Â, G₀ = Ĝ, H₀ = Ĥ::

    W = I + G_k H_k
    A_{k+1} = A_k W⁻¹ A_k
    G_{k+1} = G_k + A_k W⁻¹ G_k A_kᵀ
    H_{k+1} = H_k + A_kᵀ H_k W⁻¹ A_k          (H_k → X, A_k → 0 quadratically)

Continuous (Chu, Fan & Lin 2005): the Cayley transform with γ > 0 of the
Hamiltonian matrix gives a discrete problem in standard symplectic form with
the same stabilizing solution; with Â_γ = Â − γI and W = Â_γ + Ĝ Â_γ⁻ᵀ Ĥ::

    A₀ = I + 2γ W⁻¹,    G₀ = 2γ W⁻¹ Ĝ Â_γ⁻ᵀ,    H₀ = 2γ W⁻ᵀ Ĥ Â_γ⁻¹

(derived by writing the pencil (ℋ + γI) − λ(ℋ − γI) in the form
[[A₀, 0], [−H₀, I]] − λ[[I, G₀], [0, A₀ᵀ]]), then the discrete iteration.
γ is taken per node as ‖ℋ‖_F / √(2n), ℋ = [[Â, −Ĝ], [−Ĥ, −Âᵀ]] (a scale of
the Hamiltonian's eigenvalues, so that the Cayley map spreads them evenly).

A node counts as converged when ‖H_{k+1} − H_k‖_F ≤ 1e-14 · ‖H_{k+1}‖_F and
‖A_k‖_F ≤ 1e-8 (the closed loop has contracted; without it a node whose
noise leaves a mode on the stability boundary would "converge" to the
non-stabilizing solution), and the relative residual of the Riccati equation
is ≤ 1e-10.  Nodes that do not converge in :data:`MAX_ITERATIONS` steps are
solved per node by scipy (``solve_discrete_are`` / ``solve_continuous_are``,
the ordered Schur method of Laub 1979 / Arnold & Laub 1984) and reported in
the result; nodes scipy cannot solve either (no stabilizing solution) are
reported as failed.

References
----------
E. K.-W. Chu, H.-Y. Fan, W.-W. Lin and C.-S. Wang (2004), "Structure-preserving
algorithms for periodic discrete-time algebraic Riccati equations", Int. J.
Control 77(8):767-788; and E. K.-W. Chu, H.-Y. Fan and W.-W. Lin (2005), "A
structure-preserving doubling algorithm for continuous-time algebraic Riccati
equations", Linear Algebra Appl. 396:55-80.
W.-W. Lin and S.-F. Xu (2006), "Convergence analysis of structure-preserving
doubling algorithms for Riccati-type matrix equations", SIAM J. Matrix Anal.
Appl. 28(1):26-39.
A. J. Laub (1979), "A Schur method for solving algebraic Riccati equations",
IEEE Trans. Automatic Control 24(6):913-921.
W. F. Arnold and A. J. Laub (1984), "Generalized eigenproblem algorithms and
software for algebraic Riccati equations", Proc. IEEE 72(12):1746-1754.
"""

from __future__ import annotations

from typing import Literal, NamedTuple

import numpy as np
import scipy.linalg

MAX_ITERATIONS = 60
STEP_TOLERANCE = 1e-14
CONTRACTION_TOLERANCE = 1e-8
RESIDUAL_TOLERANCE = 1e-10

Method = Literal["doubling", "scipy", "failed"]


class RiccatiSolution(NamedTuple):
    """Stabilizing solutions of a stack of filter Riccati equations."""

    P: np.ndarray
    """(k, n, n): the solutions (NaN where ``method == "failed"``)."""
    method: list[Method]
    """Per node: solved by the batched doubling, per node by scipy, or not at all."""
    iterations: int
    """Doubling steps taken by the batch."""


def _t(M: np.ndarray) -> np.ndarray:
    return np.swapaxes(M, -1, -2)


def _sym(M: np.ndarray) -> np.ndarray:
    return 0.5 * (M + _t(M))


def _solve(W: np.ndarray, rhs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Batched solve that marks singular systems instead of failing the whole stack."""
    try:
        return np.linalg.solve(W, rhs), np.ones(W.shape[0], dtype=bool)
    except np.linalg.LinAlgError:
        ok = np.isfinite(np.linalg.cond(W)) & (np.linalg.cond(W) < 1e15)
        out = np.full(rhs.shape, np.nan)
        if np.any(ok):
            out[ok] = np.linalg.solve(W[ok], rhs[ok])
        return out, ok


def doubling_iteration(A: np.ndarray, G: np.ndarray, H: np.ndarray,
                       max_iterations: int = MAX_ITERATIONS
                       ) -> tuple[np.ndarray, np.ndarray, int]:
    """The discrete doubling iteration on stacks (module notes), from (A₀, G₀, H₀).

    Parameters
    ----------
    A, G, H : (k, n, n) arrays (G, H symmetric positive semidefinite)
    max_iterations : upper bound on the doubling steps

    Returns
    -------
    (X, converged, iterations)
        X (k, n, n) the last H_k; converged (k,) bool (step and contraction tests).

    References
    ----------
    E. K.-W. Chu, H.-Y. Fan, W.-W. Lin and C.-S. Wang (2004), "Structure-preserving
    algorithms for periodic discrete-time algebraic Riccati equations",
    Int. J. Control 77(8):767-788.
    """
    A, G, H = (np.array(M, dtype=float) for M in (A, G, H))
    k = A.shape[0]
    active = np.ones(k, dtype=bool)
    converged = np.zeros(k, dtype=bool)
    healthy = np.ones(k, dtype=bool)
    steps = 0
    with np.errstate(over="ignore", invalid="ignore"):
        steps = _iterate(A, G, H, active, converged, healthy, max_iterations)
    return H, converged & healthy, steps


def _iterate(A: np.ndarray, G: np.ndarray, H: np.ndarray, active: np.ndarray,
             converged: np.ndarray, healthy: np.ndarray, max_iterations: int) -> int:
    """The doubling steps, in place (nodes that overflow are marked unhealthy)."""
    n = A.shape[1]
    eye = np.eye(n)
    steps = 0
    for steps in range(1, max_iterations + 1):
        idx = np.flatnonzero(active)
        if idx.size == 0:
            steps -= 1
            break
        whole = idx.size == A.shape[0]
        a, g, h = (A, G, H) if whole else (A[idx], G[idx], H[idx])
        # (an explicit inverse of W would be twice as fast for small stacks, but loses
        # about three digits on ill-conditioned solutions: solve)
        Z, ok = _solve(eye + g @ h, np.concatenate([a, g], axis=2))
        Z1, Z2 = Z[:, :, :n], Z[:, :, n:]
        aT = _t(a)
        a_new = a @ Z1
        g_new = g + a @ Z2 @ aT
        h_new = h + aT @ h @ Z1
        g_new = 0.5 * (g_new + _t(g_new))
        h_new = 0.5 * (h_new + _t(h_new))
        step = np.linalg.norm(h_new - h, axis=(1, 2))
        size = np.linalg.norm(h_new, axis=(1, 2))
        contraction = np.linalg.norm(a_new, axis=(1, 2))
        finite = ok & np.isfinite(step) & np.isfinite(size) & np.isfinite(contraction) & \
            np.isfinite(np.linalg.norm(g_new, axis=(1, 2)))
        done = finite & (step <= STEP_TOLERANCE * np.maximum(size, 1e-300)) & \
            (contraction <= CONTRACTION_TOLERANCE)
        if whole and finite.all():
            A[...], G[...], H[...] = a_new, g_new, h_new
        else:
            keep = idx[finite]
            A[keep], G[keep], H[keep] = a_new[finite], g_new[finite], h_new[finite]
        healthy[idx[~finite]] = False
        converged[idx[done]] = True
        active[idx[done | ~finite]] = False
    return steps


def _discrete_residual(Phi: np.ndarray, C: np.ndarray, Q: np.ndarray, R: np.ndarray,
                       P: np.ndarray) -> np.ndarray:
    S = C @ P @ _t(C) + R
    PCt = P @ _t(C)
    res = Phi @ (P - PCt @ np.linalg.solve(S, _t(PCt))) @ _t(Phi) + Q - P
    return np.linalg.norm(res, axis=(1, 2)) / np.maximum(np.linalg.norm(P, axis=(1, 2))
                                                          + np.linalg.norm(Q, axis=(1, 2)), 1e-300)


def _continuous_residual(A: np.ndarray, C: np.ndarray, Q: np.ndarray, R: np.ndarray,
                         P: np.ndarray) -> np.ndarray:
    PCt = P @ _t(C)
    res = A @ P + P @ _t(A) - PCt @ np.linalg.solve(R, _t(PCt)) + Q
    scale = 2 * np.linalg.norm(A, axis=(1, 2)) * np.linalg.norm(P, axis=(1, 2)) + \
        np.linalg.norm(Q, axis=(1, 2))
    return np.linalg.norm(res, axis=(1, 2)) / np.maximum(scale, 1e-300)


def _finish(P: np.ndarray, good: np.ndarray, fallback, steps: int) -> RiccatiSolution:
    method: list[Method] = ["doubling" if g else "failed" for g in good]
    P = np.where(good[:, None, None], P, np.nan)
    for i in np.flatnonzero(~good):
        try:
            X = fallback(i)
        except (np.linalg.LinAlgError, ValueError):
            continue
        if np.all(np.isfinite(X)):
            P[i] = _sym(X)
            method[i] = "scipy"
    return RiccatiSolution(P=P, method=method, iterations=steps)


def filter_riccati_discrete(Phi: np.ndarray, C: np.ndarray, Q: np.ndarray, R: np.ndarray,
                            max_iterations: int = MAX_ITERATIONS) -> RiccatiSolution:
    """Prior covariance P of the discrete filter Riccati equation for a stack of nodes.

    Parameters
    ----------
    Phi : (k, n, n);  C : (k, p, n);  Q : (k, n, n) PSD;  R : (k, p, p) positive definite
    max_iterations : doubling steps before the per-node fallback

    Returns
    -------
    RiccatiSolution

    References
    ----------
    E. K.-W. Chu, H.-Y. Fan, W.-W. Lin and C.-S. Wang (2004), Int. J. Control
    77(8):767-788 (doubling); W. F. Arnold and A. J. Laub (1984), Proc. IEEE
    72(12):1746-1754 (the per-node fallback in scipy).
    """
    Phi, C, Q, R = (np.asarray(M, dtype=float) for M in (Phi, C, Q, R))
    G = _sym(_t(C) @ np.linalg.solve(R, C))
    X, conv, steps = doubling_iteration(_t(Phi), G, _sym(Q), max_iterations)
    good = conv.copy()
    if np.any(good):
        good[good] = _discrete_residual(Phi[good], C[good], Q[good], R[good],
                                        X[good]) <= RESIDUAL_TOLERANCE
    return _finish(X, good, lambda i: scipy.linalg.solve_discrete_are(
        Phi[i].T, C[i].T, Q[i], R[i]), steps)


def cayley_start(A: np.ndarray, G: np.ndarray, H: np.ndarray, gamma: np.ndarray | None = None
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(A₀, G₀, H₀) of the continuous doubling algorithm (module notes), stacked.

    Returns
    -------
    (A0, G0, H0, ok)
        ``ok`` marks nodes whose Cayley transform was well defined.

    References
    ----------
    E. K.-W. Chu, H.-Y. Fan and W.-W. Lin (2005), "A structure-preserving
    doubling algorithm for continuous-time algebraic Riccati equations",
    Linear Algebra Appl. 396:55-80.
    """
    k, n, _ = A.shape
    if gamma is None:
        size = np.sqrt(2 * np.linalg.norm(A, axis=(1, 2)) ** 2 + np.linalg.norm(G, axis=(1, 2))
                       ** 2 + np.linalg.norm(H, axis=(1, 2)) ** 2)
        gamma = np.maximum(size / np.sqrt(2 * n), 1e-300)
    g = np.asarray(gamma, dtype=float).reshape(k, 1, 1)
    Ag = A - g * np.eye(n)
    ok = np.ones(k, dtype=bool)
    # Â_γ⁻¹ H and Â_γ⁻ᵀ-type products from one solve each
    AgT_inv_H, ok1 = _solve(_t(Ag), H)           # Â_γ⁻ᵀ Ĥ
    W = Ag + G @ AgT_inv_H
    ok &= ok1
    Winv_stack, ok2 = _solve(W, np.concatenate([np.broadcast_to(np.eye(n), W.shape), G], axis=2))
    ok &= ok2
    W_inv, W_inv_G = Winv_stack[:, :, :n], Winv_stack[:, :, n:]
    A0 = np.eye(n) + 2 * g * W_inv
    # G₀ = 2γ W⁻¹ Ĝ Â_γ⁻ᵀ = 2γ (Â_γ⁻¹ (W⁻¹Ĝ)ᵀ)ᵀ
    X1, ok3 = _solve(Ag, _t(W_inv_G))
    G0 = 2 * g * _t(X1)
    # H₀ = 2γ W⁻ᵀ Ĥ Â_γ⁻¹ = 2γ (Â_γ⁻ᵀ Ĥ W⁻¹)ᵀ
    H0 = 2 * g * _t(AgT_inv_H @ W_inv)
    ok &= ok3 & np.all(np.isfinite(A0), axis=(1, 2)) & np.all(np.isfinite(G0), axis=(1, 2)) \
        & np.all(np.isfinite(H0), axis=(1, 2))
    return A0, _sym(np.nan_to_num(G0)), _sym(np.nan_to_num(H0)), ok


def filter_riccati_continuous(A: np.ndarray, C: np.ndarray, Q: np.ndarray, R: np.ndarray,
                              max_iterations: int = MAX_ITERATIONS) -> RiccatiSolution:
    """Covariance P of the continuous filter Riccati equation for a stack of nodes.

    Parameters
    ----------
    A : (k, n, n);  C : (k, p, n);  Q : (k, n, n) PSD;  R : (k, p, p) positive definite

    Returns
    -------
    RiccatiSolution

    References
    ----------
    E. K.-W. Chu, H.-Y. Fan and W.-W. Lin (2005), Linear Algebra Appl. 396:55-80
    (doubling); A. J. Laub (1979), IEEE Trans. Automatic Control 24(6):913-921
    (the per-node fallback in scipy).
    """
    A, C, Q, R = (np.asarray(M, dtype=float) for M in (A, C, Q, R))
    G = _sym(_t(C) @ np.linalg.solve(R, C))
    A0, G0, H0, ok = cayley_start(_t(A), G, _sym(Q))
    A0 = np.where(ok[:, None, None], np.nan_to_num(A0), 0.0)
    X, conv, steps = doubling_iteration(A0, G0, H0, max_iterations)
    good = conv & ok
    if np.any(good):
        good[good] = _continuous_residual(A[good], C[good], Q[good], R[good],
                                          X[good]) <= RESIDUAL_TOLERANCE
    return _finish(X, good, lambda i: scipy.linalg.solve_continuous_are(
        A[i].T, C[i].T, Q[i], R[i]), steps)
