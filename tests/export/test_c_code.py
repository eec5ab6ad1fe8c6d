"""Generated C99 estimator code, compiled and called through ctypes, against GainSchedule.

Reference: the Python :class:`linobs.estimator.schedule.GainSchedule` (``evaluate`` and
``step``) — the project's own implementation of the update, whose multilinear interpolation
is checked against scipy's ``RegularGridInterpolator`` in tests/estimator/test_schedule.py.
The tolerance 1e-12 (relative, and absolute scaled by each quantity's magnitude) leaves room
only for the order of floating-point sums.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest

from linobs.errors import UsageError
from linobs.estimator.schedule import FIELDS, GainSchedule, schedule_from_nodes
from linobs.estimator.schedule_checks import field_array
from linobs.export.c_code import c_double, c_sources, write_c_sources
from linobs.operating.grid import Grid
from tests.estimator.reference_nodes import four_tank_schedule

from .estimator_helpers import (
    CAUTION,
    CEstimator,
    interpolated_variance,
    refuse,
    synthetic_node,
    synthetic_schedule,
)

SEED = 20240611


@pytest.fixture(scope="module")
def tank_filter(bundled_fmus: dict[str, Path]) -> GainSchedule:
    schedule, _ = four_tank_schedule(bundled_fmus["four_tank"], Ts=1.0, form="filter")
    return refuse(schedule, 8)   # the corner v1 = v2 = 4 V: its cell is unusable


@pytest.fixture(scope="module")
def synth_predictor() -> GainSchedule:
    return synthetic_schedule(kind="luenberger", form="predictor")


@pytest.fixture(scope="module")
def synth_filter() -> GainSchedule:
    return synthetic_schedule(kind="kalman", form="filter")


CASES = ["tank_filter", "synth_predictor", "synth_filter"]


def box(schedule: GainSchedule) -> tuple[np.ndarray, np.ndarray]:
    return (np.array([v[0] for v in schedule.data.axis_values]),
            np.array([v[-1] for v in schedule.data.axis_values]))


def sample_values(schedule: GainSchedule, rng: np.random.Generator) -> np.ndarray:
    """240 points inside the box, 60 around it, every node and every edge midpoint."""
    lo, hi = box(schedule)
    span = np.where(hi > lo, hi - lo, 1.0)
    inside = lo + (hi - lo) * rng.random((240, len(lo)))
    around = lo - 0.25 * span + 1.5 * span * rng.random((60, len(lo)))
    nodes = np.array([list(schedule.node_point(i).values())
                      for i in range(len(schedule.data.nodes))])
    mids = np.array([(nodes[i] + nodes[j]) / 2 for i, j, _ in schedule.edges()])
    return np.vstack([inside, around, nodes, mids])


def scales(schedule: GainSchedule) -> dict[str, float]:
    first = next(n for n in schedule.data.nodes if n.status == "ok")
    return {f: float(np.max(np.abs(np.stack([field_array(n, f, first)
                                             for n in schedule.data.nodes]))))
            for f in FIELDS}


@pytest.mark.parametrize("case", CASES)
def test_interpolation_matches_the_schedule(case: str, request: pytest.FixtureRequest,
                                            tmp_path: Path) -> None:
    schedule = request.getfixturevalue(case)
    c = CEstimator(schedule, tmp_path)
    scale = scales(schedule)
    S = sample_values(schedule, np.random.default_rng(SEED))
    flags = []
    for s in S:
        status, got, usable, outside = c.interpolate(s)
        ev = schedule.evaluate(s)                        # reference: GainSchedule.evaluate
        assert status == 0
        assert (usable, outside) == (ev.usable, ev.outside), s
        for f in FIELDS:
            np.testing.assert_allclose(got[f], ev.values[f], rtol=1e-12,
                                       atol=1e-12 * scale[f], err_msg=f"{f} at {s}")
        if schedule.kind == "kalman":   # reference: run_estimator's covariance rule
            variance = interpolated_variance(schedule, ev)
            np.testing.assert_allclose(got["variance"], variance, rtol=1e-12,
                                       atol=1e-12 * np.nanmax(np.abs(variance), initial=1.0))
        else:
            assert np.isnan(got["variance"]).all()
        flags.append((usable, outside))
    usable, outside = np.array(flags).T
    assert usable.sum() > 50 and (~usable).sum() > 5      # both kinds of value were checked
    assert outside.sum() >= 20 and (~outside).sum() > 200


@pytest.mark.parametrize("case", CASES)
def test_step_matches_the_schedule(case: str, request: pytest.FixtureRequest,
                                   tmp_path: Path) -> None:
    schedule = request.getfixturevalue(case)
    c = CEstimator(schedule, tmp_path)
    rng = np.random.default_rng(SEED + 1)
    lo, hi = box(schedule)
    x0 = np.stack([np.asarray(n.x0) for n in schedule.data.nodes])
    u0 = np.stack([np.asarray(n.u0) for n in schedule.data.nodes])
    y0 = np.stack([np.asarray(n.y0) for n in schedule.data.nodes])
    outcomes = []
    for k in range(260):
        x = rng.uniform(x0.min(0) - 0.3 * np.ptp(x0, 0) - 0.5, x0.max(0) + 0.3 * np.ptp(x0, 0))
        u = rng.uniform(u0.min(0) - 0.5, u0.max(0) + 0.5)
        u_now = rng.uniform(u0.min(0) - 0.5, u0.max(0) + 0.5)
        y = rng.uniform(y0.min(0) - 0.5, y0.max(0) + 0.5)
        inside = rng.random() < 0.85       # parameters in the box, or around it
        params = {a: lo[i] + (hi[i] - lo[i]) * rng.random() if inside
                  else rng.uniform(lo[i] - 0.3, hi[i] + 0.3)
                  for i, a in enumerate(schedule.axes)
                  if schedule.data.axis_roles[a] == "parameter"}
        now = None if k % 5 == 0 else u_now               # NULL u_now means u
        status, got, usable, outside = c.step(x, u, y, now, c.params(params))
        expected, ev = schedule.step(x, u, y, params, u_now=now)   # reference: GainSchedule.step
        assert status == 0
        assert (usable, outside) == (ev.usable, ev.outside)
        np.testing.assert_allclose(got, expected, rtol=1e-12,
                                   atol=1e-12 * max(1.0, float(np.max(np.abs(expected)))))
        status, s = c.scheduling_value(x, u, c.params(params))
        np.testing.assert_array_equal(s, schedule.scheduling_value(x, u, params))
        outcomes.append((usable, outside))
    usable, outside = np.array(outcomes).T
    assert usable.any() and (~usable).any() and outside.any() and (~outside).any()


@pytest.mark.parametrize("case", CASES)
def test_nodes_are_reproduced_bit_for_bit(case: str, request: pytest.FixtureRequest,
                                          tmp_path: Path) -> None:
    # %.17g round trip: at a node the weight is exactly one, so the C tables must hold
    # exactly the node's numbers (reference: the NodeDesign data itself)
    schedule = request.getfixturevalue(case)
    c = CEstimator(schedule, tmp_path)
    first = next(n for n in schedule.data.nodes if n.status == "ok")
    for i, node in enumerate(schedule.data.nodes):
        status, got, usable, outside = c.interpolate(list(schedule.node_point(i).values()))
        assert status == 0 and usable == (node.status == "ok") and not outside
        for f in FIELDS:
            if f == "L" and node.status != "ok":
                assert np.isnan(got[f]).all()
                continue
            np.testing.assert_array_equal(got[f], field_array(node, f, first))


def test_doubles_print_for_an_exact_round_trip() -> None:
    rng = np.random.default_rng(SEED)
    values = np.concatenate([rng.normal(size=200) * 10.0 ** rng.integers(-300, 300, 200),
                             [0.0, -0.0, 1.0, 1e16, 5e-324, np.finfo(float).max]])
    for v in values:
        text = c_double(v)
        assert float(text) == v and (np.signbit(float(text)) == np.signbit(v))  # Python's parser
        assert any(ch in text for ch in ".e")   # a double literal, never an int
    assert (c_double(np.nan), c_double(np.inf), c_double(-np.inf)) == \
        ("NAN", "INFINITY", "(-INFINITY)")


def test_files_carry_the_caution_and_describe_the_sizes(synth_filter: GainSchedule,
                                                        tmp_path: Path) -> None:
    written = write_c_sources(synth_filter, tmp_path, prefix="cell_est", caution=CAUTION,
                              header_note="source FMU demo, GUID {1234}")
    assert [p.name for p in written] == ["cell_est.h", "cell_est.c"]
    for path in written:
        text = path.read_text(encoding="utf-8")
        assert text.startswith("/*\n * CAUTION (test)")
        assert "source FMU demo, GUID {1234}" in text.split("*/")[0]
        assert not re.search(r"\b(malloc|calloc|free|printf)\s*\(", text)
        assert set(re.findall(r"#include <([^>]+)>", text)) <= {"math.h", "string.h", "stddef.h"}
    header = written[0].read_text(encoding="utf-8")
    sizes = dict(re.findall(r"#define CELL_EST_([A-Z_]+) (-?\d+) ", header))
    s = synth_filter
    assert {k: int(v) for k, v in sizes.items() if not k.startswith("SOURCE_")} == {
        "STATES": len(s.states), "INPUTS": len(s.inputs), "OUTPUTS": len(s.outputs),
        "AXES": len(s.axes), "PARAMETERS": 2, "NODES": len(s.data.nodes),
        "CORNERS": 2 ** 3, "KALMAN": 1, "FILTER_FORM": 1}
    source = written[1].read_text(encoding="utf-8")
    # every file-scope object is const: no writable globals
    top_level = [line for line in source.splitlines() if re.match(r"^[a-z].*=", line)]
    assert top_level and all(re.match(r"^(static )?const ", line) for line in top_level)


def test_error_codes(synth_predictor: GainSchedule, tmp_path: Path) -> None:
    c = CEstimator(synth_predictor, tmp_path)
    status, *_ = c.interpolate([np.nan, 1.0, 1.0, 1.0])
    assert status == -1                                   # EST_NOT_FINITE
    x, u, y = np.array([25.0, 0.0, 1.0]), np.array([1.0, 1.0]), np.zeros(2)
    status, *_ = c.step(x, u, y, None, None)
    assert status == -2                                   # EST_NO_PARAMETERS: params NULL
    status, *_ = c.step(np.array([np.inf, 0.0, 1.0]), u, y, None, [1.0, 1.0])
    assert status == -1
    with pytest.raises(UsageError, match="not a C identifier"):
        c_sources(synth_predictor, prefix="2fast", caution=CAUTION)
    with pytest.raises(UsageError, match="caution"):
        c_sources(synth_predictor, caution=" ")


def test_scattered_schedule_is_refused() -> None:
    from linobs.export.estimator_fmu import build_estimator_fmu

    rng = np.random.default_rng(SEED)
    pts = rng.uniform([20.0, 0.0], [45.0, 2.0], (6, 2))
    grid = Grid.scattered(["T", "q"], pts)
    nodes = {i: synthetic_node(p[0], p[1], 1.0, kind="kalman", form="filter", Ts=0.2)
             for i, p in enumerate(pts)}
    schedule = schedule_from_nodes(grid, nodes, {"T": "state", "q": "input"})
    for call in (lambda: c_sources(schedule, caution=CAUTION),
                 lambda: build_estimator_fmu(schedule, "never.fmu", model_name="x",
                                             caution=CAUTION)):
        with pytest.raises(UsageError, match="C export needs a tensor grid") as info:
            call()
        assert "\n" not in str(info.value)
