"""Running the observability stage inside ``run_study``: verdicts, boundaries, nonlinear check,
regions and figures, written into the run folder.

Files (all written atomically):

``RUN_DIR/observability/regions.json``, ``regions.txt``
    Where observability is lost or weak, in plain words.
``RUN_DIR/observability/boundary.json``
    The refined boundary points.
``RUN_DIR/figures/observability_margin.{png,svg}``, ``observability_verdicts.{png,svg}``
    The margin map over two axes (others fixed or worst case) with the boundary, and the
    verdict counts.
"""

from __future__ import annotations

import time
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from linobs.atomic import atomic_write_json, atomic_write_text
from linobs.observability.regions import PointVerdict, find_regions, point_verdict
from linobs.observability.report import VERDICTS, verdict_key
from linobs.stages import observability as obs

if TYPE_CHECKING:  # pragma: no cover
    from linobs.pipeline import StageSummary, _Runner


def run_observability(runner: "_Runner", run_dir: Path, files: dict[str, str]
                      ) -> dict[str, "StageSummary"]:
    """Run all parts of the stage; returns their summaries (keys: stage names)."""
    study, store = runner.study, runner.store
    out: dict[str, StageSummary] = {}

    # 1. verdicts at every swept point (in the coordinator: no FMU needed)
    t0 = time.perf_counter()
    total = len(store.results("sweep"))
    if runner.on_stage is not None:
        runner.on_stage(obs.STAGE, total, len(store.done_ids(obs.STAGE)))
    from threadpoolctl import threadpool_limits

    with threadpool_limits(1):  # thousands of tiny eigen/SVD problems: threads only cost
        computed = obs.analyze_stored(study, store, progress=_counter(runner, total))
    analyzed = store.results(obs.STAGE)
    counts = {verdict_key(v): 0 for v in VERDICTS}
    for r in analyzed:
        if r.status == "ok":
            counts[verdict_key(r.data["verdict"])] += 1
    out[obs.STAGE] = runner.finish(obs.STAGE, total, time.perf_counter() - t0, computed, counts)

    # 2. boundary refinement (FMU: on the executor)
    chunks, edges = obs.boundary_chunks(study, store, workers=runner.workers)
    out[obs.BOUNDARY] = runner.execute(obs.BOUNDARY, obs.refine_chunk, chunks, edges)
    boundary = [r.data for r in store.results(obs.BOUNDARY) if r.status == "ok"]

    # 3. nonlinear check with the empirical Gramian (FMU: on the executor)
    chunks, chosen = obs.empirical_chunks(study, store, workers=runner.workers)
    summary = runner.execute(obs.EMPIRICAL, obs.empirical_chunk, chunks, chosen)
    disagree = sum(1 for r in store.results(obs.EMPIRICAL)
                   if r.status == "ok" and not r.data["agreement"]["agree"])
    summary.counts["disagree"] = disagree
    out[obs.EMPIRICAL] = summary

    # 4. regions in plain words, 5. figures
    _write_regions(runner, run_dir, analyzed, boundary, files)
    if runner.figures:
        _write_figures(runner, run_dir, analyzed, boundary, counts, files)
    return out


def _counter(runner: "_Runner", total: int):  # type: ignore[no-untyped-def]
    from linobs.run.types import Progress

    t0 = time.perf_counter()

    def report(done: int, pending: int) -> None:
        if runner.progress is not None:  # ``pending`` of ``total`` were left to analyze
            state = Progress(total=total, done=total - pending + done)
            state.counts["ok"] = state.done
            state.seconds = time.perf_counter() - t0
            runner.progress(state)
    return report


def _verdicts(analyzed: list[Any]) -> dict[int, PointVerdict]:
    return {r.item_id: point_verdict(r.data["report"]) for r in analyzed if r.status == "ok"}


def _write_regions(runner: "_Runner", run_dir: Path, analyzed: list[Any], boundary: list[Any],
                   files: dict[str, str]) -> None:
    study = runner.study
    cat = study.catalogue
    labels = {v.name: v.description for v in cat.states if v.description}
    units = {n: cat.get(n).unit or "" for n in study.grid.names}
    regions = find_regions(study.grid, _verdicts(analyzed), boundary, labels=labels, units=units)
    folder = run_dir / "observability"
    lines = [r.text for r in regions] or ["the measured outputs determine the state at every "
                                          "analyzed point (no weak or unobservable region)"]
    atomic_write_json(folder / "regions.json", [r.model_dump(mode="json") for r in regions])
    atomic_write_text(folder / "regions.txt", "\n".join(lines) + "\n")
    atomic_write_json(folder / "boundary.json", boundary)
    files["regions"] = str(folder / "regions.json")
    files["regions_text"] = str(folder / "regions.txt")
    files["boundary"] = str(folder / "boundary.json")


def _write_figures(runner: "_Runner", run_dir: Path, analyzed: list[Any], boundary: list[Any],
                   counts: dict[str, int], files: dict[str, str]) -> None:
    from linobs.report.figures import margin_map, verdict_counts

    study = runner.study
    settings = obs.settings_of(study)
    grid = study.grid
    figures = run_dir / "figures"
    by_id = {r.item_id: r for r in analyzed}
    margins = np.array([by_id[i].data["margin"] if i in by_id and by_id[i].status == "ok"
                        else np.nan for i in range(len(grid))])
    verdicts = [by_id[i].data["verdict"] if i in by_id and by_id[i].status == "ok"
                else (by_id[i].status if i in by_id else "missing") for i in range(len(grid))]
    if len(grid.names) >= 2:
        axes = tuple(settings.map_axes or grid.names[:2])
        units = {n: study.catalogue.get(n).unit or "" for n in grid.names}
        paths = margin_map(grid.points, grid.names, margins, verdicts, axes=axes,  # type: ignore[arg-type]
                           fixed=settings.map_fixed, boundary=[b["point"] for b in boundary],
                           weak_threshold=settings.weak_threshold,
                           out_stem=figures / "observability_margin",
                           title=f"{study.name}: distance to unobservability",
                           units=units)
        files["margin_map"] = str(paths[0])
    extra = {k: v for k, v in runner.store.counts("sweep").items() if k != "ok" and v}
    paths = verdict_counts({**counts, **extra}, out_stem=figures / "observability_verdicts",
                           title=f"{study.name}: verdicts")
    files["verdict_counts"] = str(paths[0])
