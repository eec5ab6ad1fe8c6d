"""Fixtures of the run-infrastructure tests: the fault-injection FMU and FMU references."""

from __future__ import annotations

from pathlib import Path

import pytest

from linobs.model.build import build_fmu
from linobs.model.loader import file_sha256
from linobs.run.types import FMURef

FAULTY_SOURCE = Path(__file__).resolve().parents[1] / "fixtures" / "faulty"


def fmu_ref(path: Path) -> FMURef:
    return FMURef(sha256=file_sha256(path), path=str(path))


@pytest.fixture(scope="session")
def faulty_fmu(tmp_path_factory: pytest.TempPathFactory) -> FMURef:
    """The fault-injection FMU of tests/fixtures/faulty, built once per session."""
    path = build_fmu(FAULTY_SOURCE, tmp_path_factory.mktemp("faulty") / "faulty.fmu")
    return fmu_ref(path)


@pytest.fixture(scope="session")
def lfp_cell(bundled_fmus: dict[str, Path]) -> FMURef:
    return fmu_ref(bundled_fmus["lfp_cell"])
