"""Uniform chains: verdicts that stay right where the observability-matrix rank fails.

Analytic facts used below (derivations; models in tests/observability/models.py):

* Measured at an end node, a uniform chain is observable.  The ladder matrix
  L is irreducible tridiagonal, so with e₀ the Krylov vectors e₀, Le₀, L²e₀, …
  reach one node further at each power and span ℝⁿ (Kalman rank condition).
  For the mass-spring chain q̈ = −Lq with y = q₀, PBH at s with s² = −μ
  (μ an eigenvalue of L) reduces to (L, e₀), observable as just shown.
* Measured at the middle node of a chain with odd n, exactly the
  antisymmetric modes are unobservable.  The reflection R (node j <-> n−1−j)
  commutes with L, and L has distinct eigenvalues, so every eigenvector is
  symmetric (Rv = v) or antisymmetric (Rv = −v).  R fixes the middle node m,
  so an antisymmetric v has v[m] = −v[m] = 0: all ⌊n/2⌋ antisymmetric modes
  (one per pair j <-> n−1−j) are invisible.  On the symmetric subspace the
  chain folds into a path of (n+1)/2 nodes measured at its end node m, again
  irreducible tridiagonal, hence observable.  So the unobservable subspace is
  exactly the antisymmetric subspace: dimension ⌊n/2⌋ for the thermal ladder
  and 2⌊n/2⌋ (antisymmetric positions and velocities) for n masses.
* Detectability: the ladder's eigenvalues −(2 − 2cos(kπ/(n+1))) are all
  negative, so its unobservable modes decay (detectable); the undamped
  masses' unobservable modes ±jω_k do not decay (not detectable).
"""

from __future__ import annotations

import control
import numpy as np
import pytest
import scipy.linalg

from linobs.observability.analysis import analyze_matrices
from linobs.observability.assessment import default_tolerance
from linobs.observability.directions import orthonormal_span
from linobs.observability.pbh import pbh_normalizer, pbh_null_vectors
from linobs.observability.staircase import observability_staircase
from tests.observability.models import (
    antisymmetric_basis,
    mass_spring_chain,
    node_output,
    thermal_ladder,
)


def _case(kind: str, n: int, where: str) -> tuple[np.ndarray, np.ndarray, int, str]:
    """(A, C, true unobservable dimension, true verdict class) of one chain."""
    A = thermal_ladder(n) if kind == "thermal" else mass_spring_chain(n)
    node = 0 if where == "end" else n // 2
    C = node_output(A.shape[0], node)
    if where == "end":
        return A, C, 0, "observable"
    dim = n // 2 if kind == "thermal" else 2 * (n // 2)
    return A, C, dim, "unobservable-detectable" if kind == "thermal" else "unobservable"


def _cases(kind: str, sizes: range) -> list[tuple[str, int, str]]:
    out = []
    for n in sizes:
        out.append((kind, n, "end"))
        if n % 2:
            out.append((kind, n, "middle"))
    return out


def _names(n: int) -> list[str]:
    return [f"s{i}" for i in range(n)]


def _check_family(cases: list[tuple[str, int, str]]) -> list[tuple[str, int, str]]:
    """Assert the verdict of every chain; return those where the plain rank test is wrong."""
    rank_wrong: list[tuple[str, int, str]] = []
    for kind, n, where in cases:
        A, C, dim, truth = _case(kind, n, where)
        report = analyze_matrices(A, C, _names(A.shape[0]), ["y"])
        # analytic (module notes): observable from an end, antisymmetric modes lost at the middle;
        # an observable chain may be graded 'weak' (the far modes are hard to see), never worse
        if truth == "observable":
            assert report.verdict in ("observable", "weak"), (kind, n, where, report.summary)
        else:
            assert report.verdict == truth, (kind, n, where, report.summary)
        assert report.unobservable_dimension == dim, (kind, n, where)
        assert report.detectable == (truth != "unobservable")
        # python-control's observability matrix (reference library) with numpy's rank
        plain_rank = np.linalg.matrix_rank(control.obsv(A, C))
        if plain_rank != A.shape[0] - dim:
            rank_wrong.append((kind, n, where))
    return rank_wrong


def test_ladder_verdicts_right_for_every_n_where_the_rank_test_fails() -> None:
    rank_wrong = _check_family(_cases("thermal", range(3, 61)))
    # the plain rank test is wrong for many ladders (e.g. 21 nodes from an end: its
    # observability matrix is numerically rank deficient), the verdict never is
    assert ("thermal", 21, "end") in rank_wrong
    assert len(rank_wrong) > 40


def test_mass_spring_verdicts_right_where_the_rank_test_fails() -> None:
    rank_wrong = _check_family(_cases("mass", range(3, 31)))
    assert ("mass", 21, "end") in rank_wrong
    assert len(rank_wrong) > 10


@pytest.mark.slow
def test_mass_spring_verdicts_right_up_to_sixty_masses() -> None:
    # 62 to 120 states with complex modes: one SVD per mode pair makes this the slow part
    # (seconds single-threaded; far more when a threaded BLAS shares the cores)
    cases = _cases("mass", range(31, 61))
    rank_wrong = _check_family(cases)
    assert len(rank_wrong) == len(cases)   # the plain rank test fails for every one of them


@pytest.mark.parametrize(("kind", "n"), [
    ("thermal", 3), ("thermal", 7), ("thermal", 21), ("thermal", 45), ("thermal", 59),
    ("mass", 3), ("mass", 7), ("mass", 21),
    pytest.param("mass", 45, marks=pytest.mark.slow), pytest.param("mass", 59, marks=pytest.mark.slow),
])
def test_unobservable_basis_is_the_antisymmetric_subspace(kind: str, n: int) -> None:
    A, C, dim, _ = _case(kind, n, "middle")
    expected = antisymmetric_basis(n, mass_spring=(kind == "mass"))   # analytic (module notes)
    tol = default_tolerance(A.shape[0]) * pbh_normalizer(A, C)
    stair = observability_staircase(A, C, tol)
    assert stair.unobservable_dimension == dim == expected.shape[1]
    # principal angles between the subspaces (scipy): zero up to rounding
    assert np.max(scipy.linalg.subspace_angles(stair.unobservable_basis, expected)) < 1e-8
    # invariance A Z_u = Z_u A_u and C Z_u = 0 (definition of the unobservable subspace)
    Z_u = stair.unobservable_basis
    np.testing.assert_allclose(A @ Z_u, Z_u @ stair.unobservable_matrix, atol=1e-12)
    np.testing.assert_allclose(C @ Z_u, 0.0, atol=1e-12)

    # the same subspace from PBH: null vectors of [λI − A; C] at the analytic antisymmetric
    # eigenvalues (even k): −(2 − 2cos(kπ/(n+1))) for the ladder, ±j·sqrt(that) for the masses
    mu = np.array([2 - 2 * np.cos(k * np.pi / (n + 1)) for k in range(2, n + 1, 2)])
    lam = -mu if kind == "thermal" else np.concatenate([1j * np.sqrt(mu), -1j * np.sqrt(mu)])
    null = orthonormal_span(pbh_null_vectors(A, C, lam, 1e-8), 1e-8)
    assert null.shape[1] == dim
    assert np.max(scipy.linalg.subspace_angles(null, stair.unobservable_basis)) < 1e-8

    # the report names the same directions: each is ±(node j − node n−1−j)/√2
    report = analyze_matrices(A, C, _names(A.shape[0]), ["y"])
    names = _names(A.shape[0])
    vectors = np.array([[d.components.get(s, 0.0) for s in names]
                        for d in report.unobservable_basis]).T
    assert np.max(scipy.linalg.subspace_angles(vectors, expected)) < 1e-6
    for direction in report.unobservable_basis:
        values = sorted(direction.components.values())
        np.testing.assert_allclose(values, [-np.sqrt(0.5), np.sqrt(0.5)], atol=1e-9)


def test_even_chain_measured_near_the_middle_is_observable() -> None:
    # with n even no node is fixed by the reflection; node n/2 − 1 sees every mode
    # (sin((n/2)kπ/(n+1)) ≠ 0 for k = 1..n since (n/2)k/(n+1) is never an integer) — analytic
    for n in (4, 10, 30, 60):
        A = thermal_ladder(n)
        report = analyze_matrices(A, node_output(n, n // 2 - 1), _names(n), ["y"])
        assert report.verdict in ("observable", "weak")
        assert report.unobservable_dimension == 0
