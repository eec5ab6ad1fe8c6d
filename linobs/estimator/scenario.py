"""The input profile of a nonlinear validation run: given segments, or generated from the grid.

A :class:`Scenario` is a piecewise-linear function of time for every model
input, stored as breakpoints.  A breakpoint time that repeats is a step: the
profile is right-continuous (at the step it takes the later value) and its
left limit is the earlier value.

From segments
-------------
:func:`build_scenario` turns the study's ``[[validation.scenario]]``
segments into breakpoints.  Each segment lasts ``duration`` seconds; every
input it names ramps linearly from its value at the start of the segment to
the value given (or, with ``step = true``, jumps to it at the start and
holds); inputs it does not name hold their value.  The profile starts at the
given start values (the trimmed inputs of the initial operating point).

Generated
---------
:func:`generate_scenario` sweeps the envelope of a gain schedule with steps
and holds only, in three phases.  It knows the grid's axes (their roles and
ranges) and the nodes' local models, nothing about the plant:

1. **settle**: hold the start inputs for one dwell time (the estimator
   converges from its wrong initial estimate at the start conditions);
2. **input sweep**: the input axes that drive no state axis visit their
   grid values, every combination in reflected Gray-code order (one axis
   moves one grid step at a time) when there are at most
   ``max_combinations``, otherwise one axis at a time (up through its values,
   back to the start); each level is held for one dwell time and the inputs
   that drive state axes sit at their rest values;
3. **state sweep**: every state axis (e.g. a state of charge, an integrator) is driven by
   the input that changes its derivative most over the input's range — the
   nodes' mean ``B`` entry times the range.  From the start value it goes to
   the farther end of the axis (the lower end on a tie), then across to the
   other end, each end approached to within ``margin`` of the span.  Each
   crossing is ``crossing_pulses`` pulses of the driving input, at the
   input's grid values on the side of its *rest value* (where the nodes' mean
   derivative vanishes) that moves the state the right way, smallest first
   and cycled, separated by rests at the rest value.  Pulse lengths come
   from the nodes' mean rate, as if the state integrated the input; a state
   whose own feedback across the axis (mean |∂ẋ/∂x| × span) exceeds a tenth
   of the fastest rate the input gives is flagged in the notes (the pulses
   may not reach the ends).  Durations are whole samples.

The dwell time is the slowest time constant of the nodes' local models
(``1 / |Re λ|`` over the non-integrating modes), kept within 10 and 200
samples; the rest between pulses is half a dwell.  Parameter axes cannot
change during a run (run one scenario per parameter value); state axes that
no input moves are reported in :attr:`GeneratedScenario.notes`.

References
----------
Knuth, D. E. (2011). The Art of Computer Programming, Vol. 4A, §7.2.1.1
(reflected mixed-radix Gray codes: the visiting order of the input levels).

Plett, G. L. (2015). Battery Management Systems, Vol. I: Battery Modeling.
Artech House (pulse-and-rest current profiles that move the state of charge
across its range while exciting the relaxation dynamics).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from pydantic import BaseModel, ConfigDict, Field

from linobs.errors import UsageError
from linobs.estimator.schedule import ScheduleData
from linobs.estimator.settings import ScenarioSegment
from linobs.operating.grid import serpentine_digits

__all__ = ["GeneratedScenario", "GeneratorOptions", "Scenario", "build_scenario",
           "generate_scenario"]


# ------------------------------------------------------------------------------ the profile
@dataclass(frozen=True)
class Scenario:
    """Piecewise-linear inputs over time (breakpoints; a repeated time is a step).

    Attributes
    ----------
    inputs : tuple of str
        The model's inputs, one column of :attr:`values` each.
    times : ndarray, shape (m,)
        Breakpoint times [s], non-decreasing, starting at 0.
    values : ndarray, shape (m, len(inputs))
        Input values at the breakpoints.
    """

    inputs: tuple[str, ...]
    times: np.ndarray
    values: np.ndarray

    @property
    def duration(self) -> float:
        return float(self.times[-1])

    def at(self, t: float | np.ndarray, *, left: bool = False) -> np.ndarray:
        """The inputs at time(s) ``t``: right-continuous, or the left limit with ``left=True``.

        Returns shape ``(len(inputs),)`` for a scalar ``t``, else ``(len(t), len(inputs))``.
        Before 0 the first value holds, after the end the last.
        """
        tt = np.atleast_1d(np.asarray(t, dtype=float))
        side = "left" if left else "right"
        i = np.searchsorted(self.times, tt, side=side) - 1
        out = np.empty((tt.size, len(self.inputs)))
        for row, (time, k) in enumerate(zip(tt, i)):
            if k < 0:
                out[row] = self.values[0]
            elif k >= len(self.times) - 1:
                out[row] = self.values[-1]
            else:
                # left: times[k] < t <= times[k+1]; right: times[k] <= t < times[k+1]
                t0, t1 = self.times[k], self.times[k + 1]
                w = (time - t0) / (t1 - t0)
                # v0 + w (v1 − v0): exact on a hold (v1 = v0) and at the breakpoint itself
                out[row] = self.values[k] + w * (self.values[k + 1] - self.values[k])
        return out[0] if np.ndim(t) == 0 else out

    def sample_times(self, sample_time: float) -> np.ndarray:
        """t_k = k·Ts for k = 0 … N, N = the whole samples that fit in the duration."""
        if not (math.isfinite(sample_time) and sample_time > 0):
            raise UsageError(f"the sample time must be a positive number of seconds, got "
                             f"{sample_time!r}")
        n = math.floor(self.duration / sample_time + 1e-9)
        if n < 1:
            raise UsageError(f"the scenario lasts {self.duration:g} s, shorter than one sample "
                             f"({sample_time:g} s); make it longer")
        return np.arange(n + 1) * sample_time


def build_scenario(segments: Sequence[ScenarioSegment], inputs: Sequence[str],
                   start: Mapping[str, float]) -> Scenario:
    """The piecewise-linear profile of the given segments (see the module notes).

    Parameters
    ----------
    segments : sequence of ScenarioSegment
    inputs : sequence of str
        Every input of the model, in the model's order.
    start : mapping
        Value of every input at t = 0.

    Raises
    ------
    UsageError
        No segments, a segment naming an unknown input, a non-finite value or
        a start value missing.
    """
    inputs = tuple(inputs)
    if not segments:
        raise UsageError("the validation scenario has no segments; give [[validation.scenario]] "
                         "entries or leave it empty to have one generated")
    missing = [name for name in inputs if name not in start]
    if missing:
        raise UsageError(f"no start value for the input(s) {', '.join(missing)}; give every "
                         f"input's value at the start of the scenario")
    current = np.array([float(start[name]) for name in inputs])
    if not np.all(np.isfinite(current)):
        raise UsageError("the start values of the scenario inputs must be finite numbers")
    index = {name: j for j, name in enumerate(inputs)}
    times, values, t = [0.0], [current.copy()], 0.0
    for k, seg in enumerate(segments):
        target = current.copy()
        for name, value in seg.inputs.items():
            if name not in index:
                raise UsageError(f"scenario segment {k + 1} names {name!r}, which is not an input "
                                 f"of the model; the inputs are {', '.join(inputs) or 'none'}")
            if not math.isfinite(float(value)):
                raise UsageError(f"scenario segment {k + 1}: {name} = {value!r} is not a finite "
                                 f"number")
            target[index[name]] = float(value)
        if seg.step:
            times.append(t)
            values.append(target.copy())
        t += float(seg.duration)
        times.append(t)
        values.append(target.copy())
        current = target
    return Scenario(inputs, np.array(times), np.array(values))


# ------------------------------------------------------------------------------ the generator
class GeneratorOptions(BaseModel):
    """Knobs of :func:`generate_scenario` (defaults as in the module notes)."""

    model_config = ConfigDict(extra="forbid")

    crossing_pulses: int = Field(8, ge=1, le=1000, description="pulses per crossing of a "
                                                               "state axis")
    margin: float = Field(0.02, ge=0, lt=0.5, description="fraction of a state axis' span kept "
                                                          "clear of each end")
    dwell: float | None = Field(None, gt=0, description="hold per input level [s]; default the "
                                                        "slowest time constant, 10-200 samples")
    rest: float | None = Field(None, ge=0, description="rest between pulses [s]; default half a "
                                                       "dwell")
    max_combinations: int = Field(36, ge=1, description="visit every combination of the input "
                                                        "axes' values up to this many")


class GeneratedScenario(BaseModel):
    """A generated scenario as segments (they can be pasted into a study) and how it was made."""

    segments: list[ScenarioSegment]
    start: dict[str, float] = Field(description="input values at t = 0")
    dwell: float = Field(description="[s] hold per input level")
    rest: float = Field(description="[s] rest between pulses")
    driven: dict[str, str] = Field(default_factory=dict,
                                   description="state axis -> the input that drives it")
    rest_values: dict[str, float] = Field(default_factory=dict,
                                          description="driving input -> its rest value")
    targets: dict[str, list[float]] = Field(
        default_factory=dict, description="state axis -> the values it is driven to, in order")
    notes: list[str] = Field(default_factory=list)

    @property
    def duration(self) -> float:
        return float(sum(s.duration for s in self.segments))

    def scenario(self, inputs: Sequence[str]) -> Scenario:
        return build_scenario(self.segments, inputs, self.start)


@dataclass
class _RateModel:
    """Mean derivative of one state over the nodes: rate(u) = offset + gains · u."""

    offset: float
    gains: np.ndarray

    def rate(self, u: np.ndarray) -> float:
        return float(self.offset + self.gains @ u)


def generate_scenario(data: ScheduleData, *, sample_time: float,
                      start_inputs: Mapping[str, float], start_states: Mapping[str, float],
                      input_ranges: Mapping[str, tuple[float, float]] | None = None,
                      options: GeneratorOptions | None = None) -> GeneratedScenario:
    """A deterministic input profile that sweeps the schedule's envelope (module notes).

    Parameters
    ----------
    data : ScheduleData
        The schedule: axes, their roles and values, the nodes' local models.
    sample_time : float
        Estimator sample time [s]; every segment lasts a whole number of samples.
    start_inputs : mapping
        Value of every model input at t = 0.
    start_states : mapping
        Value at t = 0 of every state on a grid axis.
    input_ranges : mapping, optional
        (min, max) of inputs that are not grid axes but may drive a state axis
        (e.g. their declared limits).  Axis inputs use the axis range.
    options : GeneratorOptions, optional

    Returns
    -------
    GeneratedScenario

    Raises
    ------
    UsageError
        A start value missing, or a non-positive sample time.
    """
    opts = options or GeneratorOptions()
    if not (math.isfinite(sample_time) and sample_time > 0):
        raise UsageError(f"the sample time must be a positive number of seconds, got "
                         f"{sample_time!r}")
    usable = [n for n in data.nodes if n.status == "ok"] or list(data.nodes)
    inputs, states = list(usable[0].inputs), list(usable[0].states)
    missing = [u for u in inputs if u not in start_inputs]
    if missing:
        raise UsageError(f"no start value for the input(s) {', '.join(missing)}")
    roles = data.axis_roles
    state_axes = [a for a in data.axes if roles[a] == "state"]
    input_axes = [a for a in data.axes if roles[a] == "input"]
    no_start = [a for a in state_axes if a not in start_states]
    if no_start:
        raise UsageError(f"no start value for the state axis/axes {', '.join(no_start)}")
    levels, ranges = _axis_levels(data), {}
    for name in inputs:
        if name in input_axes:
            ranges[name] = (float(levels[name][0]), float(levels[name][-1]))
        elif input_ranges and name in input_ranges:
            lo, hi = (float(v) for v in input_ranges[name])
            if math.isfinite(lo) and math.isfinite(hi) and hi > lo:
                ranges[name] = (lo, hi)
    dwell = opts.dwell if opts.dwell is not None else _default_dwell(usable, sample_time)
    dwell = _whole(dwell, sample_time)
    rest = _whole(opts.rest if opts.rest is not None else dwell / 2, sample_time, allow_zero=True)
    notes: list[str] = [f"parameter axis {a} is held during the run; run one scenario per "
                        f"value to cover it" for a in data.axes if roles[a] == "parameter"]

    # which input drives which state axis
    rates: dict[str, _RateModel] = {}
    driven: dict[str, str] = {}
    for axis in state_axes:
        i = states.index(axis)
        B = np.array([n.B[i] for n in usable])
        offset = float(np.mean([n.dx0[i] - n.B[i] @ n.u0 for n in usable]))
        gains = B.mean(axis=0)
        rates[axis] = _RateModel(offset, gains)
        effect = {u: abs(gains[j]) * (ranges[u][1] - ranges[u][0])
                  for j, u in enumerate(inputs) if u in ranges}
        best = max(effect, key=lambda u: (effect[u], -inputs.index(u)), default=None)
        if best is None or effect[best] <= 0.0:
            notes.append(f"no input with a known range moves the state axis {axis} (its "
                         f"derivative does not depend on any); it is not swept")
            continue
        driven[axis] = best
    drivers = set(driven.values())

    current = np.array([float(start_inputs[u]) for u in inputs])
    segments: list[ScenarioSegment] = []

    def hold(values: np.ndarray, duration: float) -> None:
        segments.append(ScenarioSegment(duration=duration, step=True,
                                        inputs={u: float(v) for u, v in zip(inputs, values)}))

    def at_rest(values: np.ndarray) -> np.ndarray:
        out = values.copy()
        for axis, u in driven.items():
            out[inputs.index(u)] = _rest_value(rates[axis], inputs.index(u), out, ranges[u])
        return out

    # 1. settle at the start conditions
    hold(current, dwell)
    # 2. sweep the input axes that drive no state
    sweep = [a for a in input_axes if a not in drivers]
    for combo in _combinations(sweep, levels, data.grid_kind, opts.max_combinations, start_inputs):
        values = current.copy()
        for name, v in combo.items():
            values[inputs.index(name)] = v
        hold(at_rest(values), dwell)
    if sweep:
        hold(at_rest(current), dwell)
    # 3. drive every state axis across its range and back
    targets: dict[str, list[float]] = {}
    rest_values: dict[str, float] = {}
    position = {a: float(start_states[a]) for a in state_axes}
    for axis, u in driven.items():
        j = inputs.index(u)
        base = at_rest(current)
        u_rest = float(base[j])
        rest_values[u] = u_rest
        lo, hi = float(levels[axis][0]), float(levels[axis][-1])
        span = hi - lo
        ends = (lo + opts.margin * span, hi - opts.margin * span)
        s = position[axis]
        first = ends[0] if abs(s - ends[0]) >= abs(s - ends[1]) else ends[1]
        second = ends[1] if first == ends[0] else ends[0]
        targets[axis] = [first, second]
        candidates = levels[u] if u in input_axes else None
        if candidates is None:
            r_lo, r_hi = ranges[u]
            candidates = np.array([r_lo, 0.5 * (r_lo + u_rest), 0.5 * (u_rest + r_hi), r_hi])
        feedback = abs(float(np.mean([n.A[states.index(axis), states.index(axis)]
                                      for n in usable])))
        fastest = max((abs(rates[axis].rate(np.where(np.arange(len(inputs)) == j, v, base)))
                       for v in candidates), default=0.0)
        if fastest > 0 and feedback * span > 0.1 * fastest:
            notes.append(f"{axis} is self-regulating (time constant {1 / feedback:.3g} s): its "
                         f"own feedback across the axis exceeds a tenth of the fastest rate {u} "
                         f"gives; the pulses assume it integrates {u} and may not reach the "
                         f"ends; check the simulated range")
        for target in (first, second):
            distance = target - s
            if abs(distance) <= 1e-12 * max(span, 1.0):
                continue
            pulse_levels = _pulse_levels(rates[axis], j, base, candidates, u_rest,
                                         np.sign(distance), ranges[u])
            if not pulse_levels:
                notes.append(f"{u} cannot move {axis} {'up' if distance > 0 else 'down'} within "
                             f"its range; that crossing is left out")
                continue
            step = distance / opts.crossing_pulses
            moved = 0.0
            for k in range(opts.crossing_pulses):
                level = pulse_levels[k % len(pulse_levels)]
                values = base.copy()
                values[j] = level
                rate = rates[axis].rate(values)
                wanted = (distance - moved) if k == opts.crossing_pulses - 1 else step
                duration = _whole(abs(wanted / rate), sample_time)
                hold(values, duration)
                moved += rate * duration
                if rest > 0:
                    hold(base, rest)
            s += moved
        position[axis] = s
    return GeneratedScenario(segments=segments,
                             start={u: float(v) for u, v in zip(inputs, current)},
                             dwell=dwell, rest=rest, driven=driven, rest_values=rest_values,
                             targets=targets, notes=notes)


# ------------------------------------------------------------------------------ helpers
def _axis_levels(data: ScheduleData) -> dict[str, np.ndarray]:
    """Grid values of each axis (scattered: the distinct values, or 5 quantiles if many)."""
    if data.grid_kind == "tensor":
        return {a: np.asarray(v, dtype=float) for a, v in zip(data.axes, data.axis_values)}
    pts = np.asarray(data.points, dtype=float)
    out = {}
    for k, a in enumerate(data.axes):
        distinct = np.unique(pts[:, k])
        out[a] = distinct if distinct.size <= 7 else np.quantile(pts[:, k], [0, .25, .5, .75, 1])
    return out


def _default_dwell(nodes: Sequence[object], sample_time: float) -> float:
    """Slowest time constant of the nodes' non-integrating modes, within 10 and 200 samples."""
    slowest = 0.0
    for node in nodes:
        re = np.abs(np.linalg.eigvals(np.asarray(node.A, dtype=float)).real)  # type: ignore[attr-defined]
        if re.size and re.max() > 0:
            moving = re[re > 1e-6 * re.max()]
            slowest = max(slowest, float(1.0 / moving.min()))
    return float(np.clip(slowest, 10 * sample_time, 200 * sample_time))


def _whole(duration: float, sample_time: float, *, allow_zero: bool = False) -> float:
    """Round a duration to whole samples (at least one unless ``allow_zero``)."""
    n = round(duration / sample_time)
    return max(n, 0 if allow_zero else 1) * sample_time


def _rest_value(model: _RateModel, j: int, values: np.ndarray,
                bounds: tuple[float, float]) -> float:
    """The value of input ``j`` at which the mean derivative vanishes (clamped to its range)."""
    others = model.offset + model.gains @ values - model.gains[j] * values[j]
    return float(np.clip(-others / model.gains[j], *bounds))


def _pulse_levels(model: _RateModel, j: int, base: np.ndarray, candidates: np.ndarray,
                  rest: float, direction: float, bounds: tuple[float, float]) -> list[float]:
    """Levels of input ``j`` that move the state in ``direction``, slowest first."""
    lo, hi = bounds
    tol = 0.05 * (hi - lo)
    chosen = []
    for level in np.asarray(candidates, dtype=float):
        if abs(level - rest) <= tol or not lo - 1e-12 <= level <= hi + 1e-12:
            continue
        values = base.copy()
        values[j] = level
        rate = model.rate(values)
        if rate * direction > 0:
            chosen.append((abs(rate), float(level)))
    return [level for _, level in sorted(chosen)]


def _combinations(axes: Sequence[str], levels: Mapping[str, np.ndarray], kind: str,
                  max_combinations: int, start: Mapping[str, float]) -> list[dict[str, float]]:
    """The input-axis levels to visit, in order (module notes, phase 2)."""
    if not axes:
        return []
    shape = [len(levels[a]) for a in axes]
    if kind == "tensor" and int(np.prod(shape)) <= max_combinations:
        return [{a: float(levels[a][d]) for a, d in zip(axes, row)}
                for row in serpentine_digits(shape)]
    out = []
    for a in axes:
        values = [float(v) for v in levels[a]]
        out += [{a: v} for v in values] + [{a: v} for v in reversed(values[:-1])]
        out.append({a: float(start[a])})
    return out
