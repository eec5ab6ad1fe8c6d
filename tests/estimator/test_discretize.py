"""Zero-order hold, the affine term Γ₀, Van Loan's noise integral and the batched exponential."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.integrate
import scipy.linalg
import scipy.signal

from linobs.estimator.discretize import (
    expm_stack,
    held_injection_gain,
    process_noise_covariance,
    zero_order_hold,
)
from tests.estimator import random_system

TS = 0.7


@pytest.fixture
def system() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    return random_system(np.random.default_rng(11), 4, 2, 2, shift=0.8)


def test_zero_order_hold_matches_scipy(system: tuple[np.ndarray, ...]) -> None:
    A, B, C = system
    Phi, Gamma, _ = zero_order_hold(A, B, TS)
    # scipy.signal.cont2discrete, method "zoh" (reference library)
    Ad, Bd, *_ = scipy.signal.cont2discrete((A, B, C, np.zeros((2, 2))), TS, method="zoh")
    np.testing.assert_allclose(Phi, Ad, rtol=1e-12, atol=1e-13)
    np.testing.assert_allclose(Gamma, Bd, rtol=1e-12, atol=1e-13)


def test_affine_term_is_the_integral_of_the_exponential(system: tuple[np.ndarray, ...]) -> None:
    A, B, _ = system
    _, _, Gamma0 = zero_order_hold(A, B, TS)
    # Γ₀ = ∫₀^Ts e^{As} ds by adaptive quadrature (scipy.integrate.quad_vec)
    ref, _ = scipy.integrate.quad_vec(lambda s: scipy.linalg.expm(A * s), 0.0, TS, epsabs=1e-13,
                                      epsrel=1e-12)
    np.testing.assert_allclose(Gamma0, ref, rtol=1e-10, atol=1e-12)


def test_affine_step_solves_the_affine_ode(system: tuple[np.ndarray, ...]) -> None:
    A, B, _ = system
    rng = np.random.default_rng(3)
    x0, u0, dx0 = rng.standard_normal(4), rng.standard_normal(2), rng.standard_normal(4)
    x, u = rng.standard_normal(4), rng.standard_normal(2)
    Phi, Gamma, Gamma0 = zero_order_hold(A, B, TS)
    step = x0 + Phi @ (x - x0) + Gamma @ (u - u0) + Gamma0 @ dx0
    # scipy.integrate.solve_ivp (DOP853) of x' = dx0 + A(x − x0) + B(u − u0), u held
    sol = scipy.integrate.solve_ivp(lambda t, z: dx0 + A @ (z - x0) + B @ (u - u0), (0.0, TS), x,
                                    method="DOP853", rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(step, sol.y[:, -1], rtol=1e-9, atol=1e-10)


def test_van_loan_matches_quadrature(system: tuple[np.ndarray, ...]) -> None:
    A, _, _ = system
    rng = np.random.default_rng(5)
    G = rng.standard_normal((4, 4))
    Qc = G @ G.T
    Qd = process_noise_covariance(A, Qc, TS)

    def integrand(s: float) -> np.ndarray:
        E = scipy.linalg.expm(A * s)
        return E @ Qc @ E.T

    # Q_d = ∫₀^Ts e^{As} Q_c e^{Aᵀs} ds by adaptive quadrature (scipy.integrate.quad_vec)
    ref, _ = scipy.integrate.quad_vec(integrand, 0.0, TS, epsabs=1e-13, epsrel=1e-12)
    np.testing.assert_allclose(Qd, ref, rtol=1e-10, atol=1e-12)


def test_van_loan_is_scale_free_in_the_noise_level(system: tuple[np.ndarray, ...]) -> None:
    A, _, _ = system
    Qc = np.diag([1e8, 1.0, 0.0, 3e-6])
    small = process_noise_covariance(A, Qc / 1e8, TS)

    def integrand(s: float) -> np.ndarray:
        E = scipy.linalg.expm(A * s)
        return E @ Qc @ E.T

    # a large PSD must not degrade the integral (quad_vec reference, linear in Q_c)
    ref, _ = scipy.integrate.quad_vec(integrand, 0.0, TS, epsabs=1e-6, epsrel=1e-12)
    np.testing.assert_allclose(process_noise_covariance(A, Qc, TS), ref, rtol=1e-10, atol=1e-5)
    np.testing.assert_allclose(small * 1e8, ref, rtol=1e-10, atol=1e-5)


def test_batched_sampling_equals_one_at_a_time() -> None:
    rng = np.random.default_rng(7)
    systems = [random_system(rng, 3, 2, 1, shift=s) for s in np.linspace(-2, 1.5, 6)]
    A = np.stack([s[0] for s in systems])
    B = np.stack([s[1] for s in systems])
    Phi, Gamma, Gamma0 = zero_order_hold(A, B, TS)
    Qd = process_noise_covariance(A, np.eye(3), TS)
    for i, (a, b, c) in enumerate(systems):
        # scipy.signal.cont2discrete "zoh" per system (reference library)
        Ad, Bd, *_ = scipy.signal.cont2discrete((a, b, c, np.zeros((1, 2))), TS, method="zoh")
        np.testing.assert_allclose(Phi[i], Ad, rtol=1e-12, atol=1e-13)
        np.testing.assert_allclose(Gamma[i], Bd, rtol=1e-12, atol=1e-13)
        np.testing.assert_allclose(Gamma0[i], zero_order_hold(a, b, TS)[2], rtol=1e-14)
        np.testing.assert_allclose(Qd[i], process_noise_covariance(a, np.eye(3), TS), rtol=1e-14)


@pytest.mark.parametrize("scale", [1e-6, 0.3, 4.0, 40.0])
def test_batched_exponential_matches_scipy(scale: float) -> None:
    M = np.random.default_rng(1).standard_normal((20, 6, 6)) * scale
    # scipy.linalg.expm per matrix (reference library)
    ref = np.stack([scipy.linalg.expm(m) for m in M])
    err = np.linalg.norm(expm_stack(M) - ref, axis=(1, 2)) / np.linalg.norm(ref, axis=(1, 2))
    assert err.max() < 1e-11


def test_held_injection_gain_is_the_sampled_observer(system: tuple[np.ndarray, ...]) -> None:
    A, _, C = system
    L_c = np.random.default_rng(2).standard_normal((4, 2))
    F = A - L_c @ C
    # Γ_L = ∫₀^Ts e^{(A − L_c C)s} ds L_c (quad_vec reference)
    ref, _ = scipy.integrate.quad_vec(lambda s: scipy.linalg.expm(F * s) @ L_c, 0.0, TS,
                                      epsabs=1e-13, epsrel=1e-12)
    np.testing.assert_allclose(held_injection_gain(A, C, L_c, TS), ref, rtol=1e-10, atol=1e-12)
