"""Detectability and sensor advice."""

from __future__ import annotations

import control
import numpy as np
import pytest

from linobs.errors import UsageError
from linobs.observability.analysis import analyze, analyze_matrices
from linobs.observability.report import ObservabilitySettings
from tests.observability.models import linear_model


def test_unobservable_stable_mode_is_detectable() -> None:
    # x1' = x1 (unstable, measured), x2' = −2 x2 (stable, hidden): detectable by definition
    # (Hautus 1969: every unobservable mode is stable)
    report = analyze_matrices(np.diag([1.0, -2.0]), np.array([[1.0, 0.0]]), ["a", "b"], ["y"])
    assert report.verdict == "unobservable-detectable"
    assert report.detectable
    assert report.unobservable_basis[0].components == pytest.approx({"b": 1.0})
    assert "detectable" in report.summary


def test_unobservable_unstable_mode_is_not_detectable() -> None:
    # x1' = −x1 (measured), x2' = 2 x2 (unstable, hidden): not detectable by definition
    report = analyze_matrices(np.diag([-1.0, 2.0]), np.array([[1.0, 0.0]]), ["a", "b"], ["y"])
    assert report.verdict == "unobservable"
    assert not report.detectable
    hidden = [m for m in report.modes if not m.observable]
    assert len(hidden) == 1 and hidden[0].real == pytest.approx(2.0) and not hidden[0].stable
    assert "not detectable" in report.summary


def test_hidden_integrator_is_not_detectable() -> None:
    # a hidden pure integrator (λ = 0) does not decay: not detectable (definition)
    report = analyze_matrices(np.diag([-1.0, 0.0]), np.array([[1.0, 0.0]]), ["a", "b"], ["y"])
    assert report.verdict == "unobservable"


def _three_tank_model():  # type: ignore[no-untyped-def]
    # three decoupled first-order states; measured y = a + b, so c is unseen; candidate outputs
    # "b_only" (b) and "a_plus_c" (a + c); candidate state "b" via settings.candidates
    A = np.diag([-1.0, -2.0, -3.0])
    C = np.array([[1.0, 1.0, 0.0], [0.0, 1.0, 0.0], [1.0, 0.0, 1.0]])
    return linear_model(A, np.zeros((3, 1)), C, states=["a", "b", "c"],
                        outputs=["sum_ab", "b_only", "a_plus_c"])


def test_exactly_one_candidate_restores_observability() -> None:
    lm = _three_tank_model()
    report = analyze(lm, ObservabilitySettings(candidates=["b"]), outputs=["sum_ab"])
    assert report.verdict == "unobservable-detectable"
    by_name = {a.candidate: a for a in report.sensor_advice}
    assert set(by_name) == {"b_only", "a_plus_c", "b"}
    assert by_name["b"].kind == "state" and by_name["b_only"].kind == "output"
    # reference: python-control's observability matrix rank of each augmented C (reference
    # library); only a + c reaches state c
    for name, row in (("b_only", lm.C[1]), ("a_plus_c", lm.C[2]), ("b", np.eye(3)[1])):
        rank = np.linalg.matrix_rank(control.obsv(lm.A, np.vstack([lm.C[0], row])))
        assert by_name[name].restores == (rank == 3)
    assert [a.candidate for a in report.sensor_advice if a.restores] == ["a_plus_c"]
    assert report.sensor_advice[0].candidate == "a_plus_c"     # best first
    assert report.sensor_advice[0].verdict == "observable"
    assert report.sensor_advice[0].gramian_min > 0
    # the others leave c unseen: the smallest Gramian eigenvalue stays at rounding level
    assert all(abs(a.gramian_min) < 1e-12 for a in report.sensor_advice[1:])


def test_unknown_candidate_names_suggest_the_closest() -> None:
    lm = _three_tank_model()
    with pytest.raises(UsageError, match="did you mean 'b_only'"):
        analyze(lm, ObservabilitySettings(candidates=["b_onyl"]), outputs=["sum_ab"])
    with pytest.raises(UsageError, match="sum_ab"):
        analyze(lm, outputs=["sum_abc"])
