"""What lives in each worker process: the FMU instance cache and the chunk runner.

A worker process (a local pool process or a Dask worker) keeps one
:class:`ProcessWorkerContext`.  It loads each FMU once, on first use, and
hands the same :class:`~linobs.model.instance.Model` to every later chunk,
so an instantiation (unzip, ``dlopen``, instantiate, initialize) is paid once
per process and FMU, not once per chunk.  Models are keyed by the FMU's
SHA-256:

* on the local pool the file is read from :attr:`FMURef.path` after checking
  that its hash is still the one the run was started with;
* on Dask the bytes are delivered to the worker process (see
  :mod:`linobs.run.dask_executor`) and written once to a worker-local file
  named by the hash (:meth:`ProcessWorkerContext.deliver`).

:func:`run_chunk` calls a task and checks that it answered for exactly the
chunk's items.  The worker-side state here is per process by design (it is
what makes instances reusable); the coordinator holds none of it.
"""

from __future__ import annotations

import contextlib
import getpass
import hashlib
import os
import socket
import tempfile
import threading
from collections.abc import Iterator
from pathlib import Path
from typing import TYPE_CHECKING

from linobs.atomic import atomic_write_bytes
from linobs.errors import ModelError
from linobs.run.types import STATUSES, Chunk, FMURef, ItemResult, Task, WorkerStats

if TYPE_CHECKING:  # pragma: no cover
    from linobs.model.instance import Model

__all__ = ["ProcessWorkerContext", "delivery_dir", "process_context", "run_chunk"]


def delivery_dir() -> Path:
    """Worker-local folder for FMU files delivered as bytes, one per user."""
    try:
        user = getpass.getuser()
    except Exception:  # no user name (some containers)
        user = str(os.getuid()) if hasattr(os, "getuid") else "user"
    return Path(tempfile.gettempdir()) / f"linobs-fmus-{user}"


def single_threaded_blas() -> None:
    """Limit the linear-algebra library to one thread in this process.

    A worker is one core's share of a sweep, and its matrices are tiny: a
    multi-threaded BLAS only adds synchronization (and, when several workers
    share the cores, oversubscription that slows small operations by an order
    of magnitude).  Common practice for process-parallel numerics.
    """
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # pragma: no cover - threadpoolctl is a dependency
        return
    threadpool_limits(1)


class ProcessWorkerContext:
    """The :class:`~linobs.run.types.WorkerContext` of one worker process.

    Attributes
    ----------
    instantiations : dict[str, int]
        How many times each FMU (by SHA-256) was loaded in this process; one
        per FMU when instances are reused as intended.
    chunks, items : int
        Chunks and items this process has run.
    """

    def __init__(self) -> None:
        single_threaded_blas()
        self._models: dict[str, Model] = {}
        self._start_parameters: dict[str, dict[str, float]] = {}
        self._delivered: dict[str, Path] = {}
        self._exclusive = threading.Lock()
        self.instantiations: dict[str, int] = {}
        self.chunks = 0
        self.items = 0

    # ------------------------------------------------------------------ models
    def model(self, fmu: FMURef) -> Model:
        """This process's instance of ``fmu``, loading it on first use.

        Raises
        ------
        ModelError
            The FMU is neither delivered to this process nor readable at
            ``fmu.path`` with the expected SHA-256.
        """
        cached = self._models.get(fmu.sha256)
        if cached is not None:
            return cached
        from linobs.model.loader import load_model

        model = load_model(self._file_for(fmu))
        self._models[fmu.sha256] = model
        self._start_parameters[fmu.sha256] = dict(model.parameters)
        self.instantiations[fmu.sha256] = self.instantiations.get(fmu.sha256, 0) + 1
        return model

    def start_parameters(self, fmu: FMURef) -> dict[str, float]:
        """Parameter values of the instance right after it was loaded."""
        self.model(fmu)
        return dict(self._start_parameters[fmu.sha256])

    def fmu_file(self, fmu: FMURef) -> Path:
        """The FMU file as this worker has it (checked by hash, or delivered to this host)."""
        return self._file_for(fmu)

    def _file_for(self, fmu: FMURef) -> Path:
        delivered = self._delivered.get(fmu.sha256)
        if delivered is not None:
            return delivered
        from linobs.model.loader import file_sha256

        path = Path(fmu.path)
        if not path.is_file():
            raise ModelError(
                f"the FMU {path.name} (sha256 {fmu.sha256[:12]}...) is not available to worker "
                f"process {os.getpid()} on {socket.gethostname()}: {path} does not exist there "
                f"and its bytes were not delivered; run on this machine or let the executor "
                f"deliver the FMU")
        found = file_sha256(path)
        if found != fmu.sha256:
            raise ModelError(
                f"{path} changed since the run started (sha256 {fmu.sha256[:12]}... expected, "
                f"{found[:12]}... found); restore the original FMU or start a new run")
        return path

    def deliver(self, sha256: str, data: bytes) -> Path:
        """Keep an FMU received as bytes in a local file named by its hash.

        The file is written once per machine (atomically; a file already there
        with the right hash is reused) and used for every later load in this
        process.

        Raises
        ------
        ModelError
            ``data`` does not hash to ``sha256`` (damaged in transit).
        """
        if hashlib.sha256(data).hexdigest() != sha256:
            raise ModelError(f"the FMU bytes received for sha256 {sha256[:12]}... do not match "
                             f"their hash; the transfer was damaged; run again")
        target = delivery_dir() / f"{sha256}.fmu"
        if not _holds(target, sha256):
            atomic_write_bytes(target, data)
        self._delivered[sha256] = target
        return target

    # ------------------------------------------------------------------ bookkeeping
    @contextlib.contextmanager
    def exclusive(self) -> Iterator[None]:
        """Hold the process's instances alone (for workers that run several threads)."""
        with self._exclusive:
            yield

    def stats(self) -> WorkerStats:
        return WorkerStats(pid=os.getpid(), host=socket.gethostname(), chunks=self.chunks,
                           items=self.items, instantiations=dict(self.instantiations))

    def close(self) -> None:
        """Free every instance this process holds."""
        for model in self._models.values():
            model.close()
        self._models.clear()


def _holds(path: Path, sha256: str) -> bool:
    from linobs.model.loader import file_sha256

    try:
        return path.is_file() and file_sha256(path) == sha256
    except OSError:
        return False


_CONTEXT: ProcessWorkerContext | None = None
_CONTEXT_PID = -1
_CONTEXT_LOCK = threading.Lock()


def process_context() -> ProcessWorkerContext:
    """The context of the calling process, created on first use (a fork gets its own)."""
    global _CONTEXT, _CONTEXT_PID
    with _CONTEXT_LOCK:
        if _CONTEXT is None or _CONTEXT_PID != os.getpid():
            _CONTEXT = ProcessWorkerContext()
            _CONTEXT_PID = os.getpid()
        return _CONTEXT


class TaskContractError(RuntimeError):
    """A task answered for other items than the ones it was given (a programming error)."""


def run_chunk(task: Task, context: ProcessWorkerContext, chunk: Chunk) -> list[ItemResult]:
    """Run ``task`` on ``chunk`` and return one result per item, in the chunk's order.

    Raises
    ------
    TaskContractError
        The task returned results for other items, duplicates, or an unknown status.
    """
    results = task(context, chunk)
    wanted = [item.item_id for item in chunk.items]
    by_id = {r.item_id: r for r in results}
    if len(results) != len(wanted) or set(by_id) != set(wanted):
        raise TaskContractError(
            f"task {getattr(task, '__qualname__', task)!r} returned results for items "
            f"{sorted(by_id)[:10]} on chunk {chunk.chunk_id} holding items {wanted[:10]}; a task "
            f"must return exactly one ItemResult per item")
    for r in results:
        if r.status not in STATUSES:
            raise TaskContractError(f"task returned status {r.status!r} for item {r.item_id}; "
                                    f"use one of {', '.join(STATUSES)}")
    context.chunks += 1
    context.items += len(wanted)
    return [by_id[i] for i in wanted]
