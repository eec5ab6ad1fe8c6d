"""Settle a model to steady state by simulation: the fallback of a trim that Newton cannot solve.

Only the chosen (free) states are integrated; every other state and every
input is held at its given value.  Integration uses the variable-order BDF
method of scipy's ``solve_ivp`` with the Jacobian from the linearizer.
States are kept inside their declared min/max by evaluating the model at
the clipped state (a state that runs into its bound stays there).

The default horizon is ten times the slowest time constant of the free
states, estimated from the eigenvalues λ of their Jacobian at the start
point, τ = 1 / |Re λ| (a first-order mode has decayed to e⁻¹⁰ ≈ 5·10⁻⁵ of
its initial deviation after 10 τ).

References
----------
Shampine, L. F. & Reichelt, M. W. (1997). The MATLAB ODE suite. SIAM
Journal on Scientific Computing 18(1), 1-22 (the NDF/BDF formulas behind
scipy's ``BDF``).

Virtanen, P. et al. (2020). SciPy 1.0: fundamental algorithms for
scientific computing in Python. Nature Methods 17, 261-272.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
from scipy.integrate import solve_ivp

from linobs.linear.linearize import linearize

if TYPE_CHECKING:  # pragma: no cover
    from linobs.model.instance import Model

#: horizon in multiples of the slowest time constant
HORIZON_FACTOR = 10.0


@dataclass
class SettleOutcome:
    """The settled states (all of them) and how the simulation went."""

    x: np.ndarray
    horizon: float
    success: bool
    jacobians: int
    message: str


def slowest_time_constant(A_free: np.ndarray) -> float | None:
    """The largest 1/|Re λ| over the eigenvalues of ``A_free`` (None: no decaying or growing mode).

    Eigenvalues whose real part is below 10⁻¹² of the largest magnitude are
    taken as pure integrators or oscillators and ignored.
    """
    if A_free.size == 0:
        return None
    lam = np.linalg.eigvals(A_free)
    if not np.all(np.isfinite(lam)):
        return None
    re = np.abs(lam.real)
    scale = float(np.max(np.abs(lam), initial=0.0))
    keep = re > 1e-12 * scale
    if not keep.any():
        return None
    return float(np.max(1.0 / re[keep]))


def settle(model: "Model", x: np.ndarray, u: np.ndarray, free: np.ndarray, *,
           horizon: float | None = None, method: str = "auto") -> SettleOutcome:
    """Integrate the free states' ODEs from (x, u) over ``horizon`` seconds.

    Parameters
    ----------
    model
        The loaded model (parameters as they should be).
    x, u
        Start states and the inputs held during the simulation.
    free
        Indices of the states that move; the others are held constant.
    horizon
        Simulated time [s]; default ten times the slowest time constant of the
        free states at the start point.
    method
        Jacobian method passed to the linearizer.

    Returns
    -------
    SettleOutcome
        ``success`` False (with a message) when there is no time scale to
        settle over or the integrator stopped early.

    References
    ----------
    Shampine & Reichelt (1997) for the BDF/NDF formulas; Virtanen et al. (2020).
    """
    x = np.asarray(x, dtype=float).copy()
    u = np.asarray(u, dtype=float)
    free = np.asarray(free, dtype=int)
    states = model.catalogue.states
    lo = np.array([-np.inf if states[i].min is None else states[i].min for i in free])
    hi = np.array([np.inf if states[i].max is None else states[i].max for i in free])
    names = model.state_names + model.input_names
    jacobians = 0

    def jac_at(z: np.ndarray) -> np.ndarray:
        nonlocal jacobians
        x[free] = np.clip(z, lo, hi)
        point = dict(zip(names, [*x.tolist(), *u.tolist()]))
        lm = linearize(model, point, method=method, allow_outside_bounds=True, refine=False)
        jacobians += 1
        return lm.A[np.ix_(free, free)]

    z0 = x[free].copy()
    if horizon is None:
        tau = slowest_time_constant(jac_at(z0))
        if tau is None:
            return SettleOutcome(x=x, horizon=0.0, success=False, jacobians=jacobians, message=(
                "the free states' Jacobian has no mode that decays or grows at the start point, so "
                "there is no time scale to settle over; give settle_time"))
        horizon = HORIZON_FACTOR * tau
    evaluate = model.evaluate

    def rhs(t: float, z: np.ndarray) -> np.ndarray:
        x[free] = np.clip(z, lo, hi)
        return evaluate(x, u)[0][free]

    nominal = model.x_nominal[free]
    sol = solve_ivp(rhs, (0.0, float(horizon)), z0, method="BDF", jac=lambda t, z: jac_at(z),
                    rtol=1e-6, atol=1e-8 * nominal)
    end = sol.y[:, -1] if sol.y.size else z0
    x[free] = np.clip(end, lo, hi)
    ok = sol.status == 0
    text = (f"settled over {horizon:.4g} s" if ok else
            f"the simulation stopped at t = {sol.t[-1] if sol.t.size else 0.0:.4g} s of "
            f"{horizon:.4g} s: {sol.message}")
    return SettleOutcome(x=x, horizon=float(horizon), success=ok, jacobians=jacobians, message=text)
