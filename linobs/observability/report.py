"""What an observability analysis returns, and the settings it takes (the study's ``[observability]``).

Every decision is made on the *scaled* system: states divided by their
nominal values, outputs by theirs (x̃ = x / x_nom, ỹ = y / y_nom), and the
report says which scaling was used.
"""

from __future__ import annotations

from typing import Literal

from pydantic import AliasChoices, BaseModel, ConfigDict, Field

Verdict = Literal["observable", "weak", "unobservable-detectable", "unobservable"]
VERDICTS: tuple[Verdict, ...] = ("observable", "weak", "unobservable-detectable", "unobservable")


def verdict_key(verdict: str) -> str:
    """The summary.json key of a verdict (``unobservable-detectable`` -> ``unobservable_detectable``)."""
    return verdict.replace("-", "_")


class _Result(BaseModel):
    """Base of the result models: infinite condition numbers survive JSON as "Infinity"."""

    model_config = ConfigDict(ser_json_inf_nan="strings")


class ObservabilitySettings(BaseModel):
    """Thresholds and options of the observability analysis."""

    model_config = ConfigDict(extra="forbid")

    outputs: list[str] | None = Field(
        None, description="measured outputs used (default: the study's measured outputs)")
    weak_threshold: float = Field(
        1e-3, gt=0, description="margin (relative PBH singular value) below which a point is 'weak'")
    unobservable_tolerance: float | None = Field(
        None, gt=0, description="margin below which a mode counts as unobservable; default "
                                "100·n·ε (rounding level of the scaled test)")
    sample_time: float | None = Field(
        None, gt=0, description="estimator sample time Ts [s] for the sampled-data check")
    gramian_horizon: float | None = Field(
        None, gt=0, description="horizon [s] of the finite-horizon Gramian used when A is not "
                                "stable; default 5x the slowest stable time constant")
    state_scales: dict[str, float] = Field(
        default_factory=dict, description="scale of a state for the analysis (default: its nominal "
                                          "value), e.g. the resolution that matters (1 % of soc)")
    output_scales: dict[str, float] = Field(
        default_factory=dict, description="scale of an output (default: its nominal value), "
                                          "e.g. the sensor's resolution")
    margin_normalization: Literal["balanced", "sum"] = Field(
        "balanced", validation_alias=AliasChoices("margin_normalization", "margin_normalisation"),
        description="balanced: each block row of [λI − A; C] divided by its own norm "
                    "(independent of the time unit); sum: divided by ‖A‖ + ‖C‖ (the earlier "
                    "spelling margin_normalisation is read too)")
    candidates: list[str] = Field(
        default_factory=list, description="extra measurable states for the sensor advice "
                                          "(declared outputs not measured are always candidates)")
    # envelope-level options
    refine_boundary: bool = Field(True, description="bisect grid edges whose verdicts differ")
    boundary_tolerance: float = Field(
        1e-3, gt=0, lt=1, description="bisection stops when the edge interval is below this "
                                      "fraction of the axis span")
    empirical: Literal["off", "sample", "all"] = Field(
        "sample", description="nonlinear check with the empirical observability Gramian: off, "
                              "on a sample of points, or at every point")
    empirical_points: int = Field(8, ge=1, description="points checked when empirical = 'sample'")
    empirical_perturbation: float = Field(
        1e-3, gt=0, lt=1, description="± perturbation of each state, relative to its nominal")
    map_axes: list[str] | None = Field(
        None, description="two grid axes for the margin map (default: the first two)")
    map_fixed: dict[str, float] = Field(
        default_factory=dict, description="values of the other axes in the map; axes not given "
                                          "are reduced to their worst case (smallest margin)")


class Scaling(_Result):
    """The nominal values the analysis divided by."""

    states: dict[str, float]
    outputs: dict[str, float]


class Mode(_Result):
    """One eigenvalue of A and how well the outputs see it (PBH)."""

    real: float
    imag: float
    margin: float = Field(description="σ_min([λI − A; C]) / (‖A‖ + ‖C‖) on the scaled system "
                                      "(or 'balanced', see ObservabilityReport.margin_normalization)")
    visibility: float = Field(
        0.0, description="‖C v‖₂ / (‖A‖ + ‖C‖) for the unit (scaled) right eigenvector v: the "
                         "PBH eigenvector test, graded; an upper bound of the margin that is "
                         "blind to nearby eigenvalues")
    observable: bool
    stable: bool = Field(description="Re λ < 0 (beyond the rounding level)")
    participation: dict[str, float] = Field(
        description="|component| of the (scaled) right eigenvector per state, largest first, "
                    "normalized to 1")

    def label(self) -> str:
        lam = f"{self.real:.3g}" + (f"{self.imag:+.3g}j" if self.imag else "")
        top = ", ".join(f"{n} {v:.2f}" for n, v in list(self.participation.items())[:3])
        return f"λ = {lam} ({top})"


class Direction(_Result):
    """A unit vector in (scaled) state space, as participation of named states."""

    components: dict[str, float] = Field(description="signed components, largest |value| first")

    def text(self, limit: int = 4) -> str:
        items = [(n, v) for n, v in self.components.items() if abs(v) >= 0.05][:limit]
        return ", ".join(f"{n} {v:+.2f}" for n, v in items)


class ObservabilityMatrixInfo(_Result):
    """[C; CA; …; CA^(n−1)] of the scaled system: reported, not the verdict."""

    singular_values: list[float]
    condition: float
    numerical_rank: int = Field(description="rank at the default matrix-rank tolerance")


class GramianInfo(_Result):
    kind: Literal["infinite", "finite"]
    horizon: float | None = Field(None, description="[s], finite-horizon Gramian only")
    eigenvalues: list[float] = Field(description="ascending")
    condition: float
    least_observable: Direction


class SamplingInfo(_Result):
    sample_time: float
    lost: bool = Field(description="observability lost by sampling (Kalman, Ho & Narendra 1963)")
    pathological_pairs: list[tuple[int, int, int]] = Field(
        default_factory=list, description="(mode i, mode j, k) with Im(λi − λj) = 2πk/Ts")
    margin: float = Field(description="smallest relative PBH singular value of (e^{A Ts}, C)")
    verdict: Verdict | None = Field(
        None, description="grade of the sampled pair alone (same thresholds); the report's "
                          "verdict is the worse of this and the continuous grade")


class SensorAdvice(_Result):
    candidate: str
    kind: Literal["output", "state"]
    verdict: Verdict
    margin: float
    gramian_min: float
    restores: bool = Field(description="turns an unobservable or weak point observable")


class ObservabilityReport(_Result):
    """The observability of one local model (A, C) with the chosen outputs."""

    verdict: Verdict
    margin: float = Field(description="smallest mode margin (see Mode.margin)")
    weak_threshold: float
    unobservable_tolerance: float
    margin_normalization: Literal["sum", "balanced"] = Field(
        "sum", validation_alias=AliasChoices("margin_normalization", "margin_normalisation"),
        description="margins relative to ‖A‖ + ‖C‖ ('sum'), or with each block row "
                    "divided by its own norm ('balanced': independent of the time unit)")
    outputs: list[str]
    scaling: Scaling
    modes: list[Mode]
    unobservable_dimension: int
    unobservable_basis: list[Direction]
    detectable: bool
    observability_matrix: ObservabilityMatrixInfo
    gramian: GramianInfo
    sampling: SamplingInfo | None = None
    sensor_advice: list[SensorAdvice] = Field(default_factory=list)
    summary: str = Field(description="one line in plain words")

    @property
    def weakest(self) -> Mode:
        return min(self.modes, key=lambda m: m.margin)
