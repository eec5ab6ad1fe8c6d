"""Running the ``design`` and ``validate`` stages inside ``run_study`` and writing their files.

Files (all written atomically):

``RUN_DIR/design/schedule.json``
    The gain schedule (:class:`~linobs.estimator.schedule.ScheduleData`).
``RUN_DIR/design/continuity.json``
    Neighboring nodes whose gains jump.
``RUN_DIR/design/refused.json``
    The grid points without a design, each with its reason (and the modes no
    gain can move); when every point is refused there is no schedule and the
    validation is skipped.
``RUN_DIR/validation/frozen.json``, ``nonlinear.json``
    The frozen-point report; the nonlinear reports of the schedule and of the
    fixed-gain estimator and their comparison.
``RUN_DIR/figures/validation_*.{png,svg}``
    True vs estimated states, estimation errors, the map of the frozen-point decay reserve
    (``validation_decay_reserve``; runs made before the rename have ``validation_margin``).
"""

from __future__ import annotations

import time
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from linobs.atomic import atomic_write_json, atomic_write_text
from linobs.errors import LinobsError, UsageError
from linobs.stages import design, validate

if TYPE_CHECKING:  # pragma: no cover
    from linobs.estimator.schedule import GainSchedule
    from linobs.pipeline import StageSummary, _Runner


def run_design_stage(runner: "_Runner", run_dir: Path, files: dict[str, str]) -> "StageSummary":
    study, store = runner.study, runner.store
    t0 = time.perf_counter()
    total = len(study.grid)
    if runner.on_stage is not None:
        runner.on_stage(design.STAGE, total, len(store.done_ids(design.STAGE)))
    computed, ok, refused = design.run_design(study, store)
    folder = run_dir / "design"
    nodes = design.stored_nodes(store)
    refusals = [{"index": i, "point": study.point_values(i), "message": node.message,
                 "unmovable_modes": node.unmovable_modes}
                for i, node in sorted(nodes.items()) if node.status == "refused"]
    atomic_write_json(folder / "refused.json", refusals)
    files["refused"] = str(folder / "refused.json")
    if ok == 0:
        return runner.finish(design.STAGE, total, time.perf_counter() - t0, computed,
                             {"design_ok": 0, "design_refused": refused, "continuity_flags": 0})
    schedule = design.build_schedule(study, store, nodes)
    atomic_write_text(folder / "schedule.json", schedule.data.model_dump_json(indent=1))
    files["schedule"] = str(folder / "schedule.json")
    from linobs.estimator.continuity import gain_jumps

    verdicts = {r.item_id: r.data["verdict"] for r in store.results("observability")
                if r.status == "ok"}
    est = study.config.estimator
    assert est is not None
    jumps = gain_jumps(schedule, est.continuity_threshold, verdicts=verdicts)
    atomic_write_json(folder / "continuity.json", [j.model_dump(mode="json") for j in jumps])
    files["continuity"] = str(folder / "continuity.json")
    return runner.finish(design.STAGE, total, time.perf_counter() - t0, computed,
                         {"design_ok": ok, "design_refused": refused,
                          "continuity_flags": len(jumps)})


def start_node(study: Any, store: Any) -> int:
    """The scenario's starting grid node: state axes at their largest value (a charged cell,
    a full tank), input axes at the value nearest zero (at rest), parameters at their first."""
    grid = study.grid
    target = []
    for name in grid.names:
        lo, hi = grid.bounds()[name]
        role = study.catalogue.get(name).role
        target.append(hi if role == "state" else min(max(0.0, lo), hi) if role == "input" else lo)
    ok = sorted(r.item_id for r in store.results("sweep") if r.status == "ok")
    if not ok:
        raise UsageError("no grid point was trimmed: the validation has no starting point")
    span = np.ptp(grid.points, axis=0)
    span[span == 0] = 1.0
    d = np.sum(((grid.points[ok] - np.array(target)) / span) ** 2, axis=1)
    return ok[int(np.argmin(d))]


def run_validate_stage(runner: "_Runner", run_dir: Path, files: dict[str, str]
                       ) -> dict[str, "StageSummary"]:
    from linobs.estimator.frozen import frozen_point_check, frozen_points
    from linobs.linear.linear_model import LinearModel

    study, store = runner.study, runner.store
    schedule = design.build_schedule(study, store)
    vs = study.config.validation
    out: dict[str, StageSummary] = {}

    # 1. frozen points: trim + linearize on the executor, the check in the coordinator
    t0 = time.perf_counter()
    points = frozen_points(study.grid, vs)
    chunks = validate.frozen_chunks(study, store, points, workers=runner.workers)
    runner.execute(validate.FROZEN, validate.relinearize_chunk, chunks, len(points))
    stored = {r.item_id: r for r in store.results(validate.FROZEN)}
    index = {tuple(p[n] for n in study.grid.names): k for k, p in enumerate(points)}

    def local_model(values: dict[str, float]) -> LinearModel:
        r = stored[index[tuple(values[n] for n in study.grid.names)]]
        if r.status != "ok":
            raise LinobsError(r.message or f"no local model ({r.status})")
        return LinearModel.model_validate(r.data["linear"])

    frozen = frozen_point_check(schedule, points, local_model, vs)
    folder = run_dir / "validation"
    atomic_write_text(folder / "frozen.json", frozen.model_dump_json(indent=1))
    files["frozen"] = str(folder / "frozen.json")
    summary = runner.finish(validate.FROZEN, len(points), time.perf_counter() - t0, 0,
                            {"passed": frozen.passed, "failed": frozen.failed,
                             "unusable": frozen.unusable, "errors": frozen.errors,
                             "worst_decay_reserve": frozen.worst_decay_reserve})
    out[validate.FROZEN] = summary

    # 2. the nonlinear plant along the scenario
    out[validate.PLANT] = _nonlinear(runner, schedule, run_dir, files)
    if runner.figures:
        _figures(runner, run_dir, files, frozen)
    return out


def _scenario_payload(runner: "_Runner", schedule: "GainSchedule") -> dict[str, Any]:
    from linobs.estimator.scenario import generate_scenario

    study, store = runner.study, runner.store
    est, vs = study.config.estimator, study.config.validation
    assert est is not None
    node = start_node(study, store)
    trim = next(r for r in store.results("sweep") if r.item_id == node).data["trim"]
    start_states = {**trim["states"], **vs.initial_state}
    start_inputs = dict(trim["inputs"])
    if vs.scenario:
        segments = [g.model_dump(mode="json") for g in vs.scenario]
    else:
        generated = generate_scenario(schedule.data, sample_time=est.sample_time,
                                      start_inputs=start_inputs, start_states=start_states)
        segments = [g.model_dump(mode="json") for g in generated.segments]
    parameters = {**trim["parameters"], **study.parameters}
    return {"segments": segments, "inputs": list(study.catalogue.names("inputs")),
            "start_inputs": start_inputs, "initial_state": start_states,
            "parameters": parameters, "sample_time": est.sample_time,
            "outputs": list(schedule.outputs), "states": list(schedule.states)}


def _nonlinear(runner: "_Runner", schedule: "GainSchedule", run_dir: Path,
               files: dict[str, str]) -> "StageSummary":
    from linobs.estimator.nonlinear import (assess_run, compare, fixed_gain_schedule,
                                            initial_estimate, run_estimator)

    study, store = runner.study, runner.store
    est, vs = study.config.estimator, study.config.validation
    assert est is not None
    t0 = time.perf_counter()
    chunks = [] if store.done_ids(validate.PLANT) else [
        validate.plant_chunk_for(study, _scenario_payload(runner, schedule))]
    runner.execute(validate.PLANT, validate.plant_chunk, chunks, 1)
    result = store.results(validate.PLANT)[0]
    counts: dict[str, Any] = {}
    if result.status != "ok":
        atomic_write_json(run_dir / "validation" / "nonlinear.json",
                          {"error": result.message})
        return runner.finish(validate.PLANT, 1, time.perf_counter() - t0, len(chunks), counts)
    plant = validate.plant_run_from(result.data["plant"])
    params = dict(plant.parameters)
    x_start = initial_estimate(schedule, plant, vs)
    runs = [run_estimator(schedule, plant, initial_estimate=x_start,
                          noise_std=est.measurement_noise, seed=vs.seed, parameters=params,
                          label="schedule")]
    reports = {"schedule": assess_run(runs[0], vs)}
    comparison = None
    if vs.fixed_gain:
        fixed = fixed_gain_schedule(schedule)
        runs.append(run_estimator(fixed, plant, initial_estimate=x_start,
                                  noise_std=est.measurement_noise, seed=vs.seed,
                                  parameters=params, label="fixed gain (envelope center)"))
        reports["fixed_gain"] = assess_run(runs[1], vs)
        comparison = compare(reports["schedule"], reports["fixed_gain"])
    payload = {k: r.model_dump(mode="json") for k, r in reports.items()}
    if comparison is not None:
        payload["comparison"] = comparison.model_dump(mode="json")
    atomic_write_json(run_dir / "validation" / "nonlinear.json", payload)
    files["nonlinear"] = str(run_dir / "validation" / "nonlinear.json")
    runner.nonlinear_runs = runs  # type: ignore[attr-defined]  # for the figures
    counts["rms"] = {s: v.rms for s, v in reports["schedule"].per_state.items()}
    if "fixed_gain" in reports:
        counts["fixed_rms"] = {s: v.rms for s, v in reports["fixed_gain"].per_state.items()}
    if comparison is not None:
        counts["comparison"] = comparison.summary
    return runner.finish(validate.PLANT, 1, time.perf_counter() - t0, len(chunks), counts)


def _figures(runner: "_Runner", run_dir: Path, files: dict[str, str], frozen: Any) -> None:
    from linobs.report.estimator_figures import (estimation_errors, frozen_decay_reserve_map,
                                                 state_estimates)

    study = runner.study
    figures = run_dir / "figures"
    units = {v.name: v.unit or "" for v in study.catalogue.states}
    runs = getattr(runner, "nonlinear_runs", None)
    if runs:
        files["state_estimates"] = str(state_estimates(
            runs, out_stem=figures / "validation_states", title=f"{study.name}: true vs estimated",
            units=units)[0])
        files["estimation_errors"] = str(estimation_errors(
            runs, out_stem=figures / "validation_errors", title=f"{study.name}: estimation error",
            units=units)[0])
    usable = [p for p in frozen.points if p.decay_reserve is not None]
    if usable and len(study.grid.names) >= 1:
        names = list(study.grid.names)
        pts = np.array([[p.values[n] for n in names] for p in usable])
        files["decay_reserve_map"] = str(frozen_decay_reserve_map(
            pts, names, np.array([p.decay_reserve for p in usable]), [p.passed for p in usable],
            out_stem=figures / "validation_decay_reserve",
            title=f"{study.name}: frozen-point decay reserve",
            reserve_label=("decay reserve [1/s] (decay rate − target)"
                           if frozen.domain == "continuous"
                           else "decay reserve (target − spectral radius)"),
            units={n: study.catalogue.get(n).unit or "" for n in names})[0])
