"""Warm starts along a path of neighboring trims: the last solutions and Newton matrix.

A sweep that visits grid points in serpentine order solves a sequence of
nearby problems.  :class:`Continuation` carries from one to the next

* the free values of the last converged points, with a *predictor*: an
  affine least-squares fit through the nearest solved points, evaluated at
  the new point (on a straight run this is the secant predictor; after a
  turn of the walk it also uses the row solved before);
* the quasi-Newton matrix Newton ended with (a Jacobian approximation at
  the last solution), which then replaces the first fresh Jacobian.

Both only change where Newton starts; every point is still solved to the
trim tolerance.

References
----------
Allgower, E. L. & Georg, K. (1990). Numerical Continuation Methods: An
Introduction. Springer, §2.2-2.3 (predictor-corrector methods; the secant
predictor).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np

#: solved points kept for the predictor (enough to reach the previous row of a serpentine walk)
HISTORY = 64


class Continuation:
    """Warm-start state carried from one trim to the next along a path of neighboring points.

    The caller owns it (one per path, e.g. per serpentine walk of a grid
    chunk); :func:`linobs.operating.trim.find_operating_point` asks it for a guess and, after
    a converged trim, stores the solution in it.  A stored matrix is used only
    by a trim of the same structure (model, unknowns, equations, Jacobian
    method); one that does not suit the new point costs a failed line search
    and a fresh Jacobian.
    """

    __slots__ = ("_history", "_key", "_matrix")

    def __init__(self) -> None:
        # (names of the fixed values, their values, the free values) of the last two solutions
        self._history: list[tuple[tuple[str, ...], np.ndarray, dict[str, float]]] = []
        self._key: tuple[Any, ...] | None = None
        self._matrix: tuple[np.ndarray, np.ndarray] | None = None

    @property
    def values(self) -> dict[str, float]:
        """Free values of the last converged point (empty before the first)."""
        return dict(self._history[-1][2]) if self._history else {}

    def reset(self) -> None:
        """Forget everything (e.g. before jumping to a distant point)."""
        self._history, self._key, self._matrix = [], None, None

    def predict(self, fixed: Mapping[str, float]) -> dict[str, float] | None:
        """A guess for the point with these fixed values (None before the first solution).

        An affine fit z ≈ a + G·(f − f_new) through the nearest solved points
        (distances scaled by the spread of each fixed value), evaluated at the
        new point: linear extrapolation from the solved neighbors, which on a
        straight run of a serpentine walk is the secant predictor and after a
        turn also uses the row solved before.  With one solved point, that point.
        """
        if not self._history:
            return None
        names, f1, z1 = self._history[-1]
        if len(self._history) < 2 or tuple(sorted(fixed)) != names:
            return dict(z1)
        keys = list(z1)
        f = np.array([float(fixed[n]) for n in names])
        F = np.array([h[1] for h in self._history])
        Z = np.array([[h[2][k] for k in keys] for h in self._history])
        spread = F.max(axis=0) - F.min(axis=0)
        varying = spread > 0.0
        if not varying.any():
            return dict(z1)
        dF = (F[:, varying] - f[varying]) / spread[varying]
        dist = np.sqrt(np.einsum("ij,ij->i", dF, dF))
        nearest = np.argsort(dist, kind="stable")[: 2 * int(varying.sum()) + 2]
        design = np.hstack([np.ones((len(nearest), 1)), dF[nearest]])
        coef, *_ = np.linalg.lstsq(design, Z[nearest], rcond=1e-8)
        guess = coef[0]
        if not np.all(np.isfinite(guess)):
            return dict(z1)
        return dict(zip(keys, map(float, guess)))

    def matrix_for(self, key: tuple[Any, ...]) -> tuple[np.ndarray, np.ndarray] | None:
        """The stored Newton matrix and merit weights if they belong to a problem like ``key``."""
        return self._matrix if key == self._key else None

    def remember(self, key: tuple[Any, ...], fixed: Mapping[str, float], values: dict[str, float],
                 matrix: tuple[np.ndarray, np.ndarray] | None) -> None:
        """Store a converged solution (free values), its fixed values and its Newton matrix."""
        names = tuple(sorted(fixed))
        entry = (names, np.array([float(fixed[n]) for n in names]), dict(values))
        if key != self._key or (self._history and self._history[-1][0] != names):
            self._history = []
        self._history = [*self._history[-(HISTORY - 1):], entry]
        self._key, self._matrix = key, matrix
