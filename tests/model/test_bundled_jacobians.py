"""Jacobians of the bundled plants: analytic directional derivatives, tables, finite differences.

Each check names its outside source: a paper, an analytic result, or an
independent implementation (tests/reference/plants.py, scipy).
"""

from __future__ import annotations

from typing import Callable

import numpy as np
import pytest
import scipy.linalg
from scipy.interpolate import CubicSpline

from tests.reference import plants as ref
from tests.reference.fmu_driver import Driver, assert_rel_close, driver, unzipped  # noqa: F401

EPS = np.finfo(float).eps


FOUR_TANK_POINTS = [
    (ref.FOUR_TANK_P_MINUS["x"], ref.FOUR_TANK_P_MINUS["u"], ref.FOUR_TANK_P_MINUS["params"]),
    (ref.FOUR_TANK_P_PLUS["x"], ref.FOUR_TANK_P_PLUS["u"], ref.FOUR_TANK_P_PLUS["params"]),
    ((20.0, 0.005, 24.0, -0.001), (0.0, 10.0), {}),  # regularized and negative levels
    ((0.0, 25.0, 0.01, 7.3), (7.5, 0.4), {"gamma1": 0.2, "k2": 4.0}),
]


@pytest.mark.parametrize("x, u, params", FOUR_TANK_POINTS)
def test_four_tank_directional_derivatives_equal_analytic(
        driver: Callable[..., Driver], x: tuple, u: tuple, params: dict) -> None:
    # analytic Jacobian of Johansson (2000) eq. (1) in tests/reference/plants.py
    d = driver("four_tank")
    d.to_continuous_time()
    if params:
        d.set(params)
    d.set_point(x, u)
    for got, want, label in zip(d.jacobians(), ref.four_tank_jacobians(x, u, params), "ABCD"):
        assert_rel_close(got, want, 1e-12, label)
    assert_rel_close(d.state_derivatives(), ref.four_tank_rhs(x, u, params), 1e-12, "rhs")
    assert_rel_close(d.get(d.outputs), ref.four_tank_outputs(x, u, params), 1e-12, "outputs")


def test_four_tank_directional_derivative_is_linear_in_the_seed(driver: Callable[..., Driver]) -> None:
    # FMI standard: dv_unknown = J dv_known for a seed over several knowns at once
    d = driver("four_tank")
    d.to_continuous_time()
    x, u = (11.0, 9.0, 3.0, 2.5), (4.0, 5.0)
    d.set_point(x, u)
    A, B, C, D = ref.four_tank_jacobians(x, u)
    seed = np.array([0.3, -1.0, 2.0, 0.5, 1.5, -0.25])
    got = d.directional(d.derivatives + d.outputs, d.states + d.inputs, seed)
    assert_rel_close(got, np.block([[A, B], [C, D]]) @ seed, 1e-12, "J seed")


def test_four_tank_time_constants_and_zeros_match_the_paper(driver: Callable[..., Driver]) -> None:
    d = driver("four_tank")
    d.to_continuous_time()
    for point, n_rhp in ((ref.FOUR_TANK_P_MINUS, 0), (ref.FOUR_TANK_P_PLUS, 1)):
        d.set(point["params"])
        d.set_point(point["x"], point["u"])
        A, B, C, D = d.jacobians()
        if point is ref.FOUR_TANK_P_MINUS:
            # Johansson (2000), Table II: T1..T4 = 62, 90, 23, 30 s at P- -- from memory
            np.testing.assert_allclose(-1.0 / np.diag(A), [62, 90, 23, 30], rtol=0.04)
        # Johansson (2000), Sec. III: non-minimum phase iff gamma1 + gamma2 < 1 (one RHP zero)
        pencil_a = np.block([[A, B], [C, D]])
        pencil_b = np.block([[np.eye(4), np.zeros((4, 2))], [np.zeros((2, 6))]])
        zeros = scipy.linalg.eigvals(pencil_a, pencil_b)
        finite = zeros[np.isfinite(zeros)]
        assert len(finite) == 2
        assert np.sum(finite.real > 0) == n_rhp, finite


REACTOR_POINTS = [
    ((808.4, 333.85, 305.41), (0.5, 340.0), {}),
    ((1990.0, 281.0, 284.0), (0.999, 280.0), {}),          # cold: Damkoehler ~ 0.01
    ((40.0, 383.0, 383.0), (0.0, 370.0), {}),               # hot, valve closed
    ((250.0, 354.0, 303.0), (1.1, 370.0), {"ua": 9000.0}),  # valve saturated
    ((1500.0, 320.0, 300.0), (1.0, 330.0), {"temp_coolant_in": 290.0}),  # on the switching surface
]


@pytest.mark.parametrize("x, u, params", REACTOR_POINTS)
def test_reactor_directional_derivatives_equal_analytic(
        driver: Callable[..., Driver], x: tuple, u: tuple, params: dict) -> None:
    # analytic Jacobian of the CSTR balances in tests/reference/plants.py
    d = driver("jacketed_reactor")
    d.to_continuous_time()
    if params:
        d.set(params)
    d.set_point(x, u)
    for got, want, label in zip(d.jacobians(), ref.jacketed_reactor_jacobians(x, u, params), "ABCD"):
        assert_rel_close(got, want, 1e-12, label)
    assert_rel_close(d.state_derivatives(), ref.jacketed_reactor_rhs(x, u, params), 1e-12, "rhs")


def test_reactor_adjoint_derivative_is_the_transpose(driver: Callable[..., Driver]) -> None:
    # FMI 3.0 standard: adjoint derivative = seed^T J; J from the analytic reference
    d = driver("jacketed_reactor")
    d.to_continuous_time()
    x, u = (900.0, 331.0, 307.0), (0.47, 336.0)
    d.set_point(x, u)
    A, B, C, D = ref.jacketed_reactor_jacobians(x, u)
    J = np.block([[A, B], [C, D]])
    seed = np.array([0.5, -2.0, 1.0, 3.0, -1.0])
    got = d.fmu.getAdjointDerivative([d.vr[n] for n in d.derivatives + d.outputs],
                                     [d.vr[n] for n in d.states + d.inputs], list(seed))
    assert_rel_close(np.array(got), seed @ J, 1e-12, "seed J")


def test_reactor_event_indicators_and_valve_saturation(driver: Callable[..., Driver]) -> None:
    # analytic: z = (1 - valve, valve); dF_c/dvalve vanishes beyond the saturation
    d = driver("jacketed_reactor")
    d.to_continuous_time()
    x = (900.0, 331.0, 307.0)
    for valve in (0.3, 0.999, 1.001, 1.2):
        d.set_point(x, (valve, 336.0))
        np.testing.assert_allclose(d.event_indicators(), [1.0 - valve, valve], rtol=1e-15)
        b_valve = d.directional(["der(temp_jacket)"], ["valve"], [1.0])[0]
        if valve < 1.0:
            assert b_valve < 0.0   # opening the valve cools the jacket (T_c,in < T_j)
        else:
            assert b_valve == 0.0
    md = d.md
    assert md.numberOfEventIndicators == 2
    assert [u.variable.name for u in md.eventIndicators] == [
        "valve_saturation_margin", "valve_closure_margin"]


def test_reactor_has_one_steady_state_in_the_envelope() -> None:
    # analytic reduction of the steady-state balances to one energy residual in T
    # (tests/reference/plants.py); a sign-change count on a fine grid finds every root
    temps = np.linspace(250.0, 450.0, 4001)
    for valve in np.linspace(0.0, 1.2, 7):
        for temp_feed in np.linspace(280.0, 370.0, 7):
            r = np.array([ref.jacketed_reactor_energy_residual(t, valve, temp_feed) for t in temps])
            assert np.count_nonzero(np.diff(np.sign(r)) != 0) == 1, (valve, temp_feed)


def test_reactor_damkohler_spans_cold_and_hot_regimes(driver: Callable[..., Driver]) -> None:
    # analytic: Da = k(T) V / F with k from the Arrhenius law (reference)
    d = driver("jacketed_reactor")
    d.to_continuous_time()
    for temp in (281.0, 333.85, 393.0):
        d.set_point((1000.0, temp, 300.0), (0.5, 340.0))
        want = ref.reactor_rate_constant(temp) * 2.0 / 0.005
        np.testing.assert_allclose(d.get(["damkohler"]), [want], rtol=1e-13)
    d.set_point((1000.0, 281.0, 300.0), (0.5, 340.0))
    assert d.get(["damkohler"])[0] < 0.02       # cold: reaction barely proceeds
    d.set_point((1000.0, 393.0, 300.0), (0.5, 340.0))
    assert d.get(["damkohler"])[0] > 50.0       # hot: nearly full conversion


# ------------------------------------------------------------- lfp tables
def test_lfp_table_interpolation_matches_scipy_natural_splines(driver: Callable[..., Driver]) -> None:
    # scipy CubicSpline(bc_type="natural") along soc, then along temperature (reference library)
    d = driver("lfp_cell")
    d.to_continuous_time()
    rng = np.random.default_rng(3)
    points = [(s, t) for s, t in zip(rng.uniform(0, 1, 60), rng.uniform(-20, 60, 60))]
    points += [(0.0, -20.0), (1.0, 60.0), (0.5, 25.0), (0.97, -10.0)]  # knots and corners
    for soc, temp in points:
        d.set_point((soc, 0.0, 0.0, temp), (0.0, 25.0))
        got = d.get(["ocv", "r0", "r1", "r2"])
        want = []
        for name in ("ocv", "r0", "r1", "r2"):
            cs_soc = CubicSpline(ref.LFP_SOC_KNOTS, ref.LFP_TABLES[name], axis=0, bc_type="natural")
            cs_temp = CubicSpline(ref.LFP_TEMP_KNOTS, cs_soc(soc), bc_type="natural")
            want.append(ref.LFP_TABLE_SCALE[name] * float(cs_temp(temp)))
        assert_rel_close(got, want, 1e-12, f"tables at soc={soc:.4f}, T={temp:.2f}")


def test_lfp_table_extension_outside_the_knots_is_linear(driver: Callable[..., Driver]) -> None:
    # analytic: beyond the end knots each axis continues with end value + end slope
    d = driver("lfp_cell")
    d.to_continuous_time()
    for soc, temp in ((-0.01, 25.0), (1.01, 40.0), (0.5, -30.0), (0.3, 70.0), (1.02, 68.0)):
        d.set_point((soc, 0.0, 0.0, temp), (0.0, 25.0))
        want = [ref.lfp_table(n, soc, temp) for n in ("ocv", "r0", "r1", "r2")]
        assert_rel_close(d.get(["ocv", "r0", "r1", "r2"]), want, 1e-12, f"({soc}, {temp})")


def test_lfp_ocv_shape(driver: Callable[..., Driver]) -> None:
    d = driver("lfp_cell")
    d.to_continuous_time()
    socs = np.linspace(0.0, 1.0, 2001)
    for temp in (-20.0, -5.0, 10.0, 25.0, 42.0, 60.0):
        ocv = []
        for soc in socs:
            d.set_point((soc, 0.0, 0.0, temp), (0.0, 25.0))
            ocv.append(d.get(["ocv"])[0])
        ocv = np.array(ocv)
        slope = np.diff(ocv) / np.diff(socs)
        # requirement: OCV strictly increasing in soc at every temperature (the table
        # knots and the spline between them)
        assert np.all(slope > 0.0), temp
        # LFP plateau ~3.28-3.34 V with a few mV per 10 % SOC -- common practice
        on_plateau = ocv[(socs >= 0.15) & (socs <= 0.85)]
        assert 3.27 < on_plateau.min() < on_plateau.max() < 3.34
        plateau_slope = slope[(socs[:-1] >= 0.2) & (socs[1:] <= 0.85)]
        assert 0.01 < plateau_slope.min() < plateau_slope.max() < 0.16
        # steep below ~10 % and above ~95 % SOC -- common practice
        assert slope[socs[:-1] < 0.03].min() > 1.0
        assert slope[socs[1:] > 0.98].min() > 1.0


def test_lfp_resistances_rise_at_low_temperature_and_soc_extremes(driver: Callable[..., Driver]) -> None:
    # common practice for LFP cells: resistance grows strongly in the cold and at SOC extremes
    d = driver("lfp_cell")
    d.to_continuous_time()

    def r(soc: float, temp: float) -> np.ndarray:
        d.set_point((soc, 0.0, 0.0, temp), (0.0, 25.0))
        return d.get(["r0", "r1", "r2"])

    assert np.all(r(0.5, -20.0) > 3.0 * r(0.5, 25.0))
    assert np.all(r(0.5, 60.0) < r(0.5, 25.0))
    assert np.all(r(0.0, 25.0) > 1.5 * r(0.5, 25.0))
    assert np.all(r(1.0, 25.0) > 1.2 * r(0.5, 25.0))
    # 20 Ah prismatic cell: series resistance around 1 mOhm at 25 degC -- common practice
    assert 0.5e-3 < r(0.5, 25.0)[0] < 2e-3


# Points across the envelope, one exactly on a table knot (soc 0.3, 10 degC), others
# near the steep ends of the OCV curve.
LFP_POINTS = [
    ((0.5, 0.01, 0.02, 25.0), (20.0, 25.0)),
    ((0.25, -0.005, 0.03, -12.0), (-30.0, -15.0)),
    ((0.85, 0.05, -0.01, 47.0), (55.0, 40.0)),
    ((0.3, 0.2, 0.1, 10.0), (60.0, 0.0)),
    ((0.62, 0.0, 0.0, -20.0), (0.5, -20.0)),
    ((0.12, -0.005, 0.03, -12.0), (-30.0, -15.0)),
    ((0.03, 0.2, 0.1, 5.0), (60.0, 0.0)),
    ((0.93, -0.02, -0.01, 41.0), (-35.0, 35.0)),
    ((0.985, 0.05, -0.01, 47.0), (55.0, 40.0)),
    ((1.0, 0.0, 0.0, 25.0), (-60.0, 25.0)),
    ((0.0, 0.0, 0.0, 60.0), (60.0, 60.0)),
]


@pytest.mark.parametrize("x, u", LFP_POINTS)
def test_lfp_central_differences_are_accurate(driver: Callable[..., Driver], x: tuple, u: tuple) -> None:
    # requirement: C2 tables make central differences with step cbrt(eps) max(|x|, nominal)
    # accurate to 1e-8 relative; compared with the analytic spline Jacobian (reference)
    d = driver("lfp_cell")
    d.to_continuous_time()
    names = d.states + d.inputs
    nominal = np.array([float(d.vars[n].nominal) for n in names])
    point = np.array(x + u, dtype=float)
    nx = len(d.states)

    def f(p: np.ndarray) -> np.ndarray:
        d.set_point(p[:nx], p[nx:])
        return np.concatenate([d.state_derivatives(), d.get(d.outputs)])

    cols = []
    for j in range(len(point)):
        h = np.cbrt(EPS) * max(abs(point[j]), nominal[j])
        up, down = point.copy(), point.copy()
        up[j] += h
        down[j] -= h
        cols.append((f(up) - f(down)) / (up[j] - down[j]))
    fd = np.column_stack(cols)
    A, B, C, D = ref.lfp_cell_jacobians(x, u)
    exact = np.block([[A, B], [C, D]])
    assert np.all(fd[exact == 0.0] == 0.0)
    # error of each row of the Jacobian with columns scaled by the nominal values
    # (DESIGN: scale before tolerance decisions), relative to that row's largest entry
    err = np.abs(fd - exact) * nominal
    row_scale = np.max(np.abs(exact) * nominal, axis=1, keepdims=True)
    rel = err / row_scale
    assert rel.max() <= 1e-8, (rel.max(), np.unravel_index(np.argmax(rel), rel.shape))




def test_lfp_central_differences_accurate_along_soc(driver: Callable[..., Driver]) -> None:
    # requirement as above, swept over soc (every 0.01, ends included) at three temperatures
    d = driver("lfp_cell")
    d.to_continuous_time()
    nominal = np.array([float(d.vars[n].nominal) for n in d.states + d.inputs])
    worst = 0.0
    for temp in (-20.0, 25.0, 60.0):
        for soc in np.linspace(0.0, 1.0, 101):
            x, u = (soc, 0.02, 0.01, temp), (30.0, temp - 5.0)
            point = np.array(x + u)
            cols = []
            for j in range(len(point)):
                h = np.cbrt(EPS) * max(abs(point[j]), nominal[j])
                up, down = point.copy(), point.copy()
                up[j] += h
                down[j] -= h
                d.set_point(up[:4], up[4:])
                f_up = np.concatenate([d.state_derivatives(), d.get(d.outputs)])
                d.set_point(down[:4], down[4:])
                f_down = np.concatenate([d.state_derivatives(), d.get(d.outputs)])
                cols.append((f_up - f_down) / (up[j] - down[j]))
            A, B, C, D = ref.lfp_cell_jacobians(x, u)
            exact = np.block([[A, B], [C, D]])
            err = np.abs(np.column_stack(cols) - exact) * nominal
            worst = max(worst, float((err / np.max(np.abs(exact) * nominal, axis=1,
                                                    keepdims=True)).max()))
    assert worst <= 1e-8, worst
