"""Batched doubling solutions of the filter Riccati equations against scipy, node by node."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg

from linobs.estimator.riccati_batch import (
    filter_riccati_continuous,
    filter_riccati_discrete,
)


def batch(seed: int, k: int, n: int, p: int, shift: float, rank_q: int | None = None
          ) -> tuple[np.ndarray, ...]:
    rng = np.random.default_rng(seed)
    A = rng.standard_normal((k, n, n)) / np.sqrt(n) + shift * np.eye(n)
    C = rng.standard_normal((k, p, n))
    G = rng.standard_normal((k, n, rank_q or n))
    Q = G @ np.swapaxes(G, 1, 2) * 0.1
    W = rng.standard_normal((k, p, p))
    R = W @ np.swapaxes(W, 1, 2) + 0.1 * np.eye(p)
    return A, C, Q, R


def relative(a: np.ndarray, b: np.ndarray) -> float:
    return float(np.linalg.norm(a - b) / np.linalg.norm(b))


@pytest.mark.parametrize("shift, rank_q", [(-1.0, None), (0.4, None), (0.4, 1)])
def test_discrete_batch_matches_scipy(shift: float, rank_q: int | None) -> None:
    # shift −1: stable; +0.4: several unstable modes; rank-1 Q: noise on one direction only
    # (random C keeps every pair observable, random Q reaches every mode: both generic facts)
    A, C, Q, R = batch(7, 40, 5, 2, shift, rank_q)
    Phi = scipy.linalg.expm(A * 0.3)
    sol = filter_riccati_discrete(Phi, C, Q, R)
    assert set(sol.method) == {"doubling"}
    for i in range(len(Phi)):
        # scipy.linalg.solve_discrete_are on the dual pair (Φᵀ, Cᵀ) (reference library)
        ref = scipy.linalg.solve_discrete_are(Phi[i].T, C[i].T, Q[i], R[i])
        assert relative(sol.P[i], ref) < 1e-9


@pytest.mark.parametrize("shift, rank_q", [(-1.0, None), (0.4, None), (0.4, 1)])
def test_continuous_batch_matches_scipy(shift: float, rank_q: int | None) -> None:
    A, C, Q, R = batch(9, 40, 5, 2, shift, rank_q)
    sol = filter_riccati_continuous(A, C, Q, R)
    assert set(sol.method) == {"doubling"}
    for i in range(len(A)):
        # scipy.linalg.solve_continuous_are on the dual pair (Aᵀ, Cᵀ) (reference library)
        ref = scipy.linalg.solve_continuous_are(A[i].T, C[i].T, Q[i], R[i])
        assert relative(sol.P[i], ref) < 1e-9


def test_detectable_unobservable_nodes_in_the_batch() -> None:
    A, C, Q, R = batch(3, 10, 4, 1, -0.5)
    # make the last state a stable mode (−2) that no output sees: detectable (PBH, analytic)
    A[:, 3, :] = 0.0
    A[:, :, 3] = 0.0
    A[:, 3, 3] = -2.0
    C[:, :, 3] = 0.0
    Phi = scipy.linalg.expm(A * 0.5)
    sol = filter_riccati_discrete(Phi, C, Q, R)
    for i in range(len(A)):
        ref = scipy.linalg.solve_discrete_are(Phi[i].T, C[i].T, Q[i], R[i])   # scipy reference
        assert relative(sol.P[i], ref) < 1e-9


def test_fallback_per_node_is_reported() -> None:
    A, C, Q, R = batch(5, 6, 3, 1, -1.0)
    Phi = scipy.linalg.expm(A * 0.3)
    sol = filter_riccati_discrete(Phi, C, Q, R, max_iterations=1)
    assert set(sol.method) == {"scipy"}
    for i in range(len(A)):
        ref = scipy.linalg.solve_discrete_are(Phi[i].T, C[i].T, Q[i], R[i])   # scipy reference
        assert relative(sol.P[i], ref) < 1e-12


def test_no_stabilizing_solution_is_not_converged() -> None:
    # an integrator (Φ = 1) that the noise does not reach: P = 0 solves the DARE but its
    # closed loop keeps z = 1, so no stabilizing solution exists (Anderson & Moore 1979,
    # ch. 4 — from memory); the doubling must not report convergence
    Phi = np.array([[[1.0, 0.0], [0.0, 0.5]]])
    C = np.array([[[1.0, 1.0]]])
    Q = np.array([[[0.0, 0.0], [0.0, 1.0]]])
    R = np.array([[[0.1]]])
    sol = filter_riccati_discrete(Phi, C, Q, R)
    assert sol.method[0] != "doubling"
