"""A thin driver for FMUs through fmpy's low-level FMI 2.0 / 3.0 API, and its fixtures.

Used by the tests that compare the bundled plants with tests/reference/plants.py.
Import the fixtures into a test module with
``from tests.reference.fmu_driver import driver, unzipped  # noqa: F401``.
"""

from __future__ import annotations

import ctypes
from pathlib import Path
from typing import Any, Callable, Iterator, Sequence

import fmpy
import numpy as np
import pytest
from fmpy.fmi2 import (
    FMU2Model,
    FMU2Slave,
    fmi2CallbackAllocateMemoryTYPE,
    fmi2CallbackFreeMemoryTYPE,
    fmi2CallbackFunctions,
    fmi2CallbackLoggerTYPE,
)
from fmpy.fmi3 import FMU3Model, FMU3Slave


class Driver:
    """One FMU instance driven through fmpy's low-level FMI 2.0 / 3.0 API."""

    def __init__(self, fmu: Path, unzipdir: str, *, token: str | None = None,
                 slave: bool = False) -> None:
        md = fmpy.read_model_description(str(fmu))
        self.md = md
        self.fmi3 = md.fmiVersion.startswith("3")
        self.vars = {v.name: v for v in md.modelVariables}
        self.vr = {v.name: v.valueReference for v in md.modelVariables}
        self.states = [u.variable.derivative.name for u in md.derivatives]
        self.derivatives = [u.variable.name for u in md.derivatives]
        self.outputs = [u.variable.name for u in md.outputs]
        self.inputs = [v.name for v in md.modelVariables if v.causality == "input"]
        self.messages: list[tuple[int, str]] = []
        if self.fmi3:
            cls: Any = FMU3Slave if slave else FMU3Model
        else:
            cls = FMU2Slave if slave else FMU2Model
        self.fmu = cls(guid=md.guid if token is None else token, unzipDirectory=unzipdir,
                       modelIdentifier=md.modelExchange.modelIdentifier, instanceName="test")
        self._keep: list[Any] = []

    # logging callbacks keep every message
    def _log2(self, env: Any, name: Any, status: int, category: Any, message: bytes) -> None:
        self.messages.append((status, message.decode()))

    def _log3(self, env: Any, status: int, category: Any, message: bytes) -> None:
        self.messages.append((status, message.decode()))

    def instantiate(self) -> None:
        if self.fmi3:
            self.fmu.instantiate(logMessage=self._log3)
        else:
            cb = fmi2CallbackFunctions()
            cb.logger = fmi2CallbackLoggerTYPE(self._log2)
            cb.allocateMemory = fmi2CallbackAllocateMemoryTYPE(fmpy.calloc)
            cb.freeMemory = fmi2CallbackFreeMemoryTYPE(fmpy.free)
            self._keep.append(cb)
            self.fmu.instantiate(callbacks=cb)

    def log_text(self) -> str:
        return "\n".join(m for _, m in self.messages)

    # values
    def get(self, names: Sequence[str]) -> np.ndarray:
        refs = [self.vr[n] for n in names]
        values = self.fmu.getFloat64(refs) if self.fmi3 else self.fmu.getReal(refs)
        return np.array(values, dtype=float)

    def set(self, values: dict[str, float]) -> None:
        refs = [self.vr[n] for n in values]
        vals = [float(v) for v in values.values()]
        if self.fmi3:
            self.fmu.setFloat64(refs, vals)
        else:
            self.fmu.setReal(refs, vals)

    def enter_initialization(self) -> None:
        if self.fmi3:
            self.fmu.enterInitializationMode(startTime=0.0)
        else:
            self.fmu.setupExperiment(startTime=0.0)
            self.fmu.enterInitializationMode()

    def to_continuous_time(self, start: dict[str, float] | None = None) -> None:
        self.instantiate()
        if start:
            self.set(start)
        self.enter_initialization()
        self.fmu.exitInitializationMode()
        if self.fmi3:
            self.fmu.updateDiscreteStates()
        else:
            self.fmu.newDiscreteStates()
        self.fmu.enterContinuousTimeMode()

    def set_states(self, x: Sequence[float]) -> None:
        arr = (ctypes.c_double * len(x))(*x)
        self.fmu.setContinuousStates(arr, len(x))

    def set_point(self, x: Sequence[float], u: Sequence[float]) -> None:
        self.set_states(x)
        self.set(dict(zip(self.inputs, u)))

    def state_derivatives(self) -> np.ndarray:
        n = len(self.states)
        arr = (ctypes.c_double * n)()
        if self.fmi3:
            self.fmu.getContinuousStateDerivatives(arr, n)
        else:
            self.fmu.getDerivatives(arr, n)
        return np.array(arr[:], dtype=float)

    def event_indicators(self) -> np.ndarray:
        n = self.md.numberOfEventIndicators
        arr = (ctypes.c_double * n)()
        self.fmu.getEventIndicators(arr, n)
        return np.array(arr[:], dtype=float)

    def directional(self, unknowns: Sequence[str], knowns: Sequence[str],
                    seed: Sequence[float]) -> np.ndarray:
        return np.array(self.fmu.getDirectionalDerivative(
            [self.vr[n] for n in unknowns], [self.vr[n] for n in knowns], list(seed)), dtype=float)

    def jacobians(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """A, B, C, D column by column from directional derivatives."""
        unknowns = self.derivatives + self.outputs
        cols = []
        for known in self.states + self.inputs:
            cols.append(self.directional(unknowns, [known], [1.0]))
        J = np.column_stack(cols)
        nx, nu = len(self.states), len(self.inputs)
        return J[:nx, :nx], J[:nx, nx:nx + nu], J[nx:, :nx], J[nx:, nx:nx + nu]

    def close(self) -> None:
        if getattr(self.fmu, "component", None):
            self.fmu.freeInstance()
        else:
            self.fmu.freeLibrary()


@pytest.fixture(scope="module")
def unzipped(bundled_fmus: dict[str, Path],
             tmp_path_factory: pytest.TempPathFactory) -> dict[str, str]:
    """Name -> folder of each bundled FMU, extracted once per module."""
    root = tmp_path_factory.mktemp("unzipped")
    return {name: fmpy.extract(str(path), unzipdir=str(root / name))
            for name, path in bundled_fmus.items()}


@pytest.fixture
def driver(bundled_fmus: dict[str, Path],
           unzipped: dict[str, str]) -> Iterator[Callable[..., Driver]]:
    """Factory ``make(name, **kwargs) -> Driver``; every instance made is freed afterwards."""
    made: list[Driver] = []

    def make(name: str, **kwargs: Any) -> Driver:
        d = Driver(bundled_fmus[name], unzipped[name], **kwargs)
        made.append(d)
        return d

    yield make
    for d in made:
        d.close()


def assert_rel_close(got: np.ndarray, want: np.ndarray, rtol: float, what: str) -> None:
    """Every entry within ``rtol`` relative to the wanted value (exact where it is zero)."""
    got, want = np.asarray(got, float), np.asarray(want, float)
    scale = np.maximum(np.abs(want), np.finfo(float).tiny)
    err = np.abs(got - want) / scale
    assert np.all(err <= rtol), f"{what}: max relative error {err.max():.3e} > {rtol:g}\n{got}\n{want}"
