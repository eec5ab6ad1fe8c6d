"""Gain continuity between neighboring nodes: constructed jumps, smooth schedules, causes."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial import Delaunay

from linobs.errors import UsageError
from linobs.estimator.continuity import gain_jumps, pole_shift
from linobs.estimator.schedule import schedule_from_nodes
from linobs.operating.grid import Axis, Grid
from tests.estimator.test_schedule import (
    kalman_filter_gain,
    make_node,
    tensor_schedule,
    zoh,
)

A0 = np.array([[0.0, 1.0], [-2.0, -0.6]])
B0 = np.array([[0.0], [1.0]])
C0 = np.array([[1.0, 0.0], [0.0, 0.2]])
L0 = np.array([[0.5, 0.1], [0.2, 0.3]])
POLES = [(0.6, 0.1), (0.6, -0.1)]
AXES = {"a": [0.0, 1.0, 2.0], "b": [0.0, 1.0, 2.0]}


def node(L: np.ndarray | None = L0, A: np.ndarray = A0, poles=POLES):  # type: ignore[no-untyped-def]
    return make_node(A, B0, C0, L, poles=list(poles))


def test_one_changed_gain_is_flagged_with_exactly_that_change() -> None:
    factor = 3.0
    nodes = [node(L0 * factor if i == 4 else L0) for i in range(9)]
    jumps = gain_jumps(tensor_schedule(AXES, nodes), threshold=0.5)
    # the center node (1, 1) has four tensor neighbors: nodes 1, 3, 5, 7
    assert sorted((j.node_a, j.node_b) for j in jumps) == [(1, 4), (3, 4), (4, 5), (4, 7)]
    for jp in jumps:
        # analytic: ‖f L − L‖ / max(‖f L‖, ‖L‖) = (f − 1) / f for f > 1
        assert jp.relative_change == pytest.approx((factor - 1) / factor, rel=1e-14)
        assert jp.cause == "eigenvector swap"  # same poles, same model, different gain
        assert jp.model_change == 0.0
    assert {jp.axis for jp in jumps} == {"a", "b"}
    j = next(jp for jp in jumps if (jp.node_a, jp.node_b) == (1, 4))
    assert j.values_a == {"a": 0.0, "b": 1.0} and j.values_b == {"a": 1.0, "b": 1.0}
    # below the threshold nothing is flagged: (f−1)/f = 0.2 for f = 1.25
    nodes = [node(L0 * 1.25 if i == 4 else L0) for i in range(9)]
    assert gain_jumps(tensor_schedule(AXES, nodes), threshold=0.25) == []


def test_smooth_schedule_is_not_flagged() -> None:
    # Kalman gains designed per node (scipy's DARE) for a stiffness that varies over the grid
    Ts = 0.1
    nodes = []
    for a in AXES["a"]:
        for b in AXES["b"]:
            A = np.array([[0.0, 1.0], [-(2.0 + 0.2 * a + 0.1 * b), -0.6]])
            Phi = zoh(A, B0, Ts)[0]
            nodes.append(make_node(A, B0, C0, kalman_filter_gain(Phi, C0, 0.01 * np.eye(2),
                                                                 0.1 * np.eye(2)), Ts=Ts))
    schedule = tensor_schedule(AXES, nodes)
    assert gain_jumps(schedule, threshold=0.5) == []
    # independent: the relative changes along the 12 tensor edges, with numpy
    grid = Grid.tensor([Axis(k, v) for k, v in AXES.items()])
    changes = {}
    for i in range(9):
        for j in grid.neighbors(i):
            if i < j:
                Li, Lj = nodes[i].L, nodes[j].L
                changes[(i, j)] = np.linalg.norm(Li - Lj) / max(np.linalg.norm(Li),
                                                                np.linalg.norm(Lj))
    assert len(changes) == 12 and max(changes.values()) < 0.5
    # a threshold inside the range of changes flags exactly the pairs above it
    cut = float(np.median(list(changes.values())))
    flagged = {(jp.node_a, jp.node_b): jp.relative_change for jp in gain_jumps(schedule, cut)}
    assert set(flagged) == {k for k, v in changes.items() if v > cut}
    for k, v in flagged.items():
        assert v == pytest.approx(changes[k], rel=1e-12)
    values = list(flagged.values())
    assert values == sorted(values, reverse=True)  # largest first


def test_refused_neighbor_is_a_verdict_change() -> None:
    nodes = [node(None if i == 0 else L0) for i in range(9)]
    jumps = gain_jumps(tensor_schedule(AXES, nodes), threshold=0.5)
    assert sorted((j.node_a, j.node_b) for j in jumps) == [(0, 1), (0, 3)]
    assert all(j.cause == "verdict change" and j.relative_change is None for j in jumps)


def test_weak_verdict_is_flagged_whatever_the_gain() -> None:
    nodes = [node() for _ in range(9)]
    jumps = gain_jumps(tensor_schedule(AXES, nodes), threshold=0.5, verdicts={8: "weak"})
    assert sorted((j.node_a, j.node_b) for j in jumps) == [(5, 8), (7, 8)]
    assert all(j.cause == "verdict change" and j.relative_change == 0.0 for j in jumps)


def test_model_and_pole_changes_are_told_apart() -> None:
    A_fast = np.array([[0.0, 1.0], [-30.0, -8.0]])   # a very different local model
    nodes = [node(L0 * 3.0, A=A_fast) if i == 2 else node() for i in range(3)]
    jumps = gain_jumps(tensor_schedule({"a": [0.0, 1.0, 2.0]}, nodes), threshold=0.5)
    assert [(j.node_a, j.node_b, j.cause) for j in jumps] == [(1, 2, "model change")]
    moved = [(0.2, 0.0), (0.3, 0.0)]                 # other poles, same model
    nodes = [node(L0 * 3.0, poles=moved) if i == 2 else node() for i in range(3)]
    jumps = gain_jumps(tensor_schedule({"a": [0.0, 1.0, 2.0]}, nodes), threshold=0.5)
    assert [(j.node_a, j.node_b, j.cause) for j in jumps] == [(1, 2, "pole change")]
    # analytic: matched distances |0.6±0.1j − 0.3| = √0.1 and |0.6±0.1j − 0.2| = √0.17, over the
    # largest magnitude √0.37
    assert jumps[0].pole_shift == pytest.approx(np.sqrt(0.17) / np.sqrt(0.37), rel=1e-12)


def test_pole_shift_matches_conjugate_pairs_in_any_order() -> None:
    # analytic: the same set listed in another order has zero shift
    assert pole_shift([(0.5, 0.2), (0.5, -0.2), (0.9, 0.0)],
                      [(0.9, 0.0), (0.5, -0.2), (0.5, 0.2)]) == 0.0
    assert pole_shift([], [(0.5, 0.0)]) is None


def test_scattered_neighbors_are_the_delaunay_edges() -> None:
    rng = np.random.default_rng(3)
    pts = np.column_stack([rng.uniform(0, 50, 12), rng.uniform(0, 0.1, 12)])
    changed = 5
    nodes = [node(L0 * 4.0 if i == changed else L0) for i in range(12)]
    grid = Grid.scattered(["a", "b"], pts)
    schedule = schedule_from_nodes(grid, dict(enumerate(nodes)), {"a": "parameter",
                                                                  "b": "parameter"})
    jumps = gain_jumps(schedule, threshold=0.5)
    # reference: scipy's Delaunay of the range-scaled points, the vertices next to node 5
    tri = Delaunay((pts - pts.min(0)) / np.ptp(pts, 0))
    indptr, indices = tri.vertex_neighbor_vertices
    expected = sorted(tuple(sorted((changed, int(k)))) for k in
                      indices[indptr[changed]:indptr[changed + 1]])
    assert sorted((j.node_a, j.node_b) for j in jumps) == expected
    assert all(j.relative_change == pytest.approx(0.75, rel=1e-14) for j in jumps)  # (4−1)/4
    assert all(j.axis is None for j in jumps)


def test_threshold_must_be_positive() -> None:
    schedule = tensor_schedule({"a": [0.0, 1.0]}, [node(), node()])
    with pytest.raises(UsageError, match="threshold must be positive"):
        gain_jumps(schedule, 0.0)
