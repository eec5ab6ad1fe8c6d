"""design_nodes on whole batches: equal to per-node designs, carried local models, bundled plants."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import scipy.linalg
import scipy.signal

from linobs.errors import UsageError
from linobs.estimator.design import design_node, design_nodes
from linobs.estimator.node import NodeDesign
from linobs.estimator.schedule import GainSchedule, ScheduleData
from linobs.estimator.settings import EstimatorSettings, PolePolicy
from linobs.model.loader import load_model
from tests.estimator import as_complex, pole_mismatch, random_system
from tests.linear.test_four_tank import H_MINUS, V_MINUS, published_linear_model
from tests.observability.models import linear_model

KALMAN = EstimatorSettings(kind="kalman", sample_time=2.0,
                           process_noise={"x0": 1e-3, "x1": 1e-3, "x2": 1e-3, "x3": 1e-3},
                           measurement_noise={"y0": 0.02, "y1": 0.02})


def four_tank_like(count: int, seed: int = 0) -> list:
    """Local models of the four-tank process at random levels (Johansson 2000, eq. 2)."""
    rng = np.random.default_rng(seed)
    out = []
    for _ in range(count):
        levels = np.array(list(H_MINUS.values())) * rng.uniform(0.5, 1.5, 4)
        A, B, C = published_linear_model(levels)
        out.append(linear_model(A, B, C, x0=levels, y0=C @ levels))
    return out


@pytest.mark.parametrize("kind, domain, form", [
    ("kalman", "discrete", "filter"), ("kalman", "continuous", "predictor"),
    ("luenberger", "discrete", "predictor"), ("luenberger", "continuous", "filter")])
def test_batch_equals_node_by_node(kind: str, domain: str, form: str) -> None:
    models = four_tank_like(12)
    st = KALMAN.model_copy(update={
        "kind": kind, "domain": domain, "form": form, "consistent_poles": False,
        "poles": PolePolicy(kind="speedup", factor=2.0)})
    batch = design_nodes(models, st)
    for lm, node in zip(models, batch):
        alone = design_node(lm, st)
        assert node.status == alone.status == "ok"
        for name in ("L", "Phi", "Gamma", "Gamma0", "P_prior", "P_post", "L_continuous"):
            a, b = getattr(node, name), getattr(alone, name)
            if a is None:
                assert b is None
                continue
            np.testing.assert_allclose(a, b, rtol=1e-10, atol=1e-14 * np.max(np.abs(b)))


def test_nodes_are_valid_and_carry_the_local_model() -> None:
    A, B, C = random_system(np.random.default_rng(1), 3, 2, 3)
    D = np.arange(6.0).reshape(3, 2)
    lm = linear_model(A, B, C, D, y0=np.array([1.0, 2.0, 3.0]), x0=np.ones(3),
                      dx0=np.array([0.1, 0.0, -0.2]))
    st = EstimatorSettings(kind="kalman", sample_time=0.1, outputs=["y2", "y0"],
                           process_noise={"x0": 1.0}, measurement_noise={"y0": 0.1, "y2": 0.3})
    node = design_node(lm, st)
    # the measured rows, in the order asked for
    np.testing.assert_array_equal(node.C, C[[2, 0]])
    np.testing.assert_array_equal(node.D, D[[2, 0]])
    np.testing.assert_array_equal(node.y0, [3.0, 1.0])
    np.testing.assert_allclose(node.R, np.diag([0.3 ** 2, 0.1 ** 2]), rtol=1e-15)   # R = diag(σ²)
    # ZOH of the carried model (scipy.signal.cont2discrete "zoh", reference library)
    Ad, Bd, *_ = scipy.signal.cont2discrete((A, B, C, D), 0.1, method="zoh")
    np.testing.assert_allclose(node.Phi, Ad, rtol=1e-12)
    np.testing.assert_allclose(node.Gamma, Bd, rtol=1e-12, atol=1e-15)
    # a full pydantic round trip through JSON validates every field
    again = NodeDesign.model_validate_json(node.model_dump_json())
    for name in ("L", "Phi", "Gamma0", "P_post", "Q", "R", "x0", "dx0"):
        np.testing.assert_array_equal(getattr(again, name), getattr(node, name))
    assert again.error_std == node.error_std and again.error_poles == node.error_poles


def test_non_finite_node_is_refused_alone() -> None:
    models = four_tank_like(3)
    bad = models[1].model_copy(update={"A": np.full((4, 4), np.nan)})
    nodes = design_nodes([models[0], bad, models[2]], KALMAN)
    assert [n.status for n in nodes] == ["ok", "refused", "ok"]
    assert "non-finite" in nodes[1].message


def test_models_must_share_names() -> None:
    a = four_tank_like(1)[0]
    b = a.model_copy(update={"states": ["h1", "h2", "h3", "h4"]})
    with pytest.raises(UsageError, match="node 1"):
        design_nodes([a, b], KALMAN)
    with pytest.raises(UsageError, match="outputs"):
        design_nodes([a], KALMAN, outputs=["level"])


@pytest.mark.parametrize("form", ["filter", "predictor"])
def test_schedule_update_has_the_designed_error_dynamics(form: str) -> None:
    # a one-node schedule on the affine plant: the estimation error must evolve by exactly the
    # error matrix the design promises, (I − LC)Φ or Φ − LC
    rng = np.random.default_rng(5)
    A, B, C = random_system(rng, 4, 2, 2, shift=0.5)
    D = rng.standard_normal((2, 2))
    x0, u0, dx0 = rng.standard_normal(4), rng.standard_normal(2), rng.standard_normal(4)
    lm = linear_model(A, B, C, D, x0=x0, u0=u0, y0=C @ x0, dx0=dx0)
    node = design_node(lm, KALMAN.model_copy(update={"form": form, "sample_time": 0.3}))
    data = ScheduleData(grid_kind="tensor", axes=["p"], axis_values=[[0.0]],
                        axis_roles={"p": "parameter"}, nodes=[node])
    schedule = GainSchedule(data)
    # the affine plant sampled by scipy (cont2discrete "zoh", reference), u held constant
    Phi, Gamma, *_ = scipy.signal.cont2discrete((A, B, C, D), 0.3, method="zoh")
    Gamma0 = scipy.signal.cont2discrete((A, np.eye(4), C, np.zeros((2, 4))), 0.3, "zoh")[1]
    u = u0 + 0.1
    M = (np.eye(4) - node.L @ C) @ Phi if form == "filter" else Phi - node.L @ C
    x = x0 + rng.standard_normal(4)
    x_hat = x0.copy()
    e = x_hat - x
    for _ in range(5):
        y = C @ (x - x0) + C @ x0 + D @ (u - u0)
        x_next = x0 + Phi @ (x - x0) + Gamma @ (u - u0) + Gamma0 @ dx0
        if form == "predictor":
            x_hat, _ = schedule.step(x_hat, u, y, {"p": 0.0})
        else:
            y_next = C @ (x_next - x0) + C @ x0 + D @ (u - u0)
            x_hat, _ = schedule.step(x_hat, u, y_next, {"p": 0.0})
        x = x_next
        e = M @ e
        np.testing.assert_allclose(x_hat - x, e, rtol=1e-9, atol=1e-11)


def test_bundled_four_tank_discrete_kalman_is_stable(bundled_fmus: dict[str, Path]) -> None:
    with load_model(bundled_fmus["four_tank"]) as model:
        lm = model.linearize({**H_MINUS, **V_MINUS})
    st = EstimatorSettings(kind="kalman", sample_time=1.0, input_noise={"v1": 0.01, "v2": 0.01},
                           process_noise={"h3": 1e-4, "h4": 1e-4},
                           measurement_noise={"y1": 0.01, "y2": 0.01})
    node = design_node(lm, st)
    assert node.status == "ok", node.message
    Phi = scipy.linalg.expm(lm.A * 1.0)             # Φ = e^{ATs} (scipy)
    radius = np.max(np.abs(np.linalg.eigvals((np.eye(4) - node.L @ node.C) @ Phi)))
    assert radius < 1.0                              # Schur stability (definition)
    assert radius == pytest.approx(np.max(np.abs(as_complex(node.error_poles))), rel=1e-10)


def test_bundled_lfp_cell_designs(bundled_fmus: dict[str, Path]) -> None:
    with load_model(bundled_fmus["lfp_cell"]) as model:
        lm = model.linearize({"soc": 0.5, "temp_cell": 25.0, "t_amb": 25.0, "i_cell": 0.0})
    st = EstimatorSettings(kind="kalman", sample_time=1.0, input_noise={"i_cell": 0.01},
                           process_noise={"v_rc1": 1e-8, "v_rc2": 1e-8, "temp_cell": 1e-6},
                           measurement_noise={"v_term": 1e-3, "t_surf": 0.1})
    node = design_node(lm, st)
    assert node.status == "ok", node.message
    Phi = scipy.linalg.expm(lm.A)                    # scipy
    assert np.max(np.abs(np.linalg.eigvals((np.eye(4) - node.L @ node.C) @ Phi))) < 1.0
    # soc is an integrator (analytic: dsoc/dt ∝ −i): speedup needs a floor, then it is placed
    luen = EstimatorSettings(kind="luenberger", sample_time=1.0,
                             poles=PolePolicy(kind="speedup", factor=2.0, min_rate=1e-3))
    placed = design_node(lm, luen)
    assert placed.status == "ok", placed.message
    E = (np.eye(4) - placed.L @ placed.C) @ Phi      # the filter form's error dynamics
    # numpy eigenvalues against the requested z-poles (matched one to one)
    assert pole_mismatch(np.linalg.eigvals(E), as_complex(placed.requested_poles)) < 1e-8
    assert np.max(np.abs(as_complex(placed.requested_poles))) < 1.0


def test_progress_is_reported_per_batch() -> None:
    calls: list[tuple[int, int]] = []
    design_nodes(four_tank_like(5), KALMAN, progress=lambda done, total: calls.append((done, total)))
    assert calls == [(5, 5)]
