"""Gain schedules: interpolation against scipy's interpolators, refused nodes, JSON, the update."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.interpolate import (
    LinearNDInterpolator,
    NearestNDInterpolator,
    RegularGridInterpolator,
)
from scipy.linalg import expm, solve_discrete_are

from linobs.errors import UsageError
from linobs.estimator.node import NodeDesign
from linobs.estimator.schedule import (
    FIELDS,
    GainSchedule,
    ScheduleData,
    schedule_from_nodes,
)
from linobs.operating.grid import Axis, Grid

SHAPES = {"L": ("n", "p"), "Phi": ("n", "n"), "Gamma": ("n", "m"), "Gamma0": ("n", "n"),
          "C": ("p", "n"), "D": ("p", "m"), "x0": ("n",), "u0": ("m",), "y0": ("p",),
          "dx0": ("n",)}


# ---------------------------------------------------------------------- helpers (shared)
def zoh(A: np.ndarray, B: np.ndarray, Ts: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Φ, Γ, Γ₀ by one matrix exponential (Van Loan 1978, IEEE TAC 23(3), Theorem 1; scipy expm)."""
    n, m = B.shape
    M = np.zeros((2 * n + m, 2 * n + m))
    M[:n, :n], M[:n, n:n + m], M[:n, n + m:] = A, B, np.eye(n)
    E = expm(M * Ts)
    return E[:n, :n], E[:n, n:n + m], E[:n, n + m:]


def make_node(A: np.ndarray, B: np.ndarray, C: np.ndarray, L: np.ndarray | None, *,
              D: np.ndarray | None = None, Ts: float = 0.1, form: str = "filter",
              kind: str = "kalman", domain: str = "discrete", x0: np.ndarray | None = None,
              u0: np.ndarray | None = None, y0: np.ndarray | None = None,
              dx0: np.ndarray | None = None, states: list[str] | None = None,
              inputs: list[str] | None = None, outputs: list[str] | None = None,
              poles: list[tuple[float, float]] | None = None,
              L_continuous: np.ndarray | None = None) -> NodeDesign:
    """A node from a continuous local model, sampled exactly; ``L=None`` makes it refused."""
    A, B, C = (np.atleast_2d(np.asarray(M, dtype=float)) for M in (A, B, C))
    n, m, p = A.shape[0], B.shape[1], C.shape[0]
    Phi, Gamma, Gamma0 = zoh(A, B, Ts)
    return NodeDesign(
        status="ok" if L is not None else "refused", kind=kind, domain=domain, form=form,
        sample_time=Ts, states=states or [f"x{i}" for i in range(n)],
        inputs=inputs or [f"u{i}" for i in range(m)], outputs=outputs or [f"y{i}" for i in range(p)],
        x0=np.zeros(n) if x0 is None else x0, u0=np.zeros(m) if u0 is None else u0,
        y0=np.zeros(p) if y0 is None else y0, dx0=np.zeros(n) if dx0 is None else dx0,
        A=A, B=B, C=C, D=np.zeros((p, m)) if D is None else np.atleast_2d(D), Phi=Phi,
        Gamma=Gamma, Gamma0=Gamma0, L=np.zeros((0, 0)) if L is None else np.atleast_2d(L),
        L_continuous=L_continuous, error_poles=poles or [])


def random_node(rng: np.random.Generator, n: int = 2, m: int = 1, p: int = 2,
                refused: bool = False) -> NodeDesign:
    """A node holding random numbers in every interpolated quantity (interpolation tests only)."""
    dims = {"n": n, "m": m, "p": p}
    values = {f: rng.normal(size=tuple(dims[d] for d in SHAPES[f])) for f in FIELDS}
    if refused:
        values["L"] = np.zeros((0, 0))
    return NodeDesign(
        status="refused" if refused else "ok", kind="kalman", domain="discrete", form="filter",
        sample_time=0.5, states=[f"x{i}" for i in range(n)], inputs=[f"u{i}" for i in range(m)],
        outputs=[f"y{i}" for i in range(p)], A=rng.normal(size=(n, n)), B=rng.normal(size=(n, m)),
        **values)


def kalman_filter_gain(Phi: np.ndarray, C: np.ndarray, Q: np.ndarray, R: np.ndarray
                       ) -> np.ndarray:
    """Steady-state current-estimate Kalman gain from scipy's DARE (Kalman 1960; scipy reference)."""
    P = solve_discrete_are(Phi.T, C.T, Q, R)  # prior covariance
    return P @ C.T @ np.linalg.inv(C @ P @ C.T + R)


def tensor_schedule(axes: dict[str, list[float]], nodes: list[NodeDesign],
                    roles: dict[str, str] | None = None) -> GainSchedule:
    grid = Grid.tensor([Axis(k, v) for k, v in axes.items()])
    return schedule_from_nodes(grid, dict(enumerate(nodes)),
                               roles or {k: "parameter" for k in axes})


def stacked(nodes: list[NodeDesign], field: str) -> np.ndarray:
    return np.stack([np.asarray(getattr(n, field), dtype=float) for n in nodes])


AXES3 = {"a": [0.0, 0.3, 1.0], "b": [-2.0, -1.5, 0.0, 4.0], "c": [10.0, 20.0]}


@pytest.fixture
def random3() -> tuple[GainSchedule, list[NodeDesign]]:
    rng = np.random.default_rng(7)
    nodes = [random_node(rng) for _ in range(3 * 4 * 2)]
    return tensor_schedule(AXES3, nodes), nodes


# ---------------------------------------------------------------------- tensor interpolation
def test_exact_at_every_node(random3) -> None:  # type: ignore[no-untyped-def]
    schedule, nodes = random3
    grid = Grid.tensor([Axis(k, v) for k, v in AXES3.items()])
    for i in range(len(grid)):
        ev = schedule.evaluate(grid.points[i])
        assert ev.usable and not ev.outside
        for f in FIELDS:  # analytic: an interpolant reproduces the node values
            np.testing.assert_allclose(ev.values[f], getattr(nodes[i], f), rtol=1e-14, atol=1e-15)


def test_linear_along_an_edge(random3) -> None:  # type: ignore[no-untyped-def]
    schedule, nodes = random3
    grid = Grid.tensor([Axis(k, v) for k, v in AXES3.items()])
    i, j = grid.flat_index((1, 2, 1)), grid.flat_index((1, 3, 1))  # neighbors along axis b
    for t in np.linspace(0.0, 1.0, 7):
        s = (1 - t) * grid.points[i] + t * grid.points[j]
        ev = schedule.evaluate(s)
        for f in FIELDS:
            # analytic: multilinear interpolation restricted to a cell edge is linear in the
            # edge coordinate (the other axes' weights are 0/1 there)
            expected = (1 - t) * getattr(nodes[i], f) + t * getattr(nodes[j], f)
            np.testing.assert_allclose(ev.values[f], expected, rtol=1e-13, atol=1e-13)


def test_tensor_matches_regular_grid_interpolator(random3) -> None:  # type: ignore[no-untyped-def]
    schedule, nodes = random3
    rng = np.random.default_rng(1)
    lo = np.array([v[0] for v in AXES3.values()])
    hi = np.array([v[-1] for v in AXES3.values()])
    S = lo + (hi - lo) * rng.random((300, 3))
    batch = schedule.evaluate_many(S)
    assert batch.usable.all() and not batch.outside.any()
    shape = tuple(len(v) for v in AXES3.values())
    for f in FIELDS:
        data = stacked(nodes, f)
        # scipy's RegularGridInterpolator, method "linear" (reference library)
        ref = RegularGridInterpolator(tuple(np.array(v) for v in AXES3.values()),
                                      data.reshape(shape + data.shape[1:]), method="linear")(S)
        np.testing.assert_allclose(batch.values[f], ref, rtol=1e-12, atol=1e-12)
        for k in (0, 137, 299):  # the single-point path gives the same numbers
            np.testing.assert_allclose(schedule.evaluate(S[k]).values[f], ref[k], rtol=1e-12,
                                       atol=1e-12)


def test_outside_the_box_is_clamped_and_flagged(random3) -> None:  # type: ignore[no-untyped-def]
    schedule, _ = random3
    lo = np.array([v[0] for v in AXES3.values()])
    hi = np.array([v[-1] for v in AXES3.values()])
    for s in ([-1.0, 0.0, 15.0], [0.5, 9.0, 15.0], [2.0, -5.0, 30.0]):
        ev = schedule.evaluate(s)
        inner = schedule.evaluate(np.clip(s, lo, hi))
        assert ev.outside and not inner.outside
        for f in FIELDS:  # analytic: clamping to the box, per axis
            np.testing.assert_array_equal(ev.values[f], inner.values[f])
    assert not schedule.evaluate(hi).outside and not schedule.evaluate(lo).outside


def test_single_valued_axis_is_ignored_by_the_weights() -> None:
    rng = np.random.default_rng(3)
    nodes = [random_node(rng) for _ in range(3)]
    schedule = tensor_schedule({"a": [5.0], "b": [0.0, 1.0, 3.0]}, nodes)
    ev = schedule.evaluate([7.0, 2.0])
    assert ev.outside
    # analytic: linear between b = 1 and b = 3 at b = 2 (midpoint)
    np.testing.assert_allclose(ev.values["L"], 0.5 * (nodes[1].L + nodes[2].L), rtol=1e-14)


# ---------------------------------------------------------------------- scattered
def scattered_schedule(points: np.ndarray, nodes: list[NodeDesign]) -> GainSchedule:
    grid = Grid.scattered(["a", "b"][: points.shape[1]], points)
    return schedule_from_nodes(grid, dict(enumerate(nodes)), {n: "parameter" for n in grid.names})


def test_scattered_matches_linear_nd_interpolator() -> None:
    rng = np.random.default_rng(11)
    # axes of very different ranges: the triangulation must be taken in scaled coordinates
    pts = np.column_stack([rng.uniform(0, 1000, 25), rng.uniform(0, 1, 25)])
    nodes = [random_node(rng) for _ in pts]
    schedule = scattered_schedule(pts, nodes)
    S = np.column_stack([rng.uniform(-100, 1100, 400), rng.uniform(-0.1, 1.1, 400)])
    batch = schedule.evaluate_many(S)
    scaled = (pts - pts.min(0)) / np.ptp(pts, 0)
    for f in ("L", "Phi", "x0"):
        data = stacked(nodes, f).reshape(len(nodes), -1)
        # scipy's LinearNDInterpolator with rescale=True (reference library): NaN outside the hull
        ref = LinearNDInterpolator(pts, data, rescale=True)(S)
        inside = ~np.isnan(ref[:, 0])
        np.testing.assert_array_equal(batch.outside, ~inside)
        got = batch.values[f].reshape(len(S), -1)
        np.testing.assert_allclose(got[inside], ref[inside], rtol=1e-10, atol=1e-10)
        # outside: the nearest node in scaled coordinates (scipy's NearestNDInterpolator)
        near = NearestNDInterpolator(scaled, data)((S[~inside] - pts.min(0)) / np.ptp(pts, 0))
        np.testing.assert_allclose(got[~inside], near, rtol=0, atol=0)
    assert inside.sum() > 100 and (~inside).sum() > 20  # the sample covers both cases


def test_scattered_one_variable_is_piecewise_linear() -> None:
    rng = np.random.default_rng(5)
    pts = np.array([[3.0], [0.0], [1.0], [7.0]])
    nodes = [random_node(rng) for _ in pts]
    schedule = scattered_schedule(pts, nodes)
    S = np.linspace(-2.0, 9.0, 45)
    batch = schedule.evaluate_many(S[:, None])
    order = np.argsort(pts[:, 0])
    L = stacked(nodes, "L")
    for r in range(2):
        for c in range(2):
            # numpy.interp: piecewise linear, the end values outside (= nearest node) — reference
            ref = np.interp(S, pts[order, 0], L[order, r, c])
            np.testing.assert_allclose(batch.values["L"][:, r, c], ref, rtol=1e-13, atol=1e-13)
    np.testing.assert_array_equal(batch.outside, (S < 0.0) | (S > 7.0))


# ---------------------------------------------------------------------- refused nodes
def test_cells_touching_a_refused_node_are_unusable() -> None:
    rng = np.random.default_rng(2)
    axes = {"a": [0.0, 1.0, 2.0], "b": [0.0, 1.0, 2.0]}
    nodes = [random_node(rng, refused=(i == 0)) for i in range(9)]
    schedule = tensor_schedule(axes, nodes)
    # every interior point of cell (0, 0) uses node 0 with a positive weight
    for s in ([0.5, 0.5], [0.01, 0.99], [0.99, 0.01]):
        ev = schedule.evaluate(s)
        assert not ev.usable and np.isnan(ev.values["L"]).all()
        assert np.isfinite(ev.values["Phi"]).all()  # the refused node's local model is real
    # the other cells do not touch node 0
    assert all(schedule.evaluate(s).usable for s in ([1.5, 0.5], [0.5, 1.5], [1.5, 1.5]))
    # the edge between nodes (0,1) and (1,1) is shared with cell (0,0) but does not use node 0:
    # analytic, linear along the edge between those two nodes
    ev = schedule.evaluate([0.25, 1.0])
    assert ev.usable
    np.testing.assert_allclose(ev.values["L"], 0.75 * nodes[1].L + 0.25 * nodes[4].L, rtol=1e-14)
    batch = schedule.evaluate_many([[0.5, 0.5], [1.5, 1.5], [0.25, 1.0]])
    np.testing.assert_array_equal(batch.usable, [False, True, True])


def test_refused_center_node_makes_every_cell_unusable() -> None:
    rng = np.random.default_rng(4)
    nodes = [random_node(rng, refused=(i == 4)) for i in range(9)]
    schedule = tensor_schedule({"a": [0.0, 1.0, 2.0], "b": [0.0, 1.0, 2.0]}, nodes)
    S = np.random.default_rng(0).uniform(0.001, 1.999, (50, 2))
    assert not schedule.evaluate_many(S).usable.any()
    assert schedule.evaluate([0.0, 0.0]).usable  # at a designed node: only that node is used


def test_unusable_step_keeps_the_prediction() -> None:
    A, B, C = np.array([[-0.5]]), np.array([[1.0]]), np.array([[2.0]])
    good = make_node(A, B, C, np.array([[0.3]]), dx0=np.array([0.2]))
    bad = make_node(A, B, C, None, dx0=np.array([0.2]))
    schedule = tensor_schedule({"p": [0.0, 1.0]}, [good, bad])
    x, ev = schedule.step(np.array([1.0]), np.array([0.5]), np.array([9.0]), {"p": 0.5})
    assert not ev.usable
    # node.py's prediction without correction (every node has the same local model here)
    expected = good.Phi @ [1.0] + good.Gamma @ [0.5] + good.Gamma0 @ good.dx0
    np.testing.assert_allclose(x, expected, rtol=1e-14)


# ---------------------------------------------------------------------- serialization
def test_json_round_trip_gives_an_identical_schedule() -> None:
    rng = np.random.default_rng(9)
    nodes = [random_node(rng, refused=(i == 5)) for i in range(12)]
    schedule = tensor_schedule({"a": [0.0, 1.0, 3.0], "b": [0.0, 0.1, 0.2, 0.5]}, nodes)
    text = schedule.data.model_dump_json()
    again = GainSchedule(ScheduleData.model_validate_json(text))
    assert again.data.model_dump_json() == text
    S = np.random.default_rng(1).uniform(-0.5, 3.5, (40, 2))
    a, b = schedule.evaluate_many(S), again.evaluate_many(S)
    for f in FIELDS:
        np.testing.assert_array_equal(a.values[f], b.values[f])  # bit for bit
    np.testing.assert_array_equal(a.usable, b.usable)
    np.testing.assert_array_equal(a.outside, b.outside)
    # scattered too
    pts = rng.uniform(0, 1, (8, 2))
    sched = scattered_schedule(pts, [random_node(rng) for _ in pts])
    again = GainSchedule(ScheduleData.model_validate_json(sched.data.model_dump_json()))
    np.testing.assert_array_equal(sched.evaluate_many(S / 3).values["L"],
                                  again.evaluate_many(S / 3).values["L"])


# ---------------------------------------------------------------------- the update
def constant_schedule(form: str, D: np.ndarray | None = None) -> tuple[GainSchedule, NodeDesign]:
    A = np.array([[-0.4, 0.3], [0.0, -1.2]])
    B = np.array([[0.0], [1.0]])
    C = np.array([[1.0, 0.5]])
    node = make_node(A, B, C, np.array([[0.4], [0.1]]), D=D, form=form, states=["h", "T"],
                     inputs=["q"], outputs=["y"], x0=np.array([2.0, 30.0]), u0=np.array([1.5]),
                     y0=np.array([17.0]), dx0=np.array([0.05, -0.02]))
    axes = {"T": [20.0, 40.0], "q": [0.0, 1.0, 3.0]}
    return tensor_schedule(axes, [node] * 6, {"T": "state", "q": "input"}), node


@pytest.mark.parametrize("form", ["predictor", "filter"])
def test_step_matches_the_documented_update(form: str) -> None:
    D = np.array([[0.25]])
    schedule, nd = constant_schedule(form, D)
    x = np.array([2.3, 28.0])
    u, u_now, y = np.array([1.2]), np.array([1.7]), np.array([16.0])

    def predict(xh: np.ndarray, uu: np.ndarray) -> np.ndarray:
        # node.py: x0 + Φ(x̂ − x0) + Γ(u − u0) + Γ₀ dx0
        return nd.x0 + nd.Phi @ (xh - nd.x0) + nd.Gamma @ (uu - nd.u0) + nd.Gamma0 @ nd.dx0

    def output(xh: np.ndarray, uu: np.ndarray) -> np.ndarray:
        # node.py: y0 + C(x̂ − x0) + D(u − u0)
        return nd.y0 + nd.C @ (xh - nd.x0) + nd.D @ (uu - nd.u0)

    if form == "predictor":
        got, ev = schedule.step(x, u, y)
        expected = predict(x, u) + nd.L @ (y - output(x, u))
    else:
        got, ev = schedule.step(x, u, y, u_now=u_now)
        prior = predict(x, u)
        expected = prior + nd.L @ (y - output(prior, u_now))
    assert ev.usable and not ev.outside
    # analytic: all nodes equal, so the interpolated node is that node (node.py's formulas)
    np.testing.assert_allclose(got, expected, rtol=1e-13, atol=1e-12)
    np.testing.assert_array_equal(schedule.scheduling_value(x, u), [28.0, 1.2])


def test_filter_and_predictor_forms_are_related_by_phi_times_gain() -> None:
    # Scalar plant x' = a x + b u, y = c x, sampled: x[k+1] = φ x[k] + γ u[k] (+ affine terms).
    # Filter form with gain ℓ_f:  x̂[k|k] = x̂⁻[k] + ℓ_f (y[k] − ŷ(x̂⁻[k])),
    #                            x̂⁻[k+1] = pred(x̂[k|k], u[k]).
    # pred is affine with slope φ, so  x̂⁻[k+1] = pred(x̂⁻[k], u[k]) + φ ℓ_f (y[k] − ŷ(x̂⁻[k])):
    # the filter's priors obey the predictor recursion with gain ℓ_p = φ ℓ_f (analytic;
    # Franklin, Powell & Workman 1998, Digital Control of Dynamic Systems, §8.3).
    a, b, c, Ts = -0.7, 2.0, 1.5, 0.2
    phi = np.exp(a * Ts)
    lf = kalman_filter_gain(np.array([[phi]]), np.array([[c]]), np.array([[0.3]]),
                            np.array([[0.1]]))
    kw = {"x0": np.array([1.0]), "u0": np.array([0.4]), "y0": np.array([1.6]),
          "dx0": np.array([0.1]), "Ts": Ts}
    filt = make_node([[a]], [[b]], [[c]], lf, form="filter", **kw)
    pred = make_node([[a]], [[b]], [[c]], phi * lf, form="predictor", **kw)
    fs = tensor_schedule({"p": [0.0, 1.0]}, [filt, filt])
    ps = tensor_schedule({"p": [0.0, 1.0]}, [pred, pred])
    rng = np.random.default_rng(0)
    us, ys = rng.normal(size=31), rng.normal(size=31)
    at = {"p": 0.3}
    x_post = np.array([0.2])                                  # x̂[0|0]
    x_pred = fs.predict(fs.evaluate([0.3]), x_post, us[:1])   # x̂⁻[1] = x̂[1|0]
    for k in range(1, 31):
        x_post, _ = fs.step(x_post, us[k - 1:k], ys[k:k + 1], at)        # x̂[k|k]
        prior_next = fs.predict(fs.evaluate([0.3]), x_post, us[k:k + 1])  # x̂⁻[k+1]
        x_pred, _ = ps.step(x_pred, us[k:k + 1], ys[k:k + 1], at)        # x̂[k+1|k]
        np.testing.assert_allclose(x_pred, prior_next, rtol=1e-12, atol=1e-12)


# ---------------------------------------------------------------------- errors
def test_schedule_errors_are_usage_errors() -> None:
    rng = np.random.default_rng(0)
    grid = Grid.tensor([Axis("a", [0.0, 1.0]), Axis("b", [0.0, 1.0, 2.0])])
    nodes = {i: random_node(rng) for i in range(6)}
    roles = {"a": "parameter", "b": "parameter"}
    with pytest.raises(UsageError, match="have no node design"):
        schedule_from_nodes(grid, {i: nodes[i] for i in range(5)}, roles)
    with pytest.raises(UsageError, match="outside the grid"):
        schedule_from_nodes(grid, {**nodes, 6: nodes[0]}, roles)
    with pytest.raises(UsageError, match="unknown scheduling role"):
        schedule_from_nodes(grid, nodes, {"a": "parameter", "b": "knob"})
    with pytest.raises(UsageError, match="scheduling role"):
        schedule_from_nodes(grid, nodes, {"a": "parameter"})
    with pytest.raises(UsageError, match="marked a state"):
        schedule_from_nodes(grid, nodes, {"a": "state", "b": "parameter"})
    mixed = dict(nodes)
    mixed[3] = nodes[3].model_copy(update={"form": "predictor"})
    with pytest.raises(UsageError, match="one kind of estimator"):
        schedule_from_nodes(grid, mixed, roles)
    bad_shape = dict(nodes)
    bad_shape[2] = nodes[2].model_copy(update={"Phi": np.eye(3)})
    with pytest.raises(UsageError, match="Phi has shape"):
        schedule_from_nodes(grid, bad_shape, roles)
    refused = {i: random_node(rng, refused=True) for i in range(6)}
    with pytest.raises(UsageError, match="every node was refused"):
        schedule_from_nodes(grid, refused, roles)
    schedule = schedule_from_nodes(grid, nodes, roles)
    with pytest.raises(UsageError, match="2 entries"):
        schedule.evaluate([0.0])
    with pytest.raises(UsageError, match="give its value"):
        schedule.scheduling_value(np.zeros(2), np.zeros(1))
