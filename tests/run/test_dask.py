"""The Dask executor on a local cluster of 2 worker processes (localhost only)."""

from __future__ import annotations

from collections.abc import Iterator

import pytest

pytest.importorskip("distributed")

from distributed.core import Status  # noqa: E402

from linobs.errors import UsageError  # noqa: E402
from linobs.run.chunking import make_chunks  # noqa: E402
from linobs.run.dask_executor import DaskExecutor  # noqa: E402
from linobs.run.local import LocalPoolExecutor  # noqa: E402
from linobs.run.probe import evaluate_chunk, probe_settings  # noqa: E402
from linobs.run.types import Chunk, FMURef, ItemResult  # noqa: E402
from tests.run import tasks  # noqa: E402
from tests.run.support import U_HANG, collect, faulty_items, lfp_items  # noqa: E402
from tests.run.test_local_pool import check_fault_classification  # noqa: E402

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def cluster() -> Iterator[DaskExecutor]:
    with DaskExecutor(local_workers=2) as executor:
        yield executor


class _Shared:
    """A context manager handing out the module's cluster without closing it."""

    def __init__(self, executor: DaskExecutor) -> None:
        self.executor = executor

    def __enter__(self) -> DaskExecutor:
        return self.executor

    def __exit__(self, *exc: object) -> None:
        pass


def test_dask_results_equal_the_local_pool(cluster: DaskExecutor, lfp_cell: FMURef) -> None:
    chunks = make_chunks(lfp_items(40, 20), 5, settings=probe_settings(lfp_cell))
    on_dask = collect(cluster, evaluate_chunk, chunks, [lfp_cell])
    with LocalPoolExecutor(2) as pool:
        on_pool = collect(pool, evaluate_chunk, chunks, [lfp_cell])
    assert set(on_dask) == set(on_pool) == set(range(40))
    for i in range(40):
        assert on_dask[i] .status == on_pool[i].status == "ok"
        assert on_dask[i].data == on_pool[i].data  # the same floats, bit for bit
        assert on_dask[i].evaluations == on_pool[i].evaluations == 20


def test_dask_faults_classified_and_other_points_identical(cluster: DaskExecutor,
                                                          faulty_fmu: FMURef) -> None:
    check_fault_classification(lambda: _Shared(cluster), faulty_fmu)


def test_dask_instance_reused_across_chunks(cluster: DaskExecutor, lfp_cell: FMURef) -> None:
    chunks = make_chunks(lfp_items(24, 5), 2, settings=probe_settings(lfp_cell))
    before = {s.pid: s.chunks for s in cluster.worker_stats()}
    collect(cluster, evaluate_chunk, chunks, [lfp_cell])
    after = cluster.worker_stats()
    assert sum(s.chunks - before.get(s.pid, 0) for s in after) == len(chunks)
    for s in after:
        if s.chunks > before.get(s.pid, 0):
            assert s.instantiations[lfp_cell.sha256] == 1  # loaded once, reused by every chunk


def test_dask_hung_point_times_out(faulty_fmu: FMURef) -> None:
    items = faulty_items([1.0, U_HANG, 2.0, 3.0])
    with DaskExecutor(local_workers=2, timeout=2.0) as executor:
        results = collect(executor, evaluate_chunk,
                          make_chunks(items, 2, settings=probe_settings(faulty_fmu)), [faulty_fmu])
    assert results[1].status == "crashed"
    assert results[1].message.startswith("timed out after 2 s")
    assert [results[i].status for i in (0, 2, 3)] == ["ok"] * 3


def test_dask_task_errors_and_clean_close(faulty_fmu: FMURef) -> None:
    chunks = make_chunks(faulty_items([1.0, 2.0, 3.0, 4.0]), 1, settings=probe_settings(faulty_fmu))
    with DaskExecutor(local_workers=2) as executor:
        with pytest.raises(UsageError, match="deliberate usage error"):
            collect(executor, tasks.raise_usage_error, chunks, [faulty_fmu])

        def interrupt(chunk: Chunk, results: list[ItemResult]) -> None:
            raise KeyboardInterrupt

        with pytest.raises(KeyboardInterrupt):
            executor.run(evaluate_chunk, chunks, fmus=[faulty_fmu], on_chunk=interrupt)
        results = collect(executor, evaluate_chunk, chunks, [faulty_fmu])  # still usable
        assert [results[i].status for i in range(4)] == ["ok"] * 4
        cluster, client = executor._cluster, executor._client
    assert cluster is not None and client is not None
    assert cluster.status == Status.closed
    assert client.status == "closed"
