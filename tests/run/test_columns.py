"""Columnar chunk results in the run store: round trip, shadowing, damage, no pickle."""

from __future__ import annotations

import pickle
import sqlite3
from pathlib import Path

import numpy as np
import pytest

from linobs.errors import LinobsError
from linobs.run.columns import ColumnarResults, pack, unpack
from linobs.run.store import RunStore
from linobs.run.types import ItemResult

IDENTITY = {"study_hash": "s" * 64, "fmu_sha256": "f" * 64}


def _chunk(ids: list[int], scale: float) -> ColumnarResults:
    k = len(ids)
    A = np.arange(k * 4, dtype=float).reshape(k, 2, 2) * scale
    return ColumnarResults([ItemResult(i, "ok", message=f"point {i}") for i in ids],
                           {"A": A, "status": np.array(["ok"] * k), "n": np.arange(k)},
                           {"states": ["a", "b"], "note": [f"n{i}" for i in ids]})


def test_pack_round_trip_is_exact_and_refuses_pickles() -> None:
    arrays = {"A": np.random.default_rng(1).normal(size=(5, 3, 3)),
              "s": np.array(["ok", "failed", "ok", "ok", "not_converged"])}
    got, meta = unpack(pack(arrays, {"names": ["x"], "t": 1.5}))
    assert meta == {"names": ["x"], "t": 1.5}
    np.testing.assert_array_equal(got["A"], arrays["A"])  # bit-exact binary storage
    assert got["s"].tolist() == arrays["s"].tolist()
    with pytest.raises(TypeError, match="object dtype"):
        ColumnarResults([ItemResult(0, "ok")], {"x": np.array([{"a": 1}], dtype=object)})
    with pytest.raises(ValueError, match="not a linobs column archive"):
        unpack(b"PK\x03\x04 damaged beyond repair")


def test_columnar_results_pickle_with_their_arrays() -> None:
    chunk = _chunk([3, 4], 1.0)
    back = pickle.loads(pickle.dumps(chunk))  # how the pool and Dask carry results
    assert [r.item_id for r in back] == [3, 4]
    np.testing.assert_array_equal(back.arrays["A"], chunk.arrays["A"])
    assert back.meta == chunk.meta
    with pytest.raises(ValueError, match="first axis"):
        ColumnarResults([ItemResult(0, "ok")], {"x": np.zeros((2, 2))})


def test_store_keeps_the_chunk_each_row_names(tmp_path: Path) -> None:
    with RunStore.open(tmp_path, IDENTITY, resume=False) as store:
        store.write_chunk("sweep", "c0", _chunk([0, 1, 2], 1.0))
        store.write_chunk("sweep", "c1", _chunk([3], 1.0))
        # item 1 recomputed in another chunk (e.g. after a crash split): its new row wins
        store.write_chunk("sweep", "c2", _chunk([1], 10.0))
        ids, metas, blocks, chunk_of, row_of = store.columns("sweep")
        assert ids.tolist() == [0, 1, 2, 3]
        A1 = blocks[chunk_of[1]]["A"][row_of[1]]
        np.testing.assert_array_equal(A1, np.arange(4.0).reshape(2, 2) * 10.0)
        assert metas[chunk_of[3]]["note"] == ["n3"]
        assert store.results("sweep")[1].message == "point 1"
    with RunStore.open(tmp_path, IDENTITY, resume=True) as store:  # durable across reopen
        assert store.columns("sweep")[0].tolist() == [0, 1, 2, 3]


def test_a_damaged_blob_is_reported(tmp_path: Path) -> None:
    with RunStore.open(tmp_path, IDENTITY, resume=False) as store:
        store.write_chunk("sweep", "c0", _chunk([0], 1.0))
    with sqlite3.connect(tmp_path / "run.sqlite") as db:
        db.execute("UPDATE columns SET blob = ?", (b"truncated",))
    with RunStore.open(tmp_path, IDENTITY, resume=True) as store, \
            pytest.raises(LinobsError, match="damaged"):
        store.columns("sweep")
