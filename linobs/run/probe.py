"""A built-in task: evaluate the FMU at each point (for tests and benchmarks).

Payload of each item::

    {"x": [...], "u": [...], "parameters": {...}, "repeat": k}

``x`` and ``u`` default to the model's start values, ``parameters`` to none
(the instance's start values are restored for every name not given, so an
item never sees what an earlier item set), ``repeat`` to 1: the point is
evaluated ``k`` times (work resembling a trim and linearization, for
benchmarking).  ``chunk.settings["fmu"]`` is ``{"sha256": ..., "path": ...}``;
``chunk.settings`` may also hold ``parameters`` and ``repeat`` defaults.

Result data: ``{"dx": [...], "y": [...]}``.  An
:class:`~linobs.errors.EvaluationError` gives status ``failed`` with the
error message (which quotes the FMU's log) and ``{"fmu_log": [...]}``.
"""

from __future__ import annotations

import time
from typing import Any

import numpy as np

from linobs.errors import EvaluationError, UsageError
from linobs.run.types import Chunk, FMURef, ItemResult, WorkerContext

__all__ = ["evaluate_chunk", "probe_settings"]


def probe_settings(fmu: FMURef, **defaults: Any) -> dict[str, Any]:
    """``Chunk.settings`` for :func:`evaluate_chunk` (``parameters``, ``repeat`` optional)."""
    return {"fmu": {"sha256": fmu.sha256, "path": fmu.path}, **defaults}


def _vector(payload: dict[str, Any], key: str, default: np.ndarray, names: list[str]) -> np.ndarray:
    value = np.asarray(payload.get(key, default), dtype=float).reshape(-1)
    if value.shape != default.shape:
        raise UsageError(f"payload {key!r} has {value.size} values; the model has "
                         f"{default.size} ({', '.join(names)})")
    return value


def evaluate_chunk(context: WorkerContext, chunk: Chunk) -> list[ItemResult]:
    """Evaluate ``(dx, y)`` at every item's point; see the module docstring."""
    fmu = FMURef(**chunk.settings["fmu"])
    model = context.model(fmu)
    start = context.start_parameters(fmu)
    shared = chunk.settings.get("parameters", {})
    results: list[ItemResult] = []
    for item in chunk.items:
        payload = item.payload
        t0 = time.perf_counter()
        n0 = model.evaluations
        model.clear_log()  # report only what this item made the FMU log
        try:
            model.set_parameters({**start, **shared, **payload.get("parameters", {})})
            x = _vector(payload, "x", model.x_start, model.state_names)
            u = _vector(payload, "u", model.u_start, model.input_names)
            repeat = int(payload.get("repeat", chunk.settings.get("repeat", 1)))
            for _ in range(max(1, repeat)):
                dx, y = model.evaluate(x, u)
        except EvaluationError as exc:
            results.append(ItemResult(item.item_id, "failed", {"fmu_log": list(exc.log)},
                                      message=str(exc), evaluations=model.evaluations - n0,
                                      seconds=time.perf_counter() - t0))
            continue
        results.append(ItemResult(item.item_id, "ok", {"dx": dx.tolist(), "y": y.tolist()},
                                  evaluations=model.evaluations - n0,
                                  seconds=time.perf_counter() - t0))
    return results
