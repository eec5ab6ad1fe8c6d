"""The nonlinear observability check: simulations, the empirical Gramian and its comparison."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import quad_vec
from scipy.linalg import expm

from linobs.errors import ModelError, UsageError
from linobs.model.build import build_fmu
from linobs.model.loader import load_model
from linobs.observability.analysis import analyze
from linobs.observability.empirical import (
    EmpiricalGramian,
    compare_with_linear,
    empirical_gramian,
    empirical_verdict,
    gramian_measure,
)
from linobs.observability.linear_horizon import finite_horizon_gramian
from linobs.observability.report import ObservabilitySettings
from linobs.observability.simulate import sample_times, simulate_outputs

FIXTURES = Path(__file__).resolve().parents[1] / "fixtures"

# the linear chain as written in tests/fixtures/linear_chain/sources/model.c (start values)
CHAIN_A = np.array([[-1.0, 0.0, 0.0], [1.0, -2.0, 0.0], [0.0, 1.5, -0.5]])
CHAIN_C = np.array([[0.0, 0.0, 2.0]])
CHAIN_X_NOMINAL = np.array([2.0, 0.5, 4.0])  # modelDescription.xml
CHAIN_Y_NOMINAL = np.array([3.0])


def quadrature_gramian(A: np.ndarray, C: np.ndarray, horizon: float) -> np.ndarray:
    # scipy reference: adaptive quadrature of e^{Aᵀt} CᵀC e^{At} over [0, T]
    return quad_vec(lambda t: expm(A.T * t) @ C.T @ C @ expm(A * t), 0.0, horizon,
                    epsabs=1e-13, epsrel=1e-11)[0]


def scaled(A: np.ndarray, C: np.ndarray, xn: np.ndarray, yn: np.ndarray):
    return A * xn[None, :] / xn[:, None], C * xn[None, :] / yn[:, None]


def rel(a: np.ndarray, b: np.ndarray) -> float:
    return float(np.max(np.abs(a - b)) / np.max(np.abs(b)))


@pytest.fixture(scope="module")
def fixture_fmus(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    out = tmp_path_factory.mktemp("empirical-fmus")
    return {name: build_fmu(FIXTURES / name, out / f"{name}.fmu")
            for name in ("linear_chain", "bilinear_drift", "faulty")}


@pytest.fixture()
def chain(fixture_fmus):
    model = load_model(fixture_fmus["linear_chain"])
    yield model
    model.close()


@pytest.fixture()
def drift(fixture_fmus):
    model = load_model(fixture_fmus["bilinear_drift"])
    yield model
    model.close()


# ------------------------------------------------------------------------ simulation
@pytest.mark.parametrize("method", ["LSODA", "BDF"])
def test_simulated_outputs_follow_the_matrix_exponential(chain, method):
    times = np.linspace(0.0, 6.0, 25)
    x0, u0 = np.array([1.0, 0.5, 0.2]), np.array([0.0])
    y = simulate_outputs(chain, x0, u0, None, times, method=method)
    # analytic: free response of a linear system, y(t) = C e^{At} x0
    expected = np.array([CHAIN_C @ expm(CHAIN_A * t) @ x0 for t in times])
    assert y.shape == (len(times), 1)
    np.testing.assert_allclose(y, expected, rtol=1e-7, atol=1e-10)


def test_held_parameters_are_applied(chain):
    times = np.linspace(0.0, 2.0, 5)
    x0 = np.array([1.0, 0.0, 0.0])
    y = simulate_outputs(chain, x0, np.zeros(1), {"c": 5.0}, times)
    A = CHAIN_A.copy()
    # analytic: same free response with the output gain c = 5
    expected = np.array([5.0 * (expm(A * t) @ x0)[2] for t in times])
    np.testing.assert_allclose(y[:, 0], expected, rtol=1e-7, atol=1e-12)


def test_event_indicator_crossing_is_a_warning(chain):
    warnings: list[str] = []
    # x1 decays from 1 as e^{-t}: it crosses x1_switch = 0.5 at t = ln 2 ≈ 0.69 s (analytic)
    simulate_outputs(chain, np.array([1.0, 0.5, 0.2]), np.zeros(1), {"x1_switch": 0.5},
                     np.linspace(0.0, 2.0, 21), warnings=warnings)
    assert len(warnings) == 1 and "changed sign between t = 0.6 s and 0.7 s" in warnings[0]
    g = empirical_gramian(chain, {"x1_switch": 0.5}, ["y"], horizon=2.0, samples=50)
    assert len(g.warnings) == 1 and "6 of 6 simulations" in g.warnings[0]
    quiet = empirical_gramian(chain, {"x1_switch": 10.0}, ["y"], horizon=2.0, samples=50)
    assert quiet.warnings == []


def test_failures_are_model_errors_naming_the_point(fixture_fmus):
    with load_model(fixture_fmus["faulty"]) as model:
        # the fixture returns an error status at u = u_error = 19 (its model description)
        with pytest.raises(ModelError, match=r"u=19"):
            simulate_outputs(model, np.zeros(2), np.array([19.0]), None, np.linspace(0, 1, 5))
        with pytest.raises(ModelError, match=r"u=19"):
            simulate_outputs(model, np.zeros(2), np.array([19.0]), None, np.linspace(0, 1, 5),
                             method="BDF")
        with pytest.raises(ModelError, match=r"empirical Gramian at .*u=19"):
            empirical_gramian(model, {"u": 19.0}, ["y"], horizon=1.0)


def test_graded_sample_times():
    t = sample_times(10.0, 200, fastest_rate=100.0)
    assert t[0] == 0.0 and t[-1] == 10.0 and np.all(np.diff(t) > 0)
    # the first interval resolves the fast decay (0.1 time constants), common practice
    assert t[1] <= 0.1 / 100.0 * (1 + 1e-12)
    np.testing.assert_array_equal(sample_times(10.0, 11, fastest_rate=0.01), np.linspace(0, 10, 11))


def test_poor_resolution_is_a_warning(chain):
    g = empirical_gramian(chain, {"x1": 1000.0}, ["y"], horizon=2.0, samples=50)
    # x1 is 500 nominals from zero: rtol 1e-9 · 500 / 1e-3 · 10 = 5e-3 (the documented floor)
    assert g.resolution == pytest.approx(5e-3)
    assert any("cannot be resolved" in w and "x1 is 500 times" in w for w in g.warnings)


def test_bad_requests_are_usage_errors(chain):
    with pytest.raises(UsageError, match="did you mean 'y'"):
        empirical_gramian(chain, {}, ["yy"], horizon=1.0)
    with pytest.raises(UsageError, match="'u' is an input"):
        empirical_gramian(chain, {}, ["u"], horizon=1.0)
    with pytest.raises(UsageError, match="perturbation"):
        empirical_gramian(chain, {}, ["y"], horizon=1.0, perturbation=0.0)
    with pytest.raises(UsageError, match="horizon"):
        empirical_gramian(chain, {}, ["y"], horizon=-1.0)
    with pytest.raises(UsageError, match="integration method"):
        empirical_gramian(chain, {}, ["y"], horizon=1.0, method="Euler")


# -------------------------------------------------------------------- the Gramian itself
def test_linear_chain_equals_the_finite_horizon_gramian(chain):
    T = 10.0
    A_s, C_s = scaled(CHAIN_A, CHAIN_C, CHAIN_X_NOMINAL, CHAIN_Y_NOMINAL)
    reference = quadrature_gramian(A_s, C_s, T)
    g = empirical_gramian(chain, {}, ["y"], horizon=T, samples=2000)
    # analytic: for a linear plant the ± construction is exact (up to integration error)
    assert rel(g.gramian, reference) < 1e-5
    lam = np.linalg.eigvalsh(reference)
    # Weyl's inequality: each eigenvalue moves by at most ‖ΔW‖₂
    np.testing.assert_allclose(g.eigenvalues, lam, rtol=0, atol=1e-5 * lam[-1])
    # the linear counterpart (Van Loan) against scipy quadrature
    assert rel(g.linear.gramian, reference) < 1e-9
    np.testing.assert_allclose(g.linear.transition, expm(A_s * T), rtol=1e-9, atol=1e-12)
    # the empirical transition map is e^{ÃT} too (analytic, linear plant)
    np.testing.assert_allclose(g.transition, expm(A_s * T), atol=1e-6)
    assert g.scaling.states == {"x1": 2.0, "x2": 0.5, "x3": 4.0}
    assert g.scaling.outputs == {"y": 3.0}
    assert g.simulations == 6 and g.samples == 2000
    assert g.margin == pytest.approx(np.sqrt(lam[0] / lam[-1]), rel=1e-3)


def test_quadrature_error_estimate_is_realistic(chain):
    T = 10.0
    A_s, C_s = scaled(CHAIN_A, CHAIN_C, CHAIN_X_NOMINAL, CHAIN_Y_NOMINAL)
    lam = np.linalg.eigvalsh(quadrature_gramian(A_s, C_s, T))
    g = empirical_gramian(chain, {}, ["y"], horizon=T, samples=200)
    actual = abs(g.relative_min_eigenvalue - lam[0] / lam[-1])  # against scipy quadrature
    assert actual / 3 < g.quadrature_error < 3 * actual


def test_linear_chain_does_not_depend_on_point_or_perturbation(chain):
    T = 5.0
    a = empirical_gramian(chain, {}, ["y"], horizon=T, samples=400)
    b = empirical_gramian(chain, {"x1": -3.0, "x3": 7.0, "u": 2.0}, ["y"], horizon=T,
                          samples=400, perturbation=5e-2)
    # analytic: superposition — a linear plant's Gramian is the same at every point
    assert rel(b.gramian, a.gramian) < 1e-6


def test_a_state_can_be_the_measured_output(chain):
    T = 4.0
    g = empirical_gramian(chain, {}, ["x1"], horizon=T, samples=800)
    C = np.array([[1.0, 0.0, 0.0]])
    A_s, C_s = scaled(CHAIN_A, C, CHAIN_X_NOMINAL, CHAIN_X_NOMINAL[:1])
    # analytic: x2 and x3 never reach x1 (lower-triangular chain) — a rank-one Gramian
    reference = quadrature_gramian(A_s, C_s, T)
    assert rel(g.gramian, reference) < 1e-4
    assert g.relative_min_eigenvalue < 1e-9
    assert abs(g.least_observable.components.get("x1", 0.0)) < 1e-6
    assert g.eigenvalues[1] < 1e-9 * g.eigenvalues[2]


def test_bilinear_drift_matches_the_closed_form(drift):
    T = 10.0
    g = empirical_gramian(drift, {}, ["y"], horizon=T, samples=2000)
    # analytic: p(t) = t, q(t) = ±ε e^{-t}, y = p (1 + q): the p runs differ by 2ε, the q runs
    # by 2ε t e^{-t}, so W = [[T, ∫t e^{-t}], [·, ∫t² e^{-2t}]] exactly
    e1 = 1.0 - (T + 1.0) * np.exp(-T)
    e2 = 0.25 - np.exp(-2 * T) * (T ** 2 / 2 + T / 2 + 0.25)
    expected = np.array([[T, e1], [e1, e2]])
    assert rel(g.gramian, expected) < 1e-5
    # the linearization at p = q = 0 has C = [1, 0]: q is invisible to it (analytic)
    np.testing.assert_allclose(g.linear.gramian, [[T, 0.0], [0.0, 0.0]], atol=1e-9)


def test_drift_makes_the_checks_disagree(drift):
    g = empirical_gramian(drift, {}, ["y"], horizon=10.0)
    report = analyze(drift.linearize({}), ObservabilitySettings(), outputs=["y"])
    agreement = compare_with_linear(report, g)
    assert not agreement.agree
    # q decays (der(q) = -q) and the linear sensor misses it: detectable, not observable
    assert agreement.linear_verdict == "unobservable-detectable"
    assert agreement.empirical_verdict == "observable"
    assert agreement.linear_relative_min_eigenvalue == 0.0
    assert agreement.empirical_relative_min_eigenvalue > 1e-3
    assert "disagree" in agreement.note


def test_lfp_cell_at_rest_agrees_with_its_linearization(bundled_fmus):
    T = 2000.0
    with load_model(bundled_fmus["lfp_cell"]) as model:
        point = {"soc": 0.5, "i_cell": 0.0, "t_amb": 25.0, "temp_cell": 25.0}
        g = empirical_gramian(model, point, ["v_term", "t_surf"], horizon=T, samples=800)
        lm = model.linearize(point)
        report = analyze(lm, ObservabilitySettings(), outputs=["v_term", "t_surf"])
    A_s, C_s = scaled(lm.A, lm.C, lm.state_nominal, np.ones(2))
    # scipy reference on the local linear model: small perturbations see the linearization
    reference = quadrature_gramian(A_s, C_s, T)
    assert rel(g.gramian, reference) < 1e-3
    assert g.relative_min_eigenvalue == pytest.approx(
        np.linalg.eigvalsh(reference)[0] / np.linalg.eigvalsh(reference)[-1], rel=1e-2)
    agreement = compare_with_linear(report, g)
    assert agreement.agree, agreement.note


def test_leaving_the_declared_range_is_a_warning(bundled_fmus):
    with load_model(bundled_fmus["lfp_cell"]) as model:
        g = empirical_gramian(model, {"soc": 0.5, "i_cell": 40.0}, ["v_term"], horizon=1200.0,
                              samples=400)
    # analytic: soc(t) = soc0 − i t / (3600 Q) with Q = 20 Ah; the run from soc0 = 0.5 − 1e-3
    # reaches 0 first, at t = 0.499 · 1800 s = 898.2 s (seen at the next sample, ≤ 6 s later)
    (warning,) = [w for w in g.warnings if w.startswith("soc leaves its declared range")]
    assert "on 8 of 8 simulations" in warning
    t_first = float(warning.split("first at t = ")[1].split(" s")[0])
    assert 898.2 <= t_first <= 898.2 + 1200.0 / 199


def test_compare_refuses_different_outputs(drift, chain):
    g = empirical_gramian(chain, {}, ["y"], horizon=2.0, samples=50)
    report = analyze(chain.linearize({}), ObservabilitySettings(), outputs=["y"])
    other = g.model_copy(update={"outputs": ["x1"]})
    with pytest.raises(UsageError, match="same outputs"):
        compare_with_linear(report, other)


def test_result_round_trips_through_json(drift):
    g = empirical_gramian(drift, {}, ["y"], horizon=5.0, samples=100)
    assert g.linear.condition == float("inf")  # analytic: the linear Gramian is singular
    back = EmpiricalGramian.model_validate_json(g.model_dump_json())
    np.testing.assert_array_equal(back.gramian, g.gramian)
    assert back.linear.condition == float("inf") and back.eigenvalues == g.eigenvalues


# ------------------------------------------------------------------------- verdicts
def test_verdict_of_a_known_gramian():
    names = ["a", "b"]
    # analytic: margin = √(λ_min / λ_max) = √(1e-2) = 0.1
    g = gramian_measure(np.diag([1.0, 1e-2]), np.eye(2), names)
    assert g.margin == pytest.approx(0.1)
    assert empirical_verdict(g, weak_threshold=1e-3) == "observable"
    assert empirical_verdict(g, weak_threshold=0.5) == "weak"
    decaying = gramian_measure(np.diag([1.0, 0.0]), np.diag([0.5, 0.1]), names)
    assert empirical_verdict(decaying, weak_threshold=1e-3) == "unobservable-detectable"
    held = gramian_measure(np.diag([1.0, 0.0]), np.diag([0.5, 1.0]), names)
    assert empirical_verdict(held, weak_threshold=1e-3) == "unobservable"
    assert held.least_observable.components["b"] == pytest.approx(1.0)
    # the tolerance never goes below the computation's own resolution
    noisy = gramian_measure(np.diag([1.0, 1e-12]), np.eye(2), names, resolution=1e-5)
    assert empirical_verdict(noisy, weak_threshold=1e-3, unobservable_tolerance=1e-14) \
        == "unobservable"


# ---------------------------------------------------------------- linear reference
def test_finite_horizon_gramian_of_a_stiff_plant():
    A = np.diag([-1000.0, -1.0])
    C = np.array([[1.0, 1.0]])
    T = 10.0
    W, Phi = finite_horizon_gramian(A, C, T)
    s = -np.add.outer(np.diag(A), np.diag(A))
    # analytic: diagonal A, W_ij = (1 − e^{−(a_i + a_j) T}) / (a_i + a_j) with a = −diag(A)
    np.testing.assert_allclose(W, (1 - np.exp(-s * T)) / s, rtol=1e-10)
    np.testing.assert_allclose(Phi, np.diag(np.exp(np.diag(A) * T)), rtol=1e-10, atol=1e-300)


def test_finite_horizon_gramian_of_an_unstable_plant():
    A = np.array([[0.2, 1.0], [0.0, -3.0]])
    C = np.array([[1.0, 0.5]])
    W, _ = finite_horizon_gramian(A, C, 6.0)
    assert rel(W, quadrature_gramian(A, C, 6.0)) < 1e-10  # scipy quadrature
