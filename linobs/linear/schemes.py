"""Finite-difference formulas, step sizes and error models.

References
----------
Dennis, J. E. & Schnabel, R. B. (1983). Numerical Methods for Unconstrained
Optimization and Nonlinear Equations. Prentice-Hall (SIAM reprint 1996).

Fornberg, B. (1988). Generation of finite difference formulas on arbitrarily
spaced grids. Mathematics of Computation 51(184), 699-706 (the one-sided
second-order weights).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

EPS = float(np.finfo(float).eps)


@dataclass(frozen=True)
class Scheme:
    """A difference formula J ≈ (w0·F(x) + Σ w_k·F(x + m_k·h)) / h.

    ``curvature`` weights (c0, c_k) give the second difference
    f2 ≈ (c0·F(x) + Σ c_k·F(x + m_k·h)) / h² where the stencil allows it, and
    ``truncation`` is the coefficient t of the leading error term t·h²·|f3|
    (f2, f3: second and third derivative along the column).
    """

    name: str
    base_weight: float
    offsets: tuple[tuple[int, float], ...]
    order: int
    curvature: tuple[float, tuple[float, ...]] | None = None
    truncation: float = 0.0


SCHEMES = {
    "forward": Scheme("forward", -1.0, ((1, 1.0),), 1),
    "backward": Scheme("backward", 1.0, ((-1, -1.0),), 1),
    "central": Scheme("central", 0.0, ((1, 0.5), (-1, -0.5)), 2, (-2.0, (1.0, 1.0)), 1 / 6),
    "one-sided+": Scheme("one-sided+", -1.5, ((1, 2.0), (2, -0.5)), 2, (1.0, (-2.0, 1.0)), 1 / 3),
    "one-sided-": Scheme("one-sided-", 1.5, ((-1, -2.0), (-2, 0.5)), 2, (1.0, (-2.0, 1.0)), 1 / 3),
}
SCHEME_TEXT = {
    "forward": "forward", "backward": "backward", "central": "central",
    "one-sided+": "one-sided forward (second order)", "one-sided-": "one-sided backward (second order)",
}
# the scheme to use when the given side (+1 or -1) of a scheme must be avoided
AVOID = {
    ("forward", 1): "backward", ("backward", -1): "forward",
    ("central", 1): "one-sided-", ("central", -1): "one-sided+",
    ("one-sided+", 1): "one-sided-", ("one-sided-", -1): "one-sided+",
}


def step_sizes(values: np.ndarray, nominal: np.ndarray, order: int,
               relative_step: float | None = None) -> np.ndarray:
    """Step per variable: √ε (order 1) or ∛ε (order 2) times max(|value|, nominal)."""
    rel = relative_step if relative_step is not None else (EPS ** 0.5 if order == 1 else EPS ** (1 / 3))
    h = rel * np.maximum(np.abs(values), np.abs(nominal))
    h = np.where(h > 0, h, rel)
    return (values + h) - values  # exactly representable steps


def fits(value: float, h: float, lo: float | None, hi: float | None, scheme: Scheme) -> bool:
    for m, _ in scheme.offsets:
        v = value + m * h
        if (lo is not None and v < lo) or (hi is not None and v > hi):
            return False
    return True


def truncation(scheme: Scheme, d: np.ndarray, d2: np.ndarray, h: float) -> np.ndarray:
    """Estimated truncation error of one column's differences.

    First order: the step balances truncation and rounding when the function
    varies on the scale of the nominal value (Dennis & Schnabel 1983, §5.4), so
    the allowance is ½√ε·|J|.  Second order: t·h²·|f3| with the third
    derivative estimated as f2²/f1 from the stencil's own second difference
    (exact for exponential behavior), never more than the first-order bound h·|f2|.
    """
    if scheme.curvature is None:
        return 0.5 * EPS ** 0.5 * np.abs(d)
    with np.errstate(divide="ignore", invalid="ignore"):
        third = np.where(d != 0, d2 * d2 / np.abs(d), np.inf)
    return np.minimum(scheme.truncation * h * h * third, h * np.abs(d2))
