"""The contract between a stage (what to compute per point) and the executors (where).

A stage cuts its work into :class:`Chunk` objects of :class:`WorkItem`.  An
executor runs ``task(context, chunk)`` in worker processes (local pool or a
Dask cluster) and hands back one :class:`ItemResult` per item.  A task is a
plain importable function, so it pickles by reference; everything in a chunk
and a result is JSON-compatible, so it can be stored as is.

The executor, not the task, produces ``crashed`` results: when a worker
process dies inside a chunk, the chunk is split and retried until the
offending item stands alone.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any, Literal, Protocol

Status = Literal["ok", "failed", "crashed", "not_converged"]
STATUSES: tuple[Status, ...] = ("ok", "failed", "crashed", "not_converged")


@dataclass(frozen=True)
class FMURef:
    """An FMU identified by content: its SHA-256 and where the coordinator has it."""

    sha256: str
    path: str  # absolute path on the coordinator; workers on other hosts receive the bytes


@dataclass(frozen=True)
class WorkItem:
    """One point of a stage: a stable integer id and a JSON-compatible payload."""

    item_id: int
    payload: dict[str, Any]


@dataclass(frozen=True)
class Chunk:
    """Items evaluated in order by one worker (order matters: continuation)."""

    chunk_id: str
    items: tuple[WorkItem, ...]
    settings: dict[str, Any] = field(default_factory=dict)  # shared by all items of the stage

    def split(self) -> tuple["Chunk", "Chunk"]:
        """Two halves (for isolating a crash); ids stay derived from the parent."""
        mid = len(self.items) // 2
        return (Chunk(f"{self.chunk_id}a", self.items[:mid], self.settings),
                Chunk(f"{self.chunk_id}b", self.items[mid:], self.settings))


@dataclass
class ItemResult:
    """What a stage computed for one item."""

    item_id: int
    status: Status
    data: dict[str, Any] = field(default_factory=dict)
    message: str = ""
    evaluations: int = 0
    seconds: float = 0.0


class WorkerContext(Protocol):
    """What a task may ask of the worker it runs in.

    The instance is reused by every chunk the worker runs, and a worker that
    died is replaced by a fresh one, so a task must not depend on what earlier
    chunks did to it: set the parameters each item needs (restoring the rest
    from :meth:`start_parameters`) and clear the instance's log before an item
    whose messages it reports.
    """

    def model(self, fmu: FMURef) -> Any:  # -> linobs.model.instance.Model
        """The worker's instance of this FMU (loaded once, reused across chunks)."""
        ...

    def fmu_file(self, fmu: FMURef) -> Any:  # -> pathlib.Path
        """The FMU file on this worker's host (for tools that load it themselves, e.g. fmpy)."""
        ...

    def start_parameters(self, fmu: FMURef) -> dict[str, float]:
        """Parameter values of this FMU's instance as freshly loaded (its start values)."""
        ...


Task = Callable[[WorkerContext, Chunk], list[ItemResult]]


@dataclass
class Progress:
    """Counts reported to the progress callback after every finished chunk."""

    total: int
    done: int = 0
    counts: dict[str, int] = field(default_factory=lambda: {s: 0 for s in STATUSES})
    seconds: float = 0.0

    @property
    def rate(self) -> float:
        return self.done / self.seconds if self.seconds > 0 else 0.0

    @property
    def eta(self) -> float | None:
        r = self.rate
        return (self.total - self.done) / r if r > 0 else None


ProgressCallback = Callable[[Progress], None]


@dataclass
class WorkerStats:
    """What one worker process has done so far (for diagnostics and tests)."""

    pid: int
    host: str
    chunks: int = 0
    items: int = 0
    instantiations: dict[str, int] = field(default_factory=dict)  # FMU sha256 -> loads
