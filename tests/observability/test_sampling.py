"""Sampled-data check: pathological sample times lose observability."""

from __future__ import annotations

import numpy as np
import pytest

from linobs.observability.analysis import analyze_matrices
from linobs.observability.report import ObservabilitySettings
from linobs.observability.sampling import pathological_pairs

OMEGA = 1.7
OSCILLATOR = np.array([[0.0, 1.0], [-OMEGA**2, 0.0]])   # position, velocity
POSITION = np.array([[1.0, 0.0]])


def _at(sample_time: float, A: np.ndarray = OSCILLATOR, C: np.ndarray = POSITION,
        outputs: list[str] | None = None):  # type: ignore[no-untyped-def]
    names = outputs or [f"y{i}" for i in range(C.shape[0])]
    return analyze_matrices(A, C, ["q", "v"], names,
                            settings=ObservabilitySettings(sample_time=sample_time))


@pytest.mark.parametrize("k", [1, 2, 3])
def test_oscillator_sampled_at_multiples_of_half_its_period(k: int) -> None:
    # analytic: Φ = e^{A Ts} with ωTs = kπ is ±I, so the position samples are ±q(0) and never
    # show the velocity; the modes ±jω differ by 2jω = k·2πj/Ts (Kalman, Ho & Narendra 1963)
    report = _at(k * np.pi / OMEGA)
    continuous = analyze_matrices(OSCILLATOR, POSITION, ["q", "v"], ["y0"])
    assert continuous.verdict == "observable"          # x = q, v = q' (analytic)
    assert report.sampling is not None and report.sampling.lost
    assert report.sampling.margin < 1e-12
    assert [(i, j, abs(kk)) for i, j, kk in report.sampling.pathological_pairs] == [(0, 1, k)]
    # undamped: the lost mode does not decay, so the point is 'unobservable', never 'observable'
    assert report.verdict == "unobservable"
    assert report.sampling.verdict == "unobservable"
    assert "sampling" in report.summary


@pytest.mark.parametrize("sample_time", [0.05, 0.3, 1.0, 2.5])
def test_oscillator_at_other_sample_times(sample_time: float) -> None:
    # analytic: the sampled observability matrix [C; CΦ] = [[1, 0], [cos ωTs, sin(ωTs)/ω]]
    # has determinant sin(ωTs)/ω ≠ 0 unless ωTs is a multiple of π
    assert abs(np.sin(OMEGA * sample_time)) > 0.05
    report = _at(sample_time)
    assert report.sampling is not None and not report.sampling.lost
    assert report.sampling.pathological_pairs == []
    assert report.verdict == "observable"
    assert report.sampling.margin > 1e-3


def test_damped_pair_sampled_badly_is_detectable() -> None:
    # λ = −σ ± jω, Ts = π/ω: e^{λTs} = −e^{−σTs} for both (analytic), observability lost, but
    # both modes decay, so the verdict is 'unobservable-detectable'
    sigma = 0.2
    A = np.array([[0.0, 1.0], [-(OMEGA**2 + sigma**2), -2 * sigma]])
    report = _at(np.pi / OMEGA, A=A)
    assert report.sampling is not None and report.sampling.lost
    assert report.verdict == "unobservable-detectable"


def test_fast_sampling_margin_tends_to_the_continuous_margin() -> None:
    # delta form: (e^{λTs} − 1)/Ts → λ and (e^{ATs} − I)/Ts → A as Ts → 0 (analytic limit)
    continuous = analyze_matrices(OSCILLATOR, POSITION, ["q", "v"], ["y0"])
    report = _at(1e-6)
    assert report.sampling is not None
    assert report.sampling.margin == pytest.approx(continuous.margin, rel=1e-4)


def test_pair_without_loss_with_two_outputs() -> None:
    # with both position and velocity measured C = I has full rank: nothing is ever lost, even
    # though the mode pair is pathological (the single-output condition of Kalman, Ho & Narendra)
    report = _at(np.pi / OMEGA, C=np.eye(2))
    assert report.sampling is not None
    assert report.sampling.pathological_pairs and not report.sampling.lost
    assert report.verdict == "observable"


def test_pathological_pairs_need_equal_real_parts() -> None:
    # Im differs by 2π/Ts but Re differs: no pair (definition)
    ts = 0.5
    lam = np.array([-1.0 + 1j * np.pi / ts, -2.0 - 1j * np.pi / ts, 3.0, 3.0])
    assert pathological_pairs(lam, ts) == []
    lam = np.array([-1.0 + 1j * np.pi / ts, -1.0 - 1j * np.pi / ts])
    assert pathological_pairs(lam, ts) == [(0, 1, 1)]
