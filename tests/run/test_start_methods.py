"""Worker start methods: fork while single-threaded, the fork server otherwise; same results."""

from __future__ import annotations

import threading
from pathlib import Path

import pytest

from linobs.errors import UsageError
from linobs.run.local import LocalPoolExecutor, default_start_method
from linobs.run.store import RunStore
from linobs.run.types import FMURef
from tests.run.test_local_pool import check_fault_classification

IDENTITY = {"study_hash": "s" * 64, "fmu_sha256": "f" * 64}


@pytest.mark.parametrize("method", ["fork", "forkserver"])
def test_faults_classified_with_either_start(faulty_fmu: FMURef, method: str) -> None:
    check_fault_classification(lambda: LocalPoolExecutor(2, start_method=method), faulty_fmu)


def test_auto_forks_only_without_other_threads(monkeypatch: pytest.MonkeyPatch) -> None:
    import linobs.run.local as local

    assert default_start_method() == "auto"
    pool = LocalPoolExecutor(1)
    for safe, method in ((True, "fork"), (False, "forkserver")):
        monkeypatch.setattr(local, "_fork_is_safe", lambda safe=safe: safe)
        slot = pool._start_worker()
        try:
            assert slot.process._popen.method == method  # multiprocessing's own Popen tag
        finally:
            slot.process.kill()
            slot.process.join()
    monkeypatch.undo()
    stop = threading.Event()
    other = threading.Thread(target=stop.wait, daemon=True)
    other.start()
    try:
        assert not local._fork_is_safe()  # another Python thread runs: no fork
    finally:
        stop.set()
        other.join()
    with pytest.raises(UsageError, match="unknown start method"):
        LocalPoolExecutor(1, start_method="teleport")


def test_forked_workers_do_not_keep_the_run_lock(tmp_path: Path) -> None:
    store = RunStore.open(tmp_path, IDENTITY, resume=False)
    pool = LocalPoolExecutor(1, start_method="fork")
    slot = pool._start_worker()  # a child forked while the coordinator holds the lock
    try:
        store.close()
        # the lock went with the coordinator's descriptor although the child still lives
        assert slot.process.is_alive()
        RunStore.open(tmp_path, IDENTITY, resume=True).close()
    finally:
        slot.process.kill()
        slot.process.join()
