"""The evaluation hot path: values, counts, failures and parameter handling."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

import linobs.model.hotpath as hotpath
from linobs.errors import EvaluationError, UsageError
from linobs.model.loader import load_model
from tests.support.fmu_files import build_minimal


@pytest.fixture(scope="module")
def minimal(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return build_minimal(tmp_path_factory.mktemp("minimal") / "minimal.fmu")


def oscillator(x: np.ndarray, u: np.ndarray, k: float = 4.0, c: float = 0.5) -> tuple[np.ndarray, np.ndarray]:
    # analytic: the fixture's equations pos' = vel, vel' = -k pos - c vel + force, y = pos
    return np.array([x[1], -k * x[0] - c * x[1] + u[0]]), np.array([x[0]])


@pytest.mark.parametrize("compiled", [True, False], ids=["c-helper", "pure-ctypes"])
def test_evaluate_matches_equations(minimal: Path, compiled: bool, monkeypatch: pytest.MonkeyPatch) -> None:
    if not compiled:
        monkeypatch.setattr(hotpath, "hotpath_library", lambda: None)
    rng = np.random.default_rng(1)
    with load_model(minimal) as m:
        assert m._evaluator.compiled is compiled
        for _ in range(20):
            x, u = rng.uniform(-5, 5, 2), rng.uniform(-5, 5, 1)
            dx, y = m.evaluate(x, u)
            ref_dx, ref_y = oscillator(x, u)
            np.testing.assert_array_equal(dx, ref_dx)  # same arithmetic: bit-identical
            np.testing.assert_array_equal(y, ref_y)
        assert m.evaluations == 20
        X, U = rng.uniform(-5, 5, (7, 2)), rng.uniform(-5, 5, (7, 1))
        DX, Y, _ = m.evaluate_batch(X, U)
        for i in range(7):
            np.testing.assert_array_equal(DX[i], oscillator(X[i], U[i])[0])
        assert m.evaluations == 27


def test_returned_arrays_are_not_reused(minimal: Path) -> None:
    with load_model(minimal) as m:
        dx1, _ = m.evaluate([1.0, 0.0], [0.0])
        m.evaluate([2.0, 0.0], [0.0])
        np.testing.assert_array_equal(dx1, [0.0, -4.0])


@pytest.mark.parametrize("compiled", [True, False], ids=["c-helper", "pure-ctypes"])
def test_non_finite_value_names_the_point(minimal: Path, compiled: bool,
                                          monkeypatch: pytest.MonkeyPatch) -> None:
    if not compiled:
        monkeypatch.setattr(hotpath, "hotpath_library", lambda: None)
    with load_model(minimal) as m:
        with pytest.raises(EvaluationError, match=r"non-finite value of der\(vel\) at pos=1, vel=2, force=200"):
            m.evaluate([1.0, 2.0], [200.0])


@pytest.mark.parametrize("compiled", [True, False], ids=["c-helper", "pure-ctypes"])
def test_error_status_quotes_fmu_log_and_recovers(minimal: Path, compiled: bool,
                                                  monkeypatch: pytest.MonkeyPatch) -> None:
    if not compiled:
        monkeypatch.setattr(hotpath, "hotpath_library", lambda: None)
    with load_model(minimal) as m:
        m.set_parameters({"damping": 1.0})
        with pytest.raises(EvaluationError) as info:
            m.evaluate([1.0, 2.0], [-200.0])
        err = info.value
        assert "get derivatives returned Error at pos=1, vel=2, force=-200" in str(err)
        assert "outside the model's validity" in str(err)
        assert err.point == {"pos": 1.0, "vel": 2.0, "force": -200.0} and err.status == 3
        # the instance was reset and re-initialized with the parameters set before
        dx, _ = m.evaluate([1.0, 2.0], [3.0])
        np.testing.assert_array_equal(dx, oscillator(np.array([1.0, 2.0]), np.array([3.0]), c=1.0)[0])


def test_batch_failure_names_the_failing_row(minimal: Path) -> None:
    with load_model(minimal) as m:
        X = np.array([[0.0, 0.0], [1.0, 1.0], [3.0, 0.5]])
        U = np.array([[0.0], [0.0], [500.0]])
        with pytest.raises(EvaluationError, match="pos=3, vel=0.5, force=500"):
            m.evaluate_batch(X, U)
        with pytest.raises(UsageError, match="expected X"):
            m.evaluate_batch(np.zeros((2, 3)), np.zeros((2, 1)))


def test_fixed_parameters_reinitialize_only_on_change(minimal: Path) -> None:
    with load_model(minimal) as m:
        assert m.initializations == 1
        assert m.set_parameters({"stiffness": 4.0}) is False  # unchanged start value
        assert m.initializations == 1
        assert m.set_parameters({"damping": 2.0}) is False  # tunable: event mode, no reset
        assert m.initializations == 1
        assert m.set_parameters({"stiffness": 9.0}) is True
        assert m.initializations == 2
        assert m.set_parameters({"stiffness": 9.0, "damping": 2.0}) is False
        assert m.initializations == 2
        dx, _ = m.evaluate([1.0, 1.0], [0.0])
        np.testing.assert_array_equal(dx, oscillator(np.array([1.0, 1.0]), np.array([0.0]), k=9.0, c=2.0)[0])
        with pytest.raises(UsageError, match="is a state, not a parameter"):
            m.set_parameters({"pos": 1.0})


def test_two_instances_keep_their_own_logs(minimal: Path) -> None:
    with load_model(minimal) as a, load_model(minimal) as b:
        with pytest.raises(EvaluationError):
            a.evaluate([0.0, 0.0], [-500.0])
        assert any("validity" in line for line in a.log)
        assert not any("validity" in line for line in b.log)
