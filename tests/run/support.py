"""Helpers of the run tests: the faulty-FMU grid, a small resumable sweep, and a driver.

``python -m tests.run.support RUN_DIR FMU N_ITEMS CHUNK REPEAT`` runs the
probe sweep of :func:`sweep` in a fresh process (the kill-and-resume test
kills it with SIGKILL mid-run).
"""

from __future__ import annotations

import hashlib
import json
import sys
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from linobs.model.loader import file_sha256
from linobs.run.chunking import make_chunks
from linobs.run.local import LocalPoolExecutor
from linobs.run.probe import probe_settings
from linobs.run.store import RunStore
from linobs.run.types import Chunk, FMURef, ItemResult, Task, WorkItem

STAGE = "probe"
#: Input values at which the faulty fixture misbehaves (its parameter start values).
U_SEGFAULT, U_ABORT, U_ERROR, U_NAN, U_HANG = 13.0, 17.0, 19.0, 23.0, 29.0
FAULTS = {U_SEGFAULT: "segfault", U_ABORT: "abort", U_ERROR: "error", U_NAN: "nan"}


def faulty_items(us: Sequence[float]) -> list[WorkItem]:
    """One item per input value, states spread so that each point differs."""
    return [WorkItem(k, {"x": [0.5 + 0.25 * k, -0.125 * k], "u": [u]}) for k, u in enumerate(us)]


def grid_us(n_good: int, faults: Sequence[float]) -> list[float]:
    """``n_good`` ordinary inputs with the fault inputs interleaved at spread positions."""
    us = [0.25 + 1.5 * k for k in range(n_good)]  # never an integer, so never a fault input
    for j, f in enumerate(faults):
        us.insert(min(len(us), 3 + 5 * j), f)
    return us


def collect(executor: Any, task: Task, chunks: Sequence[Chunk], fmus: Sequence[FMURef],
            **options: Any) -> dict[int, ItemResult]:
    """Run and gather results by item id (checking that no item is answered twice)."""
    out: dict[int, ItemResult] = {}

    def keep(chunk: Chunk, results: list[ItemResult]) -> None:
        for r in results:
            assert r.item_id not in out, f"item {r.item_id} answered twice"
            out[r.item_id] = r

    executor.run(task, chunks, fmus=fmus, on_chunk=keep, **options)
    return out


def lfp_items(n: int, repeat: int) -> list[WorkItem]:
    """``n`` points of the bundled lfp_cell along soc and i_cell."""
    items = []
    for k in range(n):
        soc = 0.05 + 0.9 * k / max(1, n - 1)
        i_cell = -60.0 + 120.0 * ((7 * k) % n) / max(1, n - 1)
        items.append(WorkItem(k, {"x": [soc, 0.0, 0.0, 25.0], "u": [i_cell, 25.0],
                                  "repeat": repeat}))
    return items


def identity(fmu: FMURef, items: Sequence[WorkItem]) -> dict[str, str]:
    study = json.dumps([item.payload for item in items], sort_keys=True)
    return {"study_hash": hashlib.sha256(study.encode()).hexdigest(), "fmu_sha256": fmu.sha256,
            "study": study, "linobs_version": "test"}


def sweep(run_dir: Path, fmu: FMURef, items: Sequence[WorkItem], chunk: int, *, resume: bool,
          workers: int = 2) -> list[int]:
    """The probe stage over ``items`` into ``run_dir``, skipping stored items.

    Returns the ids of the items this call computed.
    """
    computed: list[int] = []
    with RunStore.open(run_dir, identity(fmu, items), resume=resume) as store:
        done = store.done_ids(STAGE)
        todo = [item for item in items if item.item_id not in done]
        chunks = make_chunks(todo, chunk, settings=probe_settings(fmu))

        def write(c: Chunk, results: list[ItemResult]) -> None:
            store.write_chunk(STAGE, c.chunk_id, results)
            computed.extend(r.item_id for r in results)

        with LocalPoolExecutor(workers) as executor:
            from linobs.run.probe import evaluate_chunk

            executor.run(evaluate_chunk, chunks, fmus=[fmu], on_chunk=write)
        store.mark_stage_complete(STAGE, store.counts(STAGE))
    return computed


def main(argv: list[str]) -> None:
    run_dir, fmu_path, n, chunk, repeat = argv
    path = Path(fmu_path)
    fmu = FMURef(file_sha256(path), str(path))
    sweep(Path(run_dir), fmu, lfp_items(int(n), int(repeat)), int(chunk), resume=False)


if __name__ == "__main__":
    main(sys.argv[1:])
