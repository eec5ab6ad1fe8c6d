"""Running chunks on a Dask cluster through ``dask.distributed``'s standard client.

``DaskExecutor(address="tcp://host:8786")`` connects to a running scheduler;
``DaskExecutor(local_workers=N)`` starts a cluster of ``N`` single-threaded
worker processes on this machine (localhost only) and closes it again; its
workers run without Dask's statistical profiler, which samples every thread
every 10 ms and was measured to slow the evaluation loop of a chunk about
twofold.

FMU delivery
    Each FMU travels to the workers once, content-addressed: a worker plugin
    named ``linobs-fmu-<sha256>`` (see :mod:`linobs.run.dask_worker`) that
    the scheduler also sets up on workers joining later, such as a worker
    restarted after a crash.  Each worker process loads each FMU once and
    reuses the instance (the same cache as the local pool).

Crash isolation
    When a worker process dies, the scheduler restarts it (its nanny does)
    and fails the tasks assigned to it with ``KilledWorker`` — once more than
    ``distributed.scheduler.allowed-failures`` workers died with the task
    (the local cluster started here allows none; a running cluster keeps
    its own setting, so a crashing chunk may take a few workers with it
    first).  The executor then reads the dead worker's marker file (through
    ``Client.run`` on a nanny of the same host): the chunk that was running
    is split and resubmitted, recursively, until the offending item is
    recorded ``crashed``; chunks that were only queued there are resubmitted
    unchanged.  The signal or exit status comes from the nanny's log
    (``Client.get_worker_logs(nanny=True)``).  Split halves are submitted with
    a higher priority, so they run first.

At most a window of ``2 x threads`` chunks is submitted at a time (enough
to keep every worker busy, few enough that a crash strands little work).
The executor closes its client and any cluster it started on :meth:`close`,
on leaving a ``with`` block, also after errors and Ctrl-C; tasks in flight
are canceled first.
"""

from __future__ import annotations

import hashlib
import logging
import pickle
import re
import time
import traceback
import uuid
import warnings
import weakref
from collections import deque
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import dask
from distributed import Client, Future, LocalCluster, as_completed
from distributed.comm import get_address_host
from distributed.scheduler import KilledWorker

from linobs.errors import LinobsError, ModelError, UsageError
from linobs.run.dask_worker import (TIMEOUT_MARK, FMUDelivery, pack_work, run_chunk_on_worker,
                                    take_marker, worker_stats)
from linobs.run.executor import ChunkCallback, ProgressTracker, TaskError, check_task, task_name
from linobs.run.isolation import after_death, death_message, describe_exit, timeout_message
from linobs.run.local import available_cpus
from linobs.run.types import Chunk, FMURef, ProgressCallback, Task, WorkerStats

__all__ = ["DaskExecutor"]

_NO_WORKERS_WAIT_S = 120.0
_DIAGNOSIS_WAIT_S = 15.0  # how long to wait for the dead worker's host to answer
_INNOCENT_RESUBMITS = 3   # a chunk merely queued on dying workers is resubmitted this often
_DEATH_LINE = re.compile(r"Worker process (\d+) (?:was killed by signal (\d+)|exited with status "
                         r"(\d+)|was killed by unknown signal)")


@dataclass
class _Submitted:
    chunk: Chunk
    future: Future
    depth: int      # how many splits produced this chunk (its priority)
    innocent: int   # times resubmitted unchanged after dying workers it did not run on


@dataclass
class _Death:
    running: str | None  # key of the chunk the worker was running, "" if none, None if unknown
    timed_out: bool
    how: str


def _close(client: Client | None, cluster: LocalCluster | None) -> None:
    try:
        if client is not None:
            client.close(timeout=10)
    except Exception:
        pass
    finally:
        if cluster is not None:
            try:
                cluster.close(timeout=10)
            except Exception:
                pass


class DaskExecutor:
    """Runs chunks on a Dask cluster, with crash isolation; see the module docstring.

    Parameters
    ----------
    address
        Address of a running Dask scheduler.
    local_workers
        Start a local cluster of this many single-threaded worker processes
        (default when no address is given: one per usable core).
    timeout
        Wall-clock limit per chunk in seconds, counted from the chunk's start
        on its worker; an overrun is handled like a crash.
    connect_timeout
        Seconds to wait for the scheduler at ``address``.
    """

    def __init__(self, address: str | None = None, local_workers: int | None = None, *,
                 timeout: float | None = None, connect_timeout: float = 30.0) -> None:
        if address is not None and local_workers is not None:
            raise UsageError("choose either a running Dask scheduler or a local Dask cluster, "
                             "not both")
        if local_workers is not None and local_workers < 1:
            raise UsageError(f"a local Dask cluster needs at least one worker, not {local_workers}")
        if timeout is not None and not timeout > 0:
            raise UsageError(f"the chunk timeout must be a positive number of seconds, not {timeout}")
        self.address = address
        self.timeout = timeout
        self._cluster: LocalCluster | None = None
        self._client: Client | None = None
        self._delivered: set[str] = set()
        self._deaths: dict[tuple[str, int | None], _Death] = {}
        self._closed = False
        try:
            if address is None:
                config = {"distributed.scheduler.allowed-failures": 0,
                          "distributed.worker.profile.enabled": False,
                          "distributed.scheduler.worker-saturation": 1.0}
                with dask.config.set(config), warnings.catch_warnings():
                    # the scheduler's small HTTP server (localhost) takes another port if
                    # 8787 is busy and says so; nothing for a user to act on
                    warnings.filterwarnings("ignore", message="Port .* is already in use")
                    self._cluster = LocalCluster(
                        n_workers=local_workers or available_cpus(), threads_per_worker=1,
                        processes=True, host="127.0.0.1", dashboard_address=None,
                        silence_logs=logging.CRITICAL)
                self._client = Client(self._cluster, set_as_default=False)
            else:
                try:
                    self._client = Client(address, timeout=connect_timeout, set_as_default=False)
                except (OSError, TimeoutError) as exc:
                    raise UsageError(f"cannot reach a Dask scheduler at {address} ({exc}); check "
                                     f"the address and that the scheduler is running") from None
        except BaseException:
            _close(self._client, self._cluster)
            raise
        self._finalizer = weakref.finalize(self, _close, self._client, self._cluster)

    # ------------------------------------------------------------------ running
    def run(self, task: Task, chunks: Iterable[Chunk], *, fmus: Sequence[FMURef],
            on_chunk: ChunkCallback, progress: ProgressCallback | None = None,
            total: int | None = None) -> None:
        """Run ``task`` on every chunk; see :meth:`linobs.run.executor.Executor.run`."""
        if self._closed or self._client is None:
            raise UsageError("this executor is closed; create a new one")
        check_task(task)
        self._deliver(fmus)
        tracker = ProgressTracker(chunks, total, progress)
        inflight: dict[str, _Submitted] = {}
        try:
            self._run(task, iter(chunks), on_chunk, tracker, inflight)
        except BaseException:
            futures = [s.future for s in inflight.values()]
            if futures:
                try:
                    self._client.cancel(futures)
                except Exception:
                    pass
            raise

    def _run(self, task: Task, source: Iterator[Chunk], on_chunk: ChunkCallback,
             tracker: ProgressTracker, inflight: dict[str, _Submitted]) -> None:
        client = self._client
        assert client is not None
        token = uuid.uuid4().hex[:12]
        serial = 0
        window = 2 * self._threads()
        retry: deque[tuple[Chunk, int, int]] = deque()
        done = as_completed(loop=client.loop, with_results=True, raise_errors=False)

        def submit(chunk: Chunk, depth: int, innocent: int) -> None:
            nonlocal serial
            serial += 1
            key = f"linobs-chunk-{token}-{serial}"
            future = client.submit(run_chunk_on_worker, pack_work(task, chunk), key, self.timeout,
                                   key=key, pure=False, priority=depth, retries=0)
            inflight[key] = _Submitted(chunk, future, depth, innocent)
            done.add(future)

        def fill() -> None:
            while len(inflight) < window:
                if retry:
                    submit(*retry.popleft())
                    continue
                chunk = next(source, None)
                if chunk is None:
                    return
                if chunk.items:
                    submit(chunk, 0, 0)

        fill()
        for future, result in done:
            status = future.status
            if status == "finished":
                result = pickle.loads(result)
            elif status == "error":
                result = result if isinstance(result, tuple) else (None, result, None)
            sub = inflight.pop(future.key)
            if status == "finished":
                on_chunk(sub.chunk, result)
                tracker.add(result)
            elif status == "error" and isinstance(result[1], KilledWorker):
                self._after_killed(sub, result[1], retry, on_chunk, tracker)
            elif status == "error":
                raise _task_failure(task, sub.chunk, result)
            else:
                raise LinobsError(f"the Dask scheduler dropped chunk {sub.chunk.chunk_id} "
                                  f"({status}); run again with resume")
            future.release()
            fill()

    def _after_killed(self, sub: _Submitted, exc: KilledWorker, retry: deque[tuple[Chunk, int, int]],
                      on_chunk: ChunkCallback, tracker: ProgressTracker) -> None:
        death = self._diagnose(exc)
        ran_here = death.running is None or death.running == sub.future.key
        if not ran_here and sub.innocent < _INNOCENT_RESUBMITS:
            retry.appendleft((sub.chunk, sub.depth, sub.innocent + 1))
            return
        message = (timeout_message(self.timeout or 0.0) if death.timed_out
                   else death_message(death.how))
        halves, crashed = after_death(sub.chunk, message, 0.0)
        for half in reversed(halves):
            retry.appendleft((half, sub.depth + 1, 0))
        if crashed is not None:
            on_chunk(sub.chunk, [crashed])
            tracker.add([crashed])

    # ------------------------------------------------------------------ diagnosis
    def _diagnose(self, exc: KilledWorker) -> _Death:
        """What the dead worker was running and how it died (cached per dead process)."""
        ws = exc.last_worker
        cache_key = (ws.address, ws.pid)
        if cache_key in self._deaths:
            return self._deaths[cache_key]
        client = self._client
        assert client is not None
        host = get_address_host(ws.address)
        deadline = time.monotonic() + _DIAGNOSIS_WAIT_S
        answered, marker, exitcode, exit_known = False, None, None, False
        while True:
            if not answered:
                answered, marker = self._read_marker(ws.address, host)
            timed_out = marker is not None and TIMEOUT_MARK in marker.split()
            if not exit_known and ws.pid:
                exit_known, exitcode = self._exit_status(ws.pid)
            if (answered and (exit_known or timed_out)) or time.monotonic() > deadline:
                break
            time.sleep(0.1)
        running = (marker.splitlines()[0] if marker else "") if answered else None
        death = _Death(running=running, timed_out=timed_out,
                       how=describe_exit(exitcode) if exit_known else describe_exit(None))
        self._deaths[cache_key] = death
        return death

    def _read_marker(self, address: str, host: str) -> tuple[bool, str | None]:
        """(whether a process on the dead worker's host answered, the marker text)."""
        assert self._client is not None
        for nanny in (True, False):
            try:
                replies = self._client.run(take_marker, address, nanny=nanny, on_error="return")
            except Exception:
                continue
            answered, marker = False, None
            for where, reply in replies.items():
                if isinstance(reply, BaseException):
                    continue
                if get_address_host(where) == host:
                    answered = True
                if reply:
                    answered, marker = True, reply
            if answered:
                return True, marker
        return False, None

    def _exit_status(self, pid: int) -> tuple[bool, int | None]:
        """The exit code of worker process ``pid`` from the nannies' logs (signals negative)."""
        assert self._client is not None
        try:
            logs = self._client.get_worker_logs(nanny=True)
        except Exception:
            return False, None
        for lines in logs.values():
            for entry in lines:
                text = entry[1] if isinstance(entry, (tuple, list)) else str(entry)
                match = _DEATH_LINE.search(text)
                if match and int(match.group(1)) == pid:
                    if match.group(2):
                        return True, -int(match.group(2))
                    if match.group(3):
                        return True, int(match.group(3))
                    return True, None
        return False, None

    # ------------------------------------------------------------------ cluster plumbing
    def _threads(self) -> int:
        assert self._client is not None
        threads = sum(self._client.nthreads().values())
        if threads == 0:
            try:
                self._client.wait_for_workers(1, timeout=_NO_WORKERS_WAIT_S)
            except TimeoutError:
                raise UsageError(f"the Dask scheduler at {self._client.scheduler.address} has no "
                                 f"workers; start some and run again") from None
            threads = sum(self._client.nthreads().values())
        return max(2, threads)

    def _deliver(self, fmus: Sequence[FMURef]) -> None:
        assert self._client is not None
        for fmu in fmus:
            if fmu.sha256 in self._delivered:
                continue
            try:
                data = Path(fmu.path).read_bytes()
            except OSError as exc:
                raise UsageError(f"{fmu.path}: cannot read the FMU ({exc.strerror})") from None
            if hashlib.sha256(data).hexdigest() != fmu.sha256:
                raise ModelError(f"{fmu.path} changed since the run started (sha256 "
                                 f"{fmu.sha256[:12]}... expected); restore it or start a new run")
            self._client.register_plugin(FMUDelivery(fmu.sha256, data),
                                         name=f"linobs-fmu-{fmu.sha256}")
            self._delivered.add(fmu.sha256)

    def worker_stats(self) -> list[WorkerStats]:
        """Counts of each live worker process (restarted workers start from zero)."""
        if self._client is None or self._closed:
            return []
        replies = self._client.run(worker_stats)
        return sorted(replies.values(), key=lambda s: (s.host, s.pid))

    def close(self) -> None:
        """Close the client, then the cluster this executor started (if any)."""
        if self._closed:
            return
        self._closed = True
        self._finalizer()

    def __enter__(self) -> DaskExecutor:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def _task_failure(task: Task, chunk: Chunk, result: Any) -> BaseException:
    _, exc, tb = result
    if isinstance(exc, LinobsError):
        return exc
    text = "".join(traceback.format_exception(type(exc), exc, tb) if tb is not None
                   else traceback.format_exception_only(type(exc), exc))
    return TaskError(f"the task {task_name(task)} raised on chunk {chunk.chunk_id}: "
                     f"{type(exc).__name__}: {exc}\n--- traceback in the worker process ---\n{text}",
                     text)
