"""Running a study: the stages in order, on an executor, into a durable run store.

``run_study`` is the Python face of ``linobs run``: it loads the study, opens
(or resumes) the run store in RUN_DIR, runs each stage up to ``until`` on the
chosen executor, and writes ``RUN_DIR/summary.json``.  A resumed run computes
only what is missing and ends with the same results as an uninterrupted one.
"""

from __future__ import annotations

import os
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

from pydantic import BaseModel, Field

import linobs
from linobs.atomic import atomic_write_json
from linobs.errors import UsageError
from linobs.run.executor import make_executor
from linobs.run.store import RunStore
from linobs.run.types import STATUSES, FMURef, Progress, ProgressCallback
from linobs.stages import sweep
from linobs.study import Study, load_study, study_hash

STAGES: tuple[str, ...] = ("sweep",)
"""Stages in order; later issues add observability, design, validate and export."""

CAUTION = ("linobs results are engineering aids: verify them in simulation, hardware-in-the-loop "
           "and test, by qualified engineers, under the applicable functional-safety standards, "
           "local codes and licensed practice.")


class StageSummary(BaseModel):
    """Counts of one stage."""

    points: int
    ok: int = 0
    failed: int = 0
    crashed: int = 0
    not_converged: int = 0
    evaluations: int = 0
    seconds: float = Field(0.0, description="wall time spent in this stage, over all invocations")
    computed_now: int = Field(0, description="points computed by this invocation (the rest resumed)")


class RunSummary(BaseModel):
    """``RUN_DIR/summary.json``."""

    study: str
    study_hash: str
    fmu: str
    fmu_sha256: str
    linobs_version: str
    executor: str
    stages: dict[str, StageSummary]
    points: int
    ok: int
    failed: int
    crashed: int
    not_converged: int
    evaluations: int
    seconds: float
    caution: str = CAUTION


def _identity(study: Study) -> dict[str, str]:
    return {"study_hash": study_hash(study), "fmu_sha256": study.fmu_sha256,
            "study": study.config.model_dump_json(), "linobs_version": linobs.__version__}


def run_study(study: Study | str | os.PathLike[str], out: str | os.PathLike[str], *,
              workers: int | None = None, dask: str | None = None, dask_local: int | None = None,
              resume: bool = False, until: str | None = None,
              progress: ProgressCallback | None = None,
              on_stage: Callable[[str, int, int], None] | None = None) -> RunSummary:
    """Run the study's stages into ``out`` and return the summary.

    Parameters
    ----------
    study
        A loaded :class:`~linobs.study.Study` or the path of a study file.
    out
        The run folder (created when missing).
    workers
        Local process-pool size (default: one per core).
    dask, dask_local
        Address of a Dask scheduler, or the number of workers of a local Dask
        cluster to start (for testing); the same chunks go there instead.
    resume
        Continue the run already in ``out`` (only missing points are computed).
    until
        Last stage to run (default: all available).
    progress
        Called after every finished chunk with a :class:`~linobs.run.types.Progress`.
    on_stage
        Called as ``on_stage(stage, total_points, already_done)`` when a stage starts.
    """
    if not isinstance(study, Study):
        study = load_study(Path(study))
    stages = _stages_until(until)
    run_dir = Path(out)
    run_dir.mkdir(parents=True, exist_ok=True)
    store = RunStore.open(run_dir, _identity(study), resume=resume)
    try:
        with make_executor(workers=workers, dask=dask, dask_local=dask_local) as executor:
            summaries = {}
            for stage in stages:
                summaries[stage] = _run_sweep(study, store, executor, progress, on_stage)
            summary = _summary(study, store, summaries, executor)
    finally:
        store.close()
    atomic_write_json(run_dir / "summary.json", summary.model_dump(mode="json"))
    return summary


def _stages_until(until: str | None) -> tuple[str, ...]:
    if until is None:
        return STAGES
    later = ("observability", "design", "validate", "export")
    if until in later:
        raise UsageError(f"stage {until!r} is not available in this version; available: "
                         f"{', '.join(STAGES)}")
    if until not in STAGES:
        raise UsageError(f"unknown stage {until!r}; stages in order: {', '.join(STAGES + later)}")
    return STAGES[: STAGES.index(until) + 1]


def _workers_of(executor: Any) -> int:
    return int(getattr(executor, "workers", None) or os.cpu_count() or 1)


def _run_sweep(study: Study, store: RunStore, executor: Any, progress: ProgressCallback | None,
               on_stage: Callable[[str, int, int], None] | None) -> StageSummary:
    stage = sweep.STAGE
    done = store.done_ids(stage)
    chunks, total = sweep.build_chunks(study, workers=_workers_of(executor), done=done)
    if on_stage is not None:
        on_stage(stage, total, len(done))
    state = Progress(total=total, done=len(done))
    for status, n in store.counts(stage).items():
        state.counts[status] = n
    t0 = time.perf_counter()
    computed = 0

    def on_chunk(chunk: Any, results: list[Any]) -> None:
        nonlocal computed
        store.write_chunk(stage, chunk.chunk_id, results)
        computed += len(results)
        state.done += len(results)
        for r in results:
            state.counts[r.status] = state.counts.get(r.status, 0) + 1
        state.seconds = time.perf_counter() - t0
        if progress is not None:
            progress(state)

    if chunks:
        executor.run(sweep.sweep_chunk, chunks, fmus=[FMURef(study.fmu_sha256, str(study.fmu_path))],
                     on_chunk=on_chunk, progress=None, total=sum(len(c.items) for c in chunks))
    elapsed = time.perf_counter() - t0
    previous = store.stage_info(stage) or {}
    seconds = float(previous.get("seconds", 0.0)) + elapsed
    counts = store.counts(stage)
    results = store.results(stage)
    summary = StageSummary(points=total, evaluations=sum(r.evaluations for r in results),
                           seconds=seconds, computed_now=computed,
                           **{s: counts.get(s, 0) for s in STATUSES})
    store.mark_stage_complete(stage, summary.model_dump(mode="json"))
    return summary


def _summary(study: Study, store: RunStore, stages: dict[str, StageSummary], executor: Any
             ) -> RunSummary:
    first = stages[STAGES[0]]
    return RunSummary(
        study=str(study.path), study_hash=study_hash(study), fmu=str(study.fmu_path),
        fmu_sha256=study.fmu_sha256, linobs_version=linobs.__version__,
        executor=type(executor).__name__, stages=stages, points=first.points, ok=first.ok,
        failed=first.failed, crashed=first.crashed, not_converged=first.not_converged,
        evaluations=sum(s.evaluations for s in stages.values()),
        seconds=sum(s.seconds for s in stages.values()))
