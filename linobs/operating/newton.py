"""Newton's method with a backtracking line search, Broyden updates and simple bounds.

Solves a square system r(z) = 0 for z inside the box lo ≤ z ≤ hi.  The
caller provides the residual and a Jacobian (each evaluation also returns an
opaque ``aux`` record, e.g. the full derivative and output vectors, so the
caller never has to evaluate the accepted point again).  Everything here is
in the caller's scaled variables; the solver itself knows nothing of FMUs.

Algorithm (per iteration)
-------------------------
1. Jacobian: a fresh one from the caller at the first iteration, after
   ``broyden_updates`` rank-one updates in a row, and after a line search
   that failed on an updated matrix; otherwise Broyden's ("good") update
   B⁺ = B + ((Δr − B s) sᵀ) / (sᵀ s) of the previous matrix (Broyden 1965),
   in Schubert's (1970) sparse form: each row moves only in its non-zero
   entries, so the zeros of the last fresh Jacobian (structural zeros of the
   model) stay zero, which keeps the approximation close to the Jacobian for
   many more updates on sparse problems.
2. Step: the Newton step p = −B⁻¹ r, or when B is singular or
   ill-conditioned (condition number above 1/√ε) the perturbed step
   p = −(BᵀB + μ I)⁻¹ Bᵀ r with μ = √(n ε) ‖BᵀB‖₁ (Dennis & Schnabel 1983,
   §6.5, Algorithm A6.5.1).  Components resting on a bound that the step
   would push further out are held, and the step is recomputed for the
   others in the least-squares sense (the projected-Newton active set of
   Bertsekas 1982).  When that leaves no step, the projected steepest-descent
   direction of the merit function is searched instead; when that is zero
   too, the point is a bound-constrained minimum and the solver stops.
3. Line search on the merit function f = ½‖D r‖², D a diagonal function
   scaling (Dennis & Schnabel 1983, §7.1: D changes the globalization, never
   the Newton step).  Trial points are *projected* onto the box,
   z(λ) = clip(z + λ p, lo, hi), and accepted when
   f(z(λ)) ≤ f(z) + 10⁻⁴ ∇fᵀ (z(λ) − z) (Armijo's condition on the projected
   displacement, Bertsekas 1982); otherwise λ is reduced by safeguarded
   quadratic interpolation into [0.1 λ, 0.5 λ] (Dennis & Schnabel 1983,
   §6.3.2, Algorithm A6.3.1).  A trial point at which the residual cannot be
   evaluated (one of ``trial_errors``) counts as a failed trial: λ shrinks by
   10× and the search goes on.

Function scaling ``equilibrate=True`` (the default): D_i = 1 / ‖row i of the
fresh Jacobian‖, renewed with every fresh Jacobian, so that each weighted
residual is the distance (in scaled unknowns) to the linearized surface of
its equation.  Without it, an equation with a fast time constant (an RC
branch) dominates ½‖r‖², and the full Newton step that a slow one (a
temperature) needs is rejected again and again although it solves both.

Iterates never leave the box.  Convergence: every component of r (not D r)
at most ``tolerance`` in absolute value.

References
----------
Dennis, J. E. & Schnabel, R. B. (1983). Numerical Methods for Unconstrained
Optimization and Nonlinear Equations. Prentice-Hall (SIAM reprint 1996),
§6.3 (backtracking line search), §6.5 (perturbed step), §7.1 (scaling),
§8.1 (Broyden).

Broyden, C. G. (1965). A class of methods for solving nonlinear simultaneous
equations. Mathematics of Computation 19(92), 577-593.

Schubert, L. K. (1970). Modification of a quasi-Newton method for nonlinear
equations with a sparse Jacobian. Mathematics of Computation 24(109), 27-30.

Bertsekas, D. P. (1982). Projected Newton methods for optimization problems
with simple constraints. SIAM Journal on Control and Optimization 20(2),
221-246.

Nocedal, J. & Wright, S. J. (2006). Numerical Optimization, 2nd ed.
Springer, §3.1 (the sufficient-decrease constant 10⁻⁴), §11.1 (Newton and
Broyden methods for nonlinear equations).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np

EPS = float(np.finfo(float).eps)
#: sufficient-decrease constant (Dennis & Schnabel 1983, §6.3; Nocedal & Wright 2006, §3.1)
ARMIJO = 1e-4
#: condition number above which the perturbed step is used (Dennis & Schnabel 1983, A6.5.1)
CONDITION_LIMIT = 1.0 / math.sqrt(EPS)
#: a trial step that changes no unknown by more than this many ulps is no step at all
STEP_ULPS = 4.0
#: backtracking steps per line search at most (λ then is at most 0.5⁴⁰ ≈ 1e-12)
MAX_BACKTRACKS = 40
#: an updated (not fresh) matrix whose step needs more backtracking than this is refreshed
BROYDEN_MIN_LAMBDA = 0.1

Residual = Callable[[np.ndarray], tuple[np.ndarray, Any]]
Jacobian = Callable[[np.ndarray], tuple[np.ndarray, np.ndarray, Any]]
Reason = Literal["converged", "max_iterations", "line_search", "bounds", "singular"]


@dataclass
class NewtonOutcome:
    """Where the iteration stopped and why.

    ``z``, ``r`` and ``aux`` belong to the last accepted iterate (each
    accepted step decreases the merit function of its Jacobian's scaling).
    """

    z: np.ndarray
    r: np.ndarray
    aux: Any
    reason: Reason
    iterations: int
    jacobians: int
    failed_trials: int
    matrix: np.ndarray | None = None
    weights: np.ndarray | None = None

    @property
    def converged(self) -> bool:
        return self.reason == "converged"


def solve_newton_broyden(residual: Residual, jacobian: Jacobian, z0: np.ndarray,
                         lo: np.ndarray, hi: np.ndarray, *, tolerance: float, max_iterations: int,
                         broyden_updates: int, start: tuple[np.ndarray, Any] | None = None,
                         trial_errors: tuple[type[BaseException], ...] = (),
                         equilibrate: bool = True,
                         matrix: tuple[np.ndarray, np.ndarray] | None = None) -> NewtonOutcome:
    """Solve r(z) = 0 inside lo ≤ z ≤ hi (see the module notes for the algorithm).

    Parameters
    ----------
    residual
        z -> (r, aux).  Exceptions other than ``trial_errors`` propagate; a
        ``trial_errors`` exception at a line-search trial point shortens the step.
    jacobian
        z -> (J, r, aux): the Jacobian and the residual at the same point.
    z0
        Starting point (projected onto the box first).
    lo, hi
        Bounds (``-inf`` / ``inf`` where there is none).
    tolerance
        Converged when max |r_i| ≤ tolerance.
    max_iterations
        Number of steps (each a Newton or Broyden step with its line search).
    broyden_updates
        Rank-one updates allowed between fresh Jacobians (0: pure Newton).
    start
        (r, aux) already known at ``z0`` (saves one evaluation).
    trial_errors
        Exception types that mark a trial point as not evaluable.
    equilibrate
        Weight the merit function by the inverse row norms of each fresh
        Jacobian (else D = I: the line search works on ½‖r‖² itself).
    matrix
        (B, D): a Jacobian approximation and merit weights to start from (e.g.
        the final matrix of a neighboring solve); it is treated as an updated
        matrix, i.e. refreshed when its line search fails.

    References
    ----------
    Dennis & Schnabel (1983); Broyden (1965); Bertsekas (1982); Nocedal &
    Wright (2006) — see the module docstring.
    """
    z = np.minimum(np.maximum(np.asarray(z0, dtype=float), lo), hi)
    if start is None or not np.array_equal(z, z0):
        r, aux = residual(z)
    else:
        r, aux = start
    B: np.ndarray | None = None
    D = np.ones(len(r))
    if matrix is not None and matrix[0].shape == (len(r), len(z)):
        B, D = matrix[0].copy(), matrix[1].copy()
    last = B
    pattern = None if B is None else B != 0.0
    fresh = False
    updates = 0
    iterations = jacobians = failed = 0
    reason: Reason = "max_iterations"
    while True:
        if _amax(r) <= tolerance:
            reason = "converged"
            break
        if iterations >= max_iterations:
            reason = "max_iterations"
            break
        if B is None:
            B, r, aux = jacobian(z)
            jacobians += 1
            pattern = B != 0.0
            fresh, updates = True, 0
            if equilibrate:
                D = _row_weights(B)
            if _amax(r) <= tolerance:
                reason = "converged"
                break
        iterations += 1
        p = hold_blocked(B, r, newton_step(B, r), z, lo, hi, D)
        if p is None:  # Newton is blocked by the bounds: the projected steepest descent of ½‖D r‖²
            p = -(B.T @ (D * D * r))
            p[((z <= lo) & (p < 0.0)) | ((z >= hi) & (p > 0.0))] = 0.0
            if not np.any(p):
                if not fresh:
                    B = None  # perhaps only the updated matrix is wrong: refresh first
                    continue
                reason = "bounds"
                break
        found = _line_search(residual, z, r, B, D, p, lo, hi, fresh, trial_errors)
        failed += found.failed
        if found.z is None:
            if fresh:
                reason = "singular" if not np.any(B) else "line_search"
                break
            B = None  # stale matrix: refresh and try again
            continue
        s = found.z - z
        if float(s @ s) > 0.0:
            B = _secant_update(B, s, found.r - r, pattern)
        last = B
        if updates < broyden_updates:
            updates += 1
            fresh = False
        else:
            B = None  # a fresh Jacobian next time
        z, r, aux = found.z, found.r, found.aux
    return NewtonOutcome(z=z, r=r, aux=aux, reason=reason, iterations=iterations,
                         jacobians=jacobians, failed_trials=failed,
                         matrix=B if B is not None else last, weights=D)


def _secant_update(B: np.ndarray, s: np.ndarray, y: np.ndarray, pattern: np.ndarray | None
                   ) -> np.ndarray:
    """Broyden's rank-one update, or Schubert's sparse form that keeps the structural zeros.

    Row i moves by (yᵢ − Bᵢ s)·s̄ᵢ / (s̄ᵢ·s̄ᵢ), where s̄ᵢ is s restricted to the row's
    non-zeros; with a full pattern this is the "good" Broyden update.

    References
    ----------
    Broyden, C. G. (1965). A class of methods for solving nonlinear simultaneous
    equations. Mathematics of Computation 19, 577-593.
    Schubert, L. K. (1970). Modification of a quasi-Newton method for nonlinear
    equations with a sparse Jacobian. Mathematics of Computation 24, 27-30.
    """
    defect = y - B @ s
    if pattern is None or pattern.all():
        return B + defect[:, None] * (s / float(s @ s))
    S = np.where(pattern, s[None, :], 0.0)
    norms = np.einsum("ij,ij->i", S, S)
    ok = norms > 0.0
    B = B.copy()
    B[ok] += defect[ok, None] * S[ok] / norms[ok, None]
    return B


def _amax(v: np.ndarray) -> float:
    """max |v_i| (0 for an empty vector)."""
    return float(np.abs(v).max()) if v.size else 0.0


def _row_weights(B: np.ndarray) -> np.ndarray:
    """1 / ‖row‖ of a fresh Jacobian; rows that are zero get the weight of the largest row."""
    norms = np.sqrt(np.einsum("ij,ij->i", B, B))
    top = float(np.max(norms, initial=0.0))
    if top == 0.0:
        return np.ones(len(norms))
    return 1.0 / np.where(norms > EPS * top, norms, top)


def newton_step(B: np.ndarray, r: np.ndarray) -> np.ndarray:
    """−B⁻¹ r, or the perturbed step when B is singular or ill-conditioned.

    Ill-conditioned means κ₁(B) = ‖B‖₁ ‖B⁻¹‖₁ > 1/√ε.

    References
    ----------
    Dennis & Schnabel (1983), §6.5, Algorithm A6.5.1 (the condition test and
    the perturbation μ = √(n ε) ‖BᵀB‖₁ of the normal equations).
    """
    n = B.shape[0]
    if n == 0:
        return np.zeros(0)
    try:
        inverse = np.linalg.inv(B)
    except np.linalg.LinAlgError:
        inverse = None
    if inverse is not None and np.isfinite(inverse).all():
        kappa = np.abs(B).sum(axis=0).max() * np.abs(inverse).sum(axis=0).max()
        if kappa <= CONDITION_LIMIT:
            return -(inverse @ r)
    H = B.T @ B
    mu = math.sqrt(n * EPS) * float(np.abs(H).sum(axis=0).max())
    if mu == 0.0:
        return np.zeros(n)
    return -np.linalg.solve(H + mu * np.eye(n), B.T @ r)


def hold_blocked(B: np.ndarray, r: np.ndarray, p: np.ndarray, z: np.ndarray, lo: np.ndarray,
                 hi: np.ndarray, D: np.ndarray | None = None) -> np.ndarray | None:
    """Hold components that rest on a bound and would be pushed out; re-solve for the rest.

    The others' step minimizes ‖D (B p + r)‖ (D: the merit function's row
    weights, identity by default), so it is a descent direction of ½‖D r‖².
    Returns the (possibly recomputed) step, or None when every component is
    held or that step is zero.

    References
    ----------
    Bertsekas (1982), §2 (the active set of a projected Newton method).
    """
    blocked = ((z <= lo) & (p < 0.0)) | ((z >= hi) & (p > 0.0))
    if not blocked.any():
        return p
    W = np.ones(len(r)) if D is None else D
    for _ in range(len(z)):
        free = ~blocked
        if not free.any():
            return None
        p = np.zeros_like(p)
        p[free] = -np.linalg.lstsq(W[:, None] * B[:, free], W * r, rcond=None)[0]
        more = ((z <= lo) & (p < 0.0)) | ((z >= hi) & (p > 0.0))
        if not more.any():
            break
        blocked |= more
    if not np.any(p):
        return None
    return p


@dataclass
class _Found:
    z: np.ndarray | None
    r: np.ndarray
    aux: Any
    failed: int


def _line_search(residual: Residual, z: np.ndarray, r: np.ndarray, B: np.ndarray, D: np.ndarray,
                 p: np.ndarray, lo: np.ndarray, hi: np.ndarray, fresh: bool,
                 trial_errors: tuple[type[BaseException], ...]) -> _Found:
    """Backtracking on ½‖D r‖² along the projected path; ``z`` None when it fails.

    References
    ----------
    Dennis & Schnabel (1983), Algorithm A6.3.1 (quadratic backtracking,
    safeguarded to [0.1 λ, 0.5 λ]); Bertsekas (1982) (Armijo on the projected path).
    """
    Dr = D * r
    f = 0.5 * float(Dr @ Dr)
    g = B.T @ (D * Dr)  # gradient of ½‖D r‖² with the model Jacobian B
    slope = float(g @ p)
    failed = 0
    if not slope < 0.0:
        return _Found(None, r, None, failed)
    lam = 1.0
    least = STEP_ULPS * EPS * np.abs(z)
    floor = 0.0 if fresh else BROYDEN_MIN_LAMBDA
    for _ in range(MAX_BACKTRACKS):
        if lam < floor:
            break
        zt = np.minimum(np.maximum(z + lam * p, lo), hi)
        d = zt - z
        if np.all(np.abs(d) <= least):
            break
        try:
            rt, auxt = residual(zt)
        except trial_errors:
            failed += 1
            lam *= 0.1
            continue
        Drt = D * rt
        ft = 0.5 * float(Drt @ Drt)
        predicted = float(g @ d)
        if predicted < 0.0 and ft <= f + ARMIJO * predicted:
            return _Found(zt, rt, auxt, failed)
        curvature = ft - f - slope * lam
        lam_q = -slope * lam * lam / (2.0 * curvature) if curvature > 0.0 else 0.1 * lam
        lam = min(max(lam_q, 0.1 * lam), 0.5 * lam)
    return _Found(None, r, None, failed)
