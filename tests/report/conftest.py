"""Run folders for the report tests, each made once per session with the real pipeline.

* ``stage_run`` — the 3 × 3 four-tank study through every stage (export written);
* ``observability_run`` — the same study without an ``[estimator]`` table
  (stops after the observability map);
* ``refused_run`` — a stability target no node meets (ρ ≤ 0.5), so every node
  fails validation and the export is refused.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from linobs.pipeline import run_study
from tests.export.stage_study import STUDY, write_study


@pytest.fixture(scope="session")
def stage_run(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("report-stage")
    summary = run_study(write_study(folder), folder / "run", workers=1)
    assert summary.export_usable and not summary.export_refused  # the fixture is what it says
    return folder / "run"


@pytest.fixture(scope="session")
def observability_run(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("report-observability")
    head = STUDY.split("[estimator]")[0].format()  # the study up to the estimator table
    (folder / "study.toml").write_text(head.replace('"four_tank_export"', '"four_tank_map"'))
    summary = run_study(folder / "study.toml", folder / "run", workers=1)
    assert summary.design_ok is None and "design" not in summary.stages
    return folder / "run"


@pytest.fixture(scope="session")
def refused_run(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("report-refused")
    summary = run_study(write_study(folder, target=0.5), folder / "run", workers=1)
    assert summary.export_refused
    return folder / "run"
