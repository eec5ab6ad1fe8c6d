"""Per-point cost of the observability analysis, and how often its verdict is right.

1. Cost: ``analyze_matrices`` (everything: PBH, staircase, Gramian, observability
   matrix, naming, report) per point on thermal RC ladders of n = 4, 20, 60 nodes
   measured at one end, and the symmetric ladder with an odd node count (n + 1)
   measured at its middle node (half its modes unobservable); also the 2n-state
   mass-spring chain, whose complex mode pairs cost more.
2. Correct-verdict rate on the chain family (n = 3 … 60, thermal ladders and
   mass-spring chains, measured at an end and, for odd n, at the middle): the
   analytic answer is "observable" from an end and "exactly the antisymmetric
   modes unobservable" from the middle (see tests/observability/test_chains.py).
   A verdict counts as right when it classifies observable / unobservable
   correctly ("weak" is observable) and, if unobservable, finds the right
   dimension; the plain test is the numpy rank of [C; CA; …; CA^(n−1)].

BLAS threads default to one (``OPENBLAS_NUM_THREADS`` etc., unless already set):
the envelope runs points in parallel processes, and a threaded BLAS on these
small matrices is slower, badly so when the cores are shared.

    python benchmarks/observability_cost.py [--repeat N]
"""

from __future__ import annotations

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse
import time

import numpy as np

from linobs.observability.analysis import analyze_matrices


def laplacian(n: int) -> np.ndarray:
    return 2.0 * np.eye(n) - np.eye(n, k=1) - np.eye(n, k=-1)


def chain(kind: str, n: int) -> np.ndarray:
    if kind == "thermal":
        return -laplacian(n)
    z = np.zeros((n, n))
    return np.block([[z, np.eye(n)], [-laplacian(n), z]])


def measured(n_states: int, node: int) -> np.ndarray:
    C = np.zeros((1, n_states))
    C[0, node] = 1.0
    return C


def per_point(A: np.ndarray, C: np.ndarray, repeat: int) -> tuple[float, str]:
    names = [f"s{i}" for i in range(A.shape[0])]
    report = analyze_matrices(A, C, names, ["y"])          # warm-up
    t0 = time.perf_counter()
    for _ in range(repeat):
        analyze_matrices(A, C, names, ["y"])
    return (time.perf_counter() - t0) / repeat, report.verdict


def cost_table(repeat: int) -> None:
    print("per-point cost of analyze_matrices (ms), one BLAS thread:"
          if os.environ.get("OPENBLAS_NUM_THREADS") == "1" else
          f"per-point cost of analyze_matrices (ms), OPENBLAS_NUM_THREADS="
          f"{os.environ.get('OPENBLAS_NUM_THREADS')}:")
    print(f"  {'model':38s} {'states':>6s} {'ms/point':>9s}  verdict")
    for n in (4, 20, 60):
        rows = [
            (f"thermal ladder n={n}, end node", chain("thermal", n), 0),
            (f"thermal ladder n={n + 1}, middle node", chain("thermal", n + 1), (n + 1) // 2),
            (f"mass-spring chain n={n}, end mass", chain("mass", n), 0),
        ]
        for label, A, node in rows:
            reps = max(3, repeat // (1 + A.shape[0] // 10))
            seconds, verdict = per_point(A, measured(A.shape[0], node), reps)
            print(f"  {label:38s} {A.shape[0]:6d} {1e3 * seconds:9.2f}  {verdict}")


def verdict_rates() -> None:
    total = right = rank_right = 0
    wrong: list[str] = []
    for kind in ("thermal", "mass"):
        for n in range(3, 61):
            for where in ("end", "middle") if n % 2 else ("end",):
                A = chain(kind, n)
                N = A.shape[0]
                C = measured(N, 0 if where == "end" else n // 2)
                truth = 0 if where == "end" else (n // 2 if kind == "thermal" else 2 * (n // 2))
                report = analyze_matrices(A, C, [f"s{i}" for i in range(N)], ["y"])
                ok = report.unobservable_dimension == truth and (
                    (truth == 0) == (report.verdict in ("observable", "weak")))
                blocks = [C]
                for _ in range(1, N):
                    blocks.append(blocks[-1] @ A)
                plain = int(np.linalg.matrix_rank(np.vstack(blocks)))
                total += 1
                right += ok
                rank_right += plain == N - truth
                if not ok:
                    wrong.append(f"{kind} {n} {where}")
    print(f"correct verdicts on the chain family ({total} systems, n = 3..60):")
    print(f"  linobs verdict (PBH + staircase): {right}/{total} = {100 * right / total:.1f} %")
    print(f"  plain observability-matrix rank:  {rank_right}/{total} = "
          f"{100 * rank_right / total:.1f} %")
    if wrong:
        print("  linobs wrong on:", ", ".join(wrong))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=40, help="timed calls per small model")
    args = parser.parse_args()
    cost_table(args.repeat)
    verdict_rates()


if __name__ == "__main__":
    main()
