"""The bundled LFP cell at rest: state of charge on the flat OCV plateau and at the steep ends.

At rest (i_cell = 0, 25 degC) the reference Jacobians (tests/reference/plants.py, written
from the equations) are diagonal in A: soc is an integrator (λ = 0), v_rc1, v_rc2 relax
with 1/(R_k C_k), temp_cell with hA/(m cp); v_term sees soc through dOCV/dsoc only.
So the soc mode's eigenvector is the unit vector of soc and its PBH eigenvector test
‖C̃ e_soc‖ = |dOCV/dsoc| · soc_nom / v_term_nom follows the OCV slope.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import scipy.linalg

from linobs.linear.linear_model import LinearModel
from linobs.model.loader import load_model
from linobs.observability.analysis import analyze
from linobs.observability.report import Mode, ObservabilityReport
from tests.reference import plants

SOCS = (0.03, 0.5, 0.97)
SOC_THRESHOLD = 1e-2
"""Documented threshold for the soc mode: separates the plateau from the steep ends."""


@pytest.fixture(scope="module")
def cell_models(bundled_fmus: dict[str, Path]) -> dict[float, LinearModel]:
    with load_model(bundled_fmus["lfp_cell"]) as model:
        return {soc: model.linearize({"soc": soc, "temp_cell": 25.0, "t_amb": 25.0,
                                      "i_cell": 0.0}) for soc in SOCS}


def _soc_mode(report: ObservabilityReport) -> Mode:
    return next(m for m in report.modes if next(iter(m.participation)) == "soc")


def _scaled_reference(lm: LinearModel) -> tuple[np.ndarray, np.ndarray]:
    A, _, C, _ = plants.lfp_cell_jacobians(lm.x0, lm.u0)      # analytic reference Jacobians
    sx, sy = np.asarray(lm.state_nominal), np.asarray(lm.output_nominal)
    return A * sx[None, :] / sx[:, None], C * sx[None, :] / sy[:, None]


def test_state_of_charge_is_weak_on_the_plateau(cell_models: dict[float, LinearModel]) -> None:
    lm = cell_models[0.5]
    report = analyze(lm, margin_normalization="sum")
    soc = _soc_mode(report)
    assert soc.real == 0.0 or abs(soc.real) < 1e-12          # the integrator (analytic)
    assert soc.margin < report.weak_threshold
    assert report.verdict == "weak"
    # the margin is σ_min([0·I − Ã; C̃]) / (‖Ã‖ + ‖C̃‖) of the reference Jacobians (scipy)
    A, C = _scaled_reference(lm)
    ref = scipy.linalg.svdvals(np.vstack([-A, C]))[-1] / (np.linalg.norm(A, 2)
                                                          + np.linalg.norm(C, 2))
    assert soc.margin == pytest.approx(ref, rel=1e-3)


def test_soc_visibility_follows_the_ocv_slope(cell_models: dict[float, LinearModel]) -> None:
    seen = {}
    for soc_value, lm in cell_models.items():
        report = analyze(lm, margin_normalization="sum")
        A, C = _scaled_reference(lm)
        slope = plants.lfp_tables(soc_value, 25.0, dsoc=1)["ocv"]     # reference OCV table
        # eigenvector test of the soc mode, from the reference (module notes)
        expected = abs(slope) / (np.linalg.norm(A, 2) + np.linalg.norm(C, 2))
        assert _soc_mode(report).visibility == pytest.approx(expected, rel=1e-3)
        seen[soc_value] = _soc_mode(report).visibility
    assert seen[0.5] < SOC_THRESHOLD < min(seen[0.03], seen[0.97])


def test_balanced_margin_separates_plateau_and_ends(cell_models: dict[float, LinearModel]) -> None:
    margins = {}
    for soc_value, lm in cell_models.items():
        report = analyze(lm, margin_normalization="balanced")
        A, C = _scaled_reference(lm)
        # balanced margin at λ = 0 from the reference Jacobians (scipy svdvals; definition)
        ref = scipy.linalg.svdvals(np.vstack([-A / np.linalg.norm(A, 2),
                                              C / np.linalg.norm(C, 2)]))[-1] / 2
        margins[soc_value] = _soc_mode(report).margin
        assert margins[soc_value] == pytest.approx(ref, rel=1e-3)
    assert margins[0.5] < SOC_THRESHOLD <= min(margins[0.03], margins[0.97])


def test_weakest_modes_at_the_ends_are_the_rc_voltages(
        cell_models: dict[float, LinearModel]) -> None:
    # the RC voltages reach v_term with unit gain but are scaled by their 10 mV nominal, so in
    # the scaled model they are 1 % of an output nominal (reference Jacobians, C row −1 · 0.01)
    for soc_value in (0.03, 0.97):
        report = cell_models[soc_value].observability()
        assert next(iter(report.weakest.participation)) in ("v_rc1", "v_rc2")
        assert report.verdict == "weak"
        assert report.unobservable_dimension == 0
        assert report.scaling.states["v_rc1"] == pytest.approx(0.01)
