"""Observability Gramians against python-control, quadrature and closed forms."""

from __future__ import annotations

import control
import numpy as np
import pytest
import scipy.integrate
import scipy.linalg

from linobs.observability.analysis import analyze_matrices
from linobs.observability.gramian import (
    default_horizon,
    finite_gramian,
    infinite_gramian,
)
from tests.observability.models import cart_pendulum, thermal_ladder


def _stable(rng: np.random.Generator, n: int) -> np.ndarray:
    A = rng.standard_normal((n, n))
    return A - (np.max(np.linalg.eigvals(A).real) + 0.5) * np.eye(n)


def test_infinite_gramian_matches_python_control() -> None:
    pytest.importorskip("slycot")   # python-control computes Gramians through slycot
    rng = np.random.default_rng(5)
    for n, p in ((2, 1), (4, 2), (7, 1)):
        A = _stable(rng, n)
        C = rng.standard_normal((p, n))
        sys = control.ss(A, np.zeros((n, 1)), C, np.zeros((p, 1)))
        reference = control.gram(sys, "o")   # reference library
        np.testing.assert_allclose(infinite_gramian(A, C), reference, rtol=1e-9,
                                   atol=1e-12 * np.abs(reference).max())


def test_infinite_gramian_of_a_diagonal_system() -> None:
    # closed form: W_ij = ∫ c_i c_j e^{(λi + λj) t} dt = −c_i c_j / (λi + λj)  (analytic)
    lam = np.array([-0.5, -1.0, -3.0])
    c = np.array([[1.0, -2.0, 0.5]])
    expected = -np.outer(c, c) / (lam[:, None] + lam[None, :])
    np.testing.assert_allclose(infinite_gramian(np.diag(lam), c), expected, rtol=1e-12)


@pytest.mark.parametrize("case", ["cart", "oscillator", "unstable"])
def test_finite_gramian_matches_quadrature(case: str) -> None:
    if case == "cart":
        A, _ = cart_pendulum()
        C = np.array([[1.0, 0.0, 0.0, 0.0]])
        T = 0.8
    elif case == "oscillator":
        A = np.array([[0.0, 2.0], [-2.0, 0.0]])
        C = np.array([[1.0, 0.0]])
        T = 7.3
    else:
        A = np.array([[0.3, 1.0, 0.0], [0.0, -1.0, 2.0], [0.0, -2.0, -1.0]])
        C = np.array([[0.0, 1.0, 1.0]])
        T = 4.0

    def integrand(t: float) -> np.ndarray:
        E = scipy.linalg.expm(A * t)
        return E.T @ C.T @ C @ E

    # scipy's adaptive vector quadrature of the defining integral (reference library)
    reference, _ = scipy.integrate.quad_vec(integrand, 0.0, T, epsabs=1e-13, epsrel=1e-11)
    np.testing.assert_allclose(finite_gramian(A, C, T), reference, rtol=1e-8,
                               atol=1e-10 * np.abs(reference).max())


def test_long_finite_horizon_tends_to_the_infinite_gramian() -> None:
    # W(T) = W(∞) − e^{AᵀT} W(∞) e^{AT} → W(∞); with the slowest decay rate 0.081 and T = 600
    # the difference is below e^{−2·0.081·600} ≈ 1e-42 (analytic)
    A = thermal_ladder(6)
    C = np.eye(6)[:1]
    np.testing.assert_allclose(finite_gramian(A, C, 600.0), infinite_gramian(A, C), rtol=1e-9,
                               atol=1e-12)


def test_finite_gramian_with_fast_modes_and_a_long_horizon() -> None:
    # diag(−50, 0), c = (1, 1), T = 100: a naive block exponential overflows (e^{50·100});
    # closed form W = [[(1 − e^{−100T})/100, (1 − e^{−50T})/50], [·, T]]  (analytic)
    A = np.diag([-50.0, 0.0])
    C = np.array([[1.0, 1.0]])
    T = 100.0
    expected = np.array([[1.0 / 100.0, 1.0 / 50.0], [1.0 / 50.0, T]])
    np.testing.assert_allclose(finite_gramian(A, C, T), expected, rtol=1e-10)


def test_default_horizon_rule() -> None:
    # documented rule: 5x the slowest stable time constant; else 5 / min |λ| over non-zero λ;
    # else 5 / ‖A‖; else 1 (arithmetic on the stated rule)
    assert default_horizon(np.array([0.0, -0.1, -0.01]), 1e-12, 1.0) == pytest.approx(500.0)
    assert default_horizon(np.array([0.0, 2.0, 1j * 4.0]), 1e-12, 1.0) == pytest.approx(2.5)
    assert default_horizon(np.array([0.0, 0.0]), 1e-12, 2.0) == pytest.approx(2.5)
    assert default_horizon(np.array([0.0]), 1e-12, 0.0) == 1.0


def test_report_uses_the_infinite_gramian_only_when_stable() -> None:
    A, _ = cart_pendulum()
    C = np.array([[1.0, 0.0, 0.0, 0.0]])
    report = analyze_matrices(A, C, ["x", "v", "th", "om"], ["x"])
    assert report.gramian.kind == "finite"
    # the pendulum's stable mode λ = −sqrt((M + m) g / (M l)) sets T = 5 / |λ| (documented rule)
    lam = np.sqrt(1.2 * 9.81 / 0.5)
    assert report.gramian.horizon == pytest.approx(5.0 / lam, rel=1e-9)
    # its eigenvalues: those of the defining integral by scipy's quadrature (reference library)
    W, _ = scipy.integrate.quad_vec(
        lambda t: scipy.linalg.expm(A.T * t) @ C.T @ C @ scipy.linalg.expm(A * t), 0.0, 5.0 / lam,
        epsabs=1e-13, epsrel=1e-11)
    np.testing.assert_allclose(report.gramian.eigenvalues, np.linalg.eigvalsh(W), rtol=1e-6,
                               atol=1e-12)
    stable = analyze_matrices(thermal_ladder(4), np.eye(4)[:1], list("abcd"), ["y"])
    assert stable.gramian.kind == "infinite" and stable.gramian.horizon is None
    assert stable.gramian.eigenvalues == sorted(stable.gramian.eigenvalues)
