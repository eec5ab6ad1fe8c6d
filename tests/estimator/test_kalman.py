"""Steady-state Kalman designs: closed forms, python-control's designs, refusals, noise errors."""

from __future__ import annotations

import control
import numpy as np
import pytest
import scipy.integrate
import scipy.linalg

from linobs.errors import UsageError
from linobs.estimator.design import design_node
from linobs.estimator.settings import EstimatorSettings
from tests.estimator import as_complex, pole_mismatch, random_system
from tests.observability.models import linear_model

TS = 0.5


def kalman(form: str = "filter", domain: str = "discrete", **noise: object) -> EstimatorSettings:
    return EstimatorSettings(kind="kalman", form=form, domain=domain, sample_time=TS, **noise)


def van_loan_reference(A: np.ndarray, Qc: np.ndarray) -> np.ndarray:
    """∫₀^Ts e^{As} Q_c e^{Aᵀs} ds by adaptive quadrature (scipy.integrate.quad_vec)."""
    def f(s: float) -> np.ndarray:
        E = scipy.linalg.expm(A * s)
        return E @ Qc @ E.T
    return scipy.integrate.quad_vec(f, 0.0, TS, epsabs=1e-14, epsrel=1e-12)[0]


@pytest.mark.parametrize("form", ["filter", "predictor"])
def test_scalar_random_walk_closed_form(form: str) -> None:
    q, sigma = 0.3, 0.2
    lm = linear_model(np.zeros((1, 1)), np.zeros((1, 1)), np.ones((1, 1)), states=["x"],
                      outputs=["y"])
    node = design_node(lm, kalman(form, process_noise={"x": q}, measurement_noise={"y": sigma}))
    assert node.status == "ok", node.message
    Q, R = q * TS, sigma ** 2        # Van Loan with A = 0: ∫₀^Ts q ds = q·Ts (analytic)
    # scalar DARE with Φ = C = 1: P = P − P²/(P + R) + Q ⇒ P² = Q (P + R) ⇒
    # P² − Q P − Q R = 0 ⇒ P = (Q + √(Q² + 4 Q R)) / 2 (the positive root)
    P = (Q + np.sqrt(Q ** 2 + 4 * Q * R)) / 2
    assert node.P_prior[0, 0] == pytest.approx(P, rel=1e-12)
    gain = P / (P + R)                               # P Cᵀ (C P Cᵀ + R)⁻¹, scalar
    P_post = P * R / (P + R)                          # (1 − gain) P
    assert node.P_post[0, 0] == pytest.approx(P_post, rel=1e-12)
    assert node.L[0, 0] == pytest.approx(gain, rel=1e-12)     # Φ = 1: both forms' gains agree
    assert node.Q[0, 0] == pytest.approx(Q, rel=1e-14)
    std = np.sqrt(P_post if form == "filter" else P)
    assert node.error_std["x"] == pytest.approx(std, rel=1e-12)
    # error dynamics (1 − gain)·1 (analytic)
    assert pole_mismatch(as_complex(node.error_poles), np.array([1 - gain])) < 1e-12


def test_scalar_continuous_random_walk_closed_form() -> None:
    q, sigma = 0.3, 0.2
    lm = linear_model(np.zeros((1, 1)), np.zeros((1, 1)), np.ones((1, 1)), states=["x"],
                      outputs=["y"])
    node = design_node(lm, kalman("predictor", "continuous", process_noise={"x": q},
                                  measurement_noise={"y": sigma}))
    Rc = sigma ** 2 * TS
    # scalar CARE with A = 0: −P²/R_c + q = 0 ⇒ P = √(q R_c), L_c = P / R_c (analytic)
    assert node.P_prior[0, 0] == pytest.approx(np.sqrt(q * Rc), rel=1e-12)
    assert node.L_continuous[0, 0] == pytest.approx(np.sqrt(q * Rc) / Rc, rel=1e-12)
    # sampled update: ∫₀^Ts e^{−l s} ds · l = 1 − e^{−l Ts} (analytic), error pole e^{−l Ts}
    ell = np.sqrt(q / Rc)
    assert node.L[0, 0] == pytest.approx(1 - np.exp(-ell * TS), rel=1e-12)


@pytest.fixture
def plant() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    return random_system(np.random.default_rng(31), 4, 2, 2, shift=0.3)


NOISE = {"process_noise": {"x0": 0.02, "x1": 0.5, "x3": 0.1}, "input_noise": {"u1": 0.3},
             "measurement_noise": {"y0": 0.05, "y1": 0.2}}


def _noise(B: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    Qc = np.diag([0.02, 0.5, 0.0, 0.1]) + 0.3 * np.outer(B[:, 1], B[:, 1])
    return Qc, np.diag([0.05 ** 2, 0.2 ** 2])


def test_discrete_designs_match_python_control(plant: tuple[np.ndarray, ...]) -> None:
    A, B, C = plant
    lm = linear_model(A, B, C)
    pred = design_node(lm, kalman("predictor", **NOISE))
    filt = design_node(lm, kalman("filter", **NOISE))
    assert pred.status == filt.status == "ok"
    Qc, R = _noise(B)
    Phi = scipy.linalg.expm(A * TS)
    Qd = van_loan_reference(A, Qc)
    np.testing.assert_allclose(pred.Q, Qd, rtol=1e-10, atol=1e-13)
    # python-control's discrete design (reference library): x[n+1] = A x + G w, E{ww'} = QN,
    # E{vv'} = RN; its L is the predictor's (x_e[n+1] = A x_e + L (y − C x_e)), P the prior
    L_ref, P_ref, E_ref = control.dlqe(Phi, np.eye(4), C, Qd, R)
    np.testing.assert_allclose(pred.L, L_ref, rtol=1e-8, atol=1e-11)
    np.testing.assert_allclose(pred.P_prior, P_ref, rtol=1e-8, atol=1e-12)
    assert pole_mismatch(as_complex(pred.error_poles), E_ref) < 1e-8
    # the current-estimate gain is P Cᵀ (C P Cᵀ + R)⁻¹ = Φ⁻¹ L_pred (Kalman 1960; analytic)
    np.testing.assert_allclose(filt.L, np.linalg.solve(Phi, L_ref), rtol=1e-8, atol=1e-11)
    P_post = P_ref - filt.L @ (C @ P_ref @ C.T + R) @ filt.L.T
    np.testing.assert_allclose(filt.P_post, P_post, rtol=1e-8, atol=1e-12)
    np.testing.assert_allclose(list(filt.error_std.values()), np.sqrt(np.diag(P_post)), rtol=1e-8)
    np.testing.assert_allclose(list(pred.error_std.values()), np.sqrt(np.diag(P_ref)), rtol=1e-8)
    # (I − L C) Φ has the predictor's poles (similar to Φ (I − L C))
    assert pole_mismatch(np.linalg.eigvals((np.eye(4) - filt.L @ C) @ Phi), E_ref) < 1e-8


def test_continuous_design_matches_python_control(plant: tuple[np.ndarray, ...]) -> None:
    A, B, C = plant
    node = design_node(linear_model(A, B, C), kalman("predictor", "continuous", **NOISE))
    assert node.status == "ok", node.message
    Qc, R = _noise(B)
    # python-control's continuous design (reference library), R_c = σ²·Ts (settings' convention)
    L_ref, P_ref, _ = control.lqe(A, np.eye(4), C, Qc, R * TS)
    np.testing.assert_allclose(node.L_continuous, L_ref, rtol=1e-8, atol=1e-11)
    np.testing.assert_allclose(node.P_prior, P_ref, rtol=1e-8, atol=1e-12)
    # (its eigenvalues come back in single precision: compare those of A − L_ref C instead)
    assert pole_mismatch(np.linalg.eigvals(A - node.L_continuous @ C),
                         np.linalg.eigvals(A - L_ref @ C)) < 1e-8


def test_detectable_but_unobservable_still_designed() -> None:
    # x2 is invisible and decays (−3): detectable, not observable (PBH, analytic)
    A = np.array([[-1.0, 1.0, 0.0], [0.0, -2.0, 0.0], [0.0, 0.0, -3.0]])
    lm = linear_model(A, np.ones((3, 1)), np.array([[1.0, 0.0, 0.0]]))
    node = design_node(lm, kalman(process_noise={"x0": 1.0, "x1": 1.0, "x2": 1.0},
                                  measurement_noise={"y0": 0.1}))
    assert node.status == "ok", node.message
    assert np.max(np.abs(as_complex(node.error_poles))) < 1
    # the unobservable mode stays in the error dynamics: z = e^{−3 Ts} (analytic)
    assert np.min(np.abs(as_complex(node.error_poles) - np.exp(-3 * TS))) < 1e-10
    # and its variance is the open-loop one of x2: the Lyapunov fixed point
    # p = e^{−6Ts} p + q_d, q_d = (1 − e^{−6Ts})/6 ⇒ p = 1/6 (analytic, stationary variance)
    assert node.P_prior[2, 2] == pytest.approx(1 / 6, rel=1e-9)


def test_undetectable_pair_is_refused() -> None:
    A = np.diag([-1.0, 0.4])                     # x1 unstable and not measured (analytic)
    lm = linear_model(A, np.ones((2, 1)), np.array([[1.0, 0.0]]))
    node = design_node(lm, kalman(process_noise={"x0": 1.0, "x1": 1.0},
                                  measurement_noise={"y0": 0.1}))
    assert node.status == "refused"
    assert "not detectable" in node.message and "x1" in node.message
    assert f"{np.exp(0.4 * TS):.6g}" in node.message
    assert node.L.size == 0 and node.Phi.shape == (2, 2)


def test_unexcited_integrator_is_refused_with_the_fix() -> None:
    A = np.array([[0.0, 0.0], [0.0, -1.0]])      # x0 an integrator, no noise reaches it
    lm = linear_model(A, np.zeros((2, 1)), np.eye(2))
    node = design_node(lm, kalman(process_noise={"x1": 1.0},
                                  measurement_noise={"y0": 0.1, "y1": 0.1}))
    assert node.status == "refused"
    assert "process_noise for x0" in node.message


def test_unexcited_unstable_mode_uses_the_stabilizing_solution() -> None:
    a_c, r = 0.6, 0.04
    lm = linear_model(np.array([[a_c]]), np.zeros((1, 1)), np.ones((1, 1)))
    node = design_node(lm, kalman("predictor", measurement_noise={"y0": np.sqrt(r)}))
    assert node.status == "ok", node.message
    assert "does not reach the unstable" in node.message
    a = np.exp(a_c * TS)
    # scalar DARE with Q = 0: P = a²P − a²P²/(P + R) ⇒ P = R (a² − 1) (the stabilizing root)
    assert node.P_prior[0, 0] == pytest.approx(r * (a ** 2 - 1), rel=1e-10)
    # error pole a (1 − P/(P + R)) = 1/a (analytic)
    assert pole_mismatch(as_complex(node.error_poles), np.array([1 / a])) < 1e-10


def test_noise_errors_name_what_is_missing(plant: tuple[np.ndarray, ...]) -> None:
    A, B, C = plant
    lm = linear_model(A, B, C)
    with pytest.raises(UsageError, match="y1"):
        design_node(lm, kalman(measurement_noise={"y0": 0.1}))
    with pytest.raises(UsageError, match="process_noise"):
        design_node(lm, kalman(process_noise={"nope": 1.0},
                               measurement_noise={"y0": 0.1, "y1": 0.1}))
    with pytest.raises(UsageError, match="σ of y0 is 0"):
        design_node(lm, kalman(measurement_noise={"y0": 0.0, "y1": 0.1}))
    # measuring only y0 needs only y0's σ
    node = design_node(lm, kalman(process_noise={"x0": 1.0}, measurement_noise={"y0": 0.1}),
                       outputs=["y0"])
    assert node.outputs == ["y0"] and node.C.shape == (1, 4) and node.L.shape == (4, 1)
