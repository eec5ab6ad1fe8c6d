"""The analyze API: scaling, output selection, errors, serialization."""

from __future__ import annotations

import json

import numpy as np
import pytest

from linobs.errors import ModelError, UsageError
from linobs.observability.analysis import analyze, analyze_matrices
from linobs.observability.report import ObservabilityReport, ObservabilitySettings
from tests.observability.models import linear_model, thermal_ladder


def test_scaling_by_nominals_is_a_change_of_units() -> None:
    # x̃ = x / x_nom: a model written in mK for one state and analyzed with nominal 1000 gives
    # the same scaled pair as the model in K with nominal 1 (change of units, analytic)
    A = thermal_ladder(3)
    C = np.array([[1.0, 0.0, 0.0]])
    S = np.diag([1.0, 1000.0, 1.0])                   # state 1 in mK
    A_mk, C_mk = S @ A @ np.linalg.inv(S), C @ np.linalg.inv(S)
    plain = analyze_matrices(A, C, ["a", "b", "c"], ["y"])
    scaled = analyze_matrices(A_mk, C_mk, ["a", "b", "c"], ["y"],
                              state_nominal=np.array([1.0, 1000.0, 1.0]))
    assert scaled.verdict == plain.verdict
    assert scaled.margin == pytest.approx(plain.margin, rel=1e-10)
    assert scaled.scaling.states == {"a": 1.0, "b": 1000.0, "c": 1.0}
    # without the nominal the badly scaled model looks far weaker than it is
    raw = analyze_matrices(A_mk, C_mk, ["a", "b", "c"], ["y"])
    assert raw.margin < plain.margin / 100


def test_unusable_nominals_fall_back_to_one() -> None:
    report = analyze_matrices(np.diag([-1.0, -2.0]), np.eye(2), ["a", "b"], ["ya", "yb"],
                              state_nominal=np.array([0.0, -4.0]),
                              output_nominal=np.array([np.nan, 2.0]))
    assert report.scaling.states == {"a": 1.0, "b": 4.0}
    assert report.scaling.outputs == {"ya": 1.0, "yb": 2.0}


def test_linear_model_method_and_output_selection() -> None:
    lm = linear_model(np.diag([-1.0, -2.0]), np.zeros((2, 1)), np.eye(2),
                      states=["a", "b"], outputs=["ya", "yb"])
    both = lm.observability()
    assert both.outputs == ["ya", "yb"] and both.verdict == "observable"
    only_a = lm.observability(outputs=["ya"])
    assert only_a.verdict == "unobservable-detectable"          # b never reaches ya (analytic)
    assert only_a.sensor_advice[0].candidate == "yb" and only_a.sensor_advice[0].restores
    via_settings = analyze(lm, ObservabilitySettings(outputs=["yb"]))
    assert via_settings.outputs == ["yb"]


def test_report_round_trips_through_json() -> None:
    report = analyze_matrices(thermal_ladder(5), np.eye(5)[2:3], list("abcde"), ["mid"],
                              settings=ObservabilitySettings(sample_time=0.5))
    again = ObservabilityReport.model_validate_json(report.model_dump_json())
    assert again == report
    assert report.summary and "\n" not in report.summary
    # a report stored before margin_normalization was spelled so reads the same
    stored = json.loads(report.model_dump_json())
    stored["margin_normalisation"] = stored.pop("margin_normalization")
    assert ObservabilityReport.model_validate(stored) == report
    settings = ObservabilitySettings.model_validate({"margin_normalisation": "sum"})
    assert settings.margin_normalization == "sum"
    assert "margin_normalization" in settings.model_dump()


def test_observability_matrix_is_reported_not_decisive() -> None:
    # a 30-node ladder measured at its end: observable (analytic, see test_chains), yet its
    # observability matrix is numerically rank deficient at numpy's default tolerance
    n = 30
    report = analyze_matrices(thermal_ladder(n), np.eye(n)[:1], [f"s{i}" for i in range(n)],
                              ["y"])
    assert report.observability_matrix.numerical_rank < n
    assert report.observability_matrix.condition > 1e15
    assert report.unobservable_dimension == 0 and report.verdict in ("observable", "weak")


def test_malformed_inputs() -> None:
    with pytest.raises(UsageError, match="A has shape"):
        analyze_matrices(np.eye(3), np.ones((1, 3)), ["a", "b"], ["y"])
    with pytest.raises(UsageError, match="C has shape"):
        analyze_matrices(np.eye(2), np.ones((2, 2)), ["a", "b"], ["y"])
    with pytest.raises(ModelError, match="non-finite"):
        analyze_matrices(np.array([[np.nan]]), np.ones((1, 1)), ["a"], ["y"])
    with pytest.raises(UsageError, match="no states"):
        analyze_matrices(np.zeros((0, 0)), np.zeros((0, 0)), [], [])


def test_summary_names_the_weak_state() -> None:
    # y = x0 + 1e-5·x1, decoupled decays: x1 is barely visible (analytic margin ~1e-5 scale)
    report = analyze_matrices(np.diag([-1.0, -3.0]), np.array([[1.0, 1e-5]]), ["big", "tiny"],
                              ["y"])
    assert report.verdict == "weak"
    assert report.summary.startswith("tiny weakly observable")
    assert "< 1e-3" in report.summary
