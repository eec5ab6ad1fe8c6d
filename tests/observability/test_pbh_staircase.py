"""PBH margins and the orthogonal staircase against python-control and textbook facts."""

from __future__ import annotations

import control
import numpy as np
import pytest
import scipy.linalg
import scipy.stats

from linobs.observability.analysis import analyze_matrices
from linobs.observability.assessment import default_tolerance
from linobs.observability.pbh import pbh_margins, pbh_normalizer
from linobs.observability.staircase import observability_staircase
from tests.observability.models import cart_pendulum

CART = ["x", "x_dot", "theta", "theta_dot"]


def _names(n: int) -> list[str]:
    return [f"x{i}" for i in range(n)]


def _random_system(rng: np.random.Generator, n: int, p: int,
                   hidden: int) -> tuple[np.ndarray, np.ndarray]:
    """(A, C) with exactly ``hidden`` unobservable directions, hidden by a random rotation.

    Kalman decomposition (Kalman 1963): in coordinates z = Qᵀx, A = [[A_o, 0], [A_21, A_u]]
    and C = [C_o, 0] leave the last ``hidden`` coordinates out of every output.
    """
    n_o = n - hidden
    A = rng.standard_normal((n, n))
    A[:n_o, n_o:] = 0.0
    C = np.hstack([rng.standard_normal((p, n_o)), np.zeros((p, hidden))])
    Q = scipy.stats.ortho_group.rvs(n, random_state=rng)
    return Q @ A @ Q.T, C @ Q.T


def test_verdicts_agree_with_the_rank_of_well_conditioned_observability_matrices() -> None:
    rng = np.random.default_rng(20240611)
    checked = 0
    for trial in range(60):
        n = int(rng.integers(2, 7))
        p = int(rng.integers(1, 3))
        hidden = int(rng.integers(0, n)) if trial % 3 else 0
        A, C = _random_system(rng, n, p, hidden)
        # python-control's observability matrix and numpy's rank (reference library); only
        # systems whose rank is unambiguous (a wide singular value gap) are compared
        s = np.linalg.svd(control.obsv(A, C), compute_uv=False)
        rank = np.linalg.matrix_rank(control.obsv(A, C))
        if rank < n and s[rank - 1] / s[0] < 1e-6 or rank == n and s[-1] / s[0] < 1e-6:
            continue
        report = analyze_matrices(A, C, _names(n), [f"y{i}" for i in range(p)])
        assert report.unobservable_dimension == n - rank
        if rank == n:
            assert report.verdict in ("observable", "weak")
        else:
            # detectable exactly when the hidden block's eigenvalues are stable (Hautus 1969);
            # in rotated coordinates those are the eigenvalues of the trailing block
            Z = report_basis(report, n)
            hidden_eigs = np.linalg.eigvals(Z.T @ A @ Z)
            expected = "unobservable-detectable" if np.all(hidden_eigs.real < 0) else "unobservable"
            assert report.verdict == expected
        checked += 1
    assert checked > 45


def report_basis(report, n: int) -> np.ndarray:  # type: ignore[no-untyped-def]
    """The report's unobservable directions as columns (state order x0, x1, …)."""
    names = _names(n)
    return np.array([[d.components.get(s, 0.0) for s in names]
                     for d in report.unobservable_basis]).T


def test_margin_is_the_smallest_singular_value_of_the_pbh_matrix() -> None:
    # definition of the margin, computed directly with scipy's svdvals (reference library)
    rng = np.random.default_rng(7)
    A = rng.standard_normal((5, 5))
    C = rng.standard_normal((2, 5))
    lam = np.linalg.eigvals(A)
    assert np.any(lam.imag != 0)   # this seed has a complex pair
    margins = pbh_margins(A, C, lam)
    scale = np.linalg.norm(A, 2) + np.linalg.norm(C, 2)
    for value, mu in zip(margins, lam):
        ref = scipy.linalg.svdvals(np.vstack([mu * np.eye(5) - A, C]))[-1] / scale
        assert value == pytest.approx(ref, rel=1e-10)
    # conjugate eigenvalues have the same margin (conjugate matrix, same singular values)
    pair = np.flatnonzero(lam.imag > 0)[0]
    other = np.argmin(np.abs(lam - np.conj(lam[pair])))
    assert margins[pair] == pytest.approx(margins[other], rel=1e-12)


def test_margin_is_the_distance_to_an_unobservable_pair() -> None:
    # Eising (1984): the perturbation −σ_min u vᴴ of [λI − A; C] makes λ unobservable
    rng = np.random.default_rng(3)
    A = np.diag([-1.0, -2.0, -3.0, -4.0]) + 0.3 * rng.standard_normal((4, 4))
    C = rng.standard_normal((1, 4))
    lam = np.linalg.eigvals(A)
    lam = lam[np.argmin(np.abs(lam.imag) + (lam.imag != 0))].real   # a real eigenvalue
    u, s, vh = np.linalg.svd(np.vstack([lam * np.eye(4) - A, C]))
    delta = s[-1] * np.outer(u[:, 3], vh[3])
    A_new = A + delta[:4]
    C_new = C - delta[4:]
    # python-control's observability matrix loses rank (reference library)
    sv = np.linalg.svd(control.obsv(A_new, C_new), compute_uv=False)
    assert sv[-1] / sv[0] < 1e-10
    report = analyze_matrices(A_new, C_new, _names(4), ["y"])
    assert report.unobservable_dimension == 1
    assert report.verdict.startswith("unobservable")


def test_cart_pendulum_with_only_the_angle_measured() -> None:
    # textbook fact (from memory, e.g. Ogata "Modern Control Engineering", inverted pendulum):
    # with only θ measured, cart position and velocity are unobservable (they do not enter
    # the pendulum equation); the double integrator at λ = 0 does not decay: not detectable
    A, _ = cart_pendulum()
    C = np.array([[0.0, 0.0, 1.0, 0.0], [1.0, 0.0, 0.0, 0.0]])
    report = analyze_matrices(A, C, CART, ["theta", "x"], outputs=["theta"])
    assert report.verdict == "unobservable"
    assert not report.detectable
    assert report.unobservable_dimension == 2
    basis = np.array([[d.components.get(s, 0.0) for s in CART]
                      for d in report.unobservable_basis]).T
    assert np.max(scipy.linalg.subspace_angles(basis, np.eye(4)[:, :2])) < 1e-10
    hidden = [m for m in report.modes if not m.observable]
    assert all(abs(complex(m.real, m.imag)) < 1e-6 for m in hidden)   # λ = 0 (twice)
    # with the cart position measured the pair is observable (same textbook example)
    report = analyze_matrices(A, C, CART, ["theta", "x"], outputs=["x"])
    assert report.verdict in ("observable", "weak")
    assert report.unobservable_dimension == 0
    # python-control's observability matrix has full rank for this case (reference library)
    assert np.linalg.matrix_rank(control.obsv(A, C[1:])) == 4


def test_repeated_eigenvalue_with_two_hidden_directions() -> None:
    # A = diag(−1, −1, −2), y = x2: the eigenvalue −1 has a 2-dimensional eigenspace that
    # the output never sees (analytic); PBH flags both copies, the staircase gives dimension 2
    A = np.diag([-1.0, -1.0, -2.0])
    C = np.array([[0.0, 0.0, 1.0]])
    report = analyze_matrices(A, C, ["a", "b", "c"], ["y"])
    assert report.unobservable_dimension == 2
    assert report.verdict == "unobservable-detectable"
    assert sorted(m.observable for m in report.modes) == [False, False, True]


def test_jordan_block_seen_at_its_end() -> None:
    # a' = −a + b, b' = −b, c' = −2c, y = b + c: 'a' influences nothing that is measured,
    # so span{a} is the unobservable subspace (dimension 1) although λ = −1 appears twice in
    # a Jordan block (analytic); both copies show margin 0 at λ = −1
    A = np.array([[-1.0, 1.0, 0.0], [0.0, -1.0, 0.0], [0.0, 0.0, -2.0]])
    C = np.array([[0.0, 1.0, 1.0]])
    report = analyze_matrices(A, C, ["a", "b", "c"], ["y"])
    assert report.unobservable_dimension == 1
    assert report.unobservable_basis[0].components["a"] == pytest.approx(1.0, abs=1e-9)
    assert report.verdict == "unobservable-detectable"
    # python-control's observability matrix has rank 2 = 3 − 1 (reference library)
    assert np.linalg.matrix_rank(control.obsv(A, C)) == 2


def test_staircase_structure_with_several_outputs() -> None:
    # definition of the staircase form: Z orthogonal, ZᵀAZ has a zero upper-right block and
    # CZ a zero right block; dimension from python-control's observability matrix rank
    rng = np.random.default_rng(11)
    A, C = _random_system(rng, 6, 2, 2)
    tol = default_tolerance(6) * pbh_normalizer(A, C)
    stair = observability_staircase(A, C, tol)
    Z = stair.transform
    np.testing.assert_allclose(Z.T @ Z, np.eye(6), atol=1e-12)
    k = stair.observable_dimension
    assert k == np.linalg.matrix_rank(control.obsv(A, C)) == 4
    assert sum(stair.block_sizes) == k and stair.block_sizes[0] == 2
    assert list(stair.block_sizes) == sorted(stair.block_sizes, reverse=True)
    T = Z.T @ A @ Z
    np.testing.assert_allclose(T[:k, k:], 0.0, atol=1e-12)
    np.testing.assert_allclose((C @ Z)[:, k:], 0.0, atol=1e-12)
