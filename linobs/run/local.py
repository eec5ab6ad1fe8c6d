"""The local process pool: long-lived worker processes on this machine, crash-isolated.

The coordinator (the calling process) keeps one duplex pipe per worker,
hands out chunks first in, first out, and waits on the pipes and on the
processes' sentinels together (:func:`multiprocessing.connection.wait`), so
it learns at once both that a chunk finished and that a worker died.

Start method
    ``auto`` on Linux: ``fork`` while the coordinator runs a single thread,
    else ``forkserver``; ``spawn`` elsewhere.  ``fork`` is the fastest (the
    child has linobs, numpy and fmpy imported already: a worker is ready in
    milliseconds, which is most of the fixed cost of a small study) but
    copies a process that may run threads (a progress-bar refresher, a Dask
    client), and a forked child can inherit a lock held by a thread that does
    not exist in it; so it is used only when the coordinator has no other
    Python thread at the moment the worker starts.  The child touches none of
    the coordinator's open resources (run store, FMU instances) and leaves
    through ``os._exit``.  ``spawn`` and ``forkserver`` start from a clean
    interpreter; the fork server imports linobs once
    (``set_forkserver_preload``), so starting or restarting a worker is a fork
    of that warm, single-threaded server.

Crash isolation
    A worker that dies inside a chunk (segfault, abort, ``os._exit``, killed)
    or overruns the optional per-chunk ``timeout`` (then the coordinator
    kills it) is replaced by a fresh process; the chunk is split and its
    halves are queued first, recursively, until the offending item is
    recorded ``crashed`` (see :mod:`linobs.run.isolation`).

Workers ignore Ctrl-C (the coordinator handles it and stops them, so an
interrupt is never mistaken for a crash), write no core files, and exit by
themselves when the coordinator dies (a ``SIGKILL``-ed run leaves no
orphans behind).
"""

from __future__ import annotations

import faulthandler
import math
import multiprocessing
import multiprocessing.connection
import os
import signal
import sys
import threading
import time
import traceback
from collections import deque
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from linobs.errors import LinobsError, UsageError
from linobs.run.executor import (ChunkCallback, ProgressTracker, check_task, pack_exception,
                                 remote_failure)
from linobs.run.isolation import after_death, death_message, describe_exit, timeout_message
from linobs.run.types import Chunk, FMURef, ProgressCallback, Task, WorkerStats
from linobs.run.worker import ProcessWorkerContext, run_chunk

__all__ = ["LocalPoolExecutor", "available_cpus", "default_start_method"]

_STARTUP_FAILURES = 3  # consecutive deaths before "ready" that stop the run
_STOP_GRACE_S = 2.0


def available_cpus() -> int:
    """Cores this process may use: its CPU affinity, capped by a cgroup CPU quota."""
    try:
        count = len(os.sched_getaffinity(0))
    except (AttributeError, OSError):
        count = os.cpu_count() or 1
    try:  # cgroup v2 quota, e.g. "200000 100000" = 2 cores (containers, CI runners)
        quota, period = Path("/sys/fs/cgroup/cpu.max").read_text().split()[:2]
        if quota != "max":
            count = min(count, max(1, math.ceil(int(quota) / int(period))))
    except (OSError, ValueError):
        pass
    return max(1, count)


def default_start_method() -> str:
    """``auto`` (fork when single-threaded, else forkserver) on Linux, else ``spawn``."""
    if sys.platform.startswith("linux") and "forkserver" in multiprocessing.get_all_start_methods():
        return "auto"
    return "spawn"


def _fork_is_safe() -> bool:
    """No other Python thread runs in this process (so no lock can be inherited held)."""
    return threading.active_count() == 1


# ---------------------------------------------------------------------- worker side
def _no_core_files() -> None:
    try:
        import resource

        _, hard = resource.getrlimit(resource.RLIMIT_CORE)
        resource.setrlimit(resource.RLIMIT_CORE, (0, hard))
    except (ImportError, ValueError, OSError):
        pass


def _exit_with_parent() -> None:
    parent = multiprocessing.parent_process()
    if parent is None:
        return

    def watch() -> None:
        multiprocessing.connection.wait([parent.sentinel])
        os._exit(0)

    threading.Thread(target=watch, name="linobs-parent-watch", daemon=True).start()


def _worker_main(conn: multiprocessing.connection.Connection) -> None:
    """Body of a pool worker: run chunks until told to stop or the pipe closes."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    faulthandler.disable()  # a forked child inherits the parent's; a crash is reported by the
    _no_core_files()        # coordinator in one line, not as a traceback dump per process
    _exit_with_parent()
    context = ProcessWorkerContext()
    conn.send(("ready", os.getpid()))
    try:
        while True:
            try:
                message = conn.recv()
            except EOFError:
                break
            except Exception as exc:  # the task could not be unpickled here
                conn.send(("error", None, pack_exception(exc), traceback.format_exc()))
                continue
            if message[0] == "stop":
                break
            _, task, chunk = message
            try:
                results = run_chunk(task, context, chunk)
            except Exception as exc:
                conn.send(("error", chunk.chunk_id, pack_exception(exc), traceback.format_exc()))
            else:
                conn.send(("done", chunk.chunk_id, results, context.stats()))
    except (BrokenPipeError, ConnectionResetError):
        pass
    finally:
        context.close()


# ---------------------------------------------------------------------- coordinator side
@dataclass
class _Slot:
    """One worker process as the coordinator sees it."""

    process: Any
    conn: multiprocessing.connection.Connection
    ready: bool = False
    chunk: Chunk | None = None
    started: float = 0.0


class LocalPoolExecutor:
    """Long-lived worker processes on this machine, with crash isolation.

    Parameters
    ----------
    workers
        Number of worker processes; default :func:`available_cpus`.
    timeout
        Wall-clock limit per chunk in seconds (a hung FMU); a chunk that
        overruns it is handled like a crash.  ``None``: no limit.
    start_method
        ``"forkserver"``, ``"spawn"`` or ``"fork"``; default
        :func:`default_start_method` (see the module docstring).

    Attributes
    ----------
    restarts : int
        Worker processes replaced after a death or timeout.
    """

    def __init__(self, workers: int | None = None, *, timeout: float | None = None,
                 start_method: str | None = None) -> None:
        if workers is not None and workers < 1:
            raise UsageError(f"the pool needs at least one worker process, not {workers}")
        if timeout is not None and not timeout > 0:
            raise UsageError(f"the chunk timeout must be a positive number of seconds, not {timeout}")
        self.workers = workers if workers is not None else available_cpus()
        self.timeout = timeout
        method = start_method or default_start_method()
        if method not in ("auto", "fork", "forkserver", "spawn"):
            raise UsageError(f"unknown start method {method!r}; use auto, fork, forkserver or spawn")
        self.start_method = method
        self._mp = multiprocessing.get_context("forkserver" if method == "auto" else method)
        if method in ("forkserver", "auto"):
            self._mp.set_forkserver_preload(["linobs.run.local"])
        self._fork = multiprocessing.get_context("fork") if method == "auto" else None
        self._slots: list[_Slot] = []
        self._stats: dict[int, WorkerStats] = {}
        self._closed = False
        self.restarts = 0

    # ------------------------------------------------------------------ processes
    def _start_worker(self) -> _Slot:
        mp = self._fork if self._fork is not None and _fork_is_safe() else self._mp
        parent, child = mp.Pipe(duplex=True)
        process = mp.Process(target=_worker_main, args=(child,), name="linobs-worker",
                             daemon=True)
        process.start()
        child.close()
        return _Slot(process=process, conn=parent)

    def _ensure_workers(self) -> None:
        while len(self._slots) < self.workers:
            self._slots.append(self._start_worker())

    def _replace(self, slot: _Slot) -> _Slot:
        slot.conn.close()
        slot.process.join(timeout=_STOP_GRACE_S)
        fresh = self._start_worker()
        self._slots[self._slots.index(slot)] = fresh
        self.restarts += 1
        return fresh

    def _kill_all(self) -> None:
        for slot in self._slots:
            if slot.process.is_alive():
                slot.process.kill()
        for slot in self._slots:
            slot.process.join(timeout=_STOP_GRACE_S)
            slot.conn.close()
        self._slots = []

    # ------------------------------------------------------------------ running
    def run(self, task: Task, chunks: Iterable[Chunk], *, fmus: Sequence[FMURef],
            on_chunk: ChunkCallback, progress: ProgressCallback | None = None,
            total: int | None = None) -> None:
        """Run ``task`` on every chunk; see :meth:`linobs.run.executor.Executor.run`."""
        if self._closed:
            raise UsageError("this executor is closed; create a new one")
        check_task(task)
        for fmu in fmus:
            if not Path(fmu.path).is_file():
                raise UsageError(f"{fmu.path}: no such FMU file")
        tracker = ProgressTracker(chunks, total, progress)
        try:
            self._run(task, iter(chunks), on_chunk, tracker)
        except BaseException:
            self._kill_all()  # chunks in flight are lost; the next run starts fresh workers
            raise

    def _run(self, task: Task, source: Iterator[Chunk], on_chunk: ChunkCallback,
             tracker: ProgressTracker) -> None:
        retry: deque[Chunk] = deque()
        exhausted = False
        failures = 0

        def next_chunk() -> Chunk | None:
            nonlocal exhausted
            if retry:
                return retry.popleft()
            while not exhausted:
                chunk = next(source, None)
                if chunk is None:
                    exhausted = True
                elif chunk.items:
                    return chunk
            return None

        self._ensure_workers()
        while True:
            for slot in self._slots:
                if slot.ready and slot.chunk is None:
                    chunk = next_chunk()
                    if chunk is None:
                        break
                    self._dispatch(slot, task, chunk, retry)
            busy = [s for s in self._slots if s.chunk is not None]
            if not busy and not retry and exhausted:
                return
            ready = multiprocessing.connection.wait(
                [s.conn for s in self._slots] + [s.process.sentinel for s in self._slots],
                timeout=self._wait_timeout(busy))
            for slot in list(self._slots):
                died = False
                if slot.conn in ready:
                    try:
                        message = slot.conn.recv()
                    except (EOFError, OSError):
                        died = True
                    else:
                        self._handle(slot, message, task, on_chunk, tracker)
                        failures = 0
                if died or (slot.process.sentinel in ready and not slot.conn.poll()):
                    failures = self._on_death(slot, None, retry, on_chunk, tracker, failures)
            if self.timeout is not None:
                now = time.monotonic()
                for slot in list(self._slots):
                    if slot.chunk is not None and now - slot.started > self.timeout:
                        slot.process.kill()
                        slot.process.join()
                        self._on_death(slot, self.timeout, retry, on_chunk, tracker, 0)

    def _wait_timeout(self, busy: list[_Slot]) -> float | None:
        if self.timeout is None or not busy:
            return None
        first = min(s.started for s in busy) + self.timeout
        return max(0.0, first - time.monotonic()) + 0.01

    def _dispatch(self, slot: _Slot, task: Task, chunk: Chunk, retry: deque[Chunk]) -> None:
        try:
            slot.conn.send(("run", task, chunk))
        except (BrokenPipeError, ConnectionResetError, EOFError, OSError):
            retry.appendleft(chunk)  # never reached the worker; its death is handled as idle
            return
        slot.chunk = chunk
        slot.started = time.monotonic()

    def _handle(self, slot: _Slot, message: tuple[Any, ...], task: Task,
                on_chunk: ChunkCallback, tracker: ProgressTracker) -> None:
        kind = message[0]
        if kind == "ready":
            slot.ready = True
            return
        chunk, slot.chunk = slot.chunk, None
        if kind == "done":
            _, chunk_id, results, stats = message
            self._stats[stats.pid] = stats
            assert chunk is not None and chunk.chunk_id == chunk_id
            on_chunk(chunk, results)
            tracker.add(results)
            return
        _, chunk_id, packed, text = message
        raise remote_failure(task, chunk_id or (chunk.chunk_id if chunk else "?"), packed, text)

    def _on_death(self, slot: _Slot, timed_out: float | None, retry: deque[Chunk],
                  on_chunk: ChunkCallback, tracker: ProgressTracker, failures: int) -> int:
        slot.process.join(timeout=_STOP_GRACE_S)
        exitcode = slot.process.exitcode
        chunk = slot.chunk
        was_ready = slot.ready
        self._stats.pop(slot.process.pid, None)
        self._replace(slot)
        if chunk is None:
            if was_ready:
                return 0
            failures += 1
            if failures >= _STARTUP_FAILURES:
                raise LinobsError(
                    f"worker processes die right after starting ({describe_exit(exitcode)}); "
                    f"check that `python -c 'import linobs'` works in a fresh interpreter")
            return failures
        seconds = time.monotonic() - slot.started
        message = (timeout_message(timed_out) if timed_out is not None
                   else death_message(describe_exit(exitcode)))
        halves, result = after_death(chunk, message, seconds)
        retry.extendleft(reversed(halves))
        if result is not None:
            on_chunk(chunk, [result])
            tracker.add([result])
        return 0

    # ------------------------------------------------------------------ inspection, shutdown
    def worker_stats(self) -> list[WorkerStats]:
        """The latest counts reported by each live worker process."""
        live = {s.process.pid for s in self._slots}
        return [s for pid, s in sorted(self._stats.items()) if pid in live]

    def close(self) -> None:
        """Ask the workers to stop, then kill any that do not within a grace period."""
        if self._closed:
            return
        self._closed = True
        for slot in self._slots:
            try:
                slot.conn.send(("stop",))
            except OSError:
                pass
        deadline = time.monotonic() + _STOP_GRACE_S
        for slot in self._slots:
            slot.process.join(timeout=max(0.0, deadline - time.monotonic()))
        self._kill_all()

    def __enter__(self) -> LocalPoolExecutor:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def __del__(self) -> None:  # pragma: no cover - best effort at interpreter exit
        try:
            if not self._closed:
                self._kill_all()
        except Exception:
            pass
