"""Running a study: the stages in order, on an executor, into a durable run store.

``run_study`` is the Python face of ``linobs run``: it loads the study, opens
(or resumes) the run store in RUN_DIR, runs each stage up to ``until`` on the
chosen executor, and writes ``RUN_DIR/summary.json``.  A resumed run computes
only what is missing and ends with the same results as an uninterrupted one.
"""

from __future__ import annotations

import os
import time
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

from pydantic import AliasChoices, BaseModel, Field

import linobs
from linobs.atomic import atomic_write_json
from linobs.errors import UsageError
from linobs.run.executor import make_executor
from linobs.run.store import RunStore
from linobs.run.types import STATUSES, Chunk, FMURef, Progress, ProgressCallback, Task
from linobs.stages import sweep
from linobs.study import Study, load_study, study_hash

STAGES: tuple[str, ...] = ("sweep", "observability", "design", "validate", "export")
"""Stages in order (``design``, ``validate`` and ``export`` need an ``[estimator]`` table)."""

CAUTION = ("linobs results are engineering aids: verify them in simulation, hardware-in-the-loop "
           "and test, by qualified engineers, under the applicable functional-safety standards, "
           "local codes and licensed practice.")

StageCallback = Callable[[str, int, int], None]


class StageSummary(BaseModel):
    """Counts of one stage (or sub-stage)."""

    points: int
    ok: int = 0
    failed: int = 0
    crashed: int = 0
    not_converged: int = 0
    evaluations: int = 0
    seconds: float = Field(0.0, description="wall time spent in this stage, over all invocations")
    computed_now: int = Field(0, description="points computed by this invocation (the rest resumed)")
    counts: dict[str, Any] = Field(default_factory=dict, description="stage-specific counts")


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
    observable: int | None = None
    weak: int | None = None
    unobservable_detectable: int | None = None
    unobservable: int | None = None
    boundary_points: int | None = None
    empirical_checked: int | None = None
    empirical_disagreements: int | None = None
    regions: list[str] | None = Field(None, description="where observability is lost or weak")
    export_usable: int | None = Field(None, description="nodes exported as usable")
    export_refused: str | None = Field(None, description="why no table was written (designed "
                                                         "nodes failed validation)")
    export_failed: int | None = Field(None, description="designed nodes that failed validation "
                                                        "(exported only with allow_failed)")
    design_ok: int | None = None
    design_refused: int | None = None
    continuity_flags: int | None = None
    validation_worst_decay_reserve: float | None = Field(
        None, validation_alias=AliasChoices("validation_worst_decay_reserve",
                                            "validation_worst_margin"),
        description="smallest frozen-point decay reserve: how much faster than required the "
                    "error decays (< 0: a failure); read also as validation_worst_margin")
    validation_frozen_passed: int | None = None
    validation_frozen_failed: int | None = None
    validation_rms: dict[str, float | None] | None = Field(
        None, description="RMS estimation error per state of the schedule on the nonlinear plant")
    fixed_gain_rms: dict[str, float | None] | None = Field(
        None, description="the same for the fixed-gain estimator designed at the envelope's center")
    comparison: list[str] | None = None
    notes: list[str] = Field(default_factory=list)
    files: dict[str, str] = Field(default_factory=dict, description="files written, by role")
    caution: str = CAUTION


def _identity(study: Study) -> dict[str, str]:
    return {"study_hash": study_hash(study), "fmu_sha256": study.fmu_sha256,
            "study": study.config.model_dump_json(), "linobs_version": linobs.__version__}


def run_study(study: Study | str | os.PathLike[str], out: str | os.PathLike[str], *,
              workers: int | None = None, dask: str | None = None, dask_local: int | None = None,
              resume: bool = False, until: str | None = None,
              progress: ProgressCallback | None = None,
              on_stage: StageCallback | None = None, figures: bool = True,
              allow_failed: bool | None = None) -> RunSummary:
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
    figures
        Draw the figures (PNG and SVG) into ``RUN_DIR/figures``.
    allow_failed
        Export tables although designed nodes failed validation (default: the
        study's ``[export] allow_failed``); the nodes are marked unusable.
    """
    if not isinstance(study, Study):
        study = load_study(Path(study))
    stages = _stages_until(until)
    run_dir = Path(out)
    run_dir.mkdir(parents=True, exist_ok=True)
    store = RunStore.open(run_dir, _identity(study), resume=resume)
    summaries: dict[str, StageSummary] = {}
    files: dict[str, str] = {}
    notes: list[str] = []
    export_refused: str | None = None
    if "design" in stages and study.config.estimator is None:
        if until in ("design", "validate", "export"):
            raise UsageError(f"--until {until} needs an [estimator] table in the study (see "
                             f"docs/study-file.md)")
        stages = tuple(s for s in stages if s not in ("design", "validate", "export"))
        notes.append("no [estimator] table: stopped after the observability map")
    try:
        with make_executor(workers=workers, dask=dask, dask_local=dask_local) as executor:
            runner = _Runner(study, store, executor, progress, on_stage)
            runner.figures = figures
            summaries["sweep"] = runner.sweep()
            if "observability" in stages:
                from linobs.stages.observability_run import run_observability

                summaries.update(run_observability(runner, run_dir, files))
            if "design" in stages:
                from linobs.stages.estimator_run import run_design_stage

                summaries["design"] = run_design_stage(runner, run_dir, files)
                des = summaries["design"].counts
                if des.get("design_ok", 0) == 0 and "validate" in stages:
                    stages = tuple(s for s in stages if s not in ("validate", "export"))
                    notes.append(f"no grid point has an estimator design (all "
                                 f"{des.get('design_refused', 0)} refused, reasons in "
                                 f"{files['refused']}): no schedule, validation skipped")
            if "validate" in stages:
                from linobs.stages.estimator_run import run_validate_stage

                summaries.update(run_validate_stage(runner, run_dir, files))
            if "export" in stages:
                from linobs.stages.export_run import run_export_stage

                from linobs.export.assemble import ExportRefused

                try:
                    summaries["export"] = run_export_stage(runner, run_dir, files,
                                                           allow_failed=allow_failed,
                                                           caution=CAUTION)
                except ExportRefused as exc:
                    export_refused = str(exc)
                    notes.append(f"export refused: {exc}")
            summary = _summary(study, summaries, executor, files)
            summary.notes = notes
            summary.export_refused = export_refused
    finally:
        store.close()
    summary.files["report"] = str(run_dir / "report.html")
    atomic_write_json(run_dir / "summary.json", summary.model_dump(mode="json", exclude_none=True))
    from linobs.report.html import write_report

    write_report(run_dir)
    return summary


def _stages_until(until: str | None) -> tuple[str, ...]:
    if until is None:
        return STAGES
    if until not in STAGES:
        raise UsageError(f"unknown stage {until!r}; stages in order: "
                         f"{', '.join(STAGES)}")
    return STAGES[: STAGES.index(until) + 1]


class _Runner:
    """Runs chunks of a stage on the executor into the store, with progress and resume."""

    def __init__(self, study: Study, store: RunStore, executor: Any,
                 progress: ProgressCallback | None, on_stage: StageCallback | None) -> None:
        self.study, self.store, self.executor = study, store, executor
        self.progress, self.on_stage = progress, on_stage
        self.fmu = FMURef(study.fmu_sha256, str(study.fmu_path))
        self.figures = True

    @property
    def workers(self) -> int:
        return int(getattr(self.executor, "workers", None) or os.cpu_count() or 1)

    def execute(self, stage: str, task: Task, chunks: Sequence[Chunk], total: int) -> StageSummary:
        """Run ``chunks`` (the missing part of a stage of ``total`` items) and summarize it."""
        store = self.store
        done = total - sum(len(c.items) for c in chunks)
        if self.on_stage is not None:
            self.on_stage(stage, total, done)
        state = Progress(total=total, done=done)
        for status, n in store.counts(stage).items():
            state.counts[status] = n
        t0 = time.perf_counter()
        computed = 0

        def on_chunk(chunk: Chunk, results: list[Any]) -> None:
            nonlocal computed
            store.write_chunk(stage, chunk.chunk_id, results)
            computed += len(results)
            state.done += len(results)
            for r in results:
                state.counts[r.status] = state.counts.get(r.status, 0) + 1
            state.seconds = time.perf_counter() - t0
            if self.progress is not None:
                self.progress(state)

        if chunks:
            self.executor.run(task, list(chunks), fmus=[self.fmu], on_chunk=on_chunk,
                              total=sum(len(c.items) for c in chunks))
        return self.finish(stage, total, time.perf_counter() - t0, computed)

    def finish(self, stage: str, total: int, elapsed: float, computed: int,
               counts: dict[str, Any] | None = None) -> StageSummary:
        previous = self.store.stage_info(stage) or {}
        status_counts = self.store.counts(stage)
        results = self.store.results(stage)
        summary = StageSummary(points=total, evaluations=sum(r.evaluations for r in results),
                               seconds=float(previous.get("seconds", 0.0)) + elapsed,
                               computed_now=computed, counts=counts or {},
                               **{s: status_counts.get(s, 0) for s in STATUSES})
        self.store.mark_stage_complete(stage, summary.model_dump(mode="json"))
        return summary

    def sweep(self) -> StageSummary:
        chunks, total = sweep.build_chunks(self.study, workers=self.workers,
                                           done=self.store.done_ids(sweep.STAGE))
        return self.execute(sweep.STAGE, sweep.sweep_chunk, chunks, total)


def _summary(study: Study, stages: dict[str, StageSummary], executor: Any,
             files: dict[str, str]) -> RunSummary:
    first = stages["sweep"]
    extra: dict[str, Any] = {}
    obs = stages.get("observability")
    if obs is not None:
        for key in ("observable", "weak", "unobservable_detectable", "unobservable"):
            extra[key] = obs.counts.get(key, 0)
        extra["boundary_points"] = stages["observability-boundary"].ok \
            if "observability-boundary" in stages else 0
        emp = stages.get("observability-empirical")
        extra["empirical_checked"] = emp.ok if emp else 0
        extra["empirical_disagreements"] = emp.counts.get("disagree", 0) if emp else 0
        extra["regions"] = _regions_text(files)
    des = stages.get("design")
    if des is not None:
        extra["design_ok"] = des.counts.get("design_ok", 0)
        extra["design_refused"] = des.counts.get("design_refused", 0)
        extra["continuity_flags"] = des.counts.get("continuity_flags", 0)
    frozen = stages.get("validate-frozen")
    if frozen is not None:
        extra["validation_frozen_passed"] = frozen.counts.get("passed", 0)
        extra["validation_frozen_failed"] = frozen.counts.get("failed", 0) + \
            frozen.counts.get("unusable", 0) + frozen.counts.get("errors", 0)
        extra["validation_worst_decay_reserve"] = frozen.counts.get("worst_decay_reserve")
    exp = stages.get("export")
    if exp is not None:
        extra["export_usable"] = exp.counts.get("exported_usable")
        extra["export_failed"] = exp.counts.get("exported_failed")
    plant = stages.get("validate-plant")
    if plant is not None:
        extra["validation_rms"] = plant.counts.get("rms")
        extra["fixed_gain_rms"] = plant.counts.get("fixed_rms")
        extra["comparison"] = plant.counts.get("comparison")
    return RunSummary(
        study=str(study.path), study_hash=study_hash(study), fmu=str(study.fmu_path),
        fmu_sha256=study.fmu_sha256, linobs_version=linobs.__version__,
        executor=type(executor).__name__, stages=stages, points=first.points, ok=first.ok,
        failed=first.failed, crashed=first.crashed, not_converged=first.not_converged,
        evaluations=sum(s.evaluations for s in stages.values()),
        seconds=sum(s.seconds for s in stages.values()), files=files, **extra)


def _regions_text(files: dict[str, str]) -> list[str]:
    path = files.get("regions_text")
    if not path or not Path(path).exists():
        return []
    return [line for line in Path(path).read_text().splitlines() if line.strip()]
