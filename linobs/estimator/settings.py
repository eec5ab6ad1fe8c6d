"""Estimator design and validation settings (the study's ``[estimator]`` and ``[validation]``).

Conventions
-----------
* The estimator runs at the sample time ``Ts``; the plant's local models are
  discretized by exact zero-order hold.
* ``process_noise`` gives, per state, the power spectral density q of a white
  noise added to that state's derivative (units of the state² per second);
  ``input_noise`` gives, per input, the PSD of a white noise on the input
  (units² · s), entering through B.  Together Q_c = diag(q) + B diag(r_u) Bᵀ,
  discretized by Van Loan's method.
* ``measurement_noise`` gives, per measured output, the **standard deviation**
  σ of one sample; the discrete design uses R = diag(σ²), a continuous design
  R_c = diag(σ²)·Ts (the PSD that gives the same sampled variance).
"""

from __future__ import annotations

from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, model_validator


class PolePolicy(BaseModel):
    """How the Luenberger observer's error-dynamics poles are chosen at each point."""

    model_config = ConfigDict(extra="forbid")

    kind: Literal["explicit", "speedup", "bandwidth"] = "speedup"
    poles: list[tuple[float, float]] = Field(
        default_factory=list, description="explicit: continuous-time poles as (real, imag) pairs "
                                          "[1/s]; complex ones in conjugate pairs")
    factor: float = Field(3.0, gt=1, description="speedup: observer poles = factor × plant poles "
                                                 "(real part), with min_rate for slow ones")
    min_rate: float = Field(0.0, ge=0, description="[1/s] floor for |Re| of every observer pole "
                                                  "(plant integrators have Re = 0)")
    bandwidth: float = Field(1.0, gt=0, description="bandwidth: natural frequency ω_n [rad/s]")
    damping: float = Field(0.7, gt=0, description="bandwidth: damping ratio ζ of the pole pattern")

    @model_validator(mode="after")
    def _explicit_has_poles(self) -> "PolePolicy":
        if self.kind == "explicit" and not self.poles:
            raise ValueError("kind = 'explicit' needs poles = [[re, im], ...]")
        return self


class EstimatorSettings(BaseModel):
    """The scheduled estimator to design at every grid point."""

    model_config = ConfigDict(extra="forbid")

    kind: Literal["kalman", "luenberger"] = "kalman"
    sample_time: float = Field(1.0, gt=0, description="estimator sample time Ts [s]")
    domain: Literal["discrete", "continuous"] = Field(
        "discrete", description="design on the sampled model (Φ, Γ) or the continuous one (A, B)")
    form: Literal["predictor", "filter"] = Field(
        "filter", description="predictor: correct with the previous sample (x̂ₖ₊₁|ₖ); filter: the "
                              "current-estimate form (x̂ₖ|ₖ)")
    outputs: list[str] | None = Field(None, description="measured outputs (default: the study's)")
    process_noise: dict[str, float] = Field(
        default_factory=dict, description="state -> PSD of the noise on its derivative [unit²/s]")
    input_noise: dict[str, float] = Field(
        default_factory=dict, description="input -> PSD of the noise on that input [unit²·s]")
    measurement_noise: dict[str, float] = Field(
        default_factory=dict, description="output -> standard deviation of one sample [unit]")
    poles: PolePolicy = Field(default_factory=PolePolicy)
    consistent_poles: bool = Field(
        True, description="Luenberger: one pole pattern for the whole grid (the slowest node's), so "
                          "that gains vary smoothly between nodes")
    continuity_threshold: float = Field(
        0.5, gt=0, description="flag neighboring nodes whose gains differ by more than this "
                               "relative change (‖ΔL‖ / max ‖L‖)")


class ScenarioSegment(BaseModel):
    """Inputs held or ramped linearly over one stretch of the validation scenario."""

    model_config = ConfigDict(extra="forbid")

    duration: float = Field(gt=0, description="[s]")
    inputs: dict[str, float] = Field(description="input -> value at the end of the segment "
                                                 "(linear ramp from the previous value)")
    step: bool = Field(False, description="jump to the values at the start of the segment and "
                                          "hold them (instead of a ramp); inputs not named hold")


class ValidationSettings(BaseModel):
    """How the schedule is validated between the nodes and on the nonlinear plant."""

    model_config = ConfigDict(extra="forbid")

    random_points: int = Field(50, ge=0, description="random interior points of the frozen-point "
                                                     "check (besides every cell center)")
    seed: int = Field(0, description="seed of the random points and of the measurement noise")
    spectral_radius_max: float = Field(
        0.999, gt=0, le=1, description="discrete: error dynamics Φ − L C (or its filter form) must "
                                       "have spectral radius at most this")
    decay_rate_min: float = Field(
        0.0, ge=0, description="continuous: every error mode must decay at least this fast [1/s]")
    initial_state: dict[str, float] = Field(
        default_factory=dict, description="true initial state of the scenario (others: first "
                                          "grid point's trimmed state)")
    initial_error: dict[str, float] = Field(
        default_factory=dict, description="estimate − truth at the start, per state")
    scenario: list[ScenarioSegment] = Field(
        default_factory=list, description="input profile; empty: generated to sweep the envelope")
    nees_confidence: float = Field(0.95, gt=0, lt=1, description="two-sided NEES bounds")
    fixed_gain: bool = Field(True, description="also run the best single fixed-gain estimator "
                                               "(designed at the envelope's center) for comparison")
    convergence_band: float = Field(
        3.0, gt=0, description="converged when |error| stays below this many standard deviations "
                               "of the steady-state covariance (Kalman) or 5 % of the initial "
                               "error (Luenberger)")
