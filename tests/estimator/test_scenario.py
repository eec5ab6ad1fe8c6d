"""Validation scenarios: piecewise-linear segments and the generated envelope sweep."""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from linobs.errors import UsageError
from linobs.estimator.nonlinear import simulate_plant
from linobs.estimator.scenario import (
    GeneratorOptions,
    build_scenario,
    generate_scenario,
)
from linobs.estimator.settings import ScenarioSegment
from tests.estimator.reference_nodes import (
    CELL_CURRENTS,
    CELL_SOCS,
    TANK_VOLTS,
    cell_schedule,
    four_tank_schedule,
)

TS_CELL = 2.0
Q_AH = 20.0  # fmus/lfp_cell/modelDescription.xml, start value of Q_Ah


@pytest.fixture(scope="module")
def cell(bundled_fmus):
    schedule, _ = cell_schedule(bundled_fmus["lfp_cell"], Ts=TS_CELL)
    return schedule


# ------------------------------------------------------------------------------ segments
def test_segments_reproduce_the_profile_at_the_breakpoints() -> None:
    segments = [ScenarioSegment(duration=10.0, inputs={"a": 4.0}),            # ramp 0 -> 4
                ScenarioSegment(duration=5.0, inputs={"b": -1.0}, step=True),  # b jumps, a holds
                ScenarioSegment(duration=20.0, inputs={"a": 0.0, "b": 1.0})]   # both ramp
    sc = build_scenario(segments, ["a", "b"], {"a": 0.0, "b": 2.0})
    # analytic piecewise-linear profile: breakpoints t = 0, 10, 15, 35 (and the step at 10)
    expected = {0.0: (0.0, 2.0), 10.0: (4.0, -1.0), 15.0: (4.0, -1.0), 35.0: (0.0, 1.0)}
    for t, value in expected.items():
        np.testing.assert_array_equal(sc.at(t), value)
    np.testing.assert_array_equal(sc.at(10.0, left=True), (4.0, 2.0))  # the left limit of the step
    # analytic: midpoints of linear ramps are the means of their ends
    np.testing.assert_allclose(sc.at(5.0), (2.0, 2.0), rtol=0, atol=1e-15)
    np.testing.assert_allclose(sc.at(25.0), (2.0, 0.0), rtol=0, atol=1e-15)
    np.testing.assert_allclose(sc.at(12.5), (4.0, -1.0), rtol=0, atol=0)  # held
    assert sc.duration == 35.0
    # a hold is exact at every time, not only at its ends (no rounding from the interpolation)
    held = build_scenario([ScenarioSegment(duration=7.0, inputs={"a": 0.1}, step=True)], ["a"],
                          {"a": 0.3})
    assert np.all(held.at(np.linspace(0.0, 7.0, 97))[:, 0] == 0.1)
    # holds past the end, first value before the start (analytic extension)
    np.testing.assert_array_equal(sc.at(np.array([-1.0, 40.0])), [[0.0, 2.0], [0.0, 1.0]])
    np.testing.assert_array_equal(sc.sample_times(10.0), [0.0, 10.0, 20.0, 30.0])


def test_segments_naming_an_unknown_input_or_missing_a_start_value_are_refused() -> None:
    with pytest.raises(UsageError, match="'c', which is not an input"):
        build_scenario([ScenarioSegment(duration=1.0, inputs={"c": 1.0})], ["a"], {"a": 0.0})
    with pytest.raises(UsageError, match="no start value"):
        build_scenario([ScenarioSegment(duration=1.0, inputs={"a": 1.0})], ["a", "b"], {"a": 0.0})
    with pytest.raises(UsageError, match="no segments"):
        build_scenario([], ["a"], {"a": 0.0})
    with pytest.raises(UsageError, match="shorter than one sample"):
        build_scenario([ScenarioSegment(duration=0.5, inputs={})], ["a"], {"a": 0.0}
                       ).sample_times(1.0)


# ------------------------------------------------------------------------------ generated
def test_generated_cell_scenario_drives_soc_across_its_axis_with_pulses_and_rests(
        bundled_fmus, cell) -> None:
    opts = GeneratorOptions()
    gen = generate_scenario(cell.data, sample_time=TS_CELL,
                            start_inputs={"i_cell": 0.0, "t_amb": 25.0},
                            start_states={"soc": 0.9}, options=opts)
    assert gen.driven == {"soc": "i_cell"}
    # analytic: dsoc/dt = -i / (3600 Q_Ah) (fmus/lfp_cell/sources/model.c) vanishes at i = 0
    assert gen.rest_values["i_cell"] == pytest.approx(0.0, abs=1e-9)
    held = np.array([[s.inputs["i_cell"], s.inputs["t_amb"]] for s in gen.segments])
    lo, hi = min(CELL_CURRENTS), max(CELL_CURRENTS)
    assert np.all((held[:, 0] >= lo) & (held[:, 0] <= hi))            # inside the grid's range
    assert set(held[:, 0]) <= set(CELL_CURRENTS)                        # grid values and rests
    assert np.all(held[:, 1] == 25.0)                                   # t_amb is not an axis
    assert all(s.step for s in gen.segments)
    durations = np.array([s.duration for s in gen.segments])
    np.testing.assert_allclose(durations / TS_CELL, np.round(durations / TS_CELL), atol=1e-9)
    # first down (farther end from 0.9), then up: discharges before charges
    first_charge = int(np.argmax(held[:, 0] < 0))
    assert np.all(held[:first_charge, 0] >= 0) and np.any(held[:first_charge, 0] > 0)

    sc = gen.scenario(["i_cell", "t_amb"])
    run = simulate_plant(bundled_fmus["lfp_cell"], sc, {"soc": 0.9, "temp_cell": 25.0}, {},
                         TS_CELL, ["v_term", "t_surf"])
    soc = run.states[:, run.state_names.index("soc")]
    # analytic coulomb counting under the held current: soc_k = soc_0 - Σ i_j Ts / (3600 Q)
    i = run.inputs[:, run.input_names.index("i_cell")]
    counted = 0.9 - np.concatenate([[0.0], np.cumsum(i[:-1]) * TS_CELL]) / (3600 * Q_AH)
    np.testing.assert_allclose(soc, counted, rtol=0, atol=1e-7)
    # moves across the soc axis: reaches both ends within the margin, never leaves the grid
    span = max(CELL_SOCS) - min(CELL_SOCS)
    edge = opts.margin * span
    assert soc.min() == pytest.approx(min(CELL_SOCS) + edge, abs=1e-3)
    assert soc.max() == pytest.approx(max(CELL_SOCS) - edge, abs=1e-3)
    assert soc.min() >= min(CELL_SOCS) and soc.max() <= max(CELL_SOCS)
    assert int(np.argmin(soc)) < int(np.argmax(soc[1:]) + 1)   # low end reached before the high


def test_generated_four_tank_scenario_visits_every_input_combination(bundled_fmus) -> None:
    schedule, _ = four_tank_schedule(bundled_fmus["four_tank"], Ts=1.0)
    gen = generate_scenario(schedule.data, sample_time=1.0, start_inputs={"v1": 3.0, "v2": 3.0},
                            start_states={})
    held = [(s.inputs["v1"], s.inputs["v2"]) for s in gen.segments]
    # settle at the start, every grid combination once, back to the start
    assert held[0] == (3.0, 3.0) and held[-1] == (3.0, 3.0)
    assert sorted(held[1:-1]) == sorted(itertools.product(TANK_VOLTS, TANK_VOLTS))
    # reflected Gray code (Knuth 2011, TAOCP 4A §7.2.1.1): consecutive visits differ in one
    # input by one grid step
    idx = [(TANK_VOLTS.index(a), TANK_VOLTS.index(b)) for a, b in held[1:-1]]
    for p, q in itertools.pairwise(idx):
        assert sorted(abs(x - y) for x, y in zip(p, q)) == [0, 1]
    assert not gen.driven and not gen.notes
    # the default dwell: the slowest time constant of the nodes, within 10..200 samples
    # (time constants from the eigenvalues of A, numpy as the reference)
    slowest = max(1.0 / np.min(np.abs(np.linalg.eigvals(n.A).real)) for n in schedule.data.nodes)
    assert gen.dwell == pytest.approx(np.clip(round(slowest), 10, 200))


def test_a_parameter_axis_and_an_unmoved_state_axis_are_reported(cell) -> None:
    # i_cell read as a parameter: it cannot change during a run, and without a declared range
    # no input is known to move soc
    data = cell.data.model_copy(update={"axis_roles": {"soc": "state", "i_cell": "parameter"}})
    start = {"i_cell": 0.0, "t_amb": 25.0}
    opts = GeneratorOptions(crossing_pulses=2, dwell=20.0, rest=0.0)
    gen = generate_scenario(data, sample_time=TS_CELL, start_inputs=start,
                            start_states={"soc": 0.5}, options=opts)
    assert not gen.driven
    assert any("parameter axis i_cell" in n for n in gen.notes)
    assert any("moves the state axis soc" in n for n in gen.notes)
    # with a declared range the input drives soc at levels inside it
    gen = generate_scenario(data, sample_time=TS_CELL, start_inputs=start,
                            start_states={"soc": 0.5}, input_ranges={"i_cell": (-60.0, 60.0)},
                            options=opts)
    assert gen.driven == {"soc": "i_cell"}
    currents = {s.inputs["i_cell"] for s in gen.segments}
    assert currents <= {-60.0, -30.0, 0.0, 30.0, 60.0} and {-30.0, 30.0} <= currents
    # from the middle (a tie) the lower end is visited first, then the upper
    assert gen.targets["soc"][0] < gen.targets["soc"][1]
    with pytest.raises(UsageError, match="state axis"):
        generate_scenario(data, sample_time=TS_CELL, start_inputs=start, start_states={})


def test_a_self_regulating_state_axis_is_flagged(bundled_fmus, cell) -> None:
    # the four-tank nodes read as if h1 were a state axis: tank 1 drains with a time constant of
    # about a minute (Johansson 2000, eq. 2: T1 = A1/a1 · sqrt(2 h1/g) ≈ 62 s at 12.4 cm), so its
    # outflow changes by ~10 cm / 62 s ≈ 0.16 cm/s across the axis, more than a tenth of what the
    # pump adds at full voltage (γ1 k1/A1 · 7 V ≈ 0.58 cm/s): the pulses cannot be trusted
    schedule, _ = four_tank_schedule(bundled_fmus["four_tank"], Ts=1.0)
    data = schedule.data.model_copy(update={"axes": ["h1", "v2"],
                                            "axis_values": [[5.0, 10.0, 15.0], list(TANK_VOLTS)],
                                            "axis_roles": {"h1": "state", "v2": "input"}})
    gen = generate_scenario(data, sample_time=1.0, start_inputs={"v1": 3.0, "v2": 3.0},
                            start_states={"h1": 12.0}, input_ranges={"v1": (0.0, 10.0)})
    assert gen.driven == {"h1": "v1"}
    assert any("h1 is self-regulating" in n for n in gen.notes)
    # soc integrates the current (A[soc, soc] = 0 in the cell's equations): no such note
    cell_gen = generate_scenario(cell.data, sample_time=TS_CELL,
                                 start_inputs={"i_cell": 0.0, "t_amb": 25.0},
                                 start_states={"soc": 0.9})
    assert not any("self-regulating" in n for n in cell_gen.notes)
