"""The durable run store: every finished chunk on disk, so a run can be resumed.

One SQLite database per run, ``RUN_DIR/run.sqlite``, in WAL mode.  Only the
coordinator writes, one transaction per finished chunk, so killing the
process at any moment loses at most the chunks in flight; a resumed run asks
:meth:`RunStore.done_ids` and computes only the rest.  Other processes may
read the file while a run writes it (WAL readers never block the writer).

Durability: ``PRAGMA synchronous=NORMAL``.  In WAL mode a transaction is
committed once its frames are in the WAL file, so it survives the death of
the process (crash, ``SIGKILL``, Ctrl-C) — the case a long sweep must
survive.  Only a power cut or an operating-system crash can undo the last
few commits (never corrupting the database); those chunks are then simply
computed again on resume.  ``FULL`` would add an fsync per chunk, which
costs tens of milliseconds on laptops and network disks and buys nothing
that resume does not already give.  (WAL needs a local file system: SQLite's
shared-memory index does not work over network file systems.)

Tables
------
``meta(key, value)``
    The run's identity: ``study_hash``, ``fmu_sha256``, ``study`` (JSON),
    ``linobs_version`` — as given to :meth:`RunStore.open` — plus ``created``
    (UTC, ISO 8601) and ``store_format``.
``results(stage, item_id, chunk_id, status, data, message, evaluations, seconds)``
    One row per item and stage, primary key ``(stage, item_id)``; ``data`` is
    JSON.
``columns(seq, stage, chunk_id, blob)``
    Stacked arrays of a chunk whose task answered with
    :class:`~linobs.run.columns.ColumnarResults` (one ``.npz`` blob per chunk,
    written in the same transaction as the chunk's rows, whose ``data`` is
    then empty).  An item's authoritative arrays are those of the chunk named
    in its ``results`` row (a chunk split by a crash, or recomputed on
    resume, writes a new blob; older blobs are shadowed).
``stages(stage, info, completed)``
    Stages marked complete, with a JSON summary.

A lock file (``RUN_DIR/run.lock``, an advisory ``flock``) keeps two
coordinators from writing the same run at once; the kernel releases it when
the process dies.
"""

from __future__ import annotations

import json
import os
import sqlite3
from collections.abc import Mapping, Sequence
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np

from linobs.errors import LinobsError, UsageError
from linobs.run.columns import ColumnarResults, pack, unpack
from linobs.run.types import STATUSES, ItemResult

__all__ = ["IDENTITY_KEYS", "STORE_FILE", "RunStore"]

STORE_FILE = "run.sqlite"
LOCK_FILE = "run.lock"
STORE_FORMAT = "2"
#: Formats this linobs reads (1: one JSON object per item; 2 adds columnar chunks).
READABLE_FORMATS = ("2",)
#: Identity entries that must match for a run to be resumed.
IDENTITY_KEYS = ("study_hash", "fmu_sha256")
_WHAT = {"study_hash": "study", "fmu_sha256": "FMU"}

_SCHEMA = """
CREATE TABLE IF NOT EXISTS meta (
    key   TEXT PRIMARY KEY,
    value TEXT NOT NULL
);
CREATE TABLE IF NOT EXISTS results (
    stage       TEXT    NOT NULL,
    item_id     INTEGER NOT NULL,
    chunk_id    TEXT    NOT NULL,
    status      TEXT    NOT NULL CHECK (status IN ('ok', 'failed', 'crashed', 'not_converged')),
    data        TEXT    NOT NULL,
    message     TEXT    NOT NULL,
    evaluations INTEGER NOT NULL,
    seconds     REAL    NOT NULL,
    PRIMARY KEY (stage, item_id)
);
CREATE TABLE IF NOT EXISTS columns (
    seq      INTEGER PRIMARY KEY AUTOINCREMENT,
    stage    TEXT NOT NULL,
    chunk_id TEXT NOT NULL,
    blob     BLOB NOT NULL
);
CREATE INDEX IF NOT EXISTS columns_by_stage ON columns (stage, chunk_id);
CREATE TABLE IF NOT EXISTS stages (
    stage     TEXT PRIMARY KEY,
    info      TEXT NOT NULL,
    completed TEXT NOT NULL
);
"""

_UPSERT = """
INSERT INTO results (stage, item_id, chunk_id, status, data, message, evaluations, seconds)
VALUES (?, ?, ?, ?, ?, ?, ?, ?)
ON CONFLICT (stage, item_id) DO UPDATE SET
    chunk_id = excluded.chunk_id, status = excluded.status, data = excluded.data,
    message = excluded.message, evaluations = excluded.evaluations, seconds = excluded.seconds
"""


def _now() -> str:
    return datetime.now(UTC).isoformat(timespec="seconds")


def _short(value: str) -> str:
    return value if len(value) <= 16 else value[:12] + "..."


class _RunLock:
    """An exclusive advisory lock on ``RUN_DIR/run.lock`` (no-op where flock is missing)."""

    def __init__(self, run_dir: Path) -> None:
        self._fd: int | None = None
        try:
            import fcntl
        except ImportError:  # pragma: no cover - Windows
            return
        fd = os.open(run_dir / LOCK_FILE, os.O_RDWR | os.O_CREAT, 0o644)
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            os.close(fd)
            raise UsageError(f"another linobs process is running the run in {run_dir}; wait "
                             f"for it to finish or choose another folder") from None
        self._fd = fd
        _HELD.add(fd)

    def release(self) -> None:
        if self._fd is not None:
            _HELD.discard(self._fd)
            os.close(self._fd)  # closing the descriptor releases the lock
            self._fd = None


_HELD: set[int] = set()
"""Descriptors of the run locks this process holds."""


def _drop_inherited_locks() -> None:
    """In a forked child (a pool worker): let go of the parent's lock descriptors, so the
    lock lives exactly as long as the coordinator holds it."""
    for fd in list(_HELD):
        try:
            os.close(fd)
        except OSError:
            pass
    _HELD.clear()


if hasattr(os, "register_at_fork"):
    os.register_at_fork(after_in_child=_drop_inherited_locks)


class RunStore:
    """The results of one run, in ``RUN_DIR/run.sqlite``; open it with :meth:`open`."""

    def __init__(self, run_dir: Path, connection: sqlite3.Connection, lock: _RunLock) -> None:
        self.run_dir = run_dir
        self.path = run_dir / STORE_FILE
        self._db = connection
        self._lock = lock
        # decoded results per stage, dropped when the stage is written to (the coordinator
        # reads the sweep's results in several stages; JSON decoding dominates there)
        self._cache: dict[str, list[ItemResult]] = {}
        self._column_cache: dict[str, tuple[np.ndarray, list[dict[str, Any]],
                                            list[dict[str, np.ndarray]], np.ndarray,
                                            np.ndarray]] = {}

    # ------------------------------------------------------------------ opening
    @classmethod
    def open(cls, run_dir: str | os.PathLike[str], identity: Mapping[str, str], *,
             resume: bool) -> RunStore:
        """Create the store of a new run, or reopen an existing one to resume it.

        Parameters
        ----------
        run_dir
            The run's folder (created if missing).
        identity
            ``study_hash`` and ``fmu_sha256`` (required), usually also
            ``study`` (the study as JSON) and ``linobs_version``.  Stored in
            ``meta`` when the run is created.
        resume
            Continue the run already in ``run_dir``.  Without an existing run
            a new one is started.

        Raises
        ------
        UsageError
            ``run_dir`` already holds a run and ``resume`` is false; or it
            holds a run of another study or FMU; or another process has it open.
        LinobsError
            ``run.sqlite`` is not a readable linobs run store.
        """
        missing = [k for k in IDENTITY_KEYS if not identity.get(k)]
        if missing:
            raise ValueError(f"the run identity needs {', '.join(missing)}")
        root = Path(run_dir)
        if root.exists() and not root.is_dir():
            raise UsageError(f"{root} is a file; the run folder must be a folder")
        if (root / STORE_FILE).exists() and not resume:
            raise UsageError(f"{root} already holds a run; pass --resume to continue it or "
                             f"choose another folder")
        root.mkdir(parents=True, exist_ok=True)
        lock = _RunLock(root)
        try:
            db = sqlite3.connect(root / STORE_FILE, isolation_level=None, timeout=30.0)
            try:
                store = cls(root, db, lock)
                store._prepare(identity)
            except BaseException:
                db.close()
                raise
        except sqlite3.DatabaseError as exc:
            lock.release()
            raise LinobsError(f"{root / STORE_FILE} is not a readable linobs run store ({exc}); "
                              f"choose another folder") from None
        except BaseException:
            lock.release()
            raise
        return store

    def _prepare(self, identity: Mapping[str, str]) -> None:
        db = self._db
        mode = db.execute("PRAGMA journal_mode=WAL").fetchone()[0]
        if str(mode).lower() != "wal":
            raise LinobsError(f"{self.path}: SQLite refused write-ahead logging (journal mode "
                              f"{mode}); put the run folder on a local disk")
        db.execute("PRAGMA synchronous=NORMAL")
        db.executescript(_SCHEMA)
        stored = self.meta
        if stored.get("store_format") is None:  # new (or created but never initialised)
            values = {**{k: str(v) for k, v in identity.items()}, "created": _now(),
                      "store_format": STORE_FORMAT}
            with self._transaction():
                db.executemany("INSERT OR REPLACE INTO meta (key, value) VALUES (?, ?)",
                               list(values.items()))
            return
        if stored["store_format"] not in READABLE_FORMATS:
            raise LinobsError(f"{self.path} was written in run-store format "
                              f"{stored['store_format']}, this linobs reads format "
                              f"{', '.join(READABLE_FORMATS)} (columnar results); resume it with "
                              f"the linobs version that started it, or start the study again "
                              f"in a new folder")
        for key in IDENTITY_KEYS:
            if stored.get(key) != identity[key]:
                raise UsageError(
                    f"{self.run_dir} holds a run of a different {_WHAT[key]} ({key} "
                    f"{_short(stored.get(key) or 'missing')} there, {_short(identity[key])} now); "
                    f"resume with the same {_WHAT[key]} or choose another folder")

    def _transaction(self) -> Any:
        db = self._db

        class _Tx:
            def __enter__(self) -> None:
                db.execute("BEGIN IMMEDIATE")

            def __exit__(self, kind: object, *rest: object) -> None:
                db.execute("COMMIT" if kind is None else "ROLLBACK")

        return _Tx()

    # ------------------------------------------------------------------ writing
    def write_chunk(self, stage: str, chunk_id: str, results: Sequence[ItemResult]) -> None:
        """Store a finished chunk's results in one transaction (replacing earlier rows)."""
        rows = []
        for r in results:
            try:
                data = json.dumps(r.data, separators=(",", ":"))
            except (TypeError, ValueError) as exc:
                raise TypeError(f"item {r.item_id} of chunk {chunk_id}: its data is not "
                                f"JSON-compatible ({exc})") from None
            rows.append((stage, int(r.item_id), chunk_id, r.status, data, r.message,
                         int(r.evaluations), float(r.seconds)))
        blob = pack({"item_id": np.array([int(r.item_id) for r in results], dtype=np.int64),
                     **results.arrays}, results.meta) \
            if isinstance(results, ColumnarResults) else None
        self._cache.pop(stage, None)
        self._column_cache.pop(stage, None)
        with self._transaction():
            self._db.executemany(_UPSERT, rows)
            if blob is not None:
                self._db.execute("INSERT INTO columns (stage, chunk_id, blob) VALUES (?, ?, ?)",
                                 (stage, chunk_id, blob))

    def mark_stage_complete(self, stage: str, info: Mapping[str, Any]) -> None:
        """Record that ``stage`` finished, with a JSON-compatible summary."""
        with self._transaction():
            self._db.execute("INSERT OR REPLACE INTO stages (stage, info, completed) VALUES (?, ?, ?)",
                             (stage, json.dumps(dict(info)), _now()))

    # ------------------------------------------------------------------ reading
    @property
    def meta(self) -> dict[str, str]:
        """The run's identity and bookkeeping entries."""
        return dict(self._db.execute("SELECT key, value FROM meta").fetchall())

    def done_ids(self, stage: str) -> set[int]:
        """Items of ``stage`` that have a result (of any status)."""
        rows = self._db.execute("SELECT item_id FROM results WHERE stage = ?", (stage,))
        return {int(i) for (i,) in rows}

    def results(self, stage: str) -> list[ItemResult]:
        """Every stored result of ``stage``, by item id (shared objects: read, do not modify)."""
        cached = self._cache.get(stage)
        if cached is None:
            rows = self._db.execute(
                "SELECT item_id, status, data, message, evaluations, seconds FROM results "
                "WHERE stage = ? ORDER BY item_id", (stage,))
            cached = [ItemResult(item_id=int(i), status=s, data=json.loads(d), message=m,
                                 evaluations=int(e), seconds=float(t))
                      for i, s, d, m, e, t in rows]
            self._cache[stage] = cached
        return list(cached)

    def columns(self, stage: str) -> tuple[np.ndarray, list[dict[str, Any]],
                                           list[dict[str, np.ndarray]], np.ndarray, np.ndarray]:
        """The columnar chunks of ``stage``, decoded once (shared: read, do not modify).

        Returns
        -------
        (item_ids, metas, arrays, chunk_of, row_of)
            ``item_ids``: the ids that have columnar results, sorted;
            ``metas``/``arrays``: per stored chunk (in writing order) its meta
            dict and its arrays; ``chunk_of[k]``/``row_of[k]``: where the
            authoritative row of ``item_ids[k]`` is (the chunk its result row
            names; the newest such blob).

        Raises
        ------
        LinobsError
            A stored blob cannot be decoded (a damaged run store).
        """
        cached = self._column_cache.get(stage)
        if cached is not None:
            return cached
        owner = dict(self._db.execute("SELECT item_id, chunk_id FROM results WHERE stage = ?",
                                      (stage,)).fetchall())
        metas: list[dict[str, Any]] = []
        blocks: list[dict[str, np.ndarray]] = []
        where: dict[int, tuple[int, int]] = {}
        rows = self._db.execute("SELECT seq, chunk_id, blob FROM columns WHERE stage = ? "
                                "ORDER BY seq", (stage,))
        for seq, chunk_id, blob in rows:
            try:
                arrays, meta = unpack(blob)
            except ValueError as exc:
                raise LinobsError(f"{self.path}: the stored results of chunk {chunk_id} "
                                  f"({stage}) are damaged ({exc}); run the study again in a "
                                  f"new folder") from None
            index = len(blocks)
            metas.append(meta)
            blocks.append(arrays)
            for row, item in enumerate(arrays["item_id"].tolist()):
                if owner.get(item) == chunk_id:
                    where[item] = (index, row)  # a later blob of the same chunk id wins
        ids = np.array(sorted(where), dtype=np.int64)
        chunk_of = np.array([where[i][0] for i in ids.tolist()], dtype=np.int64)
        row_of = np.array([where[i][1] for i in ids.tolist()], dtype=np.int64)
        cached = (ids, metas, blocks, chunk_of, row_of)
        self._column_cache[stage] = cached
        return cached

    def counts(self, stage: str) -> dict[str, int]:
        """Number of stored results of ``stage`` per status (every status listed)."""
        counts = {s: 0 for s in STATUSES}
        rows = self._db.execute(
            "SELECT status, COUNT(*) FROM results WHERE stage = ? GROUP BY status", (stage,))
        counts.update({s: int(n) for s, n in rows})
        return counts

    def stage_info(self, stage: str) -> dict[str, Any] | None:
        """The summary given to :meth:`mark_stage_complete`, or None if the stage is not complete."""
        row = self._db.execute("SELECT info FROM stages WHERE stage = ?", (stage,)).fetchone()
        return None if row is None else json.loads(row[0])

    # ------------------------------------------------------------------ closing
    def close(self) -> None:
        """Close the database (checkpointing the WAL) and release the run folder."""
        if self._db is not None:
            self._db.close()
            self._db = None  # type: ignore[assignment]
        self._lock.release()

    def __enter__(self) -> RunStore:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
