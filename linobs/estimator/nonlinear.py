"""Validation of a scheduled estimator on the nonlinear plant.

The plant is the FMU itself, integrated by fmpy's model-exchange master
(``simulate_fmu`` with CVode) along a :class:`~linobs.estimator.scenario.Scenario`;
its states and outputs at the sample instants are the truth.  The estimator
then runs offline on those samples, with seeded Gaussian measurement noise
added, from a deliberately wrong initial estimate, and is scored against the
truth.  Nothing here writes files.

Sampling conventions
--------------------
* ``hold = "zoh"`` (default): the plant is driven by the scenario sampled at
  t_k = k·Ts and held over each sample, u(t) = u[k] on [t_k, t_k+1) — the
  input the estimator's zero-order-hold models assume, so the validation
  measures the estimator, not the sampling of the input.  ``"linear"``
  drives the plant with the continuous profile (the estimator still sees
  the samples u[k]).
* States and outputs are sampled at t_k, the outputs after the input of
  sample k is applied, y[k] = h(x(t_k), u[k]); the filter form's predicted
  output uses u[k] too (``GainSchedule.step(..., u_now=u[k])``), the
  predictor form's correction is y[k] against h(x̂[k|k−1], u[k]).

Scores
------
See :mod:`linobs.estimator.nonlinear_scores` (RMS, convergence time, NEES
against chi-square bounds, usable/outside fractions; JSON-safe numbers).

References
----------
Bar-Shalom, Y., Li, X. R. & Kirubarajan, T. (2001). Estimation with
Applications to Tracking and Navigation. Wiley, §5.4 (NEES and its
chi-square consistency bounds).

Hindmarsh, A. C. et al. (2005). SUNDIALS: Suite of nonlinear and
differential/algebraic equation solvers. ACM Transactions on Mathematical
Software 31(3), 363-396 (CVODE, the integrator behind fmpy's model-exchange
simulation).

Rugh, W. J. & Shamma, J. S. (2000). Research on gain scheduling. Automatica
36(10), 1401-1425 (a single fixed-gain design as the baseline of a schedule).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Literal

import numpy as np

from linobs.errors import ModelError, UsageError
from linobs.estimator.node import NodeDesign
from linobs.estimator.nonlinear_scores import (
    Comparison,
    NeesResult,
    NonlinearReport,
    StateComparison,
    StateResult,
    assess_run,
    compare,
)
from linobs.estimator.scenario import Scenario
from linobs.estimator.schedule import GainSchedule, ScheduleData
from linobs.estimator.settings import ValidationSettings

__all__ = ["Comparison", "EstimatorRun", "NeesResult", "NonlinearReport", "PlantRun",
           "StateComparison", "StateResult", "assess_run", "center_node_index", "compare",
           "fixed_gain_schedule", "initial_estimate", "run_estimator", "simulate_plant",
           "validate_nonlinear"]

HOLDS = ("zoh", "linear")


# ------------------------------------------------------------------------------ trajectories
@dataclass(frozen=True)
class PlantRun:
    """The nonlinear plant's trajectory at the sample instants t_k = k·Ts, k = 0 … N."""

    times: np.ndarray            # (N+1,)
    sample_time: float
    state_names: list[str]
    input_names: list[str]
    output_names: list[str]
    states: np.ndarray           # (N+1, nx)
    inputs: np.ndarray           # (N+1, nu): u[k], applied on [t_k, t_k+1) under "zoh"
    outputs: np.ndarray          # (N+1, ny): at t_k, with u[k] applied
    parameters: dict[str, float]
    hold: str


@dataclass(frozen=True)
class EstimatorRun:
    """One estimator's run along a :class:`PlantRun` (in memory; figures read it)."""

    label: str
    kind: str
    form: str
    times: np.ndarray            # (N+1,)
    state_names: list[str]
    truth: np.ndarray            # (N+1, n), in the estimator's state order
    estimates: np.ndarray        # (N+1, n)
    sigma: np.ndarray | None     # (N+1, n) √diag of the interpolated covariance; NaN: none
    nees: np.ndarray | None      # (N+1,) NaN where no covariance
    usable: np.ndarray           # (N+1,) bool
    outside: np.ndarray          # (N+1,) bool
    measurements: np.ndarray     # (N+1, p) the noisy samples the estimator saw
    output_names: list[str]
    noise_std: dict[str, float]
    seed: int

    @property
    def errors(self) -> np.ndarray:
        return self.estimates - self.truth


def simulate_plant(fmu_path: str | Path, scenario: Scenario, initial_state: Mapping[str, float],
                   parameters: Mapping[str, float] | None, sample_time: float,
                   outputs: Sequence[str], states: Sequence[str] | None = None, *,
                   hold: Literal["zoh", "linear"] = "zoh",
                   relative_tolerance: float = 1e-6) -> PlantRun:
    """Integrate the FMU (model exchange, CVode) along the scenario; sample it at k·Ts.

    Parameters
    ----------
    fmu_path : path
    scenario : Scenario
        Must name every input of the model.
    initial_state : mapping
        State name -> value at t = 0 (others: the FMU's start values).
    parameters : mapping or None
        Parameter values for the run (others: the FMU's start values).
    sample_time : float
        Ts [s]; also fmpy's output interval.
    outputs : sequence of str
        Outputs to record.
    states : sequence of str, optional
        States to record (default: every continuous state).
    hold : {"zoh", "linear"}
        How the scenario drives the plant (module notes).
    relative_tolerance : float
        CVode's relative tolerance (absolute: this × each state's nominal).

    Raises
    ------
    UsageError
        Unknown names, a scenario that does not match the model's inputs, a bad hold.
    ModelError
        The FMU cannot be read or fmpy's simulation fails (fmpy's message is kept).
    """
    from fmpy import read_model_description, simulate_fmu

    if hold not in HOLDS:
        raise UsageError(f"unknown input hold {hold!r}; choose one of {', '.join(HOLDS)}")
    try:
        md = read_model_description(str(fmu_path))
    except Exception as exc:  # fmpy raises plain exceptions
        raise ModelError(f"cannot read the model description of {fmu_path}: {exc}") from exc
    all_states = [d.variable.derivative.name for d in md.derivatives]
    model_inputs = [v.name for v in md.modelVariables if v.causality == "input"]
    states = list(all_states if states is None else states)
    parameters = {k: float(v) for k, v in (parameters or {}).items()}
    for what, names, pool in (("state", states, all_states), ("state", initial_state, all_states),
                              ("output", outputs, [v.name for v in md.modelVariables
                                                   if v.causality == "output"]),
                              ("parameter", parameters, [v.name for v in md.modelVariables
                                                         if v.causality == "parameter"])):
        unknown = [n for n in names if n not in pool]
        if unknown:
            raise UsageError(f"{', '.join(map(repr, unknown))} is not a {what} of "
                             f"{md.modelName}; the {what}s are {', '.join(pool) or 'none'}")
    if sorted(scenario.inputs) != sorted(model_inputs):
        raise UsageError(f"the scenario sets the inputs {', '.join(scenario.inputs) or 'none'} "
                         f"but {md.modelName} has {', '.join(model_inputs) or 'none'}; give "
                         f"every input (and only those)")
    times = scenario.sample_times(sample_time)
    U = scenario.at(times)
    signal = _input_signal(scenario, times, U, hold)
    start_values = {**parameters, **{k: float(v) for k, v in initial_state.items()}}
    log: list[str] = []

    def logger(*args: object) -> None:
        # FMI 2.0 (component, instance, status, category, message), FMI 3.0 (env, status,
        # category, message): the status is third from the end, the message last
        status, message = args[-3], args[-1]
        if isinstance(status, int) and status >= 1:  # warning and worse
            text = message.decode("utf-8", "replace") if isinstance(message, bytes) \
                else str(message)
            log.append(" ".join(text.split()))

    try:
        result = simulate_fmu(str(fmu_path), validate=False, start_time=0.0,
                              stop_time=float(times[-1]), solver="CVode",
                              relative_tolerance=relative_tolerance, output_interval=sample_time,
                              record_events=True, fmi_type="ModelExchange",
                              start_values=start_values, input=signal,
                              output=list(dict.fromkeys([*states, *outputs])), logger=logger)
    except Exception as exc:  # fmpy raises plain exceptions
        message = " ".join(str(exc).split()) or type(exc).__name__
        said = f" (the FMU logged: {log[-1]})" if log else ""
        raise ModelError(f"the fmpy simulation of {md.modelName} failed: {message}{said}; check "
                         f"the initial state, parameters and scenario") from exc
    t = np.asarray(result["time"], dtype=float)
    tol = 1e-6 * sample_time
    first = np.searchsorted(t, times - tol, side="left")
    last = np.searchsorted(t, times + tol, side="right") - 1  # after an input event
    if np.any(last < first):
        k = int(np.argmax(last < first))
        raise ModelError(f"the fmpy simulation of {md.modelName} stopped before t = "
                         f"{times[k]:g} s (no sample there)")

    def column(names: Sequence[str], rows: np.ndarray) -> np.ndarray:
        return np.column_stack([np.asarray(result[n], dtype=float)[rows] for n in names]) \
            if names else np.zeros((len(rows), 0))

    X, Y = column(states, last), column(outputs, last)
    if not (np.all(np.isfinite(X)) and np.all(np.isfinite(Y))):
        raise ModelError(f"the fmpy simulation of {md.modelName} returned non-finite states "
                         f"or outputs; check the initial state and scenario")
    index = [scenario.inputs.index(n) for n in model_inputs]
    return PlantRun(times=times, sample_time=float(sample_time), state_names=states,
                    input_names=model_inputs, output_names=list(outputs), states=X,
                    inputs=U[:, index], outputs=Y, parameters=parameters, hold=hold)


def _input_signal(scenario: Scenario, times: np.ndarray, U: np.ndarray, hold: str) -> np.ndarray:
    """fmpy's structured input array (a repeated time is a step event)."""
    if hold == "zoh":
        rows = [(times[0], U[0])]
        for k in range(1, len(times)):
            if np.any(U[k] != U[k - 1]):
                rows += [(times[k], U[k - 1]), (times[k], U[k])]
        rows.append((times[-1], U[-1]))
    else:
        rows = list(zip(scenario.times, scenario.values))
        if scenario.times[-1] < times[-1]:
            rows.append((times[-1], scenario.values[-1]))
    dtype = [("time", np.float64)] + [(n, np.float64) for n in scenario.inputs]
    return np.array([(float(t), *map(float, u)) for t, u in rows], dtype=dtype)


# ------------------------------------------------------------------------------ the estimator
def run_estimator(schedule: GainSchedule, plant_run: PlantRun, *,
                  initial_estimate: Mapping[str, float] | np.ndarray,
                  noise_std: Mapping[str, float], seed: int,
                  parameters: Mapping[str, float] | None = None,
                  label: str = "schedule") -> EstimatorRun:
    """Run the scheduled estimator offline on the plant's samples.

    Parameters
    ----------
    schedule : GainSchedule
    plant_run : PlantRun
        Must hold every state, input and measured output of the schedule.
    initial_estimate : mapping or ndarray
        x̂ at t_0 (filter: x̂[0|0]; predictor: x̂[0|−1]), every state.
    noise_std : mapping
        Output -> σ of the Gaussian noise added to each sample (missing: 0).
    seed : int
        Seed of numpy's ``default_rng`` for the noise: runs with the same seed
        see the same noise sequence.
    parameters : mapping, optional
        Values of parameter axes of the schedule (default: the plant run's).
    label : str

    Returns
    -------
    EstimatorRun
        Estimates at every sample; for a Kalman schedule also σ and NEES from
        the steady-state covariance interpolated with the schedule's weights.
    """
    n = len(schedule.states)
    truth = _columns(plant_run.states, plant_run.state_names, schedule.states, "state")
    U = _columns(plant_run.inputs, plant_run.input_names, schedule.inputs, "input")
    Y = _columns(plant_run.outputs, plant_run.output_names, schedule.outputs, "output")
    unknown = [k for k in noise_std if k not in schedule.outputs]
    if unknown:
        raise UsageError(f"measurement noise is given for {', '.join(unknown)}, which the "
                         f"estimator does not measure ({', '.join(schedule.outputs)})")
    sigma_y = np.array([float(noise_std.get(k, 0.0)) for k in schedule.outputs])
    if np.any(~np.isfinite(sigma_y) | (sigma_y < 0)):
        raise UsageError("measurement noise standard deviations must be finite and >= 0")
    rng = np.random.default_rng(seed)
    Y = Y + rng.standard_normal(Y.shape) * sigma_y
    if isinstance(initial_estimate, Mapping):
        missing = [s for s in schedule.states if s not in initial_estimate]
        if missing:
            raise UsageError(f"the initial estimate has no value for {', '.join(missing)}")
        x = np.array([float(initial_estimate[s]) for s in schedule.states])
    else:
        x = np.asarray(initial_estimate, dtype=float).reshape(-1)
        if x.shape != (n,):
            raise UsageError(f"the initial estimate needs {n} values, got {x.size}")
    params = dict(plant_run.parameters if parameters is None else parameters)
    N = len(plant_run.times)
    estimates = np.empty((N, n))
    usable = np.zeros(N, dtype=bool)
    outside = np.zeros(N, dtype=bool)
    kalman = schedule.kind == "kalman"
    cov = np.full((N, n, n), np.nan) if kalman else None
    which = "P_post" if schedule.form == "filter" else "P_prior"
    covs = [None if getattr(nd, which) is None or nd.status != "ok" else
            np.asarray(getattr(nd, which), dtype=float) for nd in schedule.data.nodes]

    def record(k: int, ev) -> None:  # type: ignore[no-untyped-def]
        usable[k], outside[k] = ev.usable, ev.outside
        if cov is not None:
            cov[k] = _interpolated(covs, ev.nodes, ev.weights, n)

    estimates[0] = x
    record(0, schedule.evaluate(schedule.scheduling_value(x, U[0], params)))
    for k in range(1, N):
        # filter: (x̂[k−1|k−1], u[k−1], y[k], u[k]) -> x̂[k|k]
        # predictor: (x̂[k−1|k−2], u[k−1], y[k−1]) -> x̂[k|k−1]
        if schedule.form == "filter":
            estimates[k], ev = schedule.step(estimates[k - 1], U[k - 1], Y[k], params,
                                             u_now=U[k])
        else:
            estimates[k], ev = schedule.step(estimates[k - 1], U[k - 1], Y[k - 1], params)
        record(k, ev)
    sigma = nees = None
    if cov is not None:
        sigma = np.sqrt(np.clip(np.diagonal(cov, axis1=1, axis2=2), 0.0, None))
        nees = np.array([_nees(e, P) for e, P in zip(estimates - truth, cov)])
    return EstimatorRun(label=label, kind=schedule.kind, form=schedule.form,
                        times=plant_run.times.copy(), state_names=list(schedule.states),
                        truth=truth, estimates=estimates, sigma=sigma, nees=nees, usable=usable,
                        outside=outside, measurements=Y, output_names=list(schedule.outputs),
                        noise_std={k: float(s) for k, s in zip(schedule.outputs, sigma_y)},
                        seed=int(seed))


def _columns(values: np.ndarray, names: Sequence[str], wanted: Sequence[str], what: str
             ) -> np.ndarray:
    missing = [w for w in wanted if w not in names]
    if missing:
        raise UsageError(f"the plant run has no {what} {', '.join(missing)}; simulate with "
                         f"every {what} the estimator uses")
    return np.asarray(values, dtype=float)[:, [list(names).index(w) for w in wanted]]


def _interpolated(covs: Sequence[np.ndarray | None], nodes: np.ndarray, weights: np.ndarray,
                  n: int) -> np.ndarray:
    """Σ wᵢ Pᵢ over the nodes with a weight; NaN if one of them has no covariance."""
    P = np.zeros((n, n))
    for i, w in zip(nodes, weights):
        if w <= 0:
            continue
        if covs[int(i)] is None:
            return np.full((n, n), np.nan)
        P += w * covs[int(i)]
    return P


def _nees(e: np.ndarray, P: np.ndarray) -> float:
    if not np.all(np.isfinite(P)):
        return math.nan
    try:
        c = np.linalg.cholesky(0.5 * (P + P.T))
    except np.linalg.LinAlgError:
        return math.nan
    z = np.linalg.solve(c, e)
    return float(z @ z)


def validate_nonlinear(schedule: GainSchedule, plant_run: PlantRun, settings: ValidationSettings,
                       *, noise_std: Mapping[str, float],
                       initial_estimate: Mapping[str, float] | np.ndarray | None = None,
                       parameters: Mapping[str, float] | None = None,
                       label: str = "schedule") -> NonlinearReport:
    """Run the estimator along the plant run and score it.

    The initial estimate is the true initial state plus ``settings.initial_error``
    unless given; the noise is seeded with ``settings.seed``.  Use
    :func:`run_estimator` and :func:`assess_run` to keep the trajectories too.
    """
    run = run_estimator(schedule, plant_run, initial_estimate=_initial(
        schedule, plant_run, settings, initial_estimate), noise_std=noise_std, seed=settings.seed,
        parameters=parameters, label=label)
    return assess_run(run, settings)


def initial_estimate(schedule: GainSchedule, plant_run: PlantRun,
                     settings: ValidationSettings) -> dict[str, float]:
    """The true initial state plus ``settings.initial_error`` (by state name)."""
    unknown = [s for s in settings.initial_error if s not in schedule.states]
    if unknown:
        raise UsageError(f"initial_error names {', '.join(unknown)}, which the estimator does not "
                         f"estimate ({', '.join(schedule.states)})")
    x0 = _columns(plant_run.states[:1], plant_run.state_names, schedule.states, "state")[0]
    return {s: float(v) + float(settings.initial_error.get(s, 0.0))
            for s, v in zip(schedule.states, x0)}


def _initial(schedule: GainSchedule, plant_run: PlantRun, settings: ValidationSettings,
             given: Mapping[str, float] | np.ndarray | None) -> Mapping[str, float] | np.ndarray:
    return initial_estimate(schedule, plant_run, settings) if given is None else given


# ------------------------------------------------------------------------------ fixed gain
def center_node_index(data: ScheduleData) -> int:
    """The usable node nearest the center of the grid's box (axes scaled by their range).

    Ties go to the lowest node number.
    """
    if data.grid_kind == "tensor":
        mesh = np.meshgrid(*[np.asarray(v, dtype=float) for v in data.axis_values],
                           indexing="ij")
        pts = np.stack([m.ravel() for m in mesh], axis=1) if data.axes else np.zeros((1, 0))
    else:
        pts = np.asarray(data.points, dtype=float).reshape(len(data.nodes), len(data.axes))
    lo, hi = pts.min(axis=0), pts.max(axis=0)
    span = np.where(hi > lo, hi - lo, 1.0)
    d = np.sum(((pts - 0.5 * (lo + hi)) / span) ** 2, axis=1)
    d[[nd.status != "ok" for nd in data.nodes]] = np.inf
    if not np.isfinite(d).any():
        raise UsageError("every node of the schedule was refused; there is no fixed gain to "
                         "compare with")
    return int(np.argmin(d))


def fixed_gain_schedule(schedule: GainSchedule, node: NodeDesign | None = None) -> GainSchedule:
    """The best single fixed-gain estimator: one node used at every scheduling value.

    Parameters
    ----------
    schedule : GainSchedule
    node : NodeDesign, optional
        A node designed at the exact center of the envelope; default the
        schedule's node nearest the center (:func:`center_node_index`).

    Returns
    -------
    GainSchedule
        A schedule over no axes with that one node (its local model and gain).
    """
    if node is None:
        node = schedule.data.nodes[center_node_index(schedule.data)]
    if node.status != "ok":
        raise UsageError(f"the fixed-gain node was refused ({node.message}); pass a node with a "
                         f"design")
    if (node.states, node.inputs, node.outputs) != (schedule.states, schedule.inputs,
                                                    schedule.outputs):
        raise UsageError("the fixed-gain node estimates other states, inputs or outputs than the "
                         "schedule; design it for the same model")
    return GainSchedule(ScheduleData(grid_kind="tensor", axes=[], axis_values=[], points=[],
                                     axis_roles={}, nodes=[node]))

