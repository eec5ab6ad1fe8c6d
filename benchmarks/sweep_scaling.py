"""Wall time of a 2,000-point sweep: 1 vs 2 pool workers, and Dask vs the pool.

The grid spans the bundled ``lfp_cell`` over soc x i_cell x t_amb (20 x 10 x
10 points).  ``--task sweep`` (the default) runs the real ``sweep`` stage at
every point — partial trim (RC voltages and cell temperature free, soc
pinned) warm-started along the chunk, then a central-difference
linearization — with the stage's own chunks (continuation order,
:func:`linobs.stages.sweep.default_chunk_size`).  ``--task probe`` runs the
probe task instead: each point evaluated ``--repeat`` times (default 100),
chunked by :func:`linobs.run.chunking.chunk_size`.  Each executor is started and warmed up (workers
running, FMU loaded) before timing; the rounds of the contenders are
interleaved (so drift in machine speed hits all alike); ratios of the best
and of the median of ``--rounds`` rounds are printed (on shared virtual
machines single sub-second rounds vary by tens of percent, and the
median ratio is the steadier figure), all from this one process.
Targets: pool speed-up 1 -> 2 workers >= 1.7 on 2 cores; Dask local
cluster (2 workers) <= 1.3 x the 2-worker pool.

    python benchmarks/sweep_scaling.py [--task sweep|probe] [--repeat 100] [--rounds 11] [--no-dask]
"""

from __future__ import annotations

import argparse
import statistics
import time
from typing import Any

import numpy as np

from linobs.model.bundled import bundled_fmu
from linobs.model.loader import file_sha256
from linobs.run.chunking import chunk_size, make_chunks
from linobs.run.executor import dask_available
from linobs.run.local import LocalPoolExecutor
from linobs.run.probe import evaluate_chunk, probe_settings
from linobs.run.types import Chunk, FMURef, ItemResult, WorkItem


STUDY = """
name = "scaling_benchmark"
[model]
bundled = "lfp_cell"
[grid.soc]
linspace = {{ start = 0.05, stop = 0.95, num = 20 }}
[grid.i_cell]
linspace = {{ start = -60.0, stop = 60.0, num = 10 }}
[grid.t_amb]
linspace = {{ start = -20.0, stop = 60.0, num = 10 }}
[trim]
pinned_states = ["soc"]
[linearize]
method = "central"
"""


class Job:
    """What is timed: the FMU, the task, and the chunks for a given worker count."""

    def __init__(self, task_name: str, repeat: int) -> None:
        self.task_name = task_name
        if task_name == "sweep":
            import tempfile
            from pathlib import Path

            from linobs.stages import sweep
            from linobs.study import load_study

            folder = Path(tempfile.mkdtemp(prefix="linobs-bench-"))
            (folder / "study.toml").write_text(STUDY.format())
            self.study = load_study(folder / "study.toml")
            self.fmu = FMURef(self.study.fmu_sha256, str(self.study.fmu_path))
            self.task = sweep.sweep_chunk
            self.points = len(self.study.grid)
        else:
            path = bundled_fmu("lfp_cell")
            self.fmu = FMURef(file_sha256(path), str(path))
            self.items = grid_items(repeat)
            self.settings = probe_settings(self.fmu)
            self.task = evaluate_chunk
            self.points = len(self.items)

    def chunks(self, workers: int) -> list[Chunk]:
        if self.task_name == "sweep":
            from linobs.stages import sweep

            # the same chunks for every contender, so the results can be compared
            return sweep.build_chunks(self.study, workers=2)[0]
        return make_chunks(self.items, chunk_size(len(self.items), workers), settings=self.settings)


def grid_items(repeat: int) -> list[WorkItem]:
    items = []
    for soc in np.linspace(0.05, 0.95, 20):
        for i_cell in np.linspace(-60.0, 60.0, 10):
            for t_amb in np.linspace(-20.0, 60.0, 10):
                items.append(WorkItem(len(items), {"x": [soc, 0.0, 0.0, t_amb],
                                                   "u": [i_cell, t_amb], "repeat": repeat}))
    return items


class Contender:
    """An executor with its chunks, timed over interleaved rounds."""

    def __init__(self, name: str, executor: Any, workers: int, job: "Job", started: float) -> None:
        self.name, self.executor, self.fmu, self.task = name, executor, job.fmu, job.task
        self.chunks = job.chunks(workers)
        self.size = max(len(c.items) for c in self.chunks)
        self.times: list[float] = []
        self.results: dict[int, ItemResult] = {}
        self._run(self.chunks[:workers])  # workers started, FMU loaded
        self.warm_up = time.perf_counter() - started

    def _run(self, chunks: list[Chunk]) -> None:
        def keep(chunk: Chunk, rs: list[ItemResult]) -> None:
            self.results.update({r.item_id: r for r in rs})

        self.executor.run(self.task, chunks, fmus=[self.fmu], on_chunk=keep)

    def round(self) -> None:
        self.results.clear()
        t0 = time.perf_counter()
        self._run(self.chunks)
        self.times.append(time.perf_counter() - t0)

    @property
    def best(self) -> float:
        return min(self.times)

    @property
    def median(self) -> float:
        return statistics.median(self.times)

    def line(self) -> str:
        return (f"  {self.name:<30} {len(self.chunks):>3} chunks of {self.size:>3}  "
                f"best {self.best:6.3f} s, median {self.median:6.3f} s   "
                f"(start + warm-up {self.warm_up:4.2f} s)")


def race(contenders: list[Contender], rounds: int) -> None:
    """Interleave the contenders' rounds, so that drift in machine speed hits all alike."""
    for _ in range(rounds):
        for c in contenders:
            c.round()
    reference = {i: r.data for i, r in contenders[0].results.items()}
    for c in contenders:
        if {i: r.data for i, r in c.results.items()} != reference:
            raise SystemExit(f"{c.name}: results differ from {contenders[0].name}")
        print(c.line())


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--task", choices=("sweep", "probe"), default="sweep")
    parser.add_argument("--repeat", type=int, default=100)
    parser.add_argument("--rounds", type=int, default=11)
    parser.add_argument("--no-dask", action="store_true")
    args = parser.parse_args()
    job = Job(args.task, args.repeat)
    what = ("trim + linearize (the sweep stage)" if args.task == "sweep"
            else f"the probe task, {args.repeat} evaluations each")
    print(f"{job.points} points of lfp_cell, {what}; {args.rounds} interleaved runs")
    started = time.perf_counter()
    with LocalPoolExecutor(2) as pool2:
        two = Contender("local pool, 2 workers", pool2, 2, job, started)
        started = time.perf_counter()
        with LocalPoolExecutor(1) as pool1:
            one = Contender("local pool, 1 worker", pool1, 1, job, started)
            race([one, two], args.rounds)
        print(f"speed-up 1 -> 2 pool workers: {one.best / two.best:.2f} (best), "
              f"{one.median / two.median:.2f} (median)  (target >= 1.7 on 2 cores)")
        if args.no_dask:
            return
        if not dask_available():
            print("Dask not installed (pip install 'linobs[dask]'): comparison skipped")
            return
        from linobs.run.dask_executor import DaskExecutor

        started = time.perf_counter()
        with DaskExecutor(local_workers=2) as cluster:
            dask = Contender("Dask local cluster, 2 workers", cluster, 2, job, started)
            two.times.clear()
            race([two, dask], args.rounds)
        print(f"Dask / 2-worker pool: {dask.best / two.best:.2f} (best), "
              f"{dask.median / two.median:.2f} (median)  (target <= 1.3)")


if __name__ == "__main__":
    main()
