"""Array field types for pydantic models: numpy inside, nested lists on disk."""

from __future__ import annotations

from typing import Annotated, Any

import numpy as np
from pydantic import PlainSerializer, PlainValidator, WithJsonSchema


def _to_float_array(ndim: int):  # type: ignore[no-untyped-def]
    def validate(value: Any) -> np.ndarray:
        arr = np.array(value, dtype=float)
        if ndim == 2 and arr.ndim == 1 and arr.size == 0:  # [] stands for a matrix with no rows
            arr = arr.reshape(0, 0)
        if arr.ndim != ndim:
            raise ValueError(f"expected a {ndim}-dimensional array, got shape {arr.shape}")
        return arr
    return validate


def _serialize(arr: np.ndarray) -> list[Any]:
    return np.asarray(arr, dtype=float).tolist()


Vector = Annotated[
    np.ndarray,
    PlainValidator(_to_float_array(1)),
    PlainSerializer(_serialize, return_type=list),
    WithJsonSchema({"type": "array", "items": {"type": "number"}}),
]
"""A 1-D float array (serialized as a list of numbers)."""

Matrix = Annotated[
    np.ndarray,
    PlainValidator(_to_float_array(2)),
    PlainSerializer(_serialize, return_type=list),
    WithJsonSchema({"type": "array", "items": {"type": "array", "items": {"type": "number"}}}),
]
"""A 2-D float array, row = equation (serialized as nested lists)."""
