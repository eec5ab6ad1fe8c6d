"""The ``validate`` stage: the schedule between the nodes and on the nonlinear plant.

1. **Frozen-point check.** At every cell center and at random interior points
   (seeded) the FMU is trimmed and linearized again — on the executor, with
   crash isolation — and the schedule's interpolated gain is applied to that
   true local model; the error dynamics must decay at the required rate.
2. **Nonlinear check.** The plant FMU is simulated with fmpy along the
   scenario (on the executor); the scheduled estimator, and the single
   fixed-gain estimator designed at the envelope's center, run offline on the
   noisy samples from a wrong initial estimate.
"""

from __future__ import annotations

import time
from typing import TYPE_CHECKING, Any

import numpy as np

from linobs.errors import EvaluationError, LinobsError
from linobs.linear.linearize import linearize
from linobs.operating.continuation import Continuation
from linobs.operating.trim import find_operating_point
from linobs.operating.trim_spec import TrimSpec
from linobs.run.types import Chunk, FMURef, ItemResult, WorkerContext, WorkItem

if TYPE_CHECKING:  # pragma: no cover
    from linobs.run.store import RunStore
    from linobs.study import Study

FROZEN = "validate-frozen"
PLANT = "validate-plant"


def frozen_chunks(study: "Study", store: "RunStore", points: list[dict[str, float]], *,
                  workers: int) -> list[Chunk]:
    """Chunks of validation points to trim and linearize (only those not done yet)."""
    from linobs.stages.sweep import stage_settings

    sweep = {r.item_id: r for r in store.results("sweep") if r.status == "ok"}
    grid = study.grid
    scaled = grid.scaled()
    lo = np.array([grid.bounds()[n][0] for n in grid.names])
    span = np.array([grid.bounds()[n][1] - grid.bounds()[n][0] for n in grid.names])
    span[span == 0] = 1.0
    solved = np.array(sorted(sweep))
    done = store.done_ids(FROZEN)
    items = []
    for k, values in enumerate(points):
        if k in done:
            continue
        guess = None
        if solved.size:
            q = (np.array([values[n] for n in grid.names]) - lo) / span
            j = int(solved[np.argmin(np.sum((scaled[solved] - q) ** 2, axis=1))])
            tr = sweep[j].data["trim"]
            guess = {**tr["states"], **tr["inputs"]}
        items.append(WorkItem(k, {"values": {**study.config.grid.fixed, **values}, "guess": guess}))
    size = max(1, min(16, -(-len(items) // max(1, 4 * workers))))
    settings = stage_settings(study)
    return [Chunk(f"{FROZEN}-{k:05d}", tuple(items[k:k + size]), settings)
            for k in range(0, len(items), size)]


def relinearize_chunk(context: WorkerContext, chunk: Chunk) -> list[ItemResult]:
    """Task: trim and linearize the FMU at each validation point (guess: the nearest node)."""
    s = chunk.settings
    fmu = FMURef(**s["fmu"])
    model = context.model(fmu)
    start = context.start_parameters(fmu)
    spec = TrimSpec.model_validate(s["trim"])
    out = []
    for item in chunk.items:
        t0 = time.perf_counter()
        e0 = model.evaluations + model.directional_evaluations
        model.clear_log()
        fixed = {**start, **s["parameters"], **item.payload["values"]}
        try:
            tr = find_operating_point(model, fixed, spec, method=s["method"],
                                      guess=item.payload["guess"], continuation=Continuation())
            if tr.converged:
                lm = linearize(model, tr.point(), method=s["method"], allow_outside_bounds=True)
                status, data, message = "ok", {"trim": tr.model_dump(mode="json"),
                                               "linear": lm.model_dump(mode="json")}, ""
            else:
                status, data, message = "not_converged", {"trim": tr.model_dump(mode="json")}, \
                    tr.message
        except (EvaluationError, LinobsError) as exc:
            status, data, message = "failed", {}, str(exc)
        out.append(ItemResult(item.item_id, status, data, message,
                              model.evaluations + model.directional_evaluations - e0,
                              time.perf_counter() - t0))
    return out


def plant_chunk(context: WorkerContext, chunk: Chunk) -> list[ItemResult]:
    """Task: simulate the plant FMU with fmpy along the validation scenario.

    The payload carries the scenario as segments (JSON); the trajectory comes
    back as plain lists.
    """
    from linobs.estimator.nonlinear import simulate_plant
    from linobs.estimator.scenario import build_scenario
    from linobs.estimator.settings import ScenarioSegment

    path = context.fmu_file(FMURef(**chunk.settings["fmu"]))
    out = []
    for item in chunk.items:
        t0 = time.perf_counter()
        p = item.payload
        try:
            scenario = build_scenario([ScenarioSegment.model_validate(g) for g in p["segments"]],
                                      p["inputs"], p["start_inputs"])
            run = simulate_plant(path, scenario, p["initial_state"], p["parameters"],
                                 p["sample_time"], p["outputs"], p["states"])
            data = {"plant": plant_run_record(run)}
            status, message = "ok", ""
        except LinobsError as exc:
            status, data, message = "failed", {}, str(exc)
        out.append(ItemResult(item.item_id, status, data, message, 0, time.perf_counter() - t0))
    return out


def plant_run_record(run: Any) -> dict[str, Any]:
    """A :class:`~linobs.estimator.nonlinear.PlantRun` as JSON-compatible data."""
    return {"times": np.asarray(run.times).tolist(), "sample_time": float(run.sample_time),
            "state_names": list(run.state_names), "input_names": list(run.input_names),
            "output_names": list(run.output_names), "states": np.asarray(run.states).tolist(),
            "inputs": np.asarray(run.inputs).tolist(), "outputs": np.asarray(run.outputs).tolist(),
            "parameters": dict(run.parameters), "hold": run.hold}


def plant_run_from(record: dict[str, Any]) -> Any:
    from linobs.estimator.nonlinear import PlantRun

    arrays = {k: np.asarray(record[k], dtype=float) for k in ("times", "states", "inputs", "outputs")}
    return PlantRun(**{**record, **arrays})


def plant_chunk_for(study: "Study", payload: dict[str, Any]) -> Chunk:
    from linobs.stages.sweep import stage_settings

    return Chunk(f"{PLANT}-00000", (WorkItem(0, payload),), stage_settings(study))
