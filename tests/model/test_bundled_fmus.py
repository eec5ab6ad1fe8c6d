"""The bundled plant FMUs against the FMI standard and an independent simulation.

Each check names its outside source: the FMI standard, a paper, an analytic
result, or an independent implementation (tests/reference/plants.py, scipy).
Directional derivatives and tables are checked in test_bundled_jacobians.py.
"""

from __future__ import annotations

from pathlib import Path
from typing import Callable, Sequence

import fmpy
import numpy as np
import pytest
from fmpy.fmi1 import FMICallException
from fmpy.fmi3 import FMU3Slave
from fmpy.validation import validate_fmu
from scipy.integrate import solve_ivp

from tests.reference import plants as ref
from tests.reference.fmu_driver import Driver, driver, unzipped  # noqa: F401

JACOBIANS: dict[str, Callable[..., tuple[np.ndarray, ...]]] = {
    "four_tank": ref.four_tank_jacobians,
    "lfp_cell": ref.lfp_cell_jacobians,
    "jacketed_reactor": ref.jacketed_reactor_jacobians,
}
RHS = {"four_tank": ref.four_tank_rhs, "lfp_cell": ref.lfp_cell_rhs,
       "jacketed_reactor": ref.jacketed_reactor_rhs}
OUTPUTS = {"four_tank": ref.four_tank_outputs, "lfp_cell": ref.lfp_cell_outputs,
           "jacketed_reactor": ref.jacketed_reactor_outputs}
ORDER = {
    "four_tank": (ref.FOUR_TANK_STATES, ref.FOUR_TANK_INPUTS, ref.FOUR_TANK_OUTPUTS),
    "lfp_cell": (ref.LFP_STATES, ref.LFP_INPUTS, ref.LFP_OUTPUTS),
    "jacketed_reactor": (ref.REACTOR_STATES, ref.REACTOR_INPUTS, ref.REACTOR_OUTPUTS),
}
PLANTS = tuple(ORDER)


# ------------------------------------------------------------- the standard
@pytest.mark.parametrize("name", PLANTS)
def test_validate_fmu_reports_no_problems(bundled_fmus: dict[str, Path], name: str) -> None:
    # FMI 2.0 / 3.0 XML schemas and model-structure rules as checked by fmpy.validation
    assert validate_fmu(str(bundled_fmus[name])) == []


@pytest.mark.parametrize("name", PLANTS)
def test_model_structure_order_matches_reference(bundled_fmus: dict[str, Path], name: str) -> None:
    # the order the reference Jacobians document must be the FMU's ModelStructure order
    md = fmpy.read_model_description(str(bundled_fmus[name]))
    states, inputs, outputs = ORDER[name]
    assert tuple(u.variable.derivative.name for u in md.derivatives) == states
    assert tuple(v.name for v in md.modelVariables if v.causality == "input") == inputs
    assert tuple(u.variable.name for u in md.outputs) == outputs
    assert md.modelExchange.modelIdentifier == name


def _generic_point(name: str) -> tuple[list[float], list[float]]:
    return {
        "four_tank": ([11.0, 9.0, 3.0, 2.5], [4.0, 5.0]),
        "lfp_cell": ([0.43, 0.011, 0.017, 31.0], [13.0, 17.0]),
        "jacketed_reactor": ([900.0, 331.0, 307.0], [0.47, 336.0]),
    }[name]


@pytest.mark.parametrize("name", PLANTS)
def test_dependencies_are_the_structural_sparsity(bundled_fmus: dict[str, Path], name: str) -> None:
    # ModelStructure dependencies (FMI standard) == nonzero pattern of the analytic
    # Jacobian [A B; C D] of the reference at a generic point
    md = fmpy.read_model_description(str(bundled_fmus[name]))
    states, inputs, outputs = ORDER[name]
    knowns = list(states) + list(inputs)
    A, B, C, D = JACOBIANS[name](*_generic_point(name))
    J = np.block([[A, B], [C, D]])
    unknowns = list(md.derivatives) + list(md.outputs)
    for row, unk in enumerate(unknowns):
        declared = {v.name for v in unk.dependencies}
        expected = {knowns[j] for j in range(len(knowns)) if J[row, j] != 0.0}
        assert declared == expected, f"{unk.variable.name}: {declared} != {expected}"


@pytest.mark.parametrize("name", PLANTS)
def test_start_values_and_variabilities_match_the_xml(driver: Callable[..., Driver], name: str) -> None:
    # start values readable in initialization mode equal the declared ones (FMI standard);
    # every fixed parameter is refused after initialization, every tunable one accepted
    d = driver(name)
    d.instantiate()
    d.enter_initialization()
    declared = {n: float(v.start) for n, v in d.vars.items() if v.start is not None}
    assert declared
    np.testing.assert_array_equal(d.get(list(declared)), list(declared.values()))
    d.fmu.exitInitializationMode()
    for n, v in d.vars.items():
        if v.causality != "parameter":
            continue
        if v.variability == "fixed":
            with pytest.raises(FMICallException):
                d.set({n: float(v.start)})
            assert "fixed parameter" in d.messages[-1][1]
        else:
            d.set({n: float(v.start)})


# ---------------------------------------------------------- state machine
def test_fmi2_wrong_guid_returns_null_and_logs(driver: Callable[..., Driver]) -> None:
    # FMI 2.0 standard: fmi2Instantiate checks the GUID and returns NULL on mismatch
    d = driver("four_tank", token="{00000000-0000-0000-0000-000000000000}")
    with pytest.raises(Exception, match="instantiate"):
        d.instantiate()
    assert any("GUID" in m for _, m in d.messages), d.messages


def test_fmi3_wrong_instantiation_token_returns_null_and_logs(driver: Callable[..., Driver]) -> None:
    # FMI 3.0 standard: the instantiation token must match
    d = driver("jacketed_reactor", token="{00000000-0000-0000-0000-000000000000}")
    with pytest.raises(Exception, match="instantiate"):
        d.instantiate()
    assert any("instantiation token" in m for _, m in d.messages), d.messages


def test_fmi2_cosimulation_is_refused(driver: Callable[..., Driver]) -> None:
    # FMI 2.0: fmi2Instantiate with fmi2CoSimulation on a model-exchange-only FMU
    d = driver("lfp_cell", slave=True)
    with pytest.raises(Exception, match="instantiate"):
        d.instantiate()
    assert any("co-simulation" in m for _, m in d.messages)


def test_fmi3_cosimulation_is_refused(bundled_fmus: dict[str, Path], unzipped: dict[str, str]) -> None:
    # FMI 3.0: fmi3InstantiateCoSimulation of a model-exchange-only FMU returns NULL
    messages: list[str] = []
    fmu = FMU3Slave(guid=fmpy.read_model_description(str(bundled_fmus["jacketed_reactor"])).guid,
                    unzipDirectory=unzipped["jacketed_reactor"],
                    modelIdentifier="jacketed_reactor", instanceName="cs")
    try:
        with pytest.raises(Exception, match="instantiate"):
            fmu.instantiate(logMessage=lambda env, st, cat, msg: messages.append(msg.decode()))
        assert any("co-simulation" in m for m in messages)
    finally:
        fmu.freeLibrary()


@pytest.mark.parametrize("name, fixed", [("four_tank", "A1"), ("jacketed_reactor", "volume")])
def test_fixed_parameter_after_initialization_is_an_error_until_reset(
        driver: Callable[..., Driver], name: str, fixed: str) -> None:
    # FMI standard: fixed parameters may change only before exiting initialization mode;
    # Reset returns the instance to the instantiated state
    d = driver(name)
    d.to_continuous_time()
    with pytest.raises(FMICallException) as info:
        d.set({fixed: 30.0})
    assert info.value.status == 3
    assert fixed in d.messages[-1][1]
    d.fmu.reset()
    d.set({fixed: 30.0})
    d.enter_initialization()
    np.testing.assert_array_equal(d.get([fixed]), [30.0])


@pytest.mark.parametrize("name", PLANTS)
def test_illegal_calls_give_error_status(driver: Callable[..., Driver], name: str) -> None:
    # FMI standard state machine: these calls are not allowed in the state they are made in
    d = driver(name)
    d.instantiate()
    state_name = d.states[0]
    with pytest.raises(FMICallException):
        d.get([state_name])                       # no getters before initialization mode
    with pytest.raises(FMICallException):
        d.fmu.exitInitializationMode()            # not in initialization mode
    with pytest.raises(FMICallException):
        d.fmu.enterContinuousTimeMode()           # not in event mode
    with pytest.raises(FMICallException):
        d.set({d.derivatives[0]: 1.0})            # calculated variables cannot be set
    d.enter_initialization()
    d.fmu.exitInitializationMode()                # now in event mode
    with pytest.raises(FMICallException):
        d.set_states([1.0] * len(d.states))       # states only in continuous-time mode
    with pytest.raises(FMICallException):
        d.set({state_name: 1.0})                  # states are set with SetContinuousStates
    d.fmu.enterContinuousTimeMode()
    with pytest.raises(FMICallException):
        d.set_states([1.0] * (len(d.states) + 1))  # wrong number of states
    d.fmu.terminate()
    with pytest.raises(FMICallException):
        d.set({d.inputs[0]: 1.0})                 # nothing can be set after terminate
    assert all(status == 3 for status, _ in d.messages)
    assert len(d.messages) >= 8


def test_tunable_parameter_can_change_in_continuous_time_mode(driver: Callable[..., Driver]) -> None:
    # project convention (DESIGN: linobs perturbs tunable parameters); analytic: dh3/dt
    # changes by -dk2 (1 - gamma2)/A3 * v2 when k2 changes
    d = driver("four_tank")
    d.to_continuous_time()
    before = d.state_derivatives()
    d.set({"k2": 3.35 + 0.5})
    after = d.state_derivatives()
    np.testing.assert_allclose(after[2] - before[2], 0.5 * (1 - 0.60) / 28.0 * 3.0, rtol=1e-12)


@pytest.mark.parametrize("name", PLANTS)
def test_fmu_state_get_set_and_serialize(driver: Callable[..., Driver], name: str) -> None:
    # FMI standard: Get/SetFMUstate restore the instance; serialization round-trips
    d = driver(name)
    d.to_continuous_time()
    x0, u0 = _generic_point(name)
    d.set_point(x0, u0)
    want = d.state_derivatives()
    snapshot = d.fmu.getFMUState()
    blob = d.fmu.serializeFMUState(snapshot) if d.fmi3 else d.fmu.serializeFMUstate(snapshot)
    d.set_point([1.01 * v + 0.1 for v in x0], [0.9 * v for v in u0])
    assert not np.array_equal(d.state_derivatives(), want)
    d.fmu.setFMUState(snapshot)
    np.testing.assert_array_equal(d.state_derivatives(), want)
    d.set_point([1.01 * v + 0.1 for v in x0], u0)
    restored = d.fmu.deserializeFMUState(blob) if d.fmi3 else d.fmu.deSerializeFMUstate(blob)
    d.fmu.setFMUState(restored)
    np.testing.assert_array_equal(d.state_derivatives(), want)
    d.fmu.freeFMUState(snapshot)
    d.fmu.freeFMUState(restored)
    with pytest.raises(FMICallException):      # a foreign blob is refused
        if d.fmi3:
            d.fmu.deserializeFMUState(b"x" * len(blob))
        else:
            d.fmu.deSerializeFMUstate(b"x" * len(blob))


# ----------------------------------------------------- values and Jacobians
def _declared_box(d: Driver, names: Sequence[str]) -> list[tuple[float, float]]:
    return [(float(d.vars[n].min), float(d.vars[n].max)) for n in names]


@pytest.mark.parametrize("name", PLANTS)
def test_values_finite_over_the_declared_ranges(driver: Callable[..., Driver], name: str) -> None:
    # requirement: states, inputs anywhere in their declared [min, max] give finite values
    d = driver(name)
    d.to_continuous_time()
    box = _declared_box(d, d.states + d.inputs)
    rng = np.random.default_rng(7)
    corners = np.array(np.meshgrid(*[[lo, hi] for lo, hi in box])).reshape(len(box), -1).T
    inside = np.array([[rng.uniform(lo, hi) for lo, hi in box] for _ in range(200)])
    nx = len(d.states)
    for point in np.vstack([corners, inside]):
        d.set_point(point[:nx], point[nx:])
        values = np.concatenate([d.state_derivatives(), d.get(d.outputs)])
        assert np.all(np.isfinite(values)), (point, values)
        if d.md.modelExchange.providesDirectionalDerivative:
            assert np.all(np.isfinite(np.concatenate([m.ravel() for m in d.jacobians()])))


# ------------------------------------------------- simulation vs reference
def _steps(names: Sequence[str], times: Sequence[float], values: Sequence[Sequence[float]],
           stop: float) -> np.ndarray:
    """fmpy input table of piecewise-constant inputs that step at ``times``."""
    rows = [(0.0, *values[0])]
    for t, before, after in zip(times, values[:-1], values[1:]):
        rows += [(t, *before), (t, *after)]
    rows.append((stop, *values[-1]))
    dtype = [("time", float)] + [(n, float) for n in names]
    return np.array(rows, dtype=dtype)


SCENARIOS = {
    # name: (step times, input values per segment, stop time, output interval)
    "four_tank": ((50.5, 150.5), ((3.0, 3.0), (3.6, 3.0), (3.6, 2.5)), 300.0, 2.0),
    "lfp_cell": ((20.5, 300.5, 400.5, 700.5),
                 ((0.0, 25.0), (40.0, 25.0), (40.0, 5.0), (-20.0, 5.0), (0.0, 5.0)), 900.0, 5.0),
    "jacketed_reactor": ((100.5, 600.5, 1000.5),
                         ((0.5, 340.0), (1.1, 340.0), (0.2, 340.0), (0.2, 320.0)), 1500.0, 10.0),
}
START = {
    "four_tank": ref.FOUR_TANK_P_MINUS["x"],
    "lfp_cell": (0.5, 0.0, 0.0, 25.0),
    "jacketed_reactor": (808.4, 333.85, 305.41),
}


@pytest.mark.parametrize("name", PLANTS)
def test_simulation_matches_reference_integration(bundled_fmus: dict[str, Path], name: str) -> None:
    # fmpy CVode (rtol 1e-10) vs scipy solve_ivp Radau (rtol 1e-11) of the reference equations
    states, inputs, outputs = ORDER[name]
    times, values, stop, interval = SCENARIOS[name]
    result = fmpy.simulate_fmu(
        str(bundled_fmus[name]), start_time=0.0, stop_time=stop, relative_tolerance=1e-10,
        output_interval=interval, record_events=False,
        input=_steps(inputs, times, values, stop), output=list(states) + list(outputs))
    md = fmpy.read_model_description(str(bundled_fmus[name]))
    nominal = np.array([float(v.nominal or 1.0) for n in states
                        for v in md.modelVariables if v.name == n])
    x = np.array(START[name], dtype=float)
    bounds = [0.0, *times, stop]
    t_out = result["time"]
    got_x = np.column_stack([result[n] for n in states])
    got_y = np.column_stack([result[n] for n in outputs])
    want_x = np.empty_like(got_x)
    want_y = np.empty_like(got_y)
    for k, u in enumerate(values):
        t0, t1 = bounds[k], bounds[k + 1]
        sol = solve_ivp(lambda t, s: RHS[name](s, u), (t0, t1), x, method="Radau",
                        rtol=1e-11, atol=1e-13 * nominal, dense_output=True,
                        jac=lambda t, s: JACOBIANS[name](s, u)[0])
        assert sol.success, sol.message
        mask = (t_out >= t0) & (t_out <= t1) if k == 0 else (t_out > t0) & (t_out <= t1)
        for i in np.flatnonzero(mask):
            want_x[i] = sol.sol(t_out[i])
            want_y[i] = OUTPUTS[name](want_x[i], u)
        x = sol.y[:, -1]
    scale_x = np.maximum(np.abs(want_x), nominal)
    assert np.max(np.abs(got_x - want_x) / scale_x) <= 1e-6
    scale_y = np.maximum(np.abs(want_y), 1.0)
    assert np.max(np.abs(got_y - want_y) / scale_y) <= 1e-6

