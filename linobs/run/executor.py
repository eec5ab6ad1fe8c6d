"""The executor interface, progress counting, and choosing an implementation.

An executor runs ``task(context, chunk)`` for every chunk in worker processes
and calls ``on_chunk(chunk, results)`` in the coordinator process for every
finished chunk or sub-chunk (a chunk split to isolate a crash), in completion
order; the caller writes them to the run store.  Two implementations:

* :class:`~linobs.run.local.LocalPoolExecutor` — long-lived worker processes
  on this machine (the default);
* :class:`~linobs.run.dask_executor.DaskExecutor` — a Dask cluster through
  ``dask.distributed``'s standard client (``pip install 'linobs[dask]'``).

A task that raises (rather than returning ``failed`` results) stops the run:
a :class:`~linobs.errors.LinobsError` is raised again as it is (the CLI
prints its one-line message); any other exception becomes a
:class:`TaskError` carrying the worker's traceback.  Chunks finished before
that were already handed to ``on_chunk``, so a resumed run keeps them.
"""

from __future__ import annotations

import importlib.util
import pickle
import time
from collections.abc import Callable, Iterable, Sequence
from typing import Any, Protocol

from linobs.errors import LinobsError, UsageError
from linobs.run.types import (STATUSES, Chunk, FMURef, ItemResult, Progress, ProgressCallback,
                              Task, WorkerStats)

__all__ = ["ChunkCallback", "Executor", "ProgressTracker", "TaskError", "make_executor"]

ChunkCallback = Callable[[Chunk, list[ItemResult]], None]


class Executor(Protocol):
    """Runs a task over chunks in worker processes; see the module docstring."""

    def run(self, task: Task, chunks: Iterable[Chunk], *, fmus: Sequence[FMURef],
            on_chunk: ChunkCallback, progress: ProgressCallback | None = None,
            total: int | None = None) -> None:
        """Run ``task`` on every chunk; call ``on_chunk`` for each finished (sub-)chunk.

        Parameters
        ----------
        task
            A module-level function (it is sent to the workers by reference).
        chunks
            The work; consumed lazily, in order.
        fmus
            Every FMU the chunks refer to (a Dask cluster receives their bytes once).
        on_chunk
            Called in the coordinator process, in completion order.
        progress
            Called with the running counts after every finished (sub-)chunk.
        total
            Number of items, for the progress counts (default: counted from
            ``chunks`` when it is a sequence).
        """
        ...

    def worker_stats(self) -> list[WorkerStats]:
        """What each live worker process has done (chunks, items, FMU loads)."""
        ...

    def close(self) -> None:
        """Stop the workers (and a cluster the executor started)."""
        ...

    def __enter__(self) -> Executor: ...

    def __exit__(self, *exc: object) -> None: ...


class TaskError(RuntimeError):
    """A task raised an exception that is not a :class:`LinobsError` (a bug in the task).

    Attributes
    ----------
    remote_traceback : str
        The traceback printed in the worker process.
    """

    def __init__(self, message: str, remote_traceback: str = "") -> None:
        super().__init__(message)
        self.remote_traceback = remote_traceback


def task_name(task: Task) -> str:
    return f"{getattr(task, '__module__', '?')}.{getattr(task, '__qualname__', repr(task))}"


def check_task(task: Task) -> None:
    """Refuse tasks that cannot travel to a worker process by reference."""
    try:
        pickle.dumps(task)
    except Exception as exc:
        raise UsageError(f"the task {task!r} cannot be sent to worker processes ({exc}); make it "
                         f"a function defined at the top level of an importable module") from None


def pack_exception(exc: BaseException) -> bytes | None:
    """The exception pickled for the trip to the coordinator, or None if it cannot travel."""
    try:
        data = pickle.dumps(exc)
        pickle.loads(data)
        return data
    except Exception:
        return None


def remote_failure(task: Task, chunk_id: str, packed: bytes | None, text: str) -> BaseException:
    """The exception to raise in the coordinator for a task that raised in a worker."""
    exc = pickle.loads(packed) if packed is not None else None
    if isinstance(exc, LinobsError):
        return exc
    lines = text.strip().splitlines()
    what = f"{type(exc).__name__}: {exc}" if exc is not None else (lines[-1] if lines else "?")
    return TaskError(f"the task {task_name(task)} raised on chunk {chunk_id}: {what}\n"
                     f"--- traceback in the worker process ---\n{text}", text)


class ProgressTracker:
    """Counts finished items by status and reports them to a progress callback."""

    def __init__(self, chunks: Iterable[Chunk], total: int | None,
                 callback: ProgressCallback | None) -> None:
        if total is None:
            total = sum(len(c.items) for c in chunks) if isinstance(chunks, Sequence) else 0
        self.progress = Progress(total=total, counts={s: 0 for s in STATUSES})
        self._callback = callback
        self._t0 = time.monotonic()

    def add(self, results: Sequence[ItemResult]) -> None:
        p = self.progress
        p.done += len(results)
        for r in results:
            p.counts[r.status] = p.counts.get(r.status, 0) + 1
        p.total = max(p.total, p.done)
        p.seconds = time.monotonic() - self._t0
        if self._callback is not None:
            self._callback(p)


def dask_available() -> bool:
    return importlib.util.find_spec("distributed") is not None


def make_executor(workers: int | None = None, dask: str | None = None,
                  dask_local: int | None = None, *, timeout: float | None = None) -> Any:
    """The executor for the options a user gave.

    Parameters
    ----------
    workers
        Size of the local process pool (default: one per usable core).
    dask
        Address of a running Dask scheduler, e.g. ``"tcp://10.0.0.5:8786"``.
    dask_local
        Start a Dask cluster of this many single-threaded worker processes on
        this machine (for testing the cluster path).
    timeout
        Wall-clock limit per chunk in seconds; a chunk that overruns it is
        treated like a crash (``None``: no limit).

    Returns
    -------
    LocalPoolExecutor or DaskExecutor

    Raises
    ------
    UsageError
        Both Dask options, a pool size together with Dask, or Dask not installed.
    """
    if dask is not None and dask_local is not None:
        raise UsageError("choose either a running Dask scheduler or a local Dask cluster, not both")
    if dask is None and dask_local is None:
        from linobs.run.local import LocalPoolExecutor

        return LocalPoolExecutor(workers, timeout=timeout)
    if workers is not None:
        raise UsageError("the number of local pool workers does not apply to a Dask run (the "
                         "cluster's workers do the work); drop it or run without Dask")
    if not dask_available():
        raise UsageError("running on Dask needs dask.distributed, which is not installed; "
                         "pip install 'linobs[dask]'")
    from linobs.run.dask_executor import DaskExecutor

    return DaskExecutor(address=dask, local_workers=dask_local, timeout=timeout)
