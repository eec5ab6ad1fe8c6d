"""Cutting a stage's items into chunks, and the rule for their size.

The size rule (:func:`chunk_size`) is ``ceil(n / (workers x 6))`` items,
clamped to 1 .. 256, balancing three costs:

* load balance — about ``chunks_per_worker`` (default 6) chunks per worker,
  so the last chunk to finish leaves the other workers idle for at most
  about 1/6 of a worker's share;
* per-chunk overhead — one round trip per chunk: about 0.5 ms on the local
  pool, 5 ms on a Dask cluster (several loopback TCP messages through the
  scheduler; measured on a 2-core virtual machine), so a chunk should hold
  at least ~50 ms of work to keep that below ~10 %; more chunks per worker
  would cut into that on sweeps of cheap points;
* what a fault costs — a crash in a chunk of ``s`` items takes about
  ``log2(s)`` worker restarts to isolate (a few ms each on the pool, about a
  second on Dask), and a killed coordinator loses the chunks in flight;
  hence at most ``max_size`` (default 256) items.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from typing import Any

from linobs.run.types import Chunk, WorkItem

__all__ = ["chunk_size", "make_chunks"]


def chunk_size(n_items: int, workers: int, *, chunks_per_worker: int = 6, max_size: int = 256) -> int:
    """Items per chunk for ``n_items`` spread over ``workers`` (see the module docstring)."""
    if n_items <= 0:
        return 1
    return max(1, min(max_size, math.ceil(n_items / (max(1, workers) * chunks_per_worker))))


def make_chunks(items: Iterable[WorkItem], size: int, *, settings: dict[str, Any] | None = None,
                prefix: str = "c") -> list[Chunk]:
    """Consecutive chunks of ``size`` items (the last may be shorter), ids ``prefix00000``..."""
    if size < 1:
        raise ValueError(f"chunk size must be at least 1, not {size}")
    items = list(items)
    shared = dict(settings or {})
    return [Chunk(f"{prefix}{k:05d}", tuple(items[i:i + size]), shared)
            for k, i in enumerate(range(0, len(items), size))]
