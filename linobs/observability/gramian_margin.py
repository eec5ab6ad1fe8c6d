"""The Gramian margin: what a finite-horizon observability Gramian says, and the verdict.

For a finite-horizon observability Gramian W of the scaled system (linear
or empirical) with eigenvalues λ_1 ≤ … ≤ λ_n, the measure is the smallest
eigenvalue relative to the largest, r = λ_1 / λ_n, and the *Gramian margin*
m = √r: W = ∫ Ψᵀ Ψ dt is the Gram matrix of the map Ψ from initial state to
output trajectory, so m is that map's smallest singular value relative to
its largest — a relative singular value on the same scale as the PBH
margin, judged with the same thresholds.

Unobservable directions (margin at or below the tolerance) count as
detectable when the scaled transition map Φ(T) restricted to them has
spectral radius below :data:`DECAY_LIMIT`: they decay over the horizon.

References
----------
Krener, A. J. & Ide, K. (2009). Measures of unobservability. Proceedings of
the 48th IEEE Conference on Decision and Control, 6401-6406.

Kailath, T. (1980). Linear Systems. Prentice-Hall, section 2.3 (Gramians).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from pydantic import BaseModel, ConfigDict, Field

from linobs.observability.directions import signed_direction
from linobs.observability.report import Direction, Verdict
from linobs.types import Matrix

__all__ = ["DECAY_LIMIT", "GramianMeasure", "gramian_measure", "margin_verdict"]

#: Φ(T) restricted to the unobservable directions must shrink them below this to count as decaying.
DECAY_LIMIT = 0.999


class GramianMeasure(BaseModel):
    """A finite-horizon observability Gramian of the scaled system and the numbers read from it."""

    model_config = ConfigDict(arbitrary_types_allowed=True, ser_json_inf_nan="strings")

    gramian: Matrix = Field(description="W in scaled coordinates (x̃ = x/x_nom, ỹ = y/y_nom)")
    eigenvalues: list[float] = Field(description="eigenvalues of W, ascending")
    eigenvectors: Matrix = Field(description="orthonormal eigenvectors of W (columns), same order")
    condition: float = Field(description="λ_max / λ_min (inf when λ_min ≤ 0)")
    relative_min_eigenvalue: float = Field(description="r = max(λ_min, 0) / λ_max (0 when W = 0)")
    margin: float = Field(description="Gramian margin √r, a relative singular value")
    least_observable: Direction = Field(description="eigenvector of λ_min, scaled coordinates")
    transition: Matrix = Field(description="scaled state transition Φ(T) over the horizon")
    resolution: float = Field(description="margin below which the computation cannot resolve "
                                          "a direction from zero (numerical noise floor)")


def gramian_measure(W: np.ndarray, transition: np.ndarray, states: Sequence[str], *,
                    resolution: float = 0.0) -> GramianMeasure:
    """Eigen-decomposition, condition, margin and least observable direction of a Gramian W.

    Parameters
    ----------
    W : ndarray, shape (n, n)
        Symmetric positive semi-definite Gramian (scaled coordinates).
    transition : ndarray, shape (n, n)
        Scaled transition map Φ(T) over the same horizon (for detectability).
    states : sequence of str
        State names, for the least observable direction.
    resolution : float
        Margin below which the computation of W cannot tell a direction from zero.
    """
    W = 0.5 * (np.asarray(W, dtype=float) + np.asarray(W, dtype=float).T)
    lam, vec = np.linalg.eigh(W)
    top = float(lam[-1]) if lam.size else 0.0
    low = float(lam[0]) if lam.size else 0.0
    rel = max(low, 0.0) / top if top > 0 else 0.0
    return GramianMeasure(
        gramian=W, eigenvalues=[float(x) for x in lam], eigenvectors=vec,
        condition=top / low if low > 0 else float("inf"), relative_min_eigenvalue=rel,
        margin=float(np.sqrt(rel)),
        least_observable=signed_direction(vec[:, 0] if lam.size else np.zeros(0), states),
        transition=np.asarray(transition, dtype=float), resolution=float(resolution))


def margin_verdict(gramian: GramianMeasure, *, weak_threshold: float,
                   unobservable_tolerance: float | None = None) -> Verdict:
    """The verdict of a Gramian margin, with the thresholds of the linear analysis.

    ``unobservable`` / ``unobservable-detectable`` when the margin is at or
    below the tolerance (never below the Gramian's own resolution), the
    latter when the unobservable directions decay over the horizon; ``weak``
    below ``weak_threshold``; ``observable`` otherwise.

    Parameters
    ----------
    gramian : GramianMeasure
        A linear or empirical finite-horizon Gramian and its transition map.
    weak_threshold : float
        Margin below which the point is ``weak``.
    unobservable_tolerance : float, optional
        Margin at or below which a direction is unobservable; default
        100·n·ε, as in the linear analysis.
    """
    n = len(gramian.eigenvalues)
    tol = 100 * max(n, 1) * np.finfo(float).eps if unobservable_tolerance is None \
        else unobservable_tolerance
    tol = max(tol, gramian.resolution)
    if gramian.margin <= tol:
        return "unobservable-detectable" if _decays(gramian, tol) else "unobservable"
    return "weak" if gramian.margin < weak_threshold else "observable"


def _decays(g: GramianMeasure, tol: float) -> bool:
    """Whether Φ(T) shrinks every direction whose margin is at or below ``tol``."""
    lam = np.asarray(g.eigenvalues)
    top = lam[-1] if lam.size else 0.0
    if top <= 0:
        weak = np.ones(lam.size, dtype=bool)
    else:
        weak = np.sqrt(np.clip(lam, 0, None) / top) <= tol
    V = g.eigenvectors[:, weak]
    if V.shape[1] == 0:
        return True
    radius = np.max(np.abs(np.linalg.eigvals(V.T @ g.transition @ V)))
    return bool(radius < DECAY_LIMIT)
