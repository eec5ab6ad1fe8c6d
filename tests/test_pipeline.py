"""`linobs run`: the sweep stage end to end, faults, resume, Dask, summary.json."""

from __future__ import annotations

import json
import os
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from linobs.cli import app
from linobs.errors import UsageError
from linobs.model.build import build_fmu
from linobs.pipeline import run_study
from linobs.run.store import RunStore
from linobs.study import load_study
from tests.reference import plants

ROOT = Path(__file__).resolve().parents[1]
FAULTY = ROOT / "tests" / "fixtures" / "faulty"
# the fault fixture misbehaves at these input values (its parameter start values)
U_SEGFAULT, U_ABORT, U_ERROR, U_NAN = 13.0, 17.0, 19.0, 23.0
SUMMARY_KEYS = ("points", "ok", "failed", "crashed", "not_converged", "evaluations", "seconds")

runner = CliRunner()


def write_study(folder: Path, body: str) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "study.toml"
    path.write_text(body)
    return path


def cell_study(folder: Path, *, soc: int = 4, current: tuple[float, ...] = (-30.0, 0.0, 20.0, 40.0),
               temps: tuple[float, ...] = (0.0, 25.0), extra: str = "") -> Path:
    return write_study(folder, f"""
name = "cell_test"
[model]
bundled = "lfp_cell"
[grid.soc]
linspace = {{ start = 0.1, stop = 0.9, num = {soc} }}
[grid.t_amb]
values = {list(temps)}
[grid.i_cell]
values = {list(current)}
[trim]
pinned_states = ["soc"]
{extra}
""")


def stored(run_dir: Path, stage: str = "sweep") -> dict[int, tuple[str, str, str]]:
    """item id -> (status, data as canonical JSON, message) straight from the store."""
    with sqlite3.connect(f"file:{run_dir / 'run.sqlite'}?mode=ro", uri=True) as db:
        rows = db.execute("SELECT item_id, status, data, message FROM results WHERE stage = ?",
                          (stage,)).fetchall()
    return {int(i): (s, json.dumps(json.loads(d), sort_keys=True), m) for i, s, d, m in rows}


def test_cell_sweep_end_to_end(tmp_path: Path) -> None:
    study_path = cell_study(tmp_path / "study")
    out = tmp_path / "run"
    seen: dict[str, list[tuple[int, int, int]]] = {}
    stage = {"name": ""}

    def on_stage(name: str, total: int, done: int) -> None:
        stage["name"] = name
        seen[name] = []

    summary = run_study(study_path, out, workers=2, on_stage=on_stage,
                        progress=lambda p: seen[stage["name"]].append((p.done, p.total, p.counts["ok"])))
    sweep = seen["sweep"]
    assert sweep[-1] == (32, 32, 32) and [d for d, _, _ in sweep] == sorted(d for d, _, _ in sweep)
    assert seen["observability"][-1][:2] == (32, 32)
    data = json.loads((out / "summary.json").read_text())
    for key in SUMMARY_KEYS:
        assert key in data, key
    assert data["points"] == 4 * 2 * 4 == summary.ok
    assert data["failed"] == data["crashed"] == data["not_converged"] == 0
    study = load_study(study_path)
    store = RunStore.open(out, {"study_hash": summary.study_hash,
                                "fmu_sha256": summary.fmu_sha256}, resume=True)
    try:
        results = store.results("sweep")
    finally:
        store.close()
    assert len(results) == 32
    for r in results:
        values = study.point_values(r.item_id)
        trim = r.data["trim"]
        lin = r.data["linear"]
        soc, temp = trim["states"]["soc"], trim["states"]["temp_cell"]
        i = trim["inputs"]["i_cell"]
        assert soc == values["soc"] and i == values["i_cell"]  # pinned / fixed by the grid
        # analytic: at steady state each RC branch carries the cell current, v_k = i R_k(soc, T)
        r1 = plants.lfp_table("r1", soc, temp)
        r2 = plants.lfp_table("r2", soc, temp)
        assert trim["states"]["v_rc1"] == pytest.approx(i * r1, rel=1e-7, abs=1e-10)
        assert trim["states"]["v_rc2"] == pytest.approx(i * r2, rel=1e-7, abs=1e-10)
        # analytic: the integrating state keeps moving, d soc/dt = -i / (3600 Q)
        assert trim["pinned_derivatives"]["soc"] == pytest.approx(-i / (3600 * 20.0), rel=1e-12)
        # the stored local model is the one at the trimmed point (analytic Jacobian)
        x = [trim["states"][n] for n in ("soc", "v_rc1", "v_rc2", "temp_cell")]
        u = [i, values["t_amb"]]
        A, B, C, D = plants.lfp_cell_jacobians(x, u)
        np.testing.assert_allclose(np.array(lin["A"]), A, rtol=1e-6, atol=1e-12)
        np.testing.assert_allclose(np.array(lin["C"]), C, rtol=1e-6, atol=1e-12)


def test_resume_of_a_finished_run_computes_nothing(tmp_path: Path) -> None:
    study_path = cell_study(tmp_path / "study", soc=2, current=(0.0, 10.0), temps=(25.0,))
    out = tmp_path / "run"
    first = run_study(study_path, out, workers=1)
    before = stored(out)
    again = run_study(study_path, out, workers=1, resume=True)
    assert again.stages["sweep"].computed_now == 0 and again.ok == first.ok == 4
    assert stored(out) == before
    with pytest.raises(UsageError, match="already holds a run"):
        run_study(study_path, out, workers=1)
    changed = cell_study(tmp_path / "study", soc=3, current=(0.0, 10.0), temps=(25.0,))
    with pytest.raises(UsageError, match="study"):
        run_study(changed, out, workers=1, resume=True)


def test_until_names_the_stages(tmp_path: Path) -> None:
    study_path = cell_study(tmp_path / "study", soc=2, current=(0.0,), temps=(25.0,))
    with pytest.raises(UsageError, match="needs an \\[estimator\\] table"):
        run_study(study_path, tmp_path / "a", until="export")
    with pytest.raises(UsageError, match="needs an \\[estimator\\] table"):
        run_study(study_path, tmp_path / "d", until="design")
    with pytest.raises(UsageError, match="unknown stage 'swep'"):
        run_study(study_path, tmp_path / "b", until="swep")
    assert run_study(study_path, tmp_path / "c", until="sweep", workers=1).ok == 2


@pytest.fixture(scope="module")
def faulty_fmu(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return build_fmu(FAULTY, tmp_path_factory.mktemp("faulty") / "faulty.fmu")


def faulty_study(folder: Path, fmu: Path, us: list[float]) -> Path:
    return write_study(folder, f"""
name = "faults"
[model]
fmu = "{fmu}"
[grid.u]
values = {us}
[trim]
continuation = false
[run]
chunk_size = 6
""")


def test_faulty_points_are_classified_and_isolated(tmp_path: Path, faulty_fmu: Path) -> None:
    good = [0.25 + 1.5 * k for k in range(14)]  # never an integer, so never a fault value
    faults = [U_SEGFAULT, U_ABORT, U_ERROR, U_NAN]
    everything = sorted(good + faults)
    out = tmp_path / "with-faults"
    summary = run_study(faulty_study(tmp_path / "s1", faulty_fmu, everything), out, workers=2)
    assert (summary.points, summary.ok, summary.crashed, summary.failed) == (18, 14, 2, 2)
    results = stored(out)
    by_u = {everything[i]: v for i, v in results.items()}
    assert by_u[U_SEGFAULT][0] == "crashed" and "SIGSEGV" in by_u[U_SEGFAULT][2]
    assert by_u[U_ABORT][0] == "crashed" and "SIGABRT" in by_u[U_ABORT][2]
    assert by_u[U_ERROR][0] == "failed" and "fault injected" in by_u[U_ERROR][2]
    assert by_u[U_NAN][0] == "failed" and "non-finite" in by_u[U_NAN][2]
    # every other point is exactly what a run without the faulty points gives
    clean = tmp_path / "clean"
    run_study(faulty_study(tmp_path / "s2", faulty_fmu, good), clean, workers=2)
    reference = {good[i]: v for i, v in stored(clean).items()}
    for u in good:
        assert by_u[u] == reference[u], u


def test_cli_run_prints_a_summary(tmp_path: Path) -> None:
    study_path = cell_study(tmp_path / "study", soc=2, current=(0.0, 20.0), temps=(25.0,))
    result = runner.invoke(app, ["run", str(study_path), "-o", str(tmp_path / "run"),
                                 "--workers", "1"])
    assert result.exit_code == 0, result.output
    assert "run summary" in result.output and "summary.json" in result.output
    result = runner.invoke(app, ["run", str(study_path), "--out", str(tmp_path / "x"),
                                 "--dask", "tcp://127.0.0.1:1", "--dask-local", "2"])
    assert result.exit_code == 2 and "not both" in result.output


def test_study_schema_command() -> None:
    result = runner.invoke(app, ["study-schema"])
    assert result.exit_code == 0
    schema = json.loads(result.output)
    assert "grid" in json.dumps(schema) and "trim" in json.dumps(schema)


@pytest.mark.slow
def test_dask_local_equals_the_pool(tmp_path: Path) -> None:
    study_path = cell_study(tmp_path / "study", soc=3, current=(-20.0, 0.0, 20.0), temps=(10.0, 30.0))
    run_study(study_path, tmp_path / "pool", workers=2)
    summary = run_study(study_path, tmp_path / "dask", dask_local=2)
    assert summary.executor == "DaskExecutor" and summary.ok == 18
    assert stored(tmp_path / "dask") == stored(tmp_path / "pool")


@pytest.mark.slow
def test_killed_cli_run_resumes_to_identical_results(tmp_path: Path) -> None:
    study_path = cell_study(tmp_path / "study", soc=16, current=(-40.0, -20.0, 0.0, 20.0, 40.0),
                            temps=(-10.0, 10.0, 30.0, 50.0), extra="[run]\nchunk_size = 8\n")
    total = 16 * 5 * 4
    killed = tmp_path / "killed"
    cmd = [sys.executable, "-m", "linobs.cli", "run", str(study_path), "--out", str(killed),
           "--workers", "1"]
    env = {**os.environ, "PYTHONPATH": str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", "")}
    proc = subprocess.Popen(cmd, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        deadline = time.monotonic() + 120
        done = 0
        while time.monotonic() < deadline:
            try:
                done = len(stored(killed))
            except sqlite3.OperationalError:
                done = 0
            if done >= 16:
                break
            assert proc.poll() is None, "the run ended before it could be killed"
            time.sleep(0.02)
        os.kill(proc.pid, signal.SIGKILL)  # no chance to clean up
        proc.wait(timeout=30)
    finally:
        if proc.poll() is None:
            proc.kill()
    partial = len(stored(killed))
    assert 0 < partial < total
    summary = run_study(study_path, killed, workers=2, resume=True)
    assert summary.stages["sweep"].computed_now == total - partial
    uninterrupted = tmp_path / "uninterrupted"
    run_study(study_path, uninterrupted, workers=2)
    assert stored(killed) == stored(uninterrupted)
