"""Estimator figures: files are written, PNGs decode, SVGs parse and name what they show."""

from __future__ import annotations

import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest
from matplotlib.image import imread

from linobs.errors import UsageError
from linobs.estimator.nonlinear import EstimatorRun
from linobs.report.estimator_figures import (
    estimation_errors,
    frozen_decay_reserve_map,
    state_estimates,
)

STATES = ["soc", "v_rc1", "temp_cell"]


def synthetic_run(label: str, *, kalman: bool, scale: float, samples: int = 3001) -> EstimatorRun:
    """A run with decaying errors around a smooth truth (drawing input only, no model)."""
    t = np.arange(samples) * 2.0
    truth = np.column_stack([0.9 - 0.8 * t / t[-1], 0.01 * np.sin(t / 300), 25 + 2 * (t / t[-1])])
    decay = np.exp(-t / 400.0)[:, None]
    wiggle = np.random.default_rng(1).standard_normal(truth.shape) * [1e-3, 1e-4, 0.05]
    estimates = truth + scale * (np.array([-0.1, 0.005, 2.0]) * decay + wiggle)
    sigma = np.tile([2e-3, 2e-4, 0.06], (samples, 1)) if kalman else None
    return EstimatorRun(label=label, kind="kalman" if kalman else "luenberger", form="filter",
                        times=t, state_names=list(STATES), truth=truth, estimates=estimates,
                        sigma=sigma, nees=None, usable=np.ones(samples, bool),
                        outside=np.zeros(samples, bool), measurements=np.zeros((samples, 1)),
                        output_names=["v_term"], noise_std={"v_term": 0.002}, seed=0)


def check_files(paths: list[Path], words: list[str]) -> str:
    png, svg = paths
    assert png.suffix == ".png" and svg.suffix == ".svg"
    assert png.is_file() and svg.is_file()
    image = imread(png)                                # decodes
    assert image.ndim == 3 and image.shape[0] > 100 and image.shape[1] > 100
    root = ET.parse(svg).getroot()                     # parses
    assert root.tag.endswith("svg")
    text = " ".join(t for el in root.iter() for t in [el.text or ""])
    for word in words:
        assert word in text, f"{word!r} not in the SVG text"
    assert "dc:date" not in svg.read_text(encoding="utf-8")   # no date: deterministic
    return svg.read_text(encoding="utf-8")


@pytest.fixture(scope="module")
def runs() -> list[EstimatorRun]:
    return [synthetic_run("schedule", kalman=True, scale=1.0),
            synthetic_run("fixed gain", kalman=True, scale=3.0)]


def test_state_estimates_name_every_state_and_run(tmp_path: Path, runs) -> None:
    paths = state_estimates(runs, out_stem=tmp_path / "estimates",
                            units={"soc": "1", "v_rc1": "V", "temp_cell": "degC"})
    svg = check_files(paths, [*STATES, "truth", "schedule", "fixed gain", "±3σ"])
    assert "v_rc1 [V]" in svg and "soc [-]" in svg
    again = state_estimates(runs, out_stem=tmp_path / "again",
                            units={"soc": "1", "v_rc1": "V", "temp_cell": "degC"})
    assert again[1].read_bytes() == paths[1].read_bytes()   # same input, same SVG bytes
    assert not list(tmp_path.glob(".*.tmp"))                # atomic writes leave no temporaries


def test_estimation_errors_with_and_without_a_covariance(tmp_path: Path, runs) -> None:
    mixed = [runs[0], synthetic_run("observer", kalman=False, scale=1.0)]
    paths = estimation_errors(mixed, out_stem=tmp_path / "errors")
    check_files(paths, ["error in soc", "error in temp_cell", "schedule: estimate − truth",
                        "observer: estimate − truth", "±3σ"])
    with pytest.raises(UsageError, match="same plant run"):
        estimation_errors([runs[0], synthetic_run("short", kalman=True, scale=1.0, samples=10)],
                          out_stem=tmp_path / "bad")
    with pytest.raises(UsageError, match="no estimator run"):
        estimation_errors([], out_stem=tmp_path / "none")


def test_frozen_decay_reserve_map_on_a_tensor_set_scattered_points_and_one_axis(
        tmp_path: Path) -> None:
    soc, cur = np.linspace(0.1, 0.9, 5), np.array([-30.0, 0.0, 30.0])
    pts = np.array([[s, i] for s in soc for i in cur])
    reserves: list[float | None] = [0.2 - 0.5 * abs(s - 0.5) - 0.002 * abs(i) for s, i in pts]
    reserves[7] = None                                 # a point without a result
    passed = [m is not None and m >= 0 for m in reserves]
    paths = frozen_decay_reserve_map(pts, ["soc", "i_cell"], reserves, passed,
                                     out_stem=tmp_path / "t",
                                     reserve_label="decay reserve (target − spectral radius)",
                                     units={"i_cell": "A"})
    check_files(paths, ["soc", "i_cell [A]", "decay reserve (target − spectral radius)",
                        "misses the required decay", "no result (1)"])
    rng = np.random.default_rng(3)
    scattered = rng.uniform([0.1, -30.0, 10.0], [0.9, 30.0, 40.0], size=(30, 3))
    m2 = list(0.1 - 0.4 * np.abs(scattered[:, 0] - 0.5))
    paths = frozen_decay_reserve_map(scattered, ["soc", "i_cell", "t_amb"], m2,
                                     [m >= 0 for m in m2], axes=("soc", "t_amb"),
                                     out_stem=tmp_path / "s")
    check_files(paths, ["t_amb", "projected i_cell", "Frozen-point decay reserve"])
    line = frozen_decay_reserve_map(soc[:, None], ["soc"], [0.1, 0.05, -0.01, 0.04, 0.09],
                                    [True, True, False, True, True], out_stem=tmp_path / "one")
    check_files(line, ["soc", "misses the required decay (1)"])
    with pytest.raises(UsageError, match="do not match"):
        frozen_decay_reserve_map(pts, ["soc", "i_cell"], reserves[:-1], passed,
                                 out_stem=tmp_path / "x")
    with pytest.raises(UsageError, match="not a grid axis"):
        frozen_decay_reserve_map(pts, ["soc", "i_cell"], reserves, passed, axes=("soc", "q"),
                                 out_stem=tmp_path / "y")
