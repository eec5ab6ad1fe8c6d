"""The nonlinear observability check: the empirical observability Gramian from simulations.

Each state is perturbed by ± ε_i = ± p · x_nom,i around the operating point
(p = ``perturbation``), the model is simulated over [0, T] with inputs and
parameters held, and the scaled output differences give

    W_ij = 1 / (4 p²) ∫₀ᵀ (ỹ⁺ⁱ − ỹ⁻ⁱ)ᵀ (ỹ⁺ʲ − ỹ⁻ʲ) dt,

in scaled coordinates x̃ = x / x_nom, ỹ = y / y_nom (the same scaling as the
linear analysis).  For a linear plant the ± construction is exact, and W is
the finite-horizon observability Gramian ∫₀ᵀ e^{Ãᵀt} C̃ᵀ C̃ e^{Ãt} dt.

The integral is the trapezoidal rule over the sample times, which are graded
towards t = 0 when the linearization decays faster than a uniform spacing
resolves.  Its weights are positive, so W stays a Gram matrix (positive
semi-definite) whose small eigenvalues are not spoilt by the quadrature; the
difference from composite Simpson on the same samples estimates the error.

The measure compared with the linear analysis
----------------------------------------------
Both sides use the same number: the smallest eigenvalue of a finite-horizon
Gramian over the same horizon T and scaling, relative to the largest,
r = λ_min / λ_max.  Its square root, the *Gramian margin* m = √r, is the
smallest singular value of the (scaled) map from initial state to output
trajectory relative to the largest — a relative singular value, like the
PBH margin — and is judged against the same ``weak_threshold`` and
``unobservable_tolerance``.  The linear side is the Gramian of the local
linearization at the same point (Van Loan block exponential), so a
difference between the two is due to the nonlinearity (or the drift of a
point that is not an equilibrium), not to a different yardstick.

Unobservable directions count as detectable when they decay over the
horizon: the (scaled) transition map Φ(T), taken from the same ± runs as
Φ_·i = (x̃⁺ⁱ(T) − x̃⁻ⁱ(T)) / (2p), restricted to the unobservable directions
has spectral radius below 0.999.

Limits
------
* Noise floor: the integration error (``rtol`` relative to the states'
  magnitudes) over the perturbation bounds the smallest margin that can be
  told from zero, ``resolution = 10 · rtol · max(1, max |x̃₀|) / p``; the
  verdict never uses a tolerance below it, and the comparison applies the
  larger of both sides' floors to both (the linear side's is 10 √(n ε)).
* The central ± construction cancels even-order terms: with y = x² at
  x = 0 the runs from +ε and −ε give the same output, and the direction is
  (correctly) reported unobservable — x and −x cannot be told apart.
* Events are not handled (see :mod:`linobs.observability.simulate`);
  sign changes of event indicators and states leaving their declared range
  are reported as warnings.

References
----------
Lall, S., Marsden, J. E. & Glavaški, S. (2002). A subspace approach to
balanced truncation for model reduction of nonlinear control systems.
International Journal of Robust and Nonlinear Control 12(6), 519-535.

Krener, A. J. & Ide, K. (2009). Measures of unobservability. Proceedings of
the 48th IEEE Conference on Decision and Control, 6401-6406.

Van Loan, C. F. (1978). Computing integrals involving the matrix
exponential. IEEE Transactions on Automatic Control 23(3), 395-404.

Davis, P. J. & Rabinowitz, P. (1984). Methods of Numerical Integration,
2nd ed. Academic Press (trapezoidal and composite Simpson rules; the error
of the lower-order rule estimated by the difference of the two).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING

import numpy as np
from pydantic import BaseModel, ConfigDict, Field
from scipy.integrate import simpson

from linobs.errors import EvaluationError, ModelError, UsageError
from linobs.linear.linearize import linearize
from linobs.model.catalogue import unknown_name_message
from linobs.observability.gramian_margin import (
    GramianMeasure,
    gramian_measure,
    margin_verdict,
)
from linobs.observability.linear_horizon import finite_horizon_gramian
from linobs.observability.report import ObservabilityReport, Scaling, Verdict
from linobs.observability.scaling import (scale_system, scales_with_overrides, scaling_record)
from linobs.observability.simulate import (
    sample_times,
    simulate_outputs,
    simulate_trajectory,
)
from linobs.operating.point import resolve_point

if TYPE_CHECKING:  # pragma: no cover
    from linobs.model.instance import Model

__all__ = ["Agreement", "EmpiricalGramian", "GramianMeasure", "compare_with_linear",
           "empirical_gramian", "empirical_verdict", "gramian_measure", "simulate_outputs"]

empirical_verdict = margin_verdict
"""The verdict of a Gramian margin (:func:`~linobs.observability.gramian_margin.margin_verdict`)."""

#: A noise floor of the empirical margin above this is reported as a warning.
RESOLUTION_WARNING = 1e-4


class EmpiricalGramian(GramianMeasure):
    """The empirical observability Gramian at one operating point, with its linear counterpart."""

    point: dict[str, float] = Field(description="states, inputs and parameters of the point")
    states: list[str]
    outputs: list[str]
    horizon: float = Field(description="[s]")
    samples: int = Field(description="sample times used by the trapezoidal rule")
    perturbation: float = Field(description="± perturbation of each state relative to its nominal")
    scaling: Scaling
    quadrature_error: float = Field(
        description="estimated error of r from the trapezoidal rule (its difference from "
                    "composite Simpson on the same samples), absolute")
    simulations: int
    evaluations: int = Field(description="FMU evaluations spent by the integrator")
    linear: GramianMeasure = Field(
        description="the finite-horizon Gramian of the linearization at the same point, horizon "
                    "and scaling (the like-for-like reference)")
    warnings: list[str] = Field(default_factory=list)


class Agreement(BaseModel):
    """Whether the linear and the nonlinear check reach the same verdict at a point."""

    model_config = ConfigDict(ser_json_inf_nan="strings")

    agree: bool
    linear_verdict: Verdict = Field(description="from the linear finite-horizon Gramian margin")
    empirical_verdict: Verdict = Field(description="from the empirical Gramian margin")
    report_verdict: Verdict = Field(
        description="the per-point verdict of the linear analysis (PBH)")
    linear_relative_min_eigenvalue: float
    empirical_relative_min_eigenvalue: float
    linear_margin: float
    empirical_margin: float
    unobservable_tolerance: float = Field(description="the tolerance applied to both margins")
    weak_threshold: float
    horizon: float
    perturbation: float
    note: str


def empirical_gramian(model: "Model", point: Mapping[str, float], outputs: Sequence[str], *,
                      horizon: float, samples: int = 200, perturbation: float = 1e-3,
                      method: str = "LSODA", rtol: float = 1e-9,
                      state_scales: Mapping[str, float] | None = None,
                      output_scales: Mapping[str, float] | None = None) -> EmpiricalGramian:
    """The empirical observability Gramian of ``model`` at ``point`` over ``horizon``.

    Parameters
    ----------
    model : Model
        A loaded model; its parameters are set to those of the point.
    point : mapping
        States, inputs and parameters (e.g. ``TrimResult.point()``); names not
        given take start values (states, inputs) or keep current values (parameters).
    outputs : sequence of str
        Measured outputs: model outputs, or states measured directly.
    horizon : float
        Simulation window T [s].
    samples : int
        Sample times over [0, T] for the trapezoidal rule (graded towards t = 0
        when the linearization has decays faster than the uniform spacing resolves).
    perturbation : float
        ± perturbation p of each state, relative to its nominal value.
    method : {"LSODA", "BDF", "Radau"}
        Integration method; the implicit methods use the linearization's A as Jacobian.
    rtol : float
        Relative tolerance of the integration (absolute: ``rtol`` × state nominals).
    state_scales, output_scales
        Scales replacing the nominal values by name (as in the linear analysis's settings);
        the perturbation is relative to the state's scale.

    Returns
    -------
    EmpiricalGramian
        W, its eigen-decomposition, condition, margin, the least observable
        direction, the linear counterpart and warnings.

    Raises
    ------
    UsageError
        Unknown output names, a bad horizon, sample count or perturbation.
    ModelError
        A simulation failed (the message names the point).

    References
    ----------
    Lall, Marsden & Glavaški (2002); Krener & Ide (2009); Van Loan (1978) — see the module.
    """
    if not (0 < perturbation < 1):
        raise UsageError(f"the perturbation is relative to the nominal values and must lie in "
                         f"(0, 1), got {perturbation!r}")
    op = resolve_point(model, point, allow_outside_bounds=True)
    model.set_parameters(op.parameters)
    x0, u0 = op.x(), op.u()
    xn = scales_with_overrides(model.state_names, model.x_nominal, state_scales)
    rows, yn = _output_rows(model, outputs, xn, output_scales)
    try:
        lin = linearize(model, op.as_mapping(), method="auto", allow_outside_bounds=True)
    except EvaluationError as exc:
        raise ModelError(f"empirical Gramian at {model.point_text(x0, u0)}: the model cannot be "
                         f"linearized there: {exc}") from None
    A_s, C_s = scale_system(lin.A, np.vstack([lin.C, np.eye(model.nx)])[rows], xn, yn)
    rates = np.abs(np.linalg.eigvals(A_s).real) if model.nx else np.zeros(0)
    times = sample_times(horizon, samples, float(rates.max()) if rates.size else None)

    n, m = model.nx, len(times)
    diffs = np.empty((n, m, len(rows)))
    phi = np.empty((n, n))
    warnings: list[str] = []
    crossings: dict[str, list[tuple[float, float]]] = {}
    exits: dict[str, list[float]] = {}
    evaluations = 0
    for i in range(n):
        ends = []
        for sign in (1.0, -1.0):
            x = x0.copy()
            x[i] += sign * perturbation * xn[i]
            warnings.extend(_bound_warning(model, i, x[i]))
            try:
                traj = simulate_trajectory(model, x, u0, times, jacobian=lin.A, method=method,
                                           rtol=rtol)
            except ModelError as exc:
                raise ModelError(f"empirical Gramian at {model.point_text(x0, u0)}, "
                                 f"{model.state_names[i]} {'+' if sign > 0 else '-'}"
                                 f"{perturbation:g} of nominal: {exc}") from None
            evaluations += traj.evaluations
            for name, t_a, t_b in traj.crossings:
                crossings.setdefault(name, []).append((t_a, t_b))
            for name, t_a in traj.exits:
                exits.setdefault(name, []).append(t_a)
            ends.append((np.hstack([traj.outputs, traj.states]), traj.states[-1]))
        diffs[i] = (ends[0][0][:, rows] - ends[1][0][:, rows]) / yn / (2 * perturbation)
        phi[:, i] = (ends[0][1] - ends[1][1]) / xn / (2 * perturbation)

    for name, spans in crossings.items():
        first = min(spans)
        warnings.append(f"{name} changed sign on {len(spans)} of {2 * n} simulations (first "
                        f"between t = {first[0]:.4g} s and {first[1]:.4g} s): the trajectories "
                        f"cross a switching surface and events are not handled, the equations "
                        f"were integrated as given")
    for name, starts in exits.items():
        warnings.append(f"{name} leaves its declared range on {len(starts)} of {2 * n} "
                        f"simulations (first at t = {min(starts):.4g} s): the horizon reaches "
                        f"beyond the model's declared validity; consider a shorter horizon")
    W = _gram(diffs, _trapezoid_weights(times))
    W_check = simpson(np.einsum("ikp,jkp->ijk", diffs, diffs), x=times, axis=-1)
    level = max(1.0, float(np.max(np.abs(x0 / xn)))) if n else 1.0
    resolution = 10 * rtol * level / perturbation
    if resolution > RESOLUTION_WARNING:
        k = int(np.argmax(np.abs(x0 / xn)))
        warnings.append(f"margins below {resolution:.1g} cannot be resolved: "
                        f"{model.state_names[k]} is {abs(x0[k] / xn[k]):.3g} times its nominal "
                        f"value, so the integration error swamps a ±{perturbation:g}·nominal "
                        f"perturbation; declare nominal values near the operating magnitudes or "
                        f"use a larger perturbation")
    measure = gramian_measure(W, phi, model.state_names, resolution=resolution)
    quad_err = abs(gramian_measure(W_check, phi, model.state_names).relative_min_eigenvalue
                   - measure.relative_min_eigenvalue)
    r = measure.relative_min_eigenvalue
    if r > 0 and measure.margin > resolution and quad_err > 0.1 * r:
        warnings.append(f"the trapezoidal rule over {m} samples leaves an estimated "
                        f"{quad_err / r:.0%} error on the smallest relative eigenvalue; "
                        f"use more samples")

    W_lin, phi_lin = finite_horizon_gramian(A_s, C_s, horizon)
    linear = gramian_measure(W_lin, phi_lin, model.state_names,
                             resolution=10 * np.sqrt(max(n, 1) * np.finfo(float).eps))
    return EmpiricalGramian(
        **dict(measure), point=op.as_mapping(), states=list(model.state_names),
        outputs=list(outputs), horizon=float(horizon), samples=m, perturbation=perturbation,
        scaling=scaling_record(model.state_names, xn, list(outputs), yn),
        quadrature_error=quad_err, simulations=2 * n, evaluations=evaluations, linear=linear,
        warnings=warnings)


def compare_with_linear(report: ObservabilityReport, empirical: EmpiricalGramian) -> Agreement:
    """Compare the nonlinear check with the linear analysis at the same point.

    Both margins (see the module: √ of the smallest relative eigenvalue of a
    finite-horizon Gramian, same horizon and scaling) are judged with the
    report's thresholds and one tolerance, the largest of the report's and
    the two Gramians' resolutions.  ``agree`` is whether the two verdicts are
    the same.

    Raises
    ------
    UsageError
        The report and the empirical Gramian use different outputs or scaling.
    """
    if list(report.outputs) != list(empirical.outputs):
        raise UsageError(f"the linear report uses outputs {report.outputs} but the empirical "
                         f"Gramian {empirical.outputs}; compute both with the same outputs")
    scales = [*report.scaling.states.items(), *report.scaling.outputs.items()]
    theirs = {**empirical.scaling.states, **empirical.scaling.outputs}
    for name, value in scales:
        other = theirs.get(name)
        if other is None or not np.isclose(abs(value), other, rtol=1e-12):
            raise UsageError(f"the linear report scales {name} by {value:g} but the empirical "
                             f"Gramian by {other}; compute both with the same nominal values")
    tol = max(report.unobservable_tolerance, empirical.resolution, empirical.linear.resolution)
    weak = report.weak_threshold
    lin_v = empirical_verdict(empirical.linear, weak_threshold=weak, unobservable_tolerance=tol)
    emp_v = empirical_verdict(empirical, weak_threshold=weak, unobservable_tolerance=tol)
    agree = lin_v == emp_v
    ml, me = empirical.linear.margin, empirical.margin
    margins = f"Gramian margin {ml:.3g} linear, {me:.3g} nonlinear over {empirical.horizon:g} s"
    if agree:
        note = f"linear and nonlinear checks agree: {emp_v} ({margins})"
    else:
        note = (f"the checks disagree: the linearization says {lin_v}, simulations with ±"
                f"{empirical.perturbation:g} perturbations say {emp_v} ({margins}); the "
                f"nonlinearity or the drift of the point matters here, verify with simulation")
        near = [t for t in (tol, weak) if min(ml, me) <= t <= max(ml, me)]
        if near and max(ml, me) <= 2 * min(ml, me):
            note += "; the margins are close and straddle a threshold (borderline)"
    if report.verdict != lin_v:
        note += (f"; the point's PBH verdict is {report.verdict} (a different measure of the "
                 f"same linear model)")
    return Agreement(
        agree=agree, linear_verdict=lin_v, empirical_verdict=emp_v, report_verdict=report.verdict,
        linear_relative_min_eigenvalue=empirical.linear.relative_min_eigenvalue,
        empirical_relative_min_eigenvalue=empirical.relative_min_eigenvalue,
        linear_margin=ml, empirical_margin=me, unobservable_tolerance=tol, weak_threshold=weak,
        horizon=empirical.horizon, perturbation=empirical.perturbation, note=note)


# ----------------------------------------------------------------------------- helpers
def _output_rows(model: "Model", outputs: Sequence[str], state_scale: np.ndarray,
                 output_scales: Mapping[str, float] | None = None) -> tuple[list[int], np.ndarray]:
    """Row indices into [outputs; states] and the scale factor of each chosen output."""
    if not outputs:
        raise UsageError("no outputs given for the empirical Gramian; name at least one measured "
                         "output")
    rows, scale = [], []
    y_scale = scales_with_overrides(model.output_names, model.y_nominal, output_scales)
    for name in outputs:
        if name in model.output_names:
            k = model.output_names.index(name)
            rows.append(k)
            scale.append(y_scale[k])
        elif name in model.state_names:
            k = model.state_names.index(name)
            rows.append(model.ny + k)
            scale.append(state_scale[k])
        else:
            known = list(model.output_names) + list(model.state_names)
            others = {v.name: ("an " if v.role == "input" else "a ") + v.role
                      for v in (*model.catalogue.inputs, *model.catalogue.parameters)}
            if name in others:
                raise UsageError(f"empirical Gramian: {name!r} is {others[name]}; measured "
                                 f"outputs are outputs or states ({', '.join(known)})")
            raise UsageError(f"empirical Gramian: {unknown_name_message(name, known)}")
    return rows, np.array(scale, dtype=float)


def _trapezoid_weights(t: np.ndarray) -> np.ndarray:
    """Weights w with Σ w_k f(t_k) = the trapezoidal rule on any grid (common practice)."""
    h = np.diff(t)
    w = np.zeros_like(t)
    w[:-1] += h / 2
    w[1:] += h / 2
    return w


def _gram(diffs: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """W_ij = Σ_k w_k d_i(t_k) · d_j(t_k) for differences d of shape (n, m, outputs)."""
    return np.einsum("ikp,k,jkp->ij", diffs, weights, diffs)


def _bound_warning(model: "Model", i: int, value: float) -> list[str]:
    var = model.catalogue.states[i]
    problem = var.check_bounds(value)
    return [f"perturbed start {problem}; the FMU was simulated there anyway"] if problem else []
