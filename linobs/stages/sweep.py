"""The ``sweep`` stage: trim and linearize the model at every point of the study's grid.

Points are visited in the grid's continuation order (neighbor after
neighbor, fixed-parameter groups contiguous) and cut into chunks; within a
chunk each trim is warm-started from the previous solved point.  Every point
gets one stored result: ``ok`` (trim result + local linear model),
``not_converged`` (the trim's residual and iterations), ``failed`` (the FMU's
error status or non-finite value, with its log) or ``crashed`` (set by the
executor when the point kills its worker process).
"""

from __future__ import annotations

import math
import time
from typing import TYPE_CHECKING, Any

from linobs.errors import EvaluationError, LinobsError
from linobs.linear.linearize import linearize
from linobs.operating.continuation import Continuation
from linobs.operating.trim import find_operating_point
from linobs.operating.trim_spec import TrimSpec
from linobs.run.types import Chunk, FMURef, ItemResult, WorkerContext, WorkItem

if TYPE_CHECKING:  # pragma: no cover
    from linobs.study import Study

STAGE = "sweep"


def default_chunk_size(points: int, workers: int) -> int:
    """Chunks small enough for load balance and for losing little when killed,
    large enough that per-chunk overhead and cold starts stay small.

    About eight chunks per worker, between 4 and 64 points each (common practice
    for task farms: a handful of tasks per worker balances load).
    """
    return max(4, min(64, math.ceil(points / (8 * max(1, workers)))))


def stage_settings(study: "Study") -> dict[str, Any]:
    """What every chunk of the sweep shares (JSON-compatible)."""
    cfg = study.config
    return {
        "fmu": {"sha256": study.fmu_sha256, "path": str(study.fmu_path)},
        "parameters": dict(study.parameters),
        "trim": cfg.trim.model_dump(mode="json"),
        "method": cfg.linearize.method,
        "allow_outside_bounds": cfg.linearize.allow_outside_bounds,
    }


def build_chunks(study: "Study", *, workers: int, chunk_size: int | None = None,
                 done: set[int] | None = None) -> tuple[list[Chunk], int]:
    """The sweep's chunks (only the items not yet done) and the total point count.

    Chunk composition is a function of the grid and the chunk size only, so a
    resumed run recomputes exactly the chunks an uninterrupted run would have.
    """
    grid = study.grid
    slow = list(study.slow_axes)
    order = grid.continuation_order(slow)
    size = chunk_size or study.config.run.chunk_size or default_chunk_size(len(order), workers)
    settings = stage_settings(study)
    done = done or set()
    chunks = []
    for k, ids in enumerate(grid.chunks(order, size, slow)):
        todo = [i for i in ids if i not in done]
        if not todo:
            continue
        suffix = "" if len(todo) == len(ids) else "r"  # a chunk split by a crash, resumed
        items = tuple(WorkItem(int(i), {"values": study.point_values(int(i))}) for i in todo)
        chunks.append(Chunk(f"{STAGE}-{k:06d}{suffix}", items, settings))
    return chunks, len(order)


def sweep_chunk(context: WorkerContext, chunk: Chunk) -> list[ItemResult]:
    """Task run in a worker: trim + linearize each point of the chunk in order."""
    s = chunk.settings
    fmu = FMURef(**s["fmu"])
    model = context.model(fmu)
    start = context.start_parameters(fmu)  # results must not depend on earlier chunks
    spec = TrimSpec.model_validate(s["trim"])
    method = s["method"]
    results: list[ItemResult] = []
    path = Continuation()  # warm starts along the chunk (used when spec.continuation is on)
    for item in chunk.items:
        t0 = time.perf_counter()
        e0 = model.evaluations + model.directional_evaluations
        fixed = {**start, **s["parameters"], **item.payload["values"]}
        model.clear_log()  # an error quotes only what this point made the FMU log
        status, data, message = "ok", {}, ""
        try:
            tr = find_operating_point(model, fixed, spec, method=method, continuation=path)
            data["trim"] = tr.model_dump(mode="json")
            if tr.converged:
                lm = linearize(model, tr.point(), method=method, allow_outside_bounds=True)
                data["linear"] = lm.model_dump(mode="json")
            else:
                status, message = "not_converged", tr.message
        except EvaluationError as exc:
            status, message = "failed", str(exc)
            data["log"] = list(exc.log)
        except LinobsError as exc:  # e.g. a value the FMU refuses at this point
            status, message = "failed", str(exc)
        results.append(ItemResult(
            item_id=item.item_id, status=status, data=data, message=message,
            evaluations=model.evaluations + model.directional_evaluations - e0,
            seconds=time.perf_counter() - t0))
    return results
