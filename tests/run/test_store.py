"""The durable run store: identity checks, round trips, WAL mode, locking."""

from __future__ import annotations

import math
import sqlite3
import struct
from pathlib import Path

import pytest

from linobs.errors import LinobsError, UsageError
from linobs.run.store import RunStore
from linobs.run.types import ItemResult

IDENTITY = {"study_hash": "a" * 64, "fmu_sha256": "b" * 64, "study": '{"grid": []}',
            "linobs_version": "0.1.0"}


def _bits(x: float) -> bytes:
    return struct.pack("<d", x)


def test_round_trip_counts_and_stage_info(tmp_path: Path) -> None:
    results = [ItemResult(2, "ok", {"dx": [0.1 + 0.2, -0.0, 5e-324], "y": [1e308]}, "", 7, 0.5),
               ItemResult(0, "failed", {"fmu_log": ["[Error] x"]}, "went wrong", 3, 0.25),
               ItemResult(1, "crashed", {}, "worker process died with SIGSEGV", 0, 1.0),
               ItemResult(3, "not_converged", {"residual": math.inf}, "no", 50, 2.0)]
    with RunStore.open(tmp_path / "run", IDENTITY, resume=False) as store:
        store.write_chunk("trim", "c00000", results[:2])
        store.write_chunk("trim", "c00001", results[2:])
        assert store.stage_info("trim") is None
        store.mark_stage_complete("trim", {"points": 4})
    with RunStore.open(tmp_path / "run", IDENTITY, resume=True) as store:
        back = store.results("trim")
        assert [r.item_id for r in back] == [0, 1, 2, 3]
        by_id = {r.item_id: r for r in results}
        for r in back:
            assert r == by_id[r.item_id]
        # common practice: IEEE 754 doubles survive a shortest-repr text round trip bit for bit
        assert [_bits(v) for v in back[2].data["dx"]] == [_bits(0.1 + 0.2), _bits(-0.0),
                                                           _bits(5e-324)]
        assert store.done_ids("trim") == {0, 1, 2, 3}
        assert store.done_ids("linearize") == set()
        assert store.counts("trim") == {"ok": 1, "failed": 1, "crashed": 1, "not_converged": 1}
        assert store.stage_info("trim") == {"points": 4}
        meta = store.meta
        assert {k: meta[k] for k in IDENTITY} == IDENTITY and meta["created"]


def test_rewriting_an_item_replaces_it(tmp_path: Path) -> None:
    with RunStore.open(tmp_path, IDENTITY, resume=False) as store:
        store.write_chunk("s", "c0", [ItemResult(5, "crashed", message="died")])
        store.write_chunk("s", "c0b", [ItemResult(5, "ok", {"y": [1.0]})])
        assert [(r.status, r.data) for r in store.results("s")] == [("ok", {"y": [1.0]})]


def test_refuses_to_overwrite_a_run(tmp_path: Path) -> None:
    RunStore.open(tmp_path, IDENTITY, resume=False).close()
    with pytest.raises(UsageError, match="already holds a run; pass --resume"):
        RunStore.open(tmp_path, IDENTITY, resume=False)


@pytest.mark.parametrize("key, word", [("fmu_sha256", "FMU"), ("study_hash", "study")])
def test_refuses_to_resume_with_another_fmu_or_study(tmp_path: Path, key: str, word: str) -> None:
    RunStore.open(tmp_path, IDENTITY, resume=False).close()
    other = {**IDENTITY, key: "c" * 64}
    with pytest.raises(UsageError, match=f"different {word} .*{key}"):
        RunStore.open(tmp_path, other, resume=True)


def test_resume_without_a_run_starts_one(tmp_path: Path) -> None:
    with RunStore.open(tmp_path / "new", IDENTITY, resume=True) as store:
        assert store.done_ids("s") == set()
        assert store.meta["study_hash"] == IDENTITY["study_hash"]


def test_wal_mode_and_synchronous_level(tmp_path: Path) -> None:
    with RunStore.open(tmp_path, IDENTITY, resume=False) as store:
        store.write_chunk("s", "c0", [ItemResult(0, "ok")])
        with sqlite3.connect(f"file:{store.path}?mode=ro", uri=True) as reader:
            # SQLite documentation: journal_mode is persistent, reported as "wal"
            assert reader.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
            # a reader sees committed chunks while the writer keeps the database open
            assert reader.execute("SELECT COUNT(*) FROM results").fetchone()[0] == 1
        # SQLite documentation: synchronous NORMAL is level 1
        assert store._db.execute("PRAGMA synchronous").fetchone()[0] == 1


def test_one_coordinator_per_run(tmp_path: Path) -> None:
    with RunStore.open(tmp_path, IDENTITY, resume=False), \
            pytest.raises(UsageError, match="another linobs process"):
        RunStore.open(tmp_path, IDENTITY, resume=True)
    RunStore.open(tmp_path, IDENTITY, resume=True).close()  # released on close


def test_not_a_store(tmp_path: Path) -> None:
    (tmp_path / "run.sqlite").write_bytes(b"this is not a database, just text" * 40)
    with pytest.raises(LinobsError, match="not a readable linobs run store"):
        RunStore.open(tmp_path, IDENTITY, resume=True)


def test_identity_required(tmp_path: Path) -> None:
    with pytest.raises(ValueError, match="fmu_sha256"):
        RunStore.open(tmp_path, {"study_hash": "x"}, resume=False)


def test_data_must_be_json(tmp_path: Path) -> None:
    with RunStore.open(tmp_path, IDENTITY, resume=False) as store:
        with pytest.raises(TypeError, match="item 4 of chunk c9"):
            store.write_chunk("s", "c9", [ItemResult(4, "ok", {"x": object()})])
        assert store.done_ids("s") == set()  # nothing half-written
