"""Partial trim: solve for the free states and inputs that make an operating point steady.

At an operating point some variables are fixed (grid axes, study-wide values,
start values) and some are free.  :func:`find_operating_point` solves the square system

    der(x_i) = 0        for the states in ``zero_derivatives``
    y_j = target_j      for the outputs in ``output_targets``

for the free states and free inputs, while pinned (integrating) states keep
their value and have their derivative recorded.  The system is solved in
scaled variables (unknowns divided by their nominal values, derivative
residuals by the state's nominal per second, output residuals by the
output's nominal) with Newton's method, Broyden updates and a projected
backtracking line search that keeps every iterate inside the declared
min/max (:mod:`linobs.operating.newton`); optionally a simulation to steady
state (:mod:`linobs.operating.settle`) rescues points Newton cannot reach.

References
----------
Dennis, J. E. & Schnabel, R. B. (1983). Numerical Methods for Unconstrained
Optimization and Nonlinear Equations. Prentice-Hall (SIAM reprint 1996).

Broyden, C. G. (1965). A class of methods for solving nonlinear simultaneous
equations. Mathematics of Computation 19(92), 577-593.

Bertsekas, D. P. (1982). Projected Newton methods for optimization problems
with simple constraints. SIAM Journal on Control and Optimization 20(2), 221-246.

Nocedal, J. & Wright, S. J. (2006). Numerical Optimization, 2nd ed. Springer.

Allgower, E. L. & Georg, K. (1990). Numerical Continuation Methods: An
Introduction. Springer.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import TYPE_CHECKING, Any

import numpy as np

from linobs.errors import EvaluationError, UsageError
from linobs.operating.continuation import Continuation
from linobs.operating.newton import NewtonOutcome, solve_newton_broyden
from linobs.operating.settle import settle
from linobs.operating.trim_problem import TrimProblem
from linobs.operating.trim_spec import TrimResult, TrimSpec

if TYPE_CHECKING:  # pragma: no cover
    from linobs.model.instance import Model

__all__ = ["JACOBIAN_METHODS", "Continuation", "TrimProblem", "find_operating_point"]

JACOBIAN_METHODS = ("auto", "forward", "central", "exact")

_ADVICE = ("try a guess closer to the solution, fallback = 'simulate', more iterations, or check "
           "that the targets are reachable inside the declared bounds")


def find_operating_point(model: "Model", fixed: Mapping[str, float], spec: TrimSpec, *,
                         guess: Mapping[str, float] | None = None, method: str = "auto",
                         continuation: Continuation | None = None) -> TrimResult:
    """Find the operating point that satisfies a partial-trim specification.

    Parameters
    ----------
    model
        A loaded model.  Parameters named in ``fixed`` are set on it (and stay set).
    fixed
        Values of states, inputs and parameters fixed at this point (grid
        axes and study-wide values).  Checked against the declared min/max.
    spec
        What is free and what must hold.  ``free_states == "all"`` means every
        state that is neither pinned nor in ``fixed``; ``zero_derivatives``
        defaults to the free states.  Pinned states keep their value from
        ``fixed`` or their start value; inputs that are not free keep their
        value from ``fixed`` or their start value; parameters come from
        ``fixed`` or keep the model's current values.
    guess
        Starting values of the free states and inputs (continuation: the
        previous solved point's values).  Entries for anything that is not
        free are ignored, so a whole previous :meth:`TrimResult.point` may be
        passed.  Default: the continuation's values, else the model's start
        values.  A guess outside the declared bounds is projected onto them.
    method
        Jacobian method: ``exact`` (the FMU's directional derivatives),
        ``forward`` or ``central`` differences, or ``auto``: exact when the
        FMU provides directional derivatives, else forward differences —
        Newton needs a good Jacobian, not an accurate one, and forward
        differences cost half the evaluations (Dennis & Schnabel 1983, §5.4).
    continuation
        Warm-start state from the previous (neighboring) trims: its
        prediction (the last solution, extrapolated along the path when the
        last two steps line up) serves as the guess when ``guess`` is None,
        and its final Newton matrix replaces the first fresh Jacobian (when
        ``spec.broyden_updates > 0``).  Used only when ``spec.continuation``
        is true; updated in place after a converged trim.

    Returns
    -------
    TrimResult
        ``status`` ``converged`` (every scaled residual ≤ ``spec.tolerance``),
        ``not_converged`` (with the best point found, its residuals, the
        iteration count and a message — never to be used silently), or
        ``skipped`` when ``spec.enabled`` is false (the point as given, from
        one evaluation).  ``method`` is ``simulation`` when the fallback was
        used.  ``evaluations`` counts every FMU call spent, directional
        derivatives included.

    Raises
    ------
    UsageError
        Unknown or misplaced names, a variable both free and fixed or pinned,
        a system that is not square, an unknown ``method``.
    OutOfBoundsError
        A value in ``fixed`` outside its declared range.
    EvaluationError
        The FMU failed at an iterate or while its Jacobian was taken (a failure
        at a line-search trial point only shortens the step).

    Notes
    -----
    Bounds: iterates are *projected* onto the box of declared min/max (each
    trial point is clipped component-wise, and unknowns resting on a bound
    that the step would push further out are held while the others are
    re-solved), so the model is never evaluated outside it.  A solution
    outside the box is reported as not converged.

    The Jacobian comes from :func:`linobs.linear.linearize.linearize`, which
    also returns the residual at the same point; between fresh Jacobians at
    most ``spec.broyden_updates`` Broyden updates are made in a row, and a
    line search that fails on an updated matrix triggers a fresh one.

    The backtracking (Armijo) line search works on ½‖D r‖², r the
    nominal-scaled residual and D the inverse row norms of the latest fresh
    Jacobian (a function scaling in the sense of Dennis & Schnabel 1983,
    §7.1; it changes which steps are accepted, never the Newton step or the
    convergence test, which uses r itself).  With D = I the fast equations
    of a stiff plant (the cell's RC branches) dominate the merit function and
    the full steps its slow ones (the cell temperature) need are rejected.

    The fallback (``spec.fallback == "simulate"``) integrates only the free
    states' equations from the initial guess, with free inputs held at their
    guess, fixed and pinned values held, over ``spec.settle_time`` (default
    ten times the slowest time constant of the free states at the start),
    then runs Newton from the settled point with a fresh iteration budget.

    References
    ----------
    Dennis & Schnabel (1983), Newton's method with backtracking line search
    (§6.3), the perturbed step for ill-conditioned Jacobians (§6.5) and
    function scaling (§7.1).  Broyden (1965), the "good" rank-one update.
    Bertsekas (1982), projection onto simple bounds.  Nocedal & Wright
    (2006), §11.1.  Allgower & Georg (1990), the secant predictor of
    :class:`~linobs.operating.continuation.Continuation`.
    """
    if method not in JACOBIAN_METHODS:
        raise UsageError(f"unknown Jacobian method {method!r} for trim; choose one of "
                         f"{', '.join(JACOBIAN_METHODS)}")
    if method == "exact" and not model.capabilities.directional_derivatives:
        raise UsageError(f"{model.model_name} does not provide directional derivatives; use "
                         f"method 'auto', 'forward' or 'central' for trim")
    spent0 = model.evaluations + model.directional_evaluations
    problem = TrimProblem(model, fixed, spec)
    if not spec.enabled:
        z = problem.z_given
        _, aux = problem.residual(z)
        return problem.result("skipped", "none", z, aux, spent0, 0, 0,
                              "trim disabled: the point as given")
    problem.check_square()
    if method == "auto":
        method = "exact" if model.capabilities.directional_derivatives else "forward"
    warm = continuation if (continuation is not None and spec.continuation) else None
    if guess is None and warm is not None:
        guess = warm.predict(fixed)
    z0 = problem.initial(guess)
    key = problem.key(method)
    matrix = warm.matrix_for(key) if warm is not None and spec.broyden_updates > 0 else None

    def jacobian(z: np.ndarray) -> tuple[np.ndarray, np.ndarray, Any]:
        return problem.jacobian(z, method)

    def solve(z_start: np.ndarray, matrix: tuple[np.ndarray, np.ndarray] | None) -> NewtonOutcome:
        out = solve_newton_broyden(
            problem.residual, jacobian, z_start, problem.lo, problem.hi,
            tolerance=spec.tolerance, max_iterations=spec.max_iterations,
            broyden_updates=spec.broyden_updates, trial_errors=(EvaluationError,), matrix=matrix)
        if out.converged and warm is not None:
            carried = None if out.matrix is None or out.weights is None else (out.matrix, out.weights)
            warm.remember(key, fixed, problem.free_values(out.z), carried)
        return out

    out = solve(z0, matrix)
    iterations, jacobians = out.iterations, out.jacobians
    if out.converged:
        return problem.result("converged", "newton", out.z, out.aux, spent0, iterations, jacobians,
                              f"converged in {iterations} iterations")
    first = problem.failure_text(out)
    if spec.fallback != "simulate":
        return problem.result("not_converged", "newton", out.z, out.aux, spent0, iterations,
                              jacobians, f"{first}; {_ADVICE}")
    if not len(problem.fx):
        return problem.result("not_converged", "newton", out.z, out.aux, spent0, iterations,
                              jacobians, f"{first}; no free states to settle by simulation")
    x0, u0 = problem.unpack(z0)
    settled = settle(model, x0, u0, problem.fx, horizon=spec.settle_time, method=method)
    jacobians += settled.jacobians
    if settled.horizon == 0.0:
        return problem.result("not_converged", "newton", out.z, out.aux, spent0, iterations,
                              jacobians, f"{first}; no simulation: {settled.message}")
    z1 = z0.copy()
    z1[:len(problem.fx)] = settled.x[problem.fx] / problem.z_scale[:len(problem.fx)]
    again = solve(z1, None)
    iterations += again.iterations
    jacobians += again.jacobians
    if again.converged:
        return problem.result("converged", "simulation", again.z, again.aux, spent0, iterations,
                              jacobians, f"Newton alone: {first}; {settled.message}, then "
                                         f"converged in {again.iterations} iterations")
    return problem.result("not_converged", "simulation", again.z, again.aux, spent0, iterations,
                          jacobians, f"Newton alone: {first}; {settled.message}, then "
                                     f"{problem.failure_text(again)}; {_ADVICE}")
