"""Operating grids: tensor products, scattered points, neighbors, continuation order, chunks."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.spatial.distance import cdist

from linobs.errors import UsageError
from linobs.operating.grid import (
    Axis,
    Grid,
    geometric_values,
    linspace_values,
    parse_points_csv,
    serpentine_digits,
)


def _tensor(shape: tuple[int, ...]) -> Grid:
    return Grid.tensor([Axis(f"x{d}", np.arange(n) * (d + 1.5) - d) for d, n in enumerate(shape)])


shapes = st.lists(st.integers(1, 5), min_size=1, max_size=4).map(tuple)


# ------------------------------------------------------------------------- axis values
def test_spacings_match_numpy() -> None:
    # common practice: numpy.linspace includes both ends
    np.testing.assert_array_equal(linspace_values(0.05, 0.95, 10), np.linspace(0.05, 0.95, 10))
    # analytic: a geometric sequence from a to b is 10**linspace(log10 a, log10 b, n)
    np.testing.assert_allclose(geometric_values(0.1, 10.0, 5),
                               np.logspace(-1.0, 1.0, 5), rtol=1e-14)
    v = geometric_values(5000.0, 20000.0, 3)
    assert v[0] == 5000.0 and v[-1] == 20000.0          # analytic: the ends are exact
    np.testing.assert_allclose(v[1:] / v[:-1], 2.0)     # analytic: constant ratio (20000/5000)**(1/2)
    assert linspace_values(3.0, 7.0, 1).tolist() == [3.0] == geometric_values(3.0, 7.0, 1).tolist()


def test_axis_rejects_bad_values() -> None:
    with pytest.raises(ValueError, match="strictly increasing"):
        Axis("soc", [0.1, 0.5, 0.5])
    with pytest.raises(ValueError, match="non-finite"):
        Axis("soc", [0.1, np.nan])
    with pytest.raises(ValueError, match="no values"):
        Axis("soc", [])
    assert Axis("soc", np.array([0, 1])).values == (0.0, 1.0)


# ------------------------------------------------------------------------- tensor grids
def test_tensor_points_are_c_order_product() -> None:
    axes = [Axis("soc", [0.1, 0.5, 0.9]), Axis("t_amb", [-10.0, 25.0]),
            Axis("i_cell", [-20.0, 0.0, 10.0, 40.0])]
    grid = Grid.tensor(axes)
    assert len(grid) == 3 * 2 * 4 and grid.shape == (3, 2, 4)    # analytic: product of sizes
    # common practice: itertools.product enumerates in C order (last factor fastest)
    expected = np.array(list(itertools.product(*[a.values for a in axes])))
    np.testing.assert_array_equal(grid.points, expected)
    # common practice: numpy.meshgrid(indexing="ij") raveled in C order gives the same table
    mesh = np.meshgrid(*[a.array for a in axes], indexing="ij")
    np.testing.assert_array_equal(grid.points, np.stack([m.ravel() for m in mesh], axis=1))
    for i, idx in enumerate(itertools.product(*[range(len(a)) for a in axes])):
        assert grid.multi_index(i) == idx and grid.flat_index(idx) == i
        assert grid.point(i) == {a.name: a.values[k] for a, k in zip(axes, idx)}
    assert grid.names == ("soc", "t_amb", "i_cell") and grid.kind == "tensor"
    with pytest.raises(IndexError):
        grid.point(len(grid))


def test_grid_without_axes_is_one_point() -> None:
    grid = Grid.tensor([])
    # analytic: the empty product has one element
    assert len(grid) == 1 and grid.point(0) == {} and grid.continuation_order() == [0]
    assert grid.neighbors(0) == [] and grid.chunks([0], 5) == [[0]]


@given(shapes)
@settings(max_examples=40, deadline=None)
def test_tensor_neighbors_are_unit_steps(shape: tuple[int, ...]) -> None:
    grid = _tensor(shape)
    idx = np.array(list(itertools.product(*[range(n) for n in shape])))
    for i in range(len(grid)):
        # analytic: lattice neighbors are the points at L1 index distance one
        brute = set(np.flatnonzero(np.abs(idx - idx[i]).sum(axis=1) == 1).tolist())
        assert set(grid.neighbors(i)) == brute and len(grid.neighbors(i)) == len(brute)


# ------------------------------------------------------------------ continuation order
def _assert_unit_steps(grid: Grid, order: list[int]) -> None:
    assert sorted(order) == list(range(len(grid)))           # a permutation
    for a, b in itertools.pairwise(order):
        diff = np.abs(np.subtract(grid.multi_index(a), grid.multi_index(b)))
        assert diff.sum() == 1 and diff.max() == 1, (a, b)    # one index changes, by one


def _assert_groups_contiguous(grid: Grid, order: list[int], slow: list[str]) -> None:
    cols = [grid.names.index(n) for n in slow]
    keys = [tuple(grid.points[i, cols]) for i in order]
    seen: set[tuple[float, ...]] = set()
    for k, key in enumerate(keys):
        if k == 0 or key != keys[k - 1]:
            assert key not in seen, "a group of equal slow values is split"
            seen.add(key)


@given(shapes, st.data())
@settings(max_examples=80, deadline=None)
def test_serpentine_steps_change_one_index_by_one(shape: tuple[int, ...], data: st.DataObject) -> None:
    grid = _tensor(shape)
    slow = data.draw(st.lists(st.sampled_from(grid.names), unique=True, max_size=len(shape)))
    order = grid.continuation_order(slow=slow)
    # common practice (boustrophedon / reflected Gray code): consecutive points are neighbors
    _assert_unit_steps(grid, order)
    _assert_groups_contiguous(grid, order, slow)
    for a, b in itertools.pairwise(order):
        assert b in grid.neighbors(a)


def test_serpentine_small_case_by_hand() -> None:
    # analytic: the 2 x 3 boustrophedon walks row 0 forward, then row 1 backward
    assert serpentine_digits((2, 3)).tolist() == [[0, 0], [0, 1], [0, 2], [1, 2], [1, 1], [1, 0]]
    grid = _tensor((2, 3))
    assert grid.continuation_order() == [0, 1, 2, 5, 4, 3]
    # with the second axis slow it varies slowest: columns are walked one after the other
    assert grid.continuation_order(slow=["x1"]) == [0, 3, 4, 1, 2, 5]


def test_unknown_slow_axis_is_a_usage_error() -> None:
    with pytest.raises(UsageError, match="not a grid variable"):
        _tensor((2, 2)).continuation_order(slow=["mass"])


# ------------------------------------------------------------------------------ chunks
@given(shapes, st.integers(1, 7), st.data())
@settings(max_examples=60, deadline=None)
def test_chunks_respect_size_and_slow_groups(shape: tuple[int, ...], size: int,
                                             data: st.DataObject) -> None:
    grid = _tensor(shape)
    slow = data.draw(st.lists(st.sampled_from(grid.names), unique=True, max_size=len(shape)))
    order = grid.continuation_order(slow=slow)
    chunks = grid.chunks(order, size, slow=slow)
    assert [i for c in chunks for i in c] == order            # contiguous runs of the order
    assert all(1 <= len(c) <= size for c in chunks)
    cols = [grid.names.index(n) for n in slow]
    for c in chunks:                                          # never across a slow change
        assert len({tuple(grid.points[i, cols]) for i in c}) == 1
    # common practice: each group of n points needs ceil(n / size) chunks, no more
    group_sizes: dict[tuple[float, ...], int] = {}
    for i in order:
        key = tuple(grid.points[i, cols])
        group_sizes[key] = group_sizes.get(key, 0) + 1
    assert len(chunks) == sum(-(-n // size) for n in group_sizes.values())


def test_chunks_are_balanced_and_validated() -> None:
    grid = _tensor((10,))
    assert [len(c) for c in grid.chunks(list(range(10)), 4)] == [4, 3, 3]   # analytic: 10 = 4+3+3
    with pytest.raises(UsageError, match="at least 1"):
        grid.chunks([0, 1], 0)


# ----------------------------------------------------------------------- scattered grids
def _envelope(n: int = 60, seed: int = 3) -> Grid:
    rng = np.random.default_rng(seed)
    soc = rng.uniform(0.05, 0.95, n)
    current = rng.uniform(-60.0, 60.0, n) * (1.0 - 0.5 * soc)   # a non-box envelope
    temp = rng.choice([-10.0, 25.0, 45.0], n)
    return Grid.scattered(["soc", "i_cell", "t_amb"], np.column_stack([soc, current, temp]))


def test_scattered_neighbors_match_brute_force() -> None:
    grid = _envelope()
    pts = grid.points
    span = pts.max(axis=0) - pts.min(axis=0)
    # scipy cdist on range-scaled coordinates, an independent distance computation
    dist = cdist(pts / span, pts / span)
    np.fill_diagonal(dist, np.inf)
    k = 2 * grid.dims
    for i in range(len(grid)):
        got = grid.neighbors(i)
        assert len(got) == k and i not in got
        expected = np.argsort(dist[i], kind="stable")[:k]
        np.testing.assert_allclose(dist[i, got], dist[i, expected], rtol=1e-12)
    tiny = Grid.scattered(["a"], [[0.0], [1.0]])
    assert tiny.neighbors(0) == [1]                          # fewer points than 2·dims


def test_scattered_walk_is_greedy_nearest_neighbor() -> None:
    grid = _envelope()
    pts = grid.points
    lo, span = pts.min(axis=0), pts.max(axis=0) - pts.min(axis=0)
    scaled = (pts - lo) / span
    order = grid.continuation_order()
    assert sorted(order) == list(range(len(grid)))
    # independent check with scipy cdist: starts nearest the lower corner, then always steps to
    # the nearest point not yet visited (Rosenkrantz, Stearns & Lewis 1977)
    corner = cdist(np.zeros((1, 3)), scaled)[0]
    assert corner[order[0]] == corner.min()
    dist = cdist(scaled, scaled)
    for k in range(1, len(order)):
        left = order[k:]
        assert dist[order[k - 1], order[k]] == pytest.approx(dist[order[k - 1], left].min(), abs=1e-15)


def test_scattered_slow_groups_are_contiguous() -> None:
    grid = _envelope()
    order = grid.continuation_order(slow=["t_amb"])
    assert sorted(order) == list(range(len(grid)))
    _assert_groups_contiguous(grid, order, ["t_amb"])
    chunks = grid.chunks(order, 7, slow=["t_amb"])
    assert all(len({grid.points[i, 2] for i in c}) == 1 and len(c) <= 7 for c in chunks)


def test_scattered_shape_is_checked() -> None:
    with pytest.raises(ValueError, match="N x 2"):
        Grid.scattered(["a", "b"], [[1.0, 2.0, 3.0]])
    with pytest.raises(TypeError, match="tensor grids only"):
        _envelope().multi_index(0)


# ------------------------------------------------------------------------- fingerprints
def test_fingerprint_identifies_names_and_values() -> None:
    a = _tensor((3, 2))
    assert a.fingerprint() == _tensor((3, 2)).fingerprint()
    nudged = Grid.tensor([Axis("x0", [0.0, 1.5, np.nextafter(3.0, 4.0)]), Axis("x1", [-1.0, 1.5])])
    assert nudged.fingerprint() != a.fingerprint()           # one ulp changes it
    renamed = Grid.tensor([Axis("y0", a.axes[0].values), a.axes[1]])
    assert renamed.fingerprint() != a.fingerprint()
    as_table = Grid.scattered(a.names, a.points)
    assert as_table.fingerprint() != a.fingerprint()         # kind counts
    assert a.describe()["axes"] == {"x0": [0.0, 1.5, 3.0], "x1": [-1.0, 1.5]}


# --------------------------------------------------------------------------- points CSV
def test_points_csv_parses_and_reports() -> None:
    text = "\ufeff# an envelope\nsoc, i_cell ,t_amb\n0.1,-20,25\n\n0.5,1e1,25\n"
    table = parse_points_csv(text)
    assert table.problems == [] and table.names == ["soc", "i_cell", "t_amb"]
    np.testing.assert_array_equal(table.points, [[0.1, -20.0, 25.0], [0.5, 10.0, 25.0]])
    assert table.lines == [3, 5]

    bad = parse_points_csv("soc,i_cell,soc\n0.1,abc,3\n0.2,inf,1\n0.3,4\n")
    found = {(p.row, p.column, p.line): p.message for p in bad.problems}
    assert found[(None, "soc", 1)] == "names the same variable twice"
    assert found[(0, "i_cell", 2)] == "not a number: 'abc'"
    assert found[(1, "i_cell", 3)].startswith("must be finite")
    assert found[(2, None, 4)] == "has 2 values but the header names 3 columns"
    assert parse_points_csv("").problems[0].message.startswith("the table is empty")
    assert parse_points_csv("a,b\n").problems[0].message.startswith("the table has a header but no")
