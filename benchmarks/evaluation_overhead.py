"""Wall time per evaluation through ``Model.evaluate`` over a bare ctypes loop.

The bare loop calls the FMU's own functions (set continuous states, set
inputs, get derivatives, get outputs) directly with prebuilt ctypes
arguments and no checks — the floor any Python caller can reach.
``Model.evaluate`` does the same work plus copying the inputs in, status and
finiteness checks, counting, and returning fresh arrays.  Both run
interleaved in one process on the same instance; the best of several rounds
is taken for each.  Target: ratio ≤ 1.3.

    python benchmarks/evaluation_overhead.py [--plant lfp_cell] [--calls 100000]
"""

from __future__ import annotations

import argparse
import ctypes
import time

import numpy as np

import linobs.model.hotpath as hotpath
from linobs.model.bundled import bundled_fmu
from linobs.model.loader import load_model


def bare_loop(model, x: np.ndarray, u: np.ndarray, calls: int) -> float:  # type: ignore[no-untyped-def]
    b = model.binding
    lib = b.lib
    names = b.hot_names
    fns = []
    for n in names[:4]:
        f = ctypes.CFUNCTYPE(ctypes.c_int)(ctypes.cast(getattr(lib, n), ctypes.c_void_p).value)
        fns.append(f)
    set_x, set_u, get_dx, get_y = fns
    c = ctypes.c_void_p(b.instance)
    xb, ub = x.copy(), u.copy()
    dx, y = np.zeros(model.nx), np.zeros(model.ny)
    px, pu, pdx, py = (ctypes.c_void_p(a.ctypes.data) for a in (xb, ub, dx, y))
    uref = (ctypes.c_uint * model.nu)(*[v.value_reference for v in model.catalogue.inputs])
    yref = (ctypes.c_uint * model.ny)(*[v.value_reference for v in model.catalogue.outputs])
    nx, nu, ny = (ctypes.c_size_t(n) for n in (model.nx, model.nu, model.ny))
    t0 = time.perf_counter()
    if b.major == 2:
        for _ in range(calls):
            set_x(c, px, nx)
            set_u(c, uref, nu, pu)
            get_dx(c, pdx, nx)
            get_y(c, yref, ny, py)
    else:
        for _ in range(calls):
            set_x(c, px, nx)
            set_u(c, uref, nu, pu, nu)
            get_dx(c, pdx, nx)
            get_y(c, yref, ny, py, ny)
    return (time.perf_counter() - t0) / calls


def evaluate_loop(model, x: np.ndarray, u: np.ndarray, calls: int) -> float:  # type: ignore[no-untyped-def]
    evaluate = model.evaluate
    t0 = time.perf_counter()
    for _ in range(calls):
        evaluate(x, u)
    return (time.perf_counter() - t0) / calls


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--plant", default="lfp_cell")
    parser.add_argument("--calls", type=int, default=100_000)
    parser.add_argument("--rounds", type=int, default=7)
    args = parser.parse_args()
    fmu = bundled_fmu(args.plant)
    model = load_model(fmu)
    x, u = model.x_start.copy(), model.u_start.copy()
    real_library = hotpath.hotpath_library
    hotpath.hotpath_library = lambda: None  # type: ignore[assignment]
    fallback = load_model(fmu)
    hotpath.hotpath_library = real_library  # type: ignore[assignment]
    assert model._evaluator.compiled and not fallback._evaluator.compiled
    np.testing.assert_array_equal(model.evaluate(x, u)[0], fallback.evaluate(x, u)[0])
    bare, fast, slow = [], [], []
    for _ in range(args.rounds):
        bare.append(bare_loop(model, x, u, args.calls))
        fast.append(evaluate_loop(model, x, u, args.calls))
        slow.append(evaluate_loop(fallback, x, u, args.calls // 4))
    b, f, s = min(bare), min(fast), min(slow)
    print(f"plant {args.plant} (FMI {model.fmi_version}), {args.calls} calls x {args.rounds} rounds, best round")
    print(f"  bare ctypes loop (4 FMI calls)     {b * 1e9:8.0f} ns per evaluation")
    print(f"  Model.evaluate (C helper)          {f * 1e9:8.0f} ns per evaluation")
    print(f"  Model.evaluate (pure-ctypes path)  {s * 1e9:8.0f} ns per evaluation")
    print(f"ratio Model.evaluate / bare loop: {f / b:.2f}  (target <= 1.3)")
    print(f"ratio pure-ctypes fallback / bare loop: {s / b:.2f}  (used only without a C compiler)")
    model.close()
    fallback.close()


if __name__ == "__main__":
    main()
