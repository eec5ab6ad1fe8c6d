"""The parts of the Dask executor that run inside Dask worker and nanny processes.

* :class:`FMUDelivery` — a worker plugin carrying one FMU's bytes, named by
  its SHA-256.  The scheduler keeps it and sets it up on every worker that
  is running or joins later (also a worker restarted after a crash), so the
  bytes travel to each worker process once, which writes them to a local
  file named by the hash (:meth:`ProcessWorkerContext.deliver`).  Unlike
  scattered data, it cannot be lost when the workers that held it die.
* :func:`run_chunk_on_worker` — runs one chunk with the process's instance
  cache, one chunk at a time per process.  Before it starts, it writes the
  chunk's key to a small marker file named after the worker's address; the
  file outlives a crash of the process.  The scheduler fails every task that
  was *assigned* to a dead worker, running or merely queued; the marker tells
  the coordinator which one was running (:func:`take_marker`, run on a
  process of the same host).  With a ``timeout`` a watchdog thread marks the
  file and ends the process with :data:`TIMEOUT_EXIT_STATUS` when the chunk
  overruns it (the FMU's C code runs without the GIL, so the watchdog runs).
"""

from __future__ import annotations

import getpass
import hashlib
import os
import pickle
import tempfile
import threading
from pathlib import Path

from distributed import WorkerPlugin, get_worker

from linobs.run.isolation import TIMEOUT_EXIT_STATUS
from linobs.run.types import Chunk, ItemResult, Task, WorkerStats
from linobs.run.worker import process_context, run_chunk

__all__ = ["FMUDelivery", "pack_work", "run_chunk_on_worker", "take_marker", "worker_stats"]

TIMEOUT_MARK = "timeout"


class FMUDelivery(WorkerPlugin):
    """Delivers one FMU (by content) to every worker of the cluster."""

    idempotent = True

    def __init__(self, sha256: str, data: bytes) -> None:
        self.sha256 = sha256
        self.data = data

    def setup(self, worker: object) -> None:
        process_context().deliver(self.sha256, self.data)
        self.data = b""  # this worker's copy is on disk now


def _marker_dir() -> Path:
    try:
        user = getpass.getuser()
    except Exception:
        user = str(os.getuid()) if hasattr(os, "getuid") else "user"
    return Path(tempfile.gettempdir()) / f"linobs-dask-{user}"


def marker_path(worker_address: str) -> Path:
    """The marker file of the worker at ``worker_address`` (same on every process of its host)."""
    digest = hashlib.sha256(worker_address.encode()).hexdigest()[:20]
    return _marker_dir() / f"running-{digest}"


def take_marker(worker_address: str) -> str | None:
    """Read and remove a dead worker's marker; None when it left none (run on its host)."""
    path = marker_path(worker_address)
    try:
        text = path.read_text()
    except (FileNotFoundError, OSError):
        return None
    path.unlink(missing_ok=True)
    return text


def _expire(path: Path) -> None:
    try:
        with open(path, "a") as f:
            f.write(TIMEOUT_MARK + "\n")
    finally:
        os._exit(TIMEOUT_EXIT_STATUS)


def pack_work(task: Task, chunk: Chunk) -> bytes:
    """A task and its chunk as one pickle: Dask moves bytes without inspecting them."""
    return pickle.dumps((task, chunk), protocol=pickle.HIGHEST_PROTOCOL)


def run_chunk_on_worker(work: bytes, key: str, timeout: float | None) -> bytes:
    """Run one chunk in this Dask worker process (the remote half of DaskExecutor.run).

    ``work`` comes from :func:`pack_work`; the results come back pickled too
    (a list of :class:`ItemResult`), which spares Dask from measuring and
    serializing every nested item on both sides.
    """
    task, chunk = pickle.loads(work)
    return pickle.dumps(_run(task, chunk, key, timeout), protocol=pickle.HIGHEST_PROTOCOL)


def _run(task: Task, chunk: Chunk, key: str, timeout: float | None) -> list[ItemResult]:
    context = process_context()
    path = marker_path(get_worker().address)
    with context.exclusive():
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(key + "\n")
        watchdog = None
        if timeout is not None:
            watchdog = threading.Timer(timeout, _expire, (path,))
            watchdog.daemon = True
            watchdog.start()
        try:
            return run_chunk(task, context, chunk)
        finally:
            if watchdog is not None:
                watchdog.cancel()
            path.unlink(missing_ok=True)


def worker_stats() -> WorkerStats:
    """This worker process's counts (run through ``Client.run``)."""
    return process_context().stats()
