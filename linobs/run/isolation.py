"""Crash isolation: what to do with a chunk whose worker process died.

Both executors follow the same rule.  When a worker process dies (segfault,
abort, ``os._exit``, killed) or overruns the wall-clock timeout while running
a chunk, only that chunk is affected: it is split in two halves
(:meth:`Chunk.split`) that go to the front of the queue, recursively, until
the offending item stands alone; that item is then recorded ``crashed`` with
a message naming the signal, the exit code or the timeout.  Items that do not
crash are simply evaluated again in a smaller chunk, so their results are
exactly what a run without the faulty items gives (tasks are deterministic
per chunk).
"""

from __future__ import annotations

import signal

from linobs.run.types import Chunk, ItemResult

__all__ = ["TIMEOUT_EXIT_STATUS", "after_death", "death_message", "describe_exit",
           "timeout_message"]

#: Exit status of a worker that stopped itself at its wall-clock limit (the
#: status that the POSIX ``timeout`` utility uses; common practice).
TIMEOUT_EXIT_STATUS = 124


def describe_exit(exitcode: int | None) -> str:
    """``"SIGSEGV"`` for a process killed by signal 11, ``"exit code 3"`` for ``_exit(3)``."""
    if exitcode is None:
        return "an unknown exit status"
    if exitcode < 0:
        try:
            return signal.Signals(-exitcode).name
        except ValueError:
            return f"signal {-exitcode}"
    return f"exit code {exitcode}"


def death_message(how: str) -> str:
    """The ``crashed`` message of a lone item whose worker died (``how`` from :func:`describe_exit`)."""
    return f"worker process died with {how} while evaluating this point"


def timeout_message(seconds: float) -> str:
    """The ``crashed`` message of a lone item that overran the wall-clock limit."""
    return (f"timed out after {seconds:g} s while evaluating this point (the worker process "
            f"was stopped)")


def after_death(chunk: Chunk, message: str, seconds: float) -> tuple[list[Chunk], ItemResult | None]:
    """What follows the death of the worker that ran ``chunk``.

    Returns
    -------
    retry, result
        For a chunk of several items: its two halves to run next (first half
        first) and no result.  For a single item: nothing to retry and its
        ``crashed`` result carrying ``message``.
    """
    if len(chunk.items) > 1:
        return list(chunk.split()), None
    item = chunk.items[0]
    return [], ItemResult(item_id=item.item_id, status="crashed", message=message,
                          seconds=float(seconds))
