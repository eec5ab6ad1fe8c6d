"""Observability figures: files, sizes, the reduction they show, NaN points and overlays."""

from __future__ import annotations

import itertools
import xml.etree.ElementTree as ET
from pathlib import Path

import matplotlib.image
import numpy as np
import pytest

from linobs.errors import UsageError
from linobs.report.figures import (
    COUNTS_SIZE,
    DPI,
    MAP_SIZE,
    margin_map,
    margin_map_figure,
    reduce_to_axes,
    verdict_counts,
    verdict_counts_figure,
)

A_VALUES = np.array([0.0, 1.0, 2.0, 3.0])
B_VALUES = np.array([0.0, 0.5, 1.0])
C_VALUES = np.array([0.0, 1.0, 2.0, 3.5, 5.0])
UNITS = {"a": "A", "b": "degC", "c": "1"}


def field(a, b, c):
    # a constructed margin field whose minimum over c lies at c = 2 (a grid value)
    return 10.0 ** (-a) * (1.0 + b) * (1.0 + (c - 2.0) ** 2) * 1e-2


def grid(shuffle: bool = True):
    pts = np.array(list(itertools.product(A_VALUES, B_VALUES, C_VALUES)))
    if shuffle:  # the table order must not matter
        pts = pts[np.random.default_rng(3).permutation(len(pts))]
    margins = field(*pts.T)
    verdicts = np.where(margins < 1e-3, "weak", "observable").astype(object)
    return pts, margins, verdicts


def svg_text(path: Path) -> str:
    root = ET.parse(path).getroot()  # parses as XML
    return " ".join(t.strip() for t in root.itertext() if t.strip())


def artists(fig, gid):
    return [a for ax in fig.axes for a in ax.get_children() if a.get_gid() == gid]


def legend_texts(fig) -> list[str]:
    return [t.get_text() for legend in fig.legends for t in legend.get_texts()]


# --------------------------------------------------------------------------- reduction
def test_worst_case_reduction_is_the_minimum_over_the_other_axis():
    pts, margins, verdicts = grid()
    data = reduce_to_axes(pts, ["a", "b", "c"], margins, list(verdicts), axes=("a", "b"))
    A, B = np.meshgrid(A_VALUES, B_VALUES)
    # analytic: min over c of (1 + (c − 2)²) is 1, at c = 2
    np.testing.assert_allclose(data.value, 10.0 ** (-A) * (1.0 + B) * 1e-2, rtol=1e-14)
    assert data.kind == "tensor" and data.reduced == ["c"] and data.fixed == {}
    np.testing.assert_array_equal(data.x, A_VALUES)
    np.testing.assert_array_equal(data.y, B_VALUES)


def test_fixed_axis_uses_the_nearest_grid_value():
    pts, margins, verdicts = grid()
    data = reduce_to_axes(pts, ["a", "b", "c"], margins, list(verdicts), axes=("b", "a"),
                          fixed={"c": 3.4})
    assert data.fixed == {"c": 3.5}
    B, A = np.meshgrid(B_VALUES, A_VALUES)
    # analytic: the field at c = 3.5, rows along a (the second map axis)
    np.testing.assert_allclose(data.value, field(A, B, 3.5), rtol=1e-14)


def test_the_map_draws_the_reduced_field():
    pts, margins, verdicts = grid()
    fig = margin_map_figure(pts, ["a", "b", "c"], margins, list(verdicts), axes=("a", "b"),
                            weak_threshold=1e-3)
    (mesh,) = artists(fig, "margin-mesh")
    A, B = np.meshgrid(A_VALUES, B_VALUES)
    # analytic minimum over c, as drawn
    np.testing.assert_allclose(np.asarray(mesh.get_array()).reshape(A.shape),
                               10.0 ** (-A) * (1.0 + B) * 1e-2, rtol=1e-14)
    assert any("weak threshold" in t for t in legend_texts(fig))  # the field crosses 1e-3


def test_worst_verdict_wins_in_a_reduced_cell():
    pts, margins, verdicts = grid(shuffle=False)
    hit = (pts[:, 0] == 1.0) & (pts[:, 1] == 0.5) & (pts[:, 2] == 5.0)
    verdicts[hit] = "unobservable"
    data = reduce_to_axes(pts, ["a", "b", "c"], margins, list(verdicts), axes=("a", "b"))
    assert data.verdict[1, 1] == "unobservable"
    assert data.verdict[0, 0] == "observable"
    fig = margin_map_figure(pts, ["a", "b", "c"], margins, list(verdicts), axes=("a", "b"),
                            weak_threshold=1e-3)
    (marks,) = artists(fig, "verdict-unobservable")
    np.testing.assert_allclose(marks.get_offsets(), [[1.0, 0.5]])


def test_failed_points_are_gray_and_listed():
    pts, margins, verdicts = grid(shuffle=False)
    all_failed = (pts[:, 0] == 3.0) & (pts[:, 1] == 1.0)           # every c at one cell
    some_failed = (pts[:, 0] == 0.0) & (pts[:, 1] == 0.0) & (pts[:, 2] == 2.0)
    margins[all_failed] = np.nan
    verdicts[all_failed] = "failed"
    verdicts[some_failed] = "not_converged"
    data = reduce_to_axes(pts, ["a", "b", "c"], margins, list(verdicts), axes=("a", "b"))
    assert np.isnan(data.value[2, 3]) and data.verdict[2, 3] == "failed"
    # the cell minimum skips the failed point: next smallest at c = 1 or 3.5 is (1 + 1²) (analytic)
    assert data.value[0, 0] == pytest.approx(field(0.0, 0.0, 1.0))
    assert data.failed[0, 0] and data.failed[2, 3] and not data.failed[1, 1]
    fig = margin_map_figure(pts, ["a", "b", "c"], margins, list(verdicts), axes=("a", "b"),
                            weak_threshold=1e-3)
    assert len(artists(fig, "failed-cell")) == 1
    assert len(artists(fig, "partly-failed")) == 1
    assert any("5 failed" in t and "1 not converged" in t for t in legend_texts(fig))


def test_boundary_points_are_drawn(tmp_path):
    pts, margins, verdicts = grid()
    boundary = [{"a": 0.5, "b": 0.2, "c": 2.0}, {"a": 1.5, "b": 0.7, "c": 2.0},
                {"a": 2.5, "b": 0.9, "c": 0.0}]
    fig = margin_map_figure(pts, ["a", "b", "c"], margins, list(verdicts), axes=("a", "b"),
                            fixed={"c": 2.0}, boundary=boundary, weak_threshold=1e-3)
    (line,) = artists(fig, "boundary-points")
    # only the points on the fixed slice c = 2 are shown
    np.testing.assert_allclose(np.column_stack(line.get_data()), [[0.5, 0.2], [1.5, 0.7]])
    paths = margin_map(pts, ["a", "b", "c"], margins, list(verdicts), axes=("a", "b"),
                       boundary=boundary, weak_threshold=1e-3, out_stem=tmp_path / "m")
    assert 'id="boundary-points"' in paths[1].read_text()
    with pytest.raises(UsageError, match="map axis b"):
        margin_map_figure(pts, ["a", "b", "c"], margins, list(verdicts), axes=("a", "b"),
                          boundary=[{"a": 1.0}], weak_threshold=1e-3)


def test_bad_axes_are_usage_errors():
    pts, margins, verdicts = grid()
    names = ["a", "b", "c"]
    with pytest.raises(UsageError, match="'z' is not a grid axis.*a, b, c"):
        reduce_to_axes(pts, names, margins, list(verdicts), axes=("a", "z"))
    with pytest.raises(UsageError, match="two different axes"):
        reduce_to_axes(pts, names, margins, list(verdicts), axes=("a", "a"))
    with pytest.raises(UsageError, match="cannot also be fixed"):
        reduce_to_axes(pts, names, margins, list(verdicts), axes=("a", "b"), fixed={"a": 1.0})
    with pytest.raises(UsageError, match="not a grid axis"):
        reduce_to_axes(pts, names, margins, list(verdicts), axes=("a", "b"), fixed={"q": 1.0})


def test_scattered_points():
    rng = np.random.default_rng(7)
    pts = np.column_stack([rng.uniform(0, 1, 40), rng.uniform(10, 20, 40)])
    margins = 10.0 ** (-4 + 3 * pts[:, 0])
    verdicts = np.where(margins < 1e-3, "weak", "observable").astype(object)
    margins[5], verdicts[5] = np.nan, "failed"
    data = reduce_to_axes(pts, ["a", "b"], margins, list(verdicts), axes=("a", "b"))
    assert data.kind == "scattered" and len(data.x) == 40 and np.isnan(data.value[5])
    fig = margin_map_figure(pts, ["a", "b"], margins, list(verdicts), axes=("a", "b"),
                            weak_threshold=1e-3)
    (points,) = artists(fig, "margin-points")
    assert len(points.get_offsets()) == 39
    assert len(artists(fig, "failed-points")) == 1


def test_geometric_axis_is_drawn_on_a_log_scale():
    flows = np.geomspace(1e-3, 1.0, 4)
    pts = np.array(list(itertools.product(flows, [0.0, 1.0])))
    fig = margin_map_figure(pts, ["flow", "b"], np.full(len(pts), 0.1), ["observable"] * len(pts),
                            axes=("flow", "b"), weak_threshold=1e-3)
    assert fig.axes[0].get_xscale() == "log" and fig.axes[0].get_yscale() == "linear"


# ------------------------------------------------------------------------------ files
def test_map_files(tmp_path):
    pts, margins, verdicts = grid()
    paths = margin_map(pts, ["a", "b", "c"], margins, list(verdicts), axes=("a", "b"),
                       weak_threshold=1e-3, out_stem=tmp_path / "sub" / "margin",
                       title="Plant: margin", units=UNITS)
    assert paths == [tmp_path / "sub" / "margin.png", tmp_path / "sub" / "margin.svg"]
    image = matplotlib.image.imread(paths[0])
    assert image.shape[:2] == (round(MAP_SIZE[1] * DPI), round(MAP_SIZE[0] * DPI))
    text = svg_text(paths[1])
    for label in ("a [A]", "b [degC]", "Plant: margin", "worst case (smallest margin) over c",
                  "distance to unobservability (relative singular value)"):
        assert label in text
    assert not list(tmp_path.joinpath("sub").glob("*.tmp"))  # atomic: no temporary left over


def test_output_is_deterministic(tmp_path):
    pts, margins, verdicts = grid()
    kwargs = {"axes": ("a", "b"), "weak_threshold": 1e-3, "units": UNITS}
    first = margin_map(pts, ["a", "b", "c"], margins, list(verdicts), out_stem=tmp_path / "x",
                       **kwargs)
    second = margin_map(pts, ["a", "b", "c"], margins, list(verdicts), out_stem=tmp_path / "y",
                        **kwargs)
    for p, q in zip(first, second):
        assert p.read_bytes() == q.read_bytes()
    assert b"<dc:date>" not in first[1].read_bytes()


def test_verdict_counts(tmp_path):
    counts = {"observable": 12, "weak": 5, "unobservable_detectable": 2, "unobservable": 1,
              "failed": 3, "not_converged": 1}
    fig = verdict_counts_figure(counts)
    bars = [p for p in fig.axes[0].patches if p.get_gid() == "verdict-bars"] or \
        list(fig.axes[0].containers[0])
    assert [round(b.get_width()) for b in bars] == [12, 5, 2, 1, 3, 1]
    paths = verdict_counts(counts, out_stem=tmp_path / "counts", title="Plant: verdicts")
    image = matplotlib.image.imread(paths[0])
    assert image.shape[:2] == (round(COUNTS_SIZE[1] * DPI), round(COUNTS_SIZE[0] * DPI))
    text = svg_text(paths[1])
    for label in ("observable", "unobservable-detectable", "not converged", "Plant: verdicts",
                  "24 operating points"):
        assert label in text
    with pytest.raises(UsageError, match="non-negative whole number"):
        verdict_counts_figure({"weak": -1})
