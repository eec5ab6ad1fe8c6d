"""Column grouping for sparse finite differences."""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from linobs.linear.sparsity import color_columns


def _valid(pattern: np.ndarray, groups: list[list[int]]) -> bool:
    for g in groups:
        if (pattern[:, g].sum(axis=1) > 1).any():
            return False
    return True


def test_banded_matrix_needs_bandwidth_groups() -> None:
    # Curtis, Powell & Reid (1974): a band matrix of total width w is estimated with w
    # differences (columns j, j+w, j+2w, ... never share a row) — analytic for the tridiagonal case
    n = 12
    tri = np.eye(n, dtype=bool) | np.eye(n, k=1, dtype=bool) | np.eye(n, k=-1, dtype=bool)
    groups = color_columns(tri)
    assert _valid(tri, groups) and len(groups) == 3
    penta = tri | np.eye(n, k=2, dtype=bool) | np.eye(n, k=-2, dtype=bool)
    assert len(color_columns(penta)) == 5


def test_diagonal_is_one_group_and_empty_columns_are_skipped() -> None:
    # common practice: independent columns are perturbed together; an empty column costs nothing
    d = np.eye(5, dtype=bool)
    d[:, 2] = False
    groups = color_columns(d)
    assert groups == [[0, 1, 3, 4]]


def test_dense_row_forces_one_group_per_column() -> None:
    p = np.zeros((3, 4), dtype=bool)
    p[0, :] = True
    assert sorted(map(tuple, color_columns(p))) == [(0,), (1,), (2,), (3,)]


@settings(max_examples=60, deadline=None)
@given(st.integers(1, 8), st.integers(1, 8), st.integers(0, 2**32 - 1))
def test_grouping_is_always_valid_and_complete(rows: int, cols: int, seed: int) -> None:
    # property: every non-empty column in exactly one group, no shared rows within a group
    pattern = np.random.default_rng(seed).random((rows, cols)) < 0.35
    groups = color_columns(pattern)
    members = sorted(j for g in groups for j in g)
    assert members == [j for j in range(cols) if pattern[:, j].any()]
    assert _valid(pattern, groups)
