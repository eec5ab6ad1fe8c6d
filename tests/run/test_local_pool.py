"""The local process pool: crash isolation, fault classification, reuse, progress, errors."""

from __future__ import annotations

import json
import os
import shutil
from pathlib import Path

import pytest

from linobs.errors import ModelError, UsageError
from linobs.run.chunking import make_chunks
from linobs.run.executor import TaskError, make_executor
from linobs.run.local import LocalPoolExecutor, available_cpus
from linobs.run.probe import evaluate_chunk, probe_settings
from linobs.run.types import STATUSES, FMURef, Progress, WorkItem
from tests.run import tasks
from tests.run.support import (FAULTS, U_ABORT, U_ERROR, U_HANG, U_NAN, U_SEGFAULT, collect,
                               faulty_items, grid_us, lfp_items)


def _same(a: object, b: object) -> bool:
    """Equal down to the last bit of every float (repr round-trips IEEE 754 doubles)."""
    return json.dumps(a) == json.dumps(b)


def check_fault_classification(executor_factory, fmu: FMURef) -> None:
    """Shared by the pool and Dask tests: each fault kind classified, other points untouched."""
    us = grid_us(16, list(FAULTS))
    items = faulty_items(us)
    settings = probe_settings(fmu)
    with executor_factory() as executor:
        results = collect(executor, evaluate_chunk, make_chunks(items, 4, settings=settings), [fmu])
    good = [item for item in items if item.payload["u"][0] not in FAULTS]
    with LocalPoolExecutor(2) as clean:  # only the good points, cut differently
        reference = collect(clean, evaluate_chunk, make_chunks(good, 3, settings=settings), [fmu])
    assert set(results) == {item.item_id for item in items}
    for item in items:
        r = results[item.item_id]
        u = item.payload["u"][0]
        if u == U_SEGFAULT:
            assert r.status == "crashed"
            assert r.message == "worker process died with SIGSEGV while evaluating this point"
        elif u == U_ABORT:
            assert r.status == "crashed"
            assert r.message == "worker process died with SIGABRT while evaluating this point"
        elif u == U_ERROR:
            assert r.status == "failed"
            assert "returned Error" in r.message and "fault injected at u=19" in r.message
            assert any("fault injected at u=19" in line for line in r.data["fmu_log"])
        elif u == U_NAN:
            assert r.status == "failed"
            assert "non-finite value of der(x2)" in r.message
            assert "fault injected" not in r.message  # no stale log lines from other points
        else:
            ref = reference[item.item_id]
            assert r.status == "ok" and ref.status == "ok"
            assert _same(r.data, ref.data), item
            assert r.evaluations == ref.evaluations == 1
            x1, x2 = item.payload["x"]
            # analytic: the fixture's equations der(x1) = -a x1 + u, der(x2) = x1 - b x2, y = x2
            # with its start values a = 1, b = 2
            assert r.data["dx"] == pytest.approx([-x1 + u, x1 - 2.0 * x2], rel=1e-15, abs=1e-15)
            assert r.data["y"] == pytest.approx([x2], rel=1e-15)


def test_faults_classified_and_other_points_identical(faulty_fmu: FMURef) -> None:
    check_fault_classification(lambda: LocalPoolExecutor(2), faulty_fmu)


def test_exit_code_is_named(faulty_fmu: FMURef) -> None:
    items = faulty_items([1.0, 2.0, 3.0, 4.0, 5.0])
    items[3] = WorkItem(3, {**items[3].payload, "exit": 3})
    with LocalPoolExecutor(2) as executor:
        results = collect(executor, tasks.exit_or_probe,
                          make_chunks(items, 5, settings=probe_settings(faulty_fmu)), [faulty_fmu])
        assert executor.restarts >= 3  # 5 -> 2 + 3 -> 2 + 1 -> 1 + 1: three deaths
    assert results[3].status == "crashed"
    assert results[3].message == "worker process died with exit code 3 while evaluating this point"
    assert [results[i].status for i in (0, 1, 2, 4)] == ["ok"] * 4


@pytest.mark.slow
def test_hung_point_times_out(faulty_fmu: FMURef) -> None:
    items = faulty_items([1.0, U_HANG, 2.0, 3.0])
    with LocalPoolExecutor(2, timeout=1.5) as executor:
        results = collect(executor, evaluate_chunk,
                          make_chunks(items, 2, settings=probe_settings(faulty_fmu)), [faulty_fmu])
    assert results[1].status == "crashed"
    assert results[1].message.startswith("timed out after 1.5 s")
    assert [results[i].status for i in (0, 2, 3)] == ["ok"] * 3


def test_instance_reused_across_chunks(lfp_cell: FMURef) -> None:
    chunks = make_chunks(lfp_items(24, 5), 2, settings=probe_settings(lfp_cell))
    with LocalPoolExecutor(2) as executor:
        results = collect(executor, evaluate_chunk, chunks, [lfp_cell])
        stats = executor.worker_stats()
        assert executor.restarts == 0
    assert all(r.status == "ok" for r in results.values())
    assert sum(s.chunks for s in stats) == len(chunks) == 12
    assert sum(s.items for s in stats) == 24
    for s in stats:
        if s.chunks:
            assert s.instantiations == {lfp_cell.sha256: 1}  # one load per process, many chunks


def test_progress_counts_add_up(faulty_fmu: FMURef) -> None:
    items = faulty_items(grid_us(12, list(FAULTS)))
    seen: list[tuple[int, int, dict[str, int]]] = []

    def progress(p: Progress) -> None:
        seen.append((p.total, p.done, dict(p.counts)))

    with LocalPoolExecutor(2) as executor:
        results = collect(executor, evaluate_chunk,
                          make_chunks(items, 4, settings=probe_settings(faulty_fmu)),
                          [faulty_fmu], progress=progress)
    dones = [done for _, done, _ in seen]
    assert dones == sorted(dones) and dones[-1] == len(items)
    for total, done, counts in seen:
        assert total == len(items)
        assert sum(counts.values()) == done and set(counts) == set(STATUSES)
    final = seen[-1][2]
    assert final == {s: sum(1 for r in results.values() if r.status == s) for s in STATUSES}
    assert final == {"ok": 12, "failed": 2, "crashed": 2, "not_converged": 0}


def test_task_errors_stop_the_run_and_the_pool_recovers(faulty_fmu: FMURef) -> None:
    chunks = make_chunks(faulty_items([1.0, 2.0, 3.0]), 1, settings=probe_settings(faulty_fmu))
    with LocalPoolExecutor(2) as executor:
        with pytest.raises(TaskError, match="deliberate bug") as info:
            collect(executor, tasks.raise_value_error, chunks, [faulty_fmu])
        assert "Traceback" in info.value.remote_traceback
        with pytest.raises(UsageError, match="deliberate usage error"):
            collect(executor, tasks.raise_usage_error, chunks, [faulty_fmu])
        with pytest.raises(TaskError, match="exactly one ItemResult per item"):
            collect(executor, tasks.answer_for_wrong_items, chunks, [faulty_fmu])
        results = collect(executor, evaluate_chunk, chunks, [faulty_fmu])
    assert [results[i].status for i in range(3)] == ["ok"] * 3


def test_unpicklable_task_refused(faulty_fmu: FMURef) -> None:
    with LocalPoolExecutor(1) as executor, pytest.raises(UsageError, match="top level"):
        executor.run(lambda context, chunk: [], [], fmus=[], on_chunk=lambda c, r: None)


def test_changed_fmu_refused(faulty_fmu: FMURef, lfp_cell: FMURef, tmp_path: Path) -> None:
    copy = tmp_path / "faulty.fmu"
    shutil.copy(faulty_fmu.path, copy)
    wrong = FMURef(sha256=lfp_cell.sha256, path=str(copy))  # hash of another file
    chunks = make_chunks(faulty_items([1.0]), 1, settings=probe_settings(wrong))
    with LocalPoolExecutor(1) as executor, pytest.raises(ModelError, match="changed since"):
        collect(executor, evaluate_chunk, chunks, [wrong])


def test_make_executor_choices(monkeypatch: pytest.MonkeyPatch) -> None:
    with make_executor() as executor:
        assert isinstance(executor, LocalPoolExecutor)
        assert executor.workers == available_cpus()
    with pytest.raises(UsageError, match="not both"):
        make_executor(dask="tcp://127.0.0.1:8786", dask_local=2)
    with pytest.raises(UsageError, match="does not apply"):
        make_executor(workers=2, dask_local=2)
    with pytest.raises(UsageError, match="at least one"):
        make_executor(workers=0)
    monkeypatch.setattr("linobs.run.executor.dask_available", lambda: False)
    with pytest.raises(UsageError, match=r"pip install 'linobs\[dask\]'"):
        make_executor(dask_local=2)


def test_available_cpus_within_the_machine() -> None:
    # common practice: a process may use at most the cores the OS reports, at least one
    assert 1 <= available_cpus() <= (os.cpu_count() or 1)
