"""Kill a run with SIGKILL mid-way, resume it: same results, only the missing items computed."""

from __future__ import annotations

import os
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pytest

from linobs.run.store import STORE_FILE
from linobs.run.types import FMURef
from tests.run.support import STAGE, lfp_items, sweep

ROOT = Path(__file__).resolve().parents[2]
N_ITEMS, CHUNK, REPEAT = 120, 4, 4000


def _stored(db: Path) -> int:
    if not db.exists():
        return 0
    try:
        with sqlite3.connect(f"file:{db}?mode=ro", uri=True, timeout=1.0) as reader:
            return reader.execute("SELECT COUNT(*) FROM results").fetchone()[0]
    except sqlite3.OperationalError:  # tables not created yet
        return 0


def _descendants(pid: int) -> set[int]:
    parents: dict[int, int] = {}
    for entry in Path("/proc").iterdir():
        if entry.name.isdigit():
            try:
                fields = (entry / "stat").read_text().rsplit(")", 1)[1].split()
            except OSError:
                continue
            parents[int(entry.name)] = int(fields[1])
    found, frontier = set(), {pid}
    while frontier:
        frontier = {p for p, parent in parents.items() if parent in frontier} - found
        found |= frontier
    return found


def _alive(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except OSError:
        return False
    return state != "Z"


@pytest.mark.slow
@pytest.mark.skipif(not Path("/proc").is_dir(), reason="needs /proc to follow worker processes")
def test_killed_run_resumes_to_the_same_results(lfp_cell: FMURef, tmp_path: Path) -> None:
    run_dir = tmp_path / "killed"
    db = run_dir / STORE_FILE
    env = {**os.environ, "PYTHONPATH": os.pathsep.join([str(ROOT), os.environ.get("PYTHONPATH", "")])}
    proc = subprocess.Popen([sys.executable, "-m", "tests.run.support", str(run_dir), lfp_cell.path,
                             str(N_ITEMS), str(CHUNK), str(REPEAT)], cwd=ROOT, env=env)
    deadline = time.monotonic() + 120
    workers: set[int] = set()
    try:
        while True:
            stored = _stored(db)
            workers |= _descendants(proc.pid)
            if stored >= 3 * CHUNK:
                break
            assert proc.poll() is None, "the run finished before it could be killed; raise REPEAT"
            assert time.monotonic() < deadline, "the run wrote nothing"
            time.sleep(0.01)
        os.kill(proc.pid, signal.SIGKILL)
    finally:
        proc.kill()
        proc.wait()
    before = _stored(db)
    assert 0 < before < N_ITEMS, "kill the run mid-way"
    # the workers of the killed coordinator end by themselves
    give_up = time.monotonic() + 10
    while any(_alive(p) for p in workers) and time.monotonic() < give_up:
        time.sleep(0.05)
    assert workers and not any(_alive(p) for p in workers)
    with sqlite3.connect(db) as check:
        # SQLite documentation: integrity_check answers "ok" for an undamaged database
        assert check.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        done_before = {i for (i,) in check.execute("SELECT item_id FROM results")}

    items = lfp_items(N_ITEMS, REPEAT)
    computed = sweep(run_dir, lfp_cell, items, CHUNK, resume=True)
    assert sorted(computed) == sorted(set(range(N_ITEMS)) - done_before)

    reference_dir = tmp_path / "uninterrupted"
    sweep(reference_dir, lfp_cell, items, CHUNK, resume=False)
    from linobs.run.store import RunStore
    from tests.run.support import identity

    with RunStore.open(run_dir, identity(lfp_cell, items), resume=True) as resumed, \
            RunStore.open(reference_dir, identity(lfp_cell, items), resume=True) as reference:
        got, want = resumed.results(STAGE), reference.results(STAGE)
        assert [r.item_id for r in got] == list(range(N_ITEMS))
        for a, b in zip(got, want, strict=True):
            assert (a.status, a.data, a.message, a.evaluations) == \
                (b.status, b.data, b.message, b.evaluations)
            assert a.status == "ok" and a.evaluations == REPEAT
        assert resumed.stage_info(STAGE) == reference.stage_info(STAGE)
