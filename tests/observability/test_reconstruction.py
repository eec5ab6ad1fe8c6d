"""Initial-state reconstruction against simulations by scipy.signal.lsim."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.signal

from linobs.errors import UsageError
from linobs.observability.reconstruction import (
    reconstruct_initial_state,
    zero_order_hold,
)
from tests.observability.models import linear_model

# an off-equilibrium affine local model (dx0 ≠ 0) with a feedthrough, states of mixed size
A = np.array([[-0.5, 2.0, 0.0], [-2.0, -0.5, 0.0], [0.3, 0.0, -0.05]])
B = np.array([[1.0], [0.0], [0.2]])
C = np.array([[1.0, 0.0, 0.0], [0.0, 0.0, 0.01]])
D = np.array([[0.1], [0.0]])
X0 = np.array([1.0, -2.0, 300.0])      # operating point
U0 = np.array([0.5])
Y0 = np.array([0.7, 3.0])
DX0 = np.array([0.02, 0.0, -0.1])
TRUE = np.array([1.3, -1.1, 304.0])     # x(t₀) to recover


def _model():  # type: ignore[no-untyped-def]
    return linear_model(A, B, C, D, states=["p", "q", "temp"], inputs=["u"],
                        outputs=["y_p", "y_t"], x0=X0, u0=U0, y0=Y0, dx0=DX0,
                        state_nominal=np.array([1.0, 1.0, 100.0]),
                        output_nominal=np.array([1.0, 2.0]))


def _simulate(times: np.ndarray, u: np.ndarray) -> np.ndarray:
    """Outputs of the affine model by scipy.signal.lsim with held inputs (reference library).

    In δ-coordinates the model is linear with the constant dx0 as one more input equal to 1.
    """
    system = (A, np.column_stack([B, DX0]), C, np.column_stack([D, np.zeros(2)]))
    U = np.column_stack([u - U0, np.ones_like(times)])
    _, y, _ = scipy.signal.lsim(system, U, times - times[0], X0=TRUE - X0, interp=False)
    return y + Y0


def _log(count: int = 80, ts: float = 0.1) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    times = 3.0 + ts * np.arange(count)
    u = (U0 + 0.3 * np.sin(0.7 * times))[:, None]
    return times, u, _simulate(times, u[:, 0])


def test_recovers_the_initial_state_from_noiseless_samples() -> None:
    times, u, y = _log()
    result = reconstruct_initial_state(_model(), times, u, y)
    np.testing.assert_allclose(result.vector, TRUE, rtol=0, atol=1e-9 * np.abs(TRUE).max())
    assert result.initial_state["temp"] == pytest.approx(TRUE[2], abs=1e-9 * 304)
    assert result.samples == 80 and result.sample_time == pytest.approx(0.1)
    assert result.rank == 3 and np.isfinite(result.condition) and not result.resampled
    assert result.residual_rms < 1e-10
    assert result.scaling.states["temp"] == 100.0


def test_error_grows_in_proportion_to_the_noise() -> None:
    times, u, y = _log()
    rng = np.random.default_rng(1)
    z = rng.standard_normal(y.shape)
    model = _model()
    errors = []
    for level in (1e-6, 1e-4, 1e-2):
        result = reconstruct_initial_state(model, times, u, y + level * z)
        errors.append(np.linalg.norm((result.vector - TRUE) / [1.0, 1.0, 100.0]))
        # least-squares perturbation bound (Golub & Van Loan 2013, section 5.3): the scaled error
        # is at most ‖noise‖ / σ_min(O_N); σ_max(O_N) ≥ ‖C̃‖ so σ_min ≥ ‖C̃‖ / condition
        sigma_min = np.linalg.norm(C / np.array([[1.0], [2.0]]) * [1.0, 1.0, 100.0], 2) \
            / result.condition
        assert errors[-1] <= level * np.linalg.norm(z / [1.0, 2.0]) / sigma_min * (1 + 1e-6)
    # the estimate is linear in the data: the same noise pattern scaled by 100 moves the
    # estimate 100 times further (analytic), up to the noiseless rounding error
    assert errors[1] / errors[0] == pytest.approx(100.0, rel=1e-3)
    assert errors[2] / errors[1] == pytest.approx(100.0, rel=1e-3)


def test_non_uniform_log_is_resampled() -> None:
    # one lsim run on a fine uniform grid (1 ms) with the input held for 0.1 s at a time;
    # logged: every 0.1 s plus one extra sample 37 ms after each, a non-uniform log.
    # Resampling at Ts = 0.1 lands on the 0.1 s samples, so the recovery stays exact
    fine = 3.0 + 0.001 * np.arange(3901)
    held = U0 + 0.3 * np.sin(0.7 * (3.0 + 0.1 * np.floor((fine - 3.0) / 0.1 + 1e-9)))
    y_fine = _simulate(fine, held)              # reference library
    picks = np.sort(np.concatenate([np.arange(0, 3901, 100), np.arange(37, 3900, 100)]))
    result = reconstruct_initial_state(_model(), fine[picks], held[picks, None], y_fine[picks],
                                       sample_time=0.1)
    assert result.resampled and result.samples == 40
    assert any("resampled" in w for w in result.warnings)
    np.testing.assert_allclose(result.vector, TRUE, atol=1e-8 * 304)


def test_unobservable_model_warns_and_returns_minimum_norm() -> None:
    # x0' = −x0 (measured), x1' = −2 x1 (never reaches the output): x1(t₀) is undetermined
    A2 = np.diag([-1.0, -2.0])
    model = linear_model(A2, np.zeros((2, 1)), np.array([[1.0, 0.0]]))
    times = 0.1 * np.arange(30)
    y = np.exp(-times)[:, None]            # x(0) = (1, anything): analytic free response
    result = reconstruct_initial_state(model, times, None, y)
    assert result.rank == 1
    assert any("determine only 1 of 2" in w for w in result.warnings)
    assert result.vector[0] == pytest.approx(1.0, abs=1e-10)
    assert result.vector[1] == pytest.approx(0.0, abs=1e-10)
    assert result.least_determined.components == pytest.approx({"x1": 1.0})


def test_clear_errors_for_malformed_logs() -> None:
    times, u, y = _log(count=10)
    model = _model()
    with pytest.raises(UsageError, match="y_samples has shape"):
        reconstruct_initial_state(model, times, u, y[:-1])
    with pytest.raises(UsageError, match="u_samples has shape"):
        reconstruct_initial_state(model, times, u[:-2], y)
    with pytest.raises(UsageError, match="strictly increasing"):
        reconstruct_initial_state(model, times[::-1], u, y)
    with pytest.raises(UsageError, match="no variable named 'y_x'"):
        reconstruct_initial_state(model, times, u, y[:, :1], outputs=["y_x"])


def test_zero_order_hold_matches_scipy() -> None:
    # scipy.signal.cont2discrete with the zero-order-hold method (reference library)
    Ad, Bd, *_ = scipy.signal.cont2discrete((A, B, C, D), 0.25, method="zoh")
    Phi, Gamma = zero_order_hold(A, B, 0.25)
    np.testing.assert_allclose(Phi, Ad, rtol=1e-12, atol=1e-14)
    np.testing.assert_allclose(Gamma, Bd, rtol=1e-12, atol=1e-14)
