"""Tasks used only by the run tests (importable, so they travel to workers by reference)."""

from __future__ import annotations

import os

from linobs.errors import UsageError
from linobs.run.probe import evaluate_chunk
from linobs.run.types import Chunk, ItemResult, WorkerContext


def exit_or_probe(context: WorkerContext, chunk: Chunk) -> list[ItemResult]:
    """The probe, except that an item with payload ``{"exit": n}`` ends the process with ``_exit(n)``."""
    for item in chunk.items:
        if "exit" in item.payload:
            os._exit(int(item.payload["exit"]))
    return evaluate_chunk(context, chunk)


def raise_value_error(context: WorkerContext, chunk: Chunk) -> list[ItemResult]:
    raise ValueError(f"deliberate bug on {chunk.chunk_id}")


def raise_usage_error(context: WorkerContext, chunk: Chunk) -> list[ItemResult]:
    raise UsageError("deliberate usage error")


def answer_for_wrong_items(context: WorkerContext, chunk: Chunk) -> list[ItemResult]:
    return [ItemResult(item.item_id + 1000, "ok") for item in chunk.items]
