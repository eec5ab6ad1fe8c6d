"""Scores of an estimator run on the nonlinear plant, and the schedule against a fixed gain.

Scores (:func:`assess_run`)
---------------------------
* RMS estimation error per state over the whole run and after convergence;
* convergence time per state: the first sample time after which |error|
  stays within the band — ``convergence_band`` × the interpolated
  steady-state σ (Kalman), or 5 % of the initial error (Luenberger; for a
  state that starts without error, 5 % of the range its true value covers);
  ``None`` when the last sample is outside the band;
* Kalman: the normalized estimation error squared NEES_k = e_kᵀ P_k⁻¹ e_k with
  P_k the steady-state covariance interpolated between the nodes (barycentric
  weights of the schedule), and its time average over the whole run and over
  the settled part (after every state converged), against the two-sided
  chi-square bounds of a single run, chi2.ppf(α/2, N·n)/N and
  chi2.ppf(1 − α/2, N·n)/N, α = 1 − ``nees_confidence``.  The bounds assume
  errors independent from sample to sample; a slow filter's correlated
  errors spread the average more widely than they say;
* the fractions of samples at which the schedule was not usable (a refused
  node nearby: prediction only) or outside the grid.

Every number is JSON-safe: a quantity that does not exist (no convergence, no
covariance) is ``None``, never NaN or infinity.

References
----------
Bar-Shalom, Y., Li, X. R. & Kirubarajan, T. (2001). Estimation with
Applications to Tracking and Navigation. Wiley, §5.4 (NEES and its
chi-square consistency bounds).
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Literal

import numpy as np
from pydantic import BaseModel, Field
from scipy.stats import chi2

from linobs.errors import UsageError
from linobs.estimator.settings import ValidationSettings

if TYPE_CHECKING:  # pragma: no cover
    from linobs.estimator.nonlinear import EstimatorRun

__all__ = ["Comparison", "NeesResult", "NonlinearReport", "StateComparison", "StateResult",
           "assess_run", "compare"]


class StateResult(BaseModel):
    """Scores of one state's estimation error (None: does not exist, see the module notes)."""

    rms: float | None = Field(description="RMS error over the whole run; None: the estimate "
                                          "diverged (non-finite)")
    rms_converged: float | None = Field(description="RMS error after the convergence time")
    convergence_time: float | None = Field(
        description="[s] from the start until |error| stays within the band; None: never")
    band: Literal["covariance", "initial_error"] = Field(
        description="covariance: convergence_band × σ; initial_error: 5 % of |e₀|")
    band_final: float | None = Field(description="band width at the last sample")
    initial_error: float
    final_error: float | None
    max_error_converged: float | None = Field(description="largest |error| after convergence")


class NeesResult(BaseModel):
    """Time-averaged NEES of one window against the chi-square bounds of a single run."""

    window: Literal["whole run", "after convergence"]
    start_time: float | None = Field(description="[s] first sample of the window")
    samples: int = Field(description="samples with a covariance in the window")
    mean: float | None
    lower: float | None
    upper: float | None
    confidence: float
    inside: bool | None = Field(description="lower <= mean <= upper; None without samples")


class NonlinearReport(BaseModel):
    """How one estimator did on the nonlinear plant."""

    label: str
    kind: str
    form: str
    samples: int
    sample_time: float
    duration: float
    states: list[str]
    per_state: dict[str, StateResult]
    converged: bool = Field(description="every state converged")
    settled_time: float | None = Field(description="[s] latest convergence time; None: not all")
    nees: list[NeesResult] = Field(default_factory=list, description="Kalman only")
    unusable_fraction: float = Field(description="samples where a refused node was involved")
    outside_fraction: float = Field(description="samples outside the grid (clamped / nearest)")
    noise_std: dict[str, float]
    seed: int
    notes: list[str] = Field(default_factory=list)


def assess_run(run: EstimatorRun, settings: ValidationSettings) -> NonlinearReport:
    """Score an :class:`EstimatorRun` against its truth (module notes)."""
    e = run.errors
    N, n = e.shape
    t = run.times - run.times[0]
    kalman = run.sigma is not None
    per_state: dict[str, StateResult] = {}
    starts: list[int | None] = []
    notes: list[str] = []
    for i, name in enumerate(run.state_names):
        if kalman:
            band = settings.convergence_band * run.sigma[:, i]  # type: ignore[index]
            band = np.where(np.isfinite(band), band, -np.inf)  # no covariance: outside
        else:
            width = 0.05 * abs(e[0, i])
            if width == 0.0:
                width = 0.05 * float(np.ptp(run.truth[:, i]))
                notes.append(f"{name} starts without error: its band is 5 % of the range its "
                             f"true value covers")
            band = np.full(N, width)
        outside = ~(np.abs(e[:, i]) <= band)  # a non-finite error is outside
        last_out = int(np.nonzero(outside)[0][-1]) if outside.any() else -1
        k = None if last_out == N - 1 else last_out + 1
        starts.append(k)
        after = e[k:, i] if k is not None else None
        per_state[name] = StateResult(
            rms=_num(np.sqrt(np.mean(e[:, i] ** 2))),
            rms_converged=None if after is None else _num(np.sqrt(np.mean(after ** 2))),
            convergence_time=None if k is None else float(t[k]),
            band="covariance" if kalman else "initial_error",
            band_final=_num(band[-1]), initial_error=float(e[0, i]),
            final_error=_num(e[-1, i]),
            max_error_converged=None if after is None else _num(np.max(np.abs(after))))
    converged = all(k is not None for k in starts)
    settled = max(k for k in starts if k is not None) if converged else None  # type: ignore[type-var]
    nees: list[NeesResult] = []
    if run.nees is not None:
        nees.append(_nees_window(run.nees, t, 0, n, settings.nees_confidence, "whole run"))
        if settled is not None:
            nees.append(_nees_window(run.nees, t, int(settled), n, settings.nees_confidence,
                                     "after convergence"))
    return NonlinearReport(
        label=run.label, kind=run.kind, form=run.form, samples=N,
        sample_time=float(t[1] - t[0]) if N > 1 else 0.0, duration=float(t[-1]),
        states=list(run.state_names), per_state=per_state, converged=converged,
        settled_time=None if settled is None else float(t[int(settled)]), nees=nees,
        unusable_fraction=float(np.mean(~run.usable)), outside_fraction=float(np.mean(run.outside)),
        noise_std=dict(run.noise_std), seed=run.seed, notes=notes)


def _nees_window(values: np.ndarray, t: np.ndarray, start: int, n: int, confidence: float,
                 window: Literal["whole run", "after convergence"]) -> NeesResult:
    part = values[start:]
    part = part[np.isfinite(part)]
    N = int(part.size)
    if N == 0:
        return NeesResult(window=window, start_time=float(t[start]), samples=0, mean=None,
                          lower=None, upper=None, confidence=confidence, inside=None)
    # Bar-Shalom, Li & Kirubarajan (2001) §5.4: N·mean ~ chi-square with N·n degrees of freedom
    alpha = 1.0 - confidence
    lower = float(chi2.ppf(alpha / 2, N * n) / N)
    upper = float(chi2.ppf(1 - alpha / 2, N * n) / N)
    mean = float(part.mean())
    return NeesResult(window=window, start_time=float(t[start]), samples=N, mean=_num(mean),
                      lower=lower, upper=upper, confidence=confidence,
                      inside=bool(lower <= mean <= upper) if math.isfinite(mean) else None)


def _num(x: float) -> float | None:
    x = float(x)
    return x if math.isfinite(x) else None


class StateComparison(BaseModel):
    schedule_rms: float | None = Field(description="None: diverged")
    fixed_rms: float | None = Field(description="None: diverged")
    ratio: float | None = Field(description="schedule RMS / fixed-gain RMS; None if the latter is 0")
    improvement_percent: float | None = Field(description="(1 − ratio) × 100: > 0, the schedule "
                                                          "is better")


class Comparison(BaseModel):
    """The schedule against the fixed gain, per state (whole-run RMS error)."""

    schedule_label: str
    fixed_label: str
    per_state: dict[str, StateComparison]
    summary: list[str]


def compare(schedule_report: NonlinearReport, fixed_report: NonlinearReport) -> Comparison:
    """Per-state RMS of both estimators, their ratio and a sentence per state."""
    if schedule_report.states != fixed_report.states:
        raise UsageError("the two reports estimate different states and cannot be compared")
    per_state, summary = {}, []
    for name in schedule_report.states:
        a = schedule_report.per_state[name].rms
        b = fixed_report.per_state[name].rms
        ratio = a / b if a is not None and b is not None and b > 0 else None
        gain = None if ratio is None else (1.0 - ratio) * 100.0
        per_state[name] = StateComparison(schedule_rms=a, fixed_rms=b, ratio=ratio,
                                          improvement_percent=gain)
        if a is None or b is None:
            which = " and ".join(w for w, v in (("the schedule", a), ("the fixed gain", b))
                                 if v is None)
            summary.append(f"{name}: {which} diverged (non-finite estimate); no RMS to compare")
        elif gain is None:
            summary.append(f"{name}: the fixed gain has no error (RMS 0); schedule RMS {a:.4g}")
        elif gain >= 0:
            summary.append(f"the schedule beats the fixed gain by {gain:.1f} % on {name} RMS "
                           f"({a:.4g} vs {b:.4g})")
        else:
            summary.append(f"the fixed gain beats the schedule by {(1 - b / a) * 100:.1f} % on "
                           f"{name} RMS ({b:.4g} vs {a:.4g})")
    return Comparison(schedule_label=schedule_report.label, fixed_label=fixed_report.label,
                      per_state=per_state, summary=summary)
