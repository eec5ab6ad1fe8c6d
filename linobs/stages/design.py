"""The ``design`` stage: an estimator at every grid node, and the gain schedule over them.

Node designs need only the local models the sweep stored, so they run in the
coordinator, batched (stacked linear algebra and Riccati solutions for all
nodes at once).  A node without a local model (its sweep failed, crashed or
did not converge) is stored as refused; so is a node where the design is
impossible (an unobservable mode pole placement cannot move, or a pair that is
not detectable for a Kalman design): such nodes are marked in the schedule,
never filled with garbage.
"""

from __future__ import annotations

import time
from typing import TYPE_CHECKING

import numpy as np

from linobs.errors import UsageError
from linobs.estimator.node import NodeDesign
from linobs.linear.linear_model import LinearModel
from linobs.run.types import ItemResult

if TYPE_CHECKING:  # pragma: no cover
    from linobs.estimator.schedule import GainSchedule
    from linobs.run.store import RunStore
    from linobs.study import Study

STAGE = "design"


def axis_roles(study: "Study") -> dict[str, str]:
    """Where each scheduling variable (grid axis) comes from: a state, an input or a parameter."""
    roles = {}
    for name in study.grid.names:
        role = study.catalogue.get(name).role
        if role not in ("state", "input", "parameter"):
            raise UsageError(f"grid axis {name!r} is {role}; a schedule runs over states, inputs "
                             f"and parameters")
        roles[name] = role
    return roles


def measured_outputs(study: "Study") -> list[str]:
    est = study.config.estimator
    assert est is not None
    return list(est.outputs) if est.outputs is not None else list(study.outputs)


def run_design(study: "Study", store: "RunStore") -> tuple[int, int, int]:
    """Design every node not designed yet; returns (computed now, ok, refused)."""
    from linobs.estimator.design import design_nodes

    settings = study.config.estimator
    if settings is None:
        raise UsageError("the study has no [estimator] table: nothing to design; add one "
                         "(see docs/study-file.md) or run with --until observability")
    outputs = measured_outputs(study)
    done = store.done_ids(STAGE)
    sweep = [r for r in store.results("sweep") if r.item_id not in done]
    ok_items = [r for r in sweep if r.status == "ok"]
    t0 = time.perf_counter()
    models = [LinearModel.model_validate(r.data["linear"]) for r in ok_items]
    nodes = design_nodes(models, settings, outputs=outputs) if models else []
    elapsed = (time.perf_counter() - t0) / max(1, len(models))
    results = [ItemResult(r.item_id, "ok", {"node": n.model_dump(mode="json")},
                          n.message if n.status == "refused" else "", 0, elapsed)
               for r, n in zip(ok_items, nodes)]
    for r in sweep:
        if r.status != "ok":
            results.append(ItemResult(r.item_id, "failed", {},
                                      f"no local model (sweep: {r.status.replace('_', ' ')})"))
    results.sort(key=lambda r: r.item_id)
    for k in range(0, len(results), 500):
        part = results[k:k + 500]
        store.write_chunk(STAGE, f"{STAGE}-{part[0].item_id:06d}", part)
    counts = design_counts(store)
    return len(results), counts["ok"], counts["refused"]


def design_counts(store: "RunStore") -> dict[str, int]:
    ok = refused = 0
    for r in store.results(STAGE):
        if r.status == "ok" and r.data["node"]["status"] == "ok":
            ok += 1
        else:
            refused += 1
    return {"ok": ok, "refused": refused}


def stored_nodes(store: "RunStore") -> dict[int, NodeDesign]:
    """Node designs by grid point id (points without a local model are left out)."""
    return {r.item_id: NodeDesign.model_validate(r.data["node"]) for r in store.results(STAGE)
            if r.status == "ok"}


def build_schedule(study: "Study", store: "RunStore",
                   nodes: dict[int, NodeDesign] | None = None) -> "GainSchedule":
    """The gain schedule from the stored node designs (``nodes``: already read from the store).

    Grid points that have no local model at all get a refused copy of their
    nearest designed neighbor's structure (never its gain), so the schedule's
    arrays are complete and those cells are marked unusable.
    """
    from linobs.estimator.schedule import schedule_from_nodes

    nodes = stored_nodes(store) if nodes is None else dict(nodes)
    if not nodes:
        raise UsageError("no grid point has a local model to design from; look at the sweep's "
                         "failures first")
    missing = [i for i in range(len(study.grid)) if i not in nodes]
    if missing:
        designed = np.array(sorted(nodes))
        pts = study.grid.scaled()
        for i in missing:
            j = int(designed[np.argmin(np.sum((pts[designed] - pts[i]) ** 2, axis=1))])
            nodes[i] = nodes[j].model_copy(update={
                "status": "refused", "message": "no local model at this grid point",
                "L": np.zeros_like(nodes[j].L)})
    return schedule_from_nodes(study.grid, nodes, axis_roles(study))
