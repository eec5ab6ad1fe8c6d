"""Frozen-point validation: analytic model families with scipy-designed nodes, and the four-tank plant."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from scipy.linalg import expm, solve_continuous_are
from scipy.spatial import Delaunay

from linobs.errors import EvaluationError
from linobs.estimator.frozen import FrozenReport, frozen_point_check, frozen_points
from linobs.estimator.schedule import GainSchedule, schedule_from_nodes
from linobs.estimator.settings import ValidationSettings
from linobs.linear.linear_model import JacobianErrors, LinearModel, ModelIdentity
from linobs.linear.linearize import linearize
from linobs.model.loader import load_model
from linobs.operating.grid import Axis, Grid
from linobs.operating.trim import find_operating_point
from linobs.operating.trim_spec import TrimSpec
from tests.estimator.test_schedule import kalman_filter_gain, make_node, zoh
from tests.support.former_names import former_frozen

TS = 0.2
B = np.array([[0.0], [1.0]])
C = np.array([[1.0, 0.0]])
Q = np.diag([1e-3, 1e-2])
R = np.array([[0.05]])


def plant_A(s: float) -> np.ndarray:
    """An oscillator whose stiffness grows linearly with the scheduling variable (invented)."""
    return np.array([[0.0, 1.0], [-(1.0 + 2.0 * s), -0.3]])


def linear_model(A: np.ndarray, B: np.ndarray, C: np.ndarray, states: list[str] | None = None,
                 outputs: list[str] | None = None) -> LinearModel:
    n, m, p = A.shape[0], B.shape[1], C.shape[0]
    z = np.zeros
    return LinearModel(
        states=states or [f"x{i}" for i in range(n)], inputs=[f"u{i}" for i in range(m)],
        outputs=outputs or [f"y{i}" for i in range(p)], state_units=[None] * n,
        input_units=[None] * m, output_units=[None] * p, state_nominal=np.ones(n),
        input_nominal=np.ones(m), output_nominal=np.ones(p), A=A, B=B, C=C, D=z((p, m)),
        x0=z(n), u0=z(m), y0=z(p), dx0=z(n), parameters={}, method="exact",
        requested_method="exact", column_schemes=["exact"] * (n + m), steps=z(n + m),
        errors=JacobianErrors(A=z((n, n)), B=z((n, m)), C=z((p, n)), D=z((p, m))),
        evaluations=0, column_groups=0, used_structure=False,
        model=ModelIdentity(model_name="analytic", guid="-", sha256="-", fmi_version="2.0"))


def analytic_callback(point: dict[str, float]) -> LinearModel:
    return linear_model(plant_A(point["s"]), B, C)


def oscillator_schedule(values: list[float], form: str = "filter",
                        bad: dict[int, np.ndarray] | None = None) -> tuple[GainSchedule,
                                                                           list[np.ndarray]]:
    """Kalman gains per node from scipy's DARE (reference library); ``bad`` overrides some."""
    gains, nodes = [], []
    for i, s in enumerate(values):
        Phi = zoh(plant_A(s), B, TS)[0]
        L = kalman_filter_gain(Phi, C, Q, R)
        if form == "predictor":
            L = Phi @ L
        L = (bad or {}).get(i, L)
        gains.append(L)
        nodes.append(make_node(plant_A(s), B, C, L, Ts=TS, form=form))
    grid = Grid.tensor([Axis("s", values)])
    return schedule_from_nodes(grid, dict(enumerate(nodes)), {"s": "parameter"}), gains


def interpolated_gain(values: list[float], gains: list[np.ndarray], s: float) -> np.ndarray:
    """Element-wise numpy.interp of the node gains (reference: numpy's linear interpolation)."""
    G = np.stack(gains)
    return np.array([[np.interp(s, values, G[:, r, c]) for c in range(G.shape[2])]
                     for r in range(G.shape[1])])


def radius(M: np.ndarray) -> float:
    return float(np.max(np.abs(np.linalg.eigvals(M))))  # numpy (LAPACK) eigenvalues


# ---------------------------------------------------------------------- the points
def test_cell_centers_of_a_3_by_4_grid_are_the_midpoints() -> None:
    a, b = [0.0, 1.0, 4.0], [-1.0, 0.0, 0.5, 2.5]
    grid = Grid.tensor([Axis("a", a), Axis("b", b)])
    pts = frozen_points(grid, ValidationSettings(random_points=0))
    # analytic: the 2 × 3 cells' centers, C order
    expected = [{"a": ma, "b": mb} for ma in (0.5, 2.5) for mb in (-0.5, 0.25, 1.5)]
    assert pts == expected


def test_random_points_are_reproducible_and_inside_the_box() -> None:
    grid = Grid.tensor([Axis("a", [0.0, 1.0, 4.0]), Axis("b", [-1.0, 0.0, 0.5, 2.5]),
                        Axis("c", [7.0])])
    first = frozen_points(grid, ValidationSettings(random_points=40, seed=3))
    again = frozen_points(grid, ValidationSettings(random_points=40, seed=3))
    other = frozen_points(grid, ValidationSettings(random_points=40, seed=4))
    assert len(first) == 6 + 40 and first == again and first[6:] != other[6:]
    R_ = np.array([[p["a"], p["b"], p["c"]] for p in first[6:]])
    assert np.all((R_[:, 0] >= 0.0) & (R_[:, 0] <= 4.0) & (R_[:, 1] >= -1.0) & (R_[:, 1] <= 2.5))
    assert np.all(R_[:, 2] == 7.0)
    assert len({tuple(r) for r in R_}) == 40


def test_scattered_points_are_simplex_centroids_and_inside_the_hull() -> None:
    rng = np.random.default_rng(8)
    pts = np.column_stack([rng.uniform(0, 100, 15), rng.uniform(0, 1, 15)])
    grid = Grid.scattered(["a", "b"], pts)
    out = frozen_points(grid, ValidationSettings(random_points=60, seed=1))
    scaled = (pts - pts.min(0)) / np.ptp(pts, 0)
    tri = Delaunay(scaled)  # scipy reference triangulation (scaled coordinates)
    assert len(out) == len(tri.simplices) + 60
    centroids = pts[tri.simplices].mean(axis=1)  # analytic: the mean of the vertices
    got = np.array([[p["a"], p["b"]] for p in out[: len(tri.simplices)]])
    assert sorted(map(tuple, np.round(got, 12))) == sorted(map(tuple, np.round(centroids, 12)))
    rand = np.array([[p["a"], p["b"]] for p in out[len(tri.simplices):]])
    assert np.all(tri.find_simplex((rand - pts.min(0)) / np.ptp(pts, 0)) >= 0)
    assert out == frozen_points(grid, ValidationSettings(random_points=60, seed=1))


# ---------------------------------------------------------------------- the check
@pytest.mark.parametrize("form", ["filter", "predictor"])
def test_interpolated_kalman_gains_pass_with_the_right_radius(form: str) -> None:
    values = [0.0, 1.0, 2.0, 4.0]
    schedule, gains = oscillator_schedule(values, form)
    grid = Grid.tensor([Axis("s", values)])
    settings = ValidationSettings(random_points=20, seed=0)
    points = frozen_points(grid, settings)
    report = frozen_point_check(schedule, points, analytic_callback, settings)
    assert report.all_passed and report.count == 3 + 20 and report.passed == report.count
    for fp in report.points:
        s = fp.values["s"]
        Phi = expm(plant_A(s) * TS)  # scipy reference
        L = interpolated_gain(values, gains, s)
        M = Phi - L @ C if form == "predictor" else (np.eye(2) - L @ C) @ Phi
        assert fp.spectral_radius == pytest.approx(radius(M), rel=1e-10)
        assert fp.decay_reserve == pytest.approx(0.999 - radius(M), rel=1e-9)
    reserves = [fp.decay_reserve for fp in report.points]
    assert reserves == sorted(reserves) and report.worst_decay_reserve == reserves[0]


def test_a_bad_node_fails_where_its_gain_is_used() -> None:
    values = [0.0, 1.0, 2.0, 3.0, 4.0]
    bad = {3: np.array([[3.0], [-2.0]])}   # a destabilizing gain at s = 3
    schedule, gains = oscillator_schedule(values, "filter", bad)
    points = [{"s": s} for s in (0.5, 1.5, 2.5, 3.5, 2.9, 3.0)]
    report = frozen_point_check(schedule, points, analytic_callback, ValidationSettings())
    by_s = {fp.values["s"]: fp for fp in report.points}
    for s, fp in by_s.items():
        L = interpolated_gain(values, gains, s)
        rho = radius((np.eye(2) - L @ C) @ expm(plant_A(s) * TS))  # numpy / scipy, independent
        assert fp.spectral_radius == pytest.approx(rho, rel=1e-10)
        assert fp.passed == (rho <= 0.999)
    assert by_s[0.5].passed and by_s[1.5].passed                  # far from the bad node
    for s in (2.5, 2.9, 3.0, 3.5):                                # cells touching it
        assert not by_s[s].passed and by_s[s].status == "fail"
    assert report.failed == 4 and report.passed == 2 and not report.all_passed
    assert report.points[0].decay_reserve == min(fp.decay_reserve for fp in report.points)
    assert report.points[-1].passed
    # a report stored before the decay reserve had its name reads with the same values
    stored = former_frozen(report.model_dump(mode="json"))
    assert "worst_margin" in stored and "margin" in stored["points"][0]
    assert "decay_reserve" not in stored["points"][0]
    assert FrozenReport.model_validate(stored) == report


def test_continuous_design_checks_the_decay_rate() -> None:
    values = [0.0, 2.0]
    nodes, Lcs = [], []
    for s in values:
        A = plant_A(s)
        # continuous Kalman gain from scipy's CARE (Kalman & Bucy 1961; reference library)
        P = solve_continuous_are(A.T, C.T, Q / TS, R * TS)
        Lc = P @ C.T / (R[0, 0] * TS)
        Phi = expm(A * TS)
        Lcs.append(Lc)
        nodes.append(make_node(A, B, C, kalman_filter_gain(Phi, C, Q, R), Ts=TS,
                               domain="continuous", L_continuous=Lc))
    schedule = schedule_from_nodes(Grid.tensor([Axis("s", values)]), dict(enumerate(nodes)),
                                   {"s": "parameter"})
    settings = ValidationSettings(decay_rate_min=0.05)
    report = frozen_point_check(schedule, [{"s": 1.0}, {"s": 0.4}], analytic_callback, settings)
    for fp in report.points:
        s = fp.values["s"]
        Lc = interpolated_gain(values, Lcs, s)
        decay = -np.max(np.linalg.eigvals(plant_A(s) - Lc @ C).real)   # numpy, independent
        L = interpolated_gain(values, [n.L for n in nodes], s)
        rho = radius((np.eye(2) - L @ C) @ expm(plant_A(s) * TS))
        assert fp.decay_rate == pytest.approx(decay, rel=1e-10)
        assert fp.decay_reserve == pytest.approx(min(decay, -np.log(rho) / TS) - 0.05, rel=1e-9)
        assert fp.passed
    # a demanding rate fails with the same numbers
    strict = frozen_point_check(schedule, [{"s": 1.0}], analytic_callback,
                                ValidationSettings(decay_rate_min=50.0))
    assert strict.failed == 1 and strict.points[0].decay_reserve < 0


def test_callback_failures_and_refused_nodes_are_recorded() -> None:
    values = [0.0, 1.0, 2.0]
    nodes = [make_node(plant_A(s), B, C, None if i == 2 else
                       kalman_filter_gain(expm(plant_A(s) * TS), C, Q, R), Ts=TS)
             for i, s in enumerate(values)]
    schedule = schedule_from_nodes(Grid.tensor([Axis("s", values)]), dict(enumerate(nodes)),
                                   {"s": "parameter"})

    def callback(point: dict[str, float]) -> LinearModel:
        if point["s"] == 0.25:
            raise EvaluationError("the FMU failed at s = 0.25")
        return analytic_callback(point)

    calls: list[tuple[int, int]] = []
    report = frozen_point_check(schedule, [{"s": 0.5}, {"s": 0.25}, {"s": 1.5}], callback,
                                ValidationSettings(), progress=lambda d, t: calls.append((d, t)))
    assert calls == [(1, 3), (2, 3), (3, 3)]
    assert [fp.status for fp in report.points] == ["error", "unusable", "pass"]
    err, unusable, ok = report.points
    assert err.values == {"s": 0.25} and "the FMU failed at s = 0.25" in err.message
    assert err.spectral_radius is None and not err.passed
    # the update runs without correction there: the open-loop Φ (scipy expm, numpy eigvals)
    assert not unusable.usable and not unusable.passed
    assert unusable.spectral_radius == pytest.approx(radius(expm(plant_A(1.5) * TS)), rel=1e-10)
    assert ok.passed and ok.values == {"s": 0.5}
    assert (report.errors, report.unusable, report.passed, report.count) == (1, 1, 1, 3)


def test_state_order_of_the_local_model_is_followed() -> None:
    values = [0.0, 1.0]
    schedule, _ = oscillator_schedule(values)

    def swapped(point: dict[str, float]) -> LinearModel:
        P = np.array([[0, 1], [1, 0]])   # the same model with its states listed the other way
        return linear_model(P @ plant_A(point["s"]) @ P, P @ B, C @ P, states=["x1", "x0"])

    a = frozen_point_check(schedule, [{"s": 0.3}], analytic_callback, ValidationSettings())
    b = frozen_point_check(schedule, [{"s": 0.3}], swapped, ValidationSettings())
    # analytic: a permutation of the states does not change the error dynamics
    assert b.points[0].spectral_radius == pytest.approx(a.points[0].spectral_radius, rel=1e-12)


# ---------------------------------------------------------------------- a bundled plant
def test_four_tank_kalman_schedule_passes(bundled_fmus: dict[str, Path]) -> None:
    Ts = 2.0
    v1, v2 = [2.6, 3.0, 3.4], [2.6, 3.0, 3.4]
    grid = Grid.tensor([Axis("v1", v1), Axis("v2", v2)])
    spec = TrimSpec()  # every level free, der(h) = 0

    with load_model(bundled_fmus["four_tank"]) as model:
        def local(point: dict[str, float]) -> LinearModel:
            res = find_operating_point(model, point, spec)
            assert res.converged
            return linearize(model, res.point(), method="exact")

        nodes = {}
        for i in range(len(grid)):
            lm = local(grid.point(i))
            Phi = zoh(lm.A, lm.B, Ts)[0]
            # Kalman filter gain from scipy's DARE (reference library); Q ≈ Ts·diag(q)
            L = kalman_filter_gain(Phi, lm.C, Ts * np.diag([1e-3] * 4), np.diag([0.01, 0.01]))
            nodes[i] = make_node(lm.A, lm.B, lm.C, L, Ts=Ts, states=lm.states, inputs=lm.inputs,
                                 outputs=lm.outputs, x0=lm.x0, u0=lm.u0, y0=lm.y0, dx0=lm.dx0)
        schedule = schedule_from_nodes(grid, nodes, {"v1": "input", "v2": "input"})
        settings = ValidationSettings(random_points=6, seed=2)
        points = frozen_points(grid, settings)
        report = frozen_point_check(schedule, points, local, settings)
        center = {"v1": 2.8, "v2": 3.2}
        lm_center = local(center)
    assert report.count == 4 + 6 and report.all_passed, [fp.message for fp in report.points]
    assert report.worst_decay_reserve is not None and report.worst_decay_reserve > 0
    # independent at one cell center: bilinear weights are all 1/4 there (analytic)
    L = 0.25 * sum(nodes[grid.flat_index(ix)].L for ix in ((0, 1), (0, 2), (1, 1), (1, 2)))
    rho = radius((np.eye(4) - L @ lm_center.C) @ expm(lm_center.A * Ts))
    fp = next(p for p in report.points if p.values == pytest.approx(center))
    assert fp.spectral_radius == pytest.approx(rho, rel=1e-8)
    assert fp.model_mismatch is not None and fp.model_mismatch < 0.05
