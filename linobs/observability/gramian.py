"""Observability Gramians: infinite-horizon (Lyapunov) and finite-horizon (Van Loan).

The observability Gramian W(T) = ∫₀ᵀ e^{Aᵀt} CᵀC e^{At} dt measures the
output energy ∫‖y‖² dt = x₀ᵀ W x₀ of a free response from x₀: its small
eigenvalues are the directions that are hard to see, its eigenvector of the
smallest eigenvalue is the least observable direction.

* A stable (every Re λ below the stability threshold): T = ∞ and W solves
  the Lyapunov equation AᵀW + WA + CᵀC = 0 (Bartels–Stewart, through scipy).
* Otherwise the integral is finite only for finite T; it is computed by
  one matrix exponential (Van Loan 1978, Theorem 1) on a short step,

      exp([[−Aᵀ, CᵀC], [0, A]] t) = [[·, G], [0, e^{At}]],   W(t) = (e^{At})ᵀ G,

  followed by horizon doubling W(2t) = W(t) + e^{Aᵀt} W(t) e^{At} (see
  :func:`finite_gramian`).

Default horizon (:func:`default_horizon`): 5× the slowest stable time
constant, 5 · max(1 / |Re λ|) over the stable modes (five time constants:
the free response of every stable mode has decayed below 1 % of its start).
When no mode is stable it is 5× the slowest natural time scale,
5 · max(1 / |λ|) over the non-zero eigenvalues; when every eigenvalue is zero
(chains of integrators) 5 / ‖A‖₂; and 1 time unit when A = 0.

Because W is linear in CᵀC, the Gramian with an added output row c is
W + W_c with W_c the Gramian of c alone (used by the sensor advice).

References
----------
C. F. Van Loan (1978), "Computing integrals involving the matrix
exponential", IEEE Trans. Automatic Control 23(3):395-404.
R. H. Bartels and G. W. Stewart (1972), "Solution of the matrix equation
AX + XB = C", Communications of the ACM 15(9):820-826.
T. Kailath (1980), "Linear Systems", Prentice-Hall, section 2.3 (Gramians).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Literal

import numpy as np
import scipy.linalg

from linobs.observability.directions import signed_direction
from linobs.observability.report import GramianInfo

GramianKind = Literal["infinite", "finite"]

TIME_CONSTANTS = 5.0
"""The default horizon in slowest time constants."""


def default_horizon(eigenvalues: np.ndarray, stable_threshold: float, norm_a: float) -> float:
    """The default finite horizon (see the module notes)."""
    eigenvalues = np.asarray(eigenvalues, dtype=complex)
    stable = eigenvalues[eigenvalues.real < -stable_threshold]
    if stable.size:
        return float(TIME_CONSTANTS * np.max(1.0 / np.abs(stable.real)))
    nonzero = np.abs(eigenvalues)
    nonzero = nonzero[nonzero > stable_threshold]
    if nonzero.size:
        return float(TIME_CONSTANTS * np.max(1.0 / nonzero))
    if norm_a > 0.0:
        return float(TIME_CONSTANTS / norm_a)
    return 1.0


def infinite_gramian(A: np.ndarray, C: np.ndarray) -> np.ndarray:
    """W solving AᵀW + WA + CᵀC = 0 (A must be stable)."""
    W = scipy.linalg.solve_continuous_lyapunov(A.T, -(C.T @ C))
    return 0.5 * (W + W.T)


def finite_gramian(A: np.ndarray, C: np.ndarray, horizon: float) -> np.ndarray:
    """W(T) = ∫₀ᵀ e^{Aᵀt} CᵀC e^{At} dt: Van Loan's block exponential on T/2^k, then doubling.

    The block exponential alone is unusable when ‖A‖T is large: its
    upper-left block e^{−AᵀT} grows like e^{|λ|T} for fast stable modes and
    W = (e^{AT})ᵀ G cancels catastrophically.  It is therefore applied on a
    short step t₀ = T / 2^k with ‖A‖₁ t₀ ≤ 1/2, and the horizon is doubled k
    times with the semigroup identity

        W(2t) = W(t) + e^{Aᵀt} W(t) e^{At},   e^{A·2t} = (e^{At})²,

    which adds positive semidefinite terms only.
    """
    n = A.shape[0]
    norm = float(np.linalg.norm(A, 1)) * abs(horizon)
    k = int(min(max(np.ceil(np.log2(norm / 0.5)), 0), 200)) if norm > 0.5 else 0
    step = horizon / 2.0 ** k
    block = np.zeros((2 * n, 2 * n))
    block[:n, :n] = -A.T
    block[:n, n:] = C.T @ C
    block[n:, n:] = A
    E = scipy.linalg.expm(block * step)
    phi = E[n:, n:]
    W = phi.T @ E[:n, n:]
    with np.errstate(over="ignore", invalid="ignore"):
        for _ in range(k):
            W = W + phi.T @ W @ phi
            phi = phi @ phi
    return 0.5 * (W + W.T)


def observability_gramian(A: np.ndarray, C: np.ndarray, eigenvalues: np.ndarray,
                          stable_threshold: float, horizon: float | None = None,
                          ) -> tuple[np.ndarray, GramianKind, float | None]:
    """The Gramian the analysis reports: infinite when A is stable, else finite.

    Parameters
    ----------
    A, C : the (scaled) pair
    eigenvalues : eigenvalues of A
    stable_threshold : a mode is stable when Re λ < −stable_threshold
    horizon : the finite horizon when A is not stable (default: :func:`default_horizon`)

    Returns
    -------
    (W, kind, horizon) with horizon None for the infinite Gramian.
    """
    eigenvalues = np.asarray(eigenvalues, dtype=complex)
    if A.shape[0] == 0:
        return np.zeros((0, 0)), "infinite", None
    if np.all(eigenvalues.real < -stable_threshold):
        return infinite_gramian(A, C), "infinite", None
    T = horizon if horizon is not None else default_horizon(
        eigenvalues, stable_threshold, float(np.linalg.norm(A, 2)))
    return finite_gramian(A, C, T), "finite", float(T)


def gramian_of(A: np.ndarray, C: np.ndarray, kind: GramianKind, horizon: float | None) -> np.ndarray:
    """The Gramian of the same kind and horizon for another output matrix."""
    return infinite_gramian(A, C) if kind == "infinite" else finite_gramian(A, C, float(horizon))


def gramian_info(W: np.ndarray, kind: GramianKind, horizon: float | None,
                 state_names: Sequence[str]) -> GramianInfo:
    """Eigenvalues (ascending), condition number and least observable direction of W."""
    if W.size == 0:
        return GramianInfo(kind=kind, horizon=horizon, eigenvalues=[], condition=1.0,
                           least_observable=signed_direction(np.zeros(0), state_names))
    if not np.all(np.isfinite(W)):
        return GramianInfo(kind=kind, horizon=horizon, eigenvalues=[float("inf")] * W.shape[0],
                           condition=float("inf"),
                           least_observable=signed_direction(np.zeros(W.shape[0]), state_names))
    values, vectors = np.linalg.eigh(W)
    top = float(values[-1])
    low = float(values[0])
    condition = top / low if low > 0.0 else float("inf")
    return GramianInfo(kind=kind, horizon=horizon, eigenvalues=[float(v) for v in values],
                       condition=condition,
                       least_observable=signed_direction(vectors[:, 0], state_names))
