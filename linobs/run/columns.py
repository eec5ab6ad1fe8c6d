"""Columnar chunk results: stacked arrays per chunk instead of one JSON object per point.

A stage's task may return its results as a :class:`ColumnarResults`: the
usual list of :class:`~linobs.run.types.ItemResult` (status, message,
evaluations, seconds; ``data`` left empty) plus ``arrays`` (numpy arrays
whose first axis runs over the items, in the same order) and ``meta`` (a
JSON-compatible dict of what the items share: names, units, constants, and
per-item ragged lists).  The executors pass it through unchanged (it is a
``list``, so crash isolation, splitting and the item-id check work as for
plain lists), and the run store keeps the arrays as one binary blob per
chunk (:func:`pack`, an ``.npz`` archive without pickled objects) beside the
per-item status rows.

Encoding: ``numpy.savez`` of the arrays plus one extra member ``__meta__``
holding the UTF-8 JSON of ``meta``; read back with ``allow_pickle=False``, so
a stored chunk can never execute code when it is decoded.
"""

from __future__ import annotations

import io
import json
from collections.abc import Iterable, Mapping
from typing import Any

import numpy as np

from linobs.run.types import ItemResult

__all__ = ["ColumnarResults", "pack", "unpack"]

_META = "__meta__"


class ColumnarResults(list):  # type: ignore[type-arg]
    """Item results of one chunk with their stacked arrays (row k = item k).

    Attributes
    ----------
    arrays : dict[str, ndarray]
        Arrays whose first axis has one entry per item, in list order.
    meta : dict
        JSON-compatible values shared by the chunk (or per-item lists).
    """

    def __init__(self, items: Iterable[ItemResult], arrays: Mapping[str, np.ndarray],
                 meta: Mapping[str, Any] | None = None) -> None:
        super().__init__(items)
        self.arrays = {k: np.asarray(v) for k, v in arrays.items()}
        self.meta = dict(meta or {})
        for key, value in self.arrays.items():
            if value.dtype == object:
                raise TypeError(f"column {key!r} has object dtype; store numbers or fixed-width "
                                f"strings")
            if value.ndim == 0 or value.shape[0] != len(self):
                raise ValueError(f"column {key!r} has shape {value.shape}, expected a first axis "
                                 f"of {len(self)} (one row per item)")

    def __reduce__(self) -> tuple[Any, ...]:
        return (ColumnarResults, (list(self), self.arrays, self.meta))


def pack(arrays: Mapping[str, np.ndarray], meta: Mapping[str, Any]) -> bytes:
    """Arrays and a JSON-compatible dict as one ``.npz`` blob (no pickled objects)."""
    if _META in arrays:
        raise ValueError(f"{_META!r} is a reserved column name")
    buffer = io.BytesIO()
    text = json.dumps(dict(meta), separators=(",", ":"))
    np.savez(buffer, **{k: np.asarray(v) for k, v in arrays.items()},
             **{_META: np.frombuffer(text.encode("utf-8"), dtype=np.uint8)})
    return buffer.getvalue()


def unpack(blob: bytes) -> tuple[dict[str, np.ndarray], dict[str, Any]]:
    """The inverse of :func:`pack`.

    Raises
    ------
    ValueError
        The blob is not an archive written by :func:`pack` (damaged or foreign).
    """
    try:
        with np.load(io.BytesIO(blob), allow_pickle=False) as archive:
            arrays = {k: archive[k] for k in archive.files}
    except Exception as exc:  # zipfile.BadZipFile, OSError, ValueError, EOFError
        raise ValueError(f"not a linobs column archive ({type(exc).__name__}: {exc})") from None
    raw = arrays.pop(_META, None)
    if raw is None:
        raise ValueError("not a linobs column archive (no metadata member)")
    return arrays, json.loads(raw.tobytes().decode("utf-8"))
