"""Tests of the per-node estimator designs (shared helpers below).

Random systems are seeded; every numerical check names its outside source.
"""

from __future__ import annotations

import numpy as np
import scipy.linalg  # noqa: F401  (loads scipy's BLAS, so that the limit below reaches it)
from scipy.optimize import linear_sum_assignment
from threadpoolctl import threadpool_limits

# tests/conftest.py limits BLAS to one thread before numpy and scipy have loaded their
# BLAS libraries, so its limit reaches none of them; these tests solve many tiny problems,
# where extra BLAS threads only add synchronization (common practice): limit them here.
threadpool_limits(1)


def pole_mismatch(got: np.ndarray, want: np.ndarray) -> float:
    """Largest distance between two pole sets under the optimal one-to-one matching."""
    got, want = np.asarray(got, dtype=complex), np.asarray(want, dtype=complex)
    cost = np.abs(got[:, None] - want[None, :])
    rows, cols = linear_sum_assignment(cost)          # Kuhn (1955), via scipy
    return float(cost[rows, cols].max())


def as_complex(pairs: list[tuple[float, float]]) -> np.ndarray:
    return np.array([complex(re, im) for re, im in pairs])


def random_system(rng: np.random.Generator, n: int, m: int, p: int, *,
                  shift: float = 0.0) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """A random (A, B, C); ``shift`` moves the spectrum (shift > 0: some unstable modes)."""
    A = rng.standard_normal((n, n)) / np.sqrt(n) - (1.0 - shift) * np.eye(n)
    return A, rng.standard_normal((n, m)), rng.standard_normal((p, n))
