"""Shared fixtures: the bundled plant FMUs, built once per test session."""

from __future__ import annotations

from pathlib import Path

import numpy  # noqa: F401  (load BLAS before limiting its threads)
import pytest
import scipy.linalg  # noqa: F401
from threadpoolctl import threadpool_limits

# The tests solve many small linear-algebra problems; a multi-threaded BLAS only
# adds synchronization there (and oversubscribes the cores when worker processes
# run beside the tests).  Common practice for small-matrix numerics.
threadpool_limits(1)

from linobs.model.bundled import BUNDLED_PLANTS, bundled_fmu


@pytest.fixture(scope="session")
def bundled_fmus(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    """Name -> path of each bundled plant's FMU, built into a session cache folder."""
    cache = tmp_path_factory.mktemp("linobs-cache")
    return {name: bundled_fmu(name, cache=cache) for name in BUNDLED_PLANTS}
