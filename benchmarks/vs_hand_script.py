"""The same job done the way it is commonly scripted by hand, against ``linobs run`` (to ``design``).

The job, on a 400-point grid of the bundled four-tank process (pump voltages
v1 × v2, 20 × 20, in [2, 4] V): at every point find the steady levels, the
local model (A, B, C, D), judge observability from the measured levels, and
design a steady-state Kalman estimator.

The hand script (common practice, one point at a time, one FMU instance):
fmpy's high-level ``instantiate_fmu`` and its per-call getters/setters,
``scipy.optimize.root`` (hybr) from the model's start values, fixed-step
forward differences (step 1e-6), an observability-matrix rank test and a
continuous steady-state Kalman gain, both from python-control.

linobs: ``run_study`` through the ``design`` stage on the local pool
(process start included), doing more — trim with continuation, sparse
Jacobians with error estimates, scaled PBH/staircase verdicts, Gramians,
discrete Kalman designs at Ts for every node at once, a stored, resumable
run.  Printed: both wall times from this one run and their ratio
(target: linobs ≥ 10× faster).

    python benchmarks/vs_hand_script.py [--points-per-axis 20] [--lean]

``--lean`` turns off the observability stage's boundary bisection and
nonlinear check (work the hand script does not do at all).
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

import numpy as np


def hand_script(fmu: Path, voltages: list[tuple[float, float]]) -> dict[str, float]:
    from ctypes import POINTER, c_double

    import control
    from fmpy import extract, instantiate_fmu, read_model_description
    from scipy.optimize import root

    md = read_model_description(str(fmu))
    unzipped = extract(str(fmu))
    inst = instantiate_fmu(unzipped, md, fmi_type="ModelExchange")
    inst.setupExperiment(startTime=0.0)
    inst.enterInitializationMode()
    inst.exitInitializationMode()
    inst.newDiscreteStates()
    inst.enterContinuousTimeMode()
    vr = {v.name: v.valueReference for v in md.modelVariables}
    states = ["h1", "h2", "h3", "h4"]
    h_start = np.array([float(next(v.start for v in md.modelVariables if v.name == s)) for s in states])
    u_refs = [vr["v1"], vr["v2"]]
    y_refs = [vr["y1"], vr["y2"]]
    ranks = []
    for v1, v2 in voltages:
        def f(h: np.ndarray, u: tuple[float, float]) -> np.ndarray:
            inst.setReal(u_refs, list(u))
            x = np.ascontiguousarray(h, dtype=float)
            inst.setContinuousStates(x.ctypes.data_as(POINTER(c_double)), 4)
            dx = np.zeros(4)
            inst.getDerivatives(dx.ctypes.data_as(POINTER(c_double)), 4)
            return dx

        def g(h: np.ndarray, u: tuple[float, float]) -> np.ndarray:
            inst.setReal(u_refs, list(u))
            x = np.ascontiguousarray(h, dtype=float)
            inst.setContinuousStates(x.ctypes.data_as(POINTER(c_double)), 4)
            return np.array(inst.getReal(y_refs))

        u0 = (v1, v2)
        sol = root(lambda h: f(h, u0), h_start, method="hybr")
        h0 = sol.x
        step = 1e-6
        f0, y0 = f(h0, u0), g(h0, u0)
        A = np.zeros((4, 4))
        C = np.zeros((2, 4))
        for j in range(4):
            hp = h0.copy()
            hp[j] += step
            A[:, j] = (f(hp, u0) - f0) / step
            C[:, j] = (g(hp, u0) - y0) / step
        B = np.zeros((4, 2))
        for j in range(2):
            up = list(u0)
            up[j] += step
            B[:, j] = (f(h0, tuple(up)) - f0) / step
        # observability-matrix rank test, then the continuous steady-state Kalman gain
        ranks.append(np.linalg.matrix_rank(control.obsv(A, C)))
        control.lqe(A, np.eye(4), C, 1e-4 * np.eye(4), 1e-4 * np.eye(2))
    inst.terminate()
    inst.freeInstance()
    return {"observable": sum(r == 4 for r in ranks)}


STUDY = """
name = "four_tank_benchmark"
outputs = ["y1", "y2"]
[model]
bundled = "four_tank"
[grid.v1]
linspace = {{ start = 2.0, stop = 4.0, num = {n} }}
[grid.v2]
linspace = {{ start = 2.0, stop = 4.0, num = {n} }}
[observability]
refine_boundary = {refine}
empirical = "{empirical}"
[estimator]
kind = "kalman"
sample_time = 1.0
process_noise = {{ h1 = 1e-4, h2 = 1e-4, h3 = 1e-4, h4 = 1e-4 }}
measurement_noise = {{ y1 = 0.01, y2 = 0.01 }}
"""


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--points-per-axis", type=int, default=20)
    parser.add_argument("--lean", action="store_true")
    args = parser.parse_args()
    from linobs.model.bundled import bundled_fmu
    from linobs.pipeline import run_study

    n = args.points_per_axis
    fmu = bundled_fmu("four_tank")
    grid = np.linspace(2.0, 4.0, n)
    voltages = [(a, b) for a in grid for b in grid]
    t0 = time.perf_counter()
    hand = hand_script(fmu, voltages)
    t_hand = time.perf_counter() - t0
    folder = Path(tempfile.mkdtemp(prefix="linobs-vs-hand-"))
    (folder / "study.toml").write_text(STUDY.format(
        n=n, refine="false" if args.lean else "true", empirical="off" if args.lean else "sample"))
    t0 = time.perf_counter()
    summary = run_study(folder / "study.toml", folder / "run", until="design", figures=False)
    t_linobs = time.perf_counter() - t0
    print(f"{len(voltages)} points of four_tank; hand script: {hand['observable']} points "
          f"observable by rank")
    print(f"  hand script (fmpy high-level calls, scipy root, forward differences, "
          f"observability-matrix rank test + continuous Kalman gain): {t_hand:7.2f} s")
    print(f"  linobs run --until design ({summary.executor}, "
          f"{'lean' if args.lean else 'default'} observability stage): {t_linobs:7.2f} s; "
          f"{summary.ok} trimmed, {summary.observable} observable, "
          f"{summary.design_ok} designs")
    print(f"ratio hand script / linobs: {t_hand / t_linobs:.1f}x  (target >= 10)")


if __name__ == "__main__":
    main()
