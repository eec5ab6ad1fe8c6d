"""Partial trim against analytic equilibria, published operating points and scipy root finding."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from scipy.optimize import brentq

from linobs.errors import EvaluationError, UsageError
from linobs.model.loader import load_model
from linobs.operating.trim import Continuation, find_operating_point
from linobs.operating.trim_spec import TrimSpec
from tests.reference.plants import (FOUR_TANK_P_MINUS, FOUR_TANK_PARAMS, LFP_PARAMS,
                                    REACTOR_PARAMS, jacketed_reactor_energy_residual, lfp_tables,
                                    reactor_rate_constant)

P = FOUR_TANK_PARAMS  # Johansson (2000), Tables I and II (P-), from memory
LEVELS = ("h1", "h2", "h3", "h4")


def four_tank_equilibrium(v1: float, v2: float) -> np.ndarray:
    """Levels at steady state from the flow balance (analytic, Johansson 2000 eq. 1 with dh/dt = 0).

    Tanks 3 and 4 are fed only by the pumps:  a3 √(2 g h3) = (1 − γ2) k2 v2,
    a4 √(2 g h4) = (1 − γ1) k1 v1.  Tanks 1 and 2 also receive the outflow
    of the tank above:  a1 √(2 g h1) = γ1 k1 v1 + a3 √(2 g h3),
    a2 √(2 g h2) = γ2 k2 v2 + a4 √(2 g h4).  Hence h = (q / a)² / (2 g).
    """
    g = P["g"]
    q3 = (1 - P["gamma2"]) * P["k2"] * v2
    q4 = (1 - P["gamma1"]) * P["k1"] * v1
    q1 = P["gamma1"] * P["k1"] * v1 + q3
    q2 = P["gamma2"] * P["k2"] * v2 + q4
    return np.array([(q / P[a]) ** 2 / (2 * g) for q, a in ((q1, "a1"), (q2, "a2"), (q3, "a3"),
                                                             (q4, "a4"))])


def levels(result) -> np.ndarray:  # type: ignore[no-untyped-def]
    return np.array([result.states[n] for n in LEVELS])


@pytest.fixture(scope="module")
def four_tank(bundled_fmus: dict[str, Path]):  # type: ignore[no-untyped-def]
    with load_model(bundled_fmus["four_tank"]) as model:
        yield model


@pytest.fixture(scope="module")
def cell(bundled_fmus: dict[str, Path]):  # type: ignore[no-untyped-def]
    with load_model(bundled_fmus["lfp_cell"]) as model:
        yield model


# ------------------------------------------------------------------ four-tank
def test_four_tank_minimum_phase_point(four_tank) -> None:  # type: ignore[no-untyped-def]
    v = FOUR_TANK_P_MINUS["u"]  # Johansson (2000), Table II, P-: v1 = v2 = 3.00 V — from memory
    # tolerance 1e-13 on der(h)/10 cm: level error ≲ 1e-12 cm/s × T_max (≈ 90 s) ≈ 1e-10 cm
    res = find_operating_point(four_tank, {"v1": v[0], "v2": v[1]}, TrimSpec(tolerance=1e-13))
    assert res.status == "converged" and res.method == "newton"
    assert res.residual <= 1e-13
    # analytic: the flow balance (see four_tank_equilibrium)
    np.testing.assert_allclose(levels(res), four_tank_equilibrium(*v), rtol=1e-9)
    # Johansson (2000), Table II — from memory: 12.4, 12.7, 1.8, 1.4 cm measured on the rig
    # (the rig is not the model: within 10 %)
    np.testing.assert_allclose(levels(res), FOUR_TANK_P_MINUS["x"], rtol=0.10)
    assert res.inputs == {"v1": 3.0, "v2": 3.0}
    assert res.evaluations > 0 and res.jacobians >= 1 and res.iterations >= 1


def test_four_tank_free_inputs_meet_output_targets(four_tank) -> None:  # type: ignore[no-untyped-def]
    h1, h2 = 12.4, 12.7  # cm: levels of the P- point, as sensor targets y = kc h
    spec = TrimSpec(free_inputs=["v1", "v2"],
                    output_targets={"y1": P["kc"] * h1, "y2": P["kc"] * h2}, tolerance=1e-13)
    res = find_operating_point(four_tank, {}, spec)
    assert res.status == "converged"
    # analytic inverse of the flow balance: with q_i = a_i √(2 g h_i),
    #   q1 = γ1 k1 v1 + (1 − γ2) k2 v2,  q2 = (1 − γ1) k1 v1 + γ2 k2 v2  (linear in v1, v2)
    q1, q2 = (P[a] * np.sqrt(2 * P["g"] * h) for a, h in (("a1", h1), ("a2", h2)))
    M = np.array([[P["gamma1"] * P["k1"], (1 - P["gamma2"]) * P["k2"]],
                  [(1 - P["gamma1"]) * P["k1"], P["gamma2"] * P["k2"]]])
    v = np.linalg.solve(M, [q1, q2])
    np.testing.assert_allclose([res.inputs["v1"], res.inputs["v2"]], v, rtol=1e-9)
    np.testing.assert_allclose(levels(res), four_tank_equilibrium(*v), rtol=1e-9)
    np.testing.assert_allclose([res.states["h1"], res.states["h2"]], [h1, h2], rtol=1e-11)


def test_unreachable_target_is_flagged_and_bounds_hold(four_tank, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    seen: list[np.ndarray] = []
    evaluate, batch = four_tank.evaluate, four_tank.evaluate_batch

    def recording(x, u):  # type: ignore[no-untyped-def]
        seen.append(np.concatenate([x, u]))
        return evaluate(x, u)

    def recording_batch(X, U, **kw):  # type: ignore[no-untyped-def]
        seen.extend(np.hstack([np.atleast_2d(X), np.atleast_2d(U)]))
        return batch(X, U, **kw)

    monkeypatch.setattr(four_tank, "evaluate", recording)
    monkeypatch.setattr(four_tank, "evaluate_batch", recording_batch)
    # analytic: y1 = kc h1 = 15 V needs h1 = 30 cm, above the declared max of 25 cm
    spec = TrimSpec(free_inputs=["v1", "v2"], output_targets={"y1": 15.0, "y2": 6.0})
    res = find_operating_point(four_tank, {}, spec)
    assert res.status == "not_converged"
    assert res.residual > spec.tolerance and res.iterations >= 1
    assert "bounds" in res.message and "h1" in res.message
    assert set(res.residuals) == {"der(h1)", "der(h2)", "der(h3)", "der(h4)", "y1", "y2"}
    # the declared ranges (model description): levels in [0, 25] cm, voltages in [0, 10] V
    cat = four_tank.catalogue
    lo = np.array([v.min for v in (*cat.states, *cat.inputs)])
    hi = np.array([v.max for v in (*cat.states, *cat.inputs)])
    points = np.array(seen)
    assert len(points) > res.iterations
    assert np.all(points >= lo) and np.all(points <= hi)


def test_iteration_limit_from_a_bad_guess_is_flagged(four_tank) -> None:  # type: ignore[no-untyped-def]
    res = find_operating_point(four_tank, {"v1": 3.0, "v2": 3.0}, TrimSpec(max_iterations=1),
                               guess={"h1": 1.0, "h2": 20.0, "h3": 10.0, "h4": 0.1})
    assert res.status == "not_converged" and not res.converged
    assert res.iterations == 1
    assert res.residual > 1e-10 and "1 iterations" in res.message
    # the reported residuals are those of the returned point (analytic Johansson 2000 eq. 1)
    h = levels(res)
    g = P["g"]
    der_h3 = (-P["a3"] * np.sqrt(2 * g * h[2]) + (1 - P["gamma2"]) * P["k2"] * 3.0) / P["A3"]
    assert res.residuals["der(h3)"] == pytest.approx(der_h3, rel=1e-12, abs=1e-15)


def test_continuation_costs_fewer_evaluations(four_tank) -> None:  # type: ignore[no-untyped-def]
    spec = TrimSpec()
    first = find_operating_point(four_tank, {"v1": 3.8, "v2": 3.8}, spec)
    cold = find_operating_point(four_tank, {"v1": 3.9, "v2": 3.8}, spec)
    warm = find_operating_point(four_tank, {"v1": 3.9, "v2": 3.8}, spec, guess=first.point())
    path = Continuation()
    find_operating_point(four_tank, {"v1": 3.8, "v2": 3.8}, spec, continuation=path)
    carried = find_operating_point(four_tank, {"v1": 3.9, "v2": 3.8}, spec, continuation=path)
    for res in (first, cold, warm, carried):
        assert res.status == "converged"
    # common practice: a neighbor's solution is a better start than the start values
    assert warm.evaluations < cold.evaluations
    assert carried.evaluations < warm.evaluations and carried.jacobians == 0
    # analytic: the flow balance
    for res in (cold, warm, carried):
        np.testing.assert_allclose(levels(res), four_tank_equilibrium(3.9, 3.8), rtol=1e-7)


def test_failed_trial_step_only_shortens_the_step(four_tank, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    evaluate = four_tank.evaluate
    seen: list[bytes] = []
    failures = []

    def flaky(x, u):  # type: ignore[no-untyped-def]
        key = np.concatenate([x, u]).tobytes()
        if seen and key not in seen and not failures:  # the first new point after the start
            failures.append(key)
            raise EvaluationError("simulated FMU failure at a trial point")
        seen.append(key)
        return evaluate(x, u)

    monkeypatch.setattr(four_tank, "evaluate", flaky)
    res = find_operating_point(four_tank, {"v1": 3.2, "v2": 2.9}, TrimSpec(),
                               guess={"h1": 8.0, "h4": 3.0})
    assert failures and res.status == "converged"
    # analytic: the flow balance
    np.testing.assert_allclose(levels(res), four_tank_equilibrium(3.2, 2.9), rtol=1e-7)


def test_failure_outside_the_line_search_propagates(four_tank, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    def broken(x, u):  # type: ignore[no-untyped-def]
        raise EvaluationError("simulated FMU failure")

    monkeypatch.setattr(four_tank, "evaluate", broken)
    with pytest.raises(EvaluationError):
        find_operating_point(four_tank, {"v1": 3.0, "v2": 3.0}, TrimSpec())


def test_non_square_spec_is_a_usage_error(four_tank) -> None:  # type: ignore[no-untyped-def]
    with pytest.raises(UsageError) as info:
        find_operating_point(four_tank, {}, TrimSpec(free_inputs=["v1"]))  # 5 unknowns, 4 equations
    text = str(info.value)
    assert "not square" in text and "free inputs: v1" in text and "zero derivatives" in text
    assert "output targets: none" in text
    with pytest.raises(UsageError):
        find_operating_point(four_tank, {"h1": 10.0},
                             TrimSpec(free_states=["h1", "h2", "h3", "h4"]))
    with pytest.raises(UsageError):
        find_operating_point(four_tank, {}, TrimSpec(), method="spline")


def test_disabled_trim_returns_the_point_as_given(cell) -> None:  # type: ignore[no-untyped-def]
    fixed = {"soc": 0.8, "v_rc1": 0.01, "i_cell": 10.0, "t_amb": 5.0}
    spec = TrimSpec(enabled=False, pinned_states=["soc"])
    before = cell.evaluations
    res = find_operating_point(cell, fixed, spec)
    assert res.status == "skipped" and res.method == "none" and res.converged
    assert res.evaluations == 1 and cell.evaluations - before == 1
    assert res.states["soc"] == 0.8 and res.states["v_rc1"] == 0.01
    assert res.states["v_rc2"] == 0.0 and res.states["temp_cell"] == 25.0  # start values
    # analytic: dsoc/dt = -i / (3600 Q_Ah)
    assert res.pinned_derivatives["soc"] == pytest.approx(-10.0 / (3600 * LFP_PARAMS["Q_Ah"]),
                                                          rel=1e-12)


# ------------------------------------------------------------------ LFP cell
def cell_steady_state(soc: float, current: float, t_amb: float) -> tuple[float, float, float]:
    """v_rc1, v_rc2, temp_cell at steady state from the reference equations (analytic elimination).

    dv_k/dt = 0 gives v_k = i R_k(soc, T); with that, the thermal balance
    i (v_rc1 + v_rc2) + R0 i² = hA (T − t_amb) becomes the scalar equation
    i² (R0 + R1 + R2)(soc, T) − hA (T − t_amb) = 0, solved with scipy's brentq.
    """
    hA = LFP_PARAMS["hA"]

    def balance(temp: float) -> float:
        t = lfp_tables(soc, temp)
        return current**2 * (t["r0"] + t["r1"] + t["r2"]) - hA * (temp - t_amb)

    temp = brentq(balance, t_amb - 1.0, t_amb + 60.0, xtol=1e-13, rtol=1e-15)
    t = lfp_tables(soc, temp)
    return current * t["r1"], current * t["r2"], temp


@pytest.mark.parametrize(("soc", "current", "t_amb"), [(0.5, 20.0, 25.0), (0.2, -40.0, -10.0)])
def test_cell_steady_state_at_constant_current(cell, soc: float, current: float,
                                               t_amb: float) -> None:  # type: ignore[no-untyped-def]
    fixed = {"soc": soc, "i_cell": current, "t_amb": t_amb}
    # tolerance 1e-12 on der(T)/25 K: T error ≲ 2.5e-11 K/s × m cp / hA (825 s) ≈ 2e-8 K
    res = find_operating_point(cell, fixed, TrimSpec(pinned_states=["soc"], tolerance=1e-12))
    assert res.status == "converged"
    assert res.states["soc"] == soc
    # analytic: steady RC branches v_k = i R_k, thermal balance (see cell_steady_state)
    v1, v2, temp = cell_steady_state(soc, current, t_amb)
    assert res.states["temp_cell"] == pytest.approx(temp, abs=1e-7)
    assert res.states["v_rc1"] == pytest.approx(v1, rel=1e-8)
    assert res.states["v_rc2"] == pytest.approx(v2, rel=1e-8)
    # analytic: v_k = i R_k with R_k from the tables at the trimmed soc and temperature
    t = lfp_tables(soc, res.states["temp_cell"])
    assert res.states["v_rc1"] == pytest.approx(current * t["r1"], rel=1e-9)
    assert res.states["v_rc2"] == pytest.approx(current * t["r2"], rel=1e-9)
    # analytic: the pinned state of charge integrates the current, dsoc/dt = -i / (3600 Q_Ah)
    assert res.pinned_derivatives == {"soc": pytest.approx(-current / (3600 * LFP_PARAMS["Q_Ah"]),
                                                           rel=1e-12)}
    assert set(res.residuals) == {"der(v_rc1)", "der(v_rc2)", "der(temp_cell)"}


def test_simulation_fallback_rescues_a_bad_guess(cell) -> None:  # type: ignore[no-untyped-def]
    # A cold cell (near its -30 degC bound) with strongly negative RC voltages at 40 A
    # discharge: the heat i (v_rc1 + v_rc2) is negative, so Newton's iterates are pressed
    # against the bounds of temp_cell and v_rc2 and crawl; the physical trajectory escapes.
    fixed = {"soc": 0.5, "i_cell": 40.0, "t_amb": -10.0}
    guess = {"v_rc1": 0.039, "v_rc2": -1.359, "temp_cell": -20.247}
    plain = find_operating_point(cell, fixed, TrimSpec(pinned_states=["soc"]), guess=guess)
    assert plain.status == "not_converged" and plain.method == "newton"
    rescued = find_operating_point(cell, fixed, TrimSpec(pinned_states=["soc"], fallback="simulate"),
                                   guess=guess)
    assert rescued.status == "converged" and rescued.method == "simulation"
    assert "settled over" in rescued.message
    assert rescued.evaluations > plain.evaluations
    # analytic: steady RC branches and thermal balance (see cell_steady_state)
    v1, v2, temp = cell_steady_state(0.5, 40.0, -10.0)
    # default tolerance 1e-10 on der(T)/25 K: T error ≲ 2.5e-9 K/s × 825 s ≈ 2e-6 K
    assert rescued.states["temp_cell"] == pytest.approx(temp, abs=1e-5)
    assert rescued.states["v_rc1"] == pytest.approx(v1, rel=1e-6)
    assert rescued.states["v_rc2"] == pytest.approx(v2, rel=1e-6)


# ------------------------------------------------------------------ reactor (FMI 3.0)
@pytest.mark.parametrize(("valve", "temp_feed"), [(0.5, 340.0), (0.0, 370.0), (1.0, 300.0)])
def test_reactor_temperature_is_a_root_of_the_energy_balance(bundled_fmus: dict[str, Path],
                                                             valve: float, temp_feed: float) -> None:
    with load_model(bundled_fmus["jacketed_reactor"]) as model:
        res = find_operating_point(model, {"valve": valve, "temp_feed": temp_feed},
                                   TrimSpec(tolerance=1e-12))
    assert res.status == "converged"
    temp = res.states["temp"]
    # analytic elimination of c_a and temp_jacket (tests.reference.plants), root by scipy brentq
    root = brentq(lambda t: jacketed_reactor_energy_residual(t, valve, temp_feed), 250.0, 450.0,
                  xtol=1e-12, rtol=1e-15)
    assert temp == pytest.approx(root, rel=1e-10)
    scale = REACTOR_PARAMS["flow_feed"] * REACTOR_PARAMS["rho_cp"] * temp  # W, size of the terms
    assert abs(jacketed_reactor_energy_residual(temp, valve, temp_feed)) <= 1e-9 * scale
    # analytic: c_a = F c_in / (F + V k(T)) from the mass balance
    flow, volume = REACTOR_PARAMS["flow_feed"], REACTOR_PARAMS["volume"]
    c_a = flow * REACTOR_PARAMS["c_a_feed"] / (flow + volume * reactor_rate_constant(temp))
    assert res.states["c_a"] == pytest.approx(c_a, rel=1e-9)


# ------------------------------------------------------------------ the package's name for it
def test_package_exports_find_operating_point_and_names_the_old_trim() -> None:
    import linobs

    assert linobs.find_operating_point is find_operating_point
    assert "find_operating_point" in linobs.__all__ and "trim" not in linobs.__all__
    with pytest.raises(AttributeError, match="linobs.trim was renamed to "
                                             "linobs.find_operating_point"):
        linobs.trim  # noqa: B018 - the attribute access is the test
    with pytest.raises(AttributeError, match="no attribute 'no_such_name'"):
        linobs.no_such_name  # noqa: B018
