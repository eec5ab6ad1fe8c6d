"""Design and validation cost per grid point, on the four-tank process (n = 4) and the cell.

For each plant a study is run through ``validate`` on one worker process
(``workers=1``, figures off).  Printed, from that one run:

* the ``design`` stage: points per second per core, total and the batched
  design arithmetic alone (``design_nodes`` on the stored local models, timed
  again in this process), next to scipy's per-point Riccati solver on the same
  models (``scipy.linalg.solve_discrete_are``, one call per point) as a ratio;
* the frozen-point validation: seconds per checked point (trim + linearize on
  the worker, then the interpolated-gain check) and checked points per second.

    python benchmarks/design_cost.py [--tank-grid 20]
"""

from __future__ import annotations

import argparse
import json
import sqlite3
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent

TANK = """
name = "four_tank_cost"
outputs = ["y1", "y2"]
[model]
bundled = "four_tank"
[grid.v1]
linspace = {{ start = 2.0, stop = 4.0, num = {n} }}
[grid.v2]
linspace = {{ start = 2.0, stop = 4.0, num = {n} }}
[observability]
refine_boundary = false
empirical = "off"
[estimator]
kind = "kalman"
sample_time = 1.0
process_noise = {{ h1 = 1e-4, h2 = 1e-4, h3 = 1e-4, h4 = 1e-4 }}
measurement_noise = {{ y1 = 0.01, y2 = 0.01 }}
[validation]
random_points = 100
fixed_gain = false
[[validation.scenario]]
duration = 60
inputs = {{ v1 = 3.0, v2 = 3.0 }}
"""


def run(study_text: str, label: str) -> None:
    from linobs.estimator.design import design_nodes
    from linobs.linear.linear_model import LinearModel
    from linobs.pipeline import run_study
    from linobs.stages.design import measured_outputs
    from linobs.study import load_study

    folder = Path(tempfile.mkdtemp(prefix="linobs-design-cost-"))
    (folder / "study.toml").write_text(study_text)
    summary = run_study(folder / "study.toml", folder / "run", workers=1, figures=False)
    des = summary.stages["design"]
    frozen = summary.stages["validate-frozen"]
    print(f"{label}: {summary.points} grid points, {summary.design_ok} designs")
    print(f"  design stage (store reads and writes included): "
          f"{des.points / des.seconds:9.0f} points/s/core")

    study = load_study(folder / "study.toml")
    db = sqlite3.connect(folder / "run" / "run.sqlite")
    rows = db.execute("SELECT data FROM results WHERE stage = 'sweep' AND status = 'ok'")
    models = [LinearModel.model_validate(json.loads(d)["linear"]) for (d,) in rows]
    db.close()
    settings = study.config.estimator
    outputs = measured_outputs(study)
    t0 = time.perf_counter()
    nodes = design_nodes(models, settings, outputs=outputs)
    t_batch = time.perf_counter() - t0
    t_scipy = scipy_per_point(nodes)
    print(f"  design arithmetic, batched over the grid: {len(models) / t_batch:9.0f} points/s/core"
          f"; scipy solve_discrete_are per point: {len(models) / t_scipy:9.0f} points/s/core; "
          f"ratio {t_scipy / t_batch:.1f}x")
    print(f"  frozen-point validation: {frozen.points} points, "
          f"{1e3 * frozen.seconds / max(1, frozen.points):.2f} ms/point "
          f"({frozen.points / frozen.seconds:.0f} points/s/core, trim + linearize included)")


def scipy_per_point(nodes: list) -> float:
    import scipy.linalg

    ok = [n for n in nodes if n.status == "ok" and n.Q is not None]
    t0 = time.perf_counter()
    for n in ok:
        Phi, C = np.asarray(n.Phi), np.asarray(n.C)
        P = scipy.linalg.solve_discrete_are(Phi.T, C.T, np.asarray(n.Q), np.asarray(n.R))
        np.linalg.solve(C @ P @ C.T + np.asarray(n.R), C @ P).T
    return (time.perf_counter() - t0) * len(nodes) / max(1, len(ok))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--tank-grid", type=int, default=20, help="points per axis (four-tank)")
    args = parser.parse_args()
    sys.path.insert(0, str(ROOT))
    run(TANK.format(n=args.tank_grid), f"four_tank (n = 4), {args.tank_grid}x{args.tank_grid}")
    cell = (ROOT / "examples" / "lfp_cell.toml").read_text()
    run(cell, "lfp_cell (n = 4), the examples/lfp_cell.toml grid")


if __name__ == "__main__":
    main()
