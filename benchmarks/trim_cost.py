"""FMU evaluations per trimmed point: linobs ``find_operating_point`` with continuation vs scipy ``root(hybr)``.

Over each grid the points are visited in serpentine order (consecutive
points differ by one step along one axis).  linobs' trim warm-starts every
point from the previous converged one; scipy's MINPACK hybrid method
(Powell's dog-leg with Broyden updates and forward-difference Jacobians)
starts every point from the model's start values, on the same scaled
residual built on ``Model.evaluate``.  Both are counted the same way: one per
(dx, y) evaluation, directional derivatives included for linobs.  Target:
ratio (linobs / scipy) ≤ 0.5.

Grids
-----
lfp_cell   soc × i_cell × t_amb (5 × 8 × 5 = 200 points); soc pinned,
           v_rc1, v_rc2, temp_cell free (forward-difference Jacobians: the
           FMU has no directional derivatives).
four_tank  v1 × v2 (10 × 10 = 100 points); all levels free (exact Jacobians).

    python benchmarks/trim_cost.py [--broyden-updates N]
"""

from __future__ import annotations

import argparse
import time
from collections.abc import Sequence

import numpy as np
from scipy.optimize import root

from linobs.errors import EvaluationError
from linobs.model.bundled import bundled_fmu
from linobs.model.loader import load_model
from linobs.operating.trim import Continuation, find_operating_point
from linobs.operating.trim_spec import TrimSpec


def serpentine(axes: Sequence[Sequence[float]]) -> list[tuple[float, ...]]:
    """All grid points, ordered so that neighbors in the list are neighbors in the grid.

    The first axis varies slowest; every inner axis runs forwards and
    backwards alternately (a boustrophedon walk).
    """
    if not axes:
        return [()]
    head, rest = list(axes[0]), serpentine(axes[1:])
    out: list[tuple[float, ...]] = []
    for k, value in enumerate(head):
        inner = rest if k % 2 == 0 else rest[::-1]
        out.extend((value, *p) for p in inner)
    return out


def scaled_residual(model, spec: TrimSpec, fixed: dict[str, float]):  # type: ignore[no-untyped-def]
    """The same scaled residual linobs uses, as a plain function for scipy (no bounds)."""
    names = model.state_names
    free = [i for i, n in enumerate(names) if n not in fixed and n not in spec.pinned_states]
    x = model.x_start.copy()
    u = model.u_start.copy()
    for i, n in enumerate(names):
        if n in fixed:
            x[i] = fixed[n]
    for j, n in enumerate(model.input_names):
        if n in fixed:
            u[j] = fixed[n]
    scale = model.x_nominal[free]

    def fun(z: np.ndarray) -> np.ndarray:
        x[free] = z * scale
        dx, _ = model.evaluate(x, u)
        return dx[free] / scale

    return fun, model.x_start[free] / scale, free, scale


def run(plant: str, axes: dict[str, list[float]], spec: TrimSpec) -> None:
    points = [dict(zip(axes, p)) for p in serpentine(list(axes.values()))]
    with load_model(bundled_fmu(plant)) as model:
        # linobs: continuation in serpentine order
        lin_evals, lin_ok, lin_x, lin_it, lin_jac = [], [], [], [], []
        warm = Continuation()
        t0 = time.perf_counter()
        for fixed in points:
            res = find_operating_point(model, fixed, spec, continuation=warm)
            lin_evals.append(res.evaluations)
            lin_it.append(res.iterations)
            lin_jac.append(res.jacobians)
            lin_ok.append(res.converged)
            lin_x.append(np.array(list(res.states.values())))
        lin_time = time.perf_counter() - t0
        # scipy: hybr from the start values at every point
        sci_evals, sci_ok, sci_x, sci_res = [], [], [], []
        t0 = time.perf_counter()
        for fixed in points:
            fun, z0, free, scale = scaled_residual(model, spec, fixed)
            before = model.evaluations
            try:
                sol = root(fun, z0, method="hybr")
                ok = bool(sol.success)
                z = sol.x
            except EvaluationError:  # a step outside the model's domain: not converged
                ok, z = False, z0
            sci_evals.append(model.evaluations - before)
            x = model.x_start.copy()
            for i, n in enumerate(model.state_names):
                if n in fixed:
                    x[i] = fixed[n]
            x[free] = z * scale
            sci_x.append(x)
            sci_ok.append(ok)
            sci_res.append(float(np.max(np.abs(fun(z)))) if ok else np.nan)
        sci_time = time.perf_counter() - t0
    both = [k for k in range(len(points)) if lin_ok[k] and sci_ok[k]]
    diff = max((float(np.max(np.abs(lin_x[k] - sci_x[k]))) for k in both), default=float("nan"))
    mean_lin, mean_sci = float(np.mean(lin_evals)), float(np.mean(sci_evals))
    print(f"{plant}: {len(points)} points ({' x '.join(f'{n}[{len(v)}]' for n, v in axes.items())})")
    print(f"  linobs trim (continuation): {mean_lin:7.2f} evaluations/point, "
          f"converged {sum(lin_ok)}/{len(points)}, {1e3 * lin_time / len(points):.2f} ms/point, "
          f"{np.mean(lin_it):.2f} iterations and {np.mean(lin_jac):.2f} Jacobians per point")
    print(f"  scipy root hybr (cold):     {mean_sci:7.2f} evaluations/point, "
          f"converged {sum(sci_ok)}/{len(points)}, {1e3 * sci_time / len(points):.2f} ms/point, "
          f"largest scaled residual {np.nanmax(sci_res):.2g}")
    print(f"  ratio linobs/scipy: {mean_lin / mean_sci:.3f} (target <= 0.5)")
    print(f"  largest difference between the solutions where both converged: {diff:.3g} "
          f"(state units, {len(both)} points)")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--broyden-updates", type=int, default=None,
                        help="Broyden updates between Jacobians (default: the TrimSpec default)")
    args = parser.parse_args()
    extra = {} if args.broyden_updates is None else {"broyden_updates": args.broyden_updates}
    print(f"trim settings: {TrimSpec(**extra).model_dump(include={'tolerance', 'broyden_updates'})}")
    run("lfp_cell", {"soc": list(np.linspace(0.1, 0.9, 5)),
                     "i_cell": list(np.linspace(-40.0, 40.0, 8)),
                     "t_amb": list(np.linspace(-10.0, 40.0, 5))},
        TrimSpec(pinned_states=["soc"], **extra))
    run("four_tank", {"v1": list(np.linspace(2.0, 4.0, 10)), "v2": list(np.linspace(2.0, 4.0, 10))},
        TrimSpec(**extra))


if __name__ == "__main__":
    main()
