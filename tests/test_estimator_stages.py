"""The design and validate stages of `linobs run` on the bundled four-tank process."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
import scipy.integrate
import scipy.linalg
import scipy.optimize

from linobs.estimator.schedule import GainSchedule, ScheduleData
from linobs.pipeline import run_study
from tests.reference import plants

TS = 1.0
QC = 1e-4          # process-noise PSD on each level [cm²/s]
SIGMA = 0.05       # level-sensor noise, one sample [V]

HEAD = """
name = "four_tank_schedule"
outputs = {outputs}
[model]
bundled = "four_tank"
parameters = {{ gamma1 = 0.70, gamma2 = 0.60 }}
[grid.v1]
linspace = {{ start = 2.0, stop = 4.0, num = 4 }}
[grid.v2]
linspace = {{ start = 2.0, stop = 4.0, num = 4 }}
[linearize]
method = "exact"
[observability]
empirical = "off"
"""

KALMAN = f"""
[estimator]
kind = "kalman"
sample_time = {TS}
process_noise = {{ h1 = {QC}, h2 = {QC}, h3 = {QC}, h4 = {QC} }}
measurement_noise = {{ y1 = {SIGMA}, y2 = {SIGMA} }}
[validation]
random_points = 10
seed = 3
initial_error = {{ h3 = 3.0, h4 = -3.0 }}
[[validation.scenario]]
duration = 300
inputs = {{ v1 = 2.0, v2 = 4.0 }}
[[validation.scenario]]
duration = 300
inputs = {{ v1 = 4.0, v2 = 2.0 }}
"""

LUENBERGER = f"""
[estimator]
kind = "luenberger"
sample_time = {TS}
poles = {{ kind = "speedup", factor = 4.0 }}
[validation]
random_points = 5
fixed_gain = false
"""


def write_study(folder: Path, text: str) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "study.toml"
    path.write_text(text)
    return path


@pytest.fixture(scope="module")
def kalman_run(tmp_path_factory: pytest.TempPathFactory) -> tuple[dict, Path]:
    folder = tmp_path_factory.mktemp("kalman")
    study = write_study(folder, HEAD.format(outputs='["y1", "y2"]') + KALMAN)
    summary = run_study(study, folder / "run", workers=1, figures=True)
    return summary.model_dump(), folder / "run"


def test_summary_has_the_design_and_validation_keys(kalman_run: tuple[dict, Path]) -> None:
    summary, run = kalman_run
    on_disk = json.loads((run / "summary.json").read_text())
    for key in ("design_ok", "design_refused", "validation_worst_decay_reserve", "validation_rms",
                "fixed_gain_rms"):
        assert key in on_disk and on_disk[key] == summary[key]
    assert summary["design_ok"] == 16 and summary["design_refused"] == 0
    assert set(summary["validation_rms"]) == set(summary["fixed_gain_rms"]) == set(
        plants.FOUR_TANK_STATES)
    for name in ("validation_states", "validation_errors", "validation_decay_reserve"):
        assert (run / "figures" / f"{name}.png").stat().st_size > 1000


def test_node_gain_matches_scipy_dare_on_the_analytic_model(kalman_run: tuple[dict, Path]) -> None:
    """A node's gain from the independent plant model, ZOH and Van Loan by quadrature, DARE.

    # reference library: scipy.linalg.expm (Φ = e^{A Ts}), scipy.integrate.quad_vec of
    # Qd = ∫₀^Ts e^{As} Qc e^{Aᵀs} ds (the integral Van Loan (1978) computes), and
    # scipy.linalg.solve_discrete_are for the prior covariance P; filter-form gain
    # L = P Cᵀ (C P Cᵀ + R)⁻¹ (Kalman's measurement update).
    """
    _, run = kalman_run
    data = ScheduleData.model_validate_json((run / "design" / "schedule.json").read_text())
    node = data.nodes[5]
    assert node.status == "ok"
    x0 = np.asarray(node.x0)
    u0 = np.asarray(node.u0)
    # the trimmed levels are a steady state of the independent model
    np.testing.assert_allclose(plants.four_tank_rhs(x0, u0), 0.0, atol=1e-8)
    A, _, C, _ = plants.four_tank_jacobians(x0, u0)
    np.testing.assert_allclose(node.A, A, rtol=1e-7, atol=1e-10)
    Phi = scipy.linalg.expm(A * TS)
    Qc = QC * np.eye(4)
    Qd = scipy.integrate.quad_vec(lambda s: scipy.linalg.expm(A * s) @ Qc
                                  @ scipy.linalg.expm(A.T * s), 0.0, TS, epsabs=1e-14)[0]
    R = SIGMA ** 2 * np.eye(2)
    P = scipy.linalg.solve_discrete_are(Phi.T, C.T, Qd, R)
    L = P @ C.T @ np.linalg.inv(C @ P @ C.T + R)
    np.testing.assert_allclose(node.Phi, Phi, rtol=1e-7, atol=1e-12)
    np.testing.assert_allclose(node.L, L, rtol=1e-5, atol=1e-9)


def test_frozen_points_pass_and_schedule_interpolates_at_nodes(
        kalman_run: tuple[dict, Path]) -> None:
    summary, run = kalman_run
    frozen = json.loads((run / "validation" / "frozen.json").read_text())
    # 9 cell centers of a 4 × 4 grid + 10 random interior points
    assert summary["validation_frozen_passed"] == 19 and summary["validation_frozen_failed"] == 0
    assert summary["validation_worst_decay_reserve"] > 0
    radii = [p["spectral_radius"] for p in frozen["points"]]
    assert len(radii) == 19 and max(radii) <= 0.999
    # analytic: multilinear interpolation reproduces the node values at the nodes
    schedule = GainSchedule(ScheduleData.model_validate_json(
        (run / "design" / "schedule.json").read_text()))
    data = schedule.data
    for i in (0, 7, 15):
        ev = schedule.evaluate(schedule.point_value(schedule.node_point(i)))
        np.testing.assert_allclose(ev.values["L"], data.nodes[i].L, rtol=0, atol=1e-12)


def test_nonlinear_error_converges_and_schedule_beats_fixed_gain_where_it_matters(
        kalman_run: tuple[dict, Path]) -> None:
    summary, run = kalman_run
    nonlinear = json.loads((run / "validation" / "nonlinear.json").read_text())
    per_state = nonlinear["schedule"]["per_state"]
    for name in plants.FOUR_TANK_STATES:
        # stated bound: after convergence the level error stays below 0.2 cm RMS (the initial
        # error is 3 cm on the upper tanks, sensor noise 0.05 V ≈ 0.1 cm)
        assert per_state[name]["rms_converged"] < 0.2, (name, per_state[name])
        assert per_state[name]["convergence_time"] is not None
    # the upper tanks are seen only through the lower ones; there the schedule wins
    for name in ("h3", "h4"):
        assert summary["validation_rms"][name] < summary["fixed_gain_rms"][name]
    assert summary["comparison"]


def test_luenberger_places_the_requested_poles_at_every_node(tmp_path: Path) -> None:
    text = HEAD.format(outputs='["y1", "y2"]') + LUENBERGER.replace(
        'factor = 4.0 }', 'factor = 4.0 }\nconsistent_poles = false')
    summary = run_study(write_study(tmp_path, text), tmp_path / "run", workers=1, figures=False)
    assert summary.design_ok == 16 and summary.design_refused == 0
    data = ScheduleData.model_validate_json((tmp_path / "run" / "design" / "schedule.json")
                                            .read_text())
    for node in data.nodes:
        Phi, C, L = np.asarray(node.Phi), np.asarray(node.C), np.asarray(node.L)
        # filter form: e_k+1 = (I − L C) Φ e_k (numpy eigvals)
        got = np.sort_complex(np.linalg.eigvals((np.eye(4) - L @ C) @ Phi))
        plant = np.linalg.eigvals(np.asarray(node.A))
        # speed-up ×4 of the node's own (real, stable) plant poles, mapped by z = e^{s Ts}
        want = np.sort_complex(np.exp(4.0 * plant * TS))
        np.testing.assert_allclose(got, want, rtol=1e-8, atol=1e-10)
    assert summary.validation_frozen_failed == 0


def test_consistent_poles_are_the_slowest_nodes_sped_up(tmp_path: Path) -> None:
    text = HEAD.format(outputs='["y1", "y2"]') + LUENBERGER
    summary = run_study(write_study(tmp_path, text), tmp_path / "run", workers=1, figures=False)
    assert summary.design_ok == 16
    data = ScheduleData.model_validate_json((tmp_path / "run" / "design" / "schedule.json")
                                            .read_text())
    plant = np.array([np.sort(np.linalg.eigvals(np.asarray(n.A)).real) for n in data.nodes])
    slowest = plant[np.argmax(plant.max(axis=1))]        # the smallest decay rate on the grid
    want = np.sort(np.exp(4.0 * slowest * TS))
    for node in data.nodes:
        Phi, C, L = np.asarray(node.Phi), np.asarray(node.C), np.asarray(node.L)
        got = np.sort_complex(np.linalg.eigvals((np.eye(4) - L @ C) @ Phi))
        np.testing.assert_allclose(got, want, rtol=1e-8, atol=1e-10)


def test_unobservable_pair_is_refused_with_the_modes_named(tmp_path: Path) -> None:
    """Measuring y1 alone: tanks 2 and 4 never reach y1 (Johansson 2000, Fig. 1: tank 4 drains
    into tank 2, neither into tank 1), so two modes cannot be moved by any gain."""
    study = write_study(tmp_path, HEAD.format(outputs='["y1"]') + LUENBERGER)
    summary = run_study(study, tmp_path / "run", workers=1, figures=False)
    assert summary.design_ok == 0 and summary.design_refused == 16
    assert summary.validation_frozen_passed is None
    assert any("validation skipped" in note for note in summary.notes)
    refused = json.loads((tmp_path / "run" / "design" / "refused.json").read_text())
    assert len(refused) == 16
    for entry in refused:
        assert "h2" in entry["message"] and "h4" in entry["message"], entry["message"]
        assert len(entry["unmovable_modes"]) == 2
    # the unmovable modes are the eigenvalues of the (h2, h4) block of A, which y1 never sees
    # (analytic structure; A from the independent model at the trimmed levels, scipy fsolve),
    # mapped to the z-plane by e^{s Ts}
    first = refused[0]
    u = np.array([first["point"]["v1"], first["point"]["v2"]])
    x = scipy.optimize.fsolve(lambda h: plants.four_tank_rhs(h, u), np.full(4, 5.0), xtol=1e-13)
    A = plants.four_tank_jacobians(x, u)[0]
    block = np.sort(np.exp(np.linalg.eigvals(A[np.ix_([1, 3], [1, 3])]).real * TS))
    got = np.sort([re for re, _ in first["unmovable_modes"]])
    np.testing.assert_allclose(got, block, rtol=1e-6)
