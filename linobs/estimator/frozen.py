"""Frozen-point validation of a gain schedule: is the interpolated gain stabilizing between nodes?

Each node's design is stable by construction; the question is what happens
between the nodes.  At a scheduling value ``s`` between the nodes, the check
takes the **true** local model there (the caller trims and linearizes the
plant at ``s``), the gain the schedule interpolates at ``s``, and the error
dynamics of the update the estimator actually runs, with the scheduling
value frozen:

* ``predictor`` form:  e[k+1] = (Φ_true − L C_true) e[k]
* ``filter`` form:     e[k|k] = (I − L C_true) Φ_true e[k−1|k−1]

with Φ_true = exp(A_true·Ts) (zero-order hold) and C_true the rows of the
measured outputs.  These are the error dynamics of the scheduled update when
its prediction model matches the plant at ``s``; how far the interpolated
model (Φ, C) is from the true one is reported beside them
(:attr:`FrozenPoint.model_mismatch`), since that difference drives the error
as an input.

The criterion follows the design's domain:

* ``discrete``: spectral radius ρ ≤ ``spectral_radius_max``; decay reserve
  ``spectral_radius_max − ρ``.
* ``continuous``: the continuous error dynamics A_true − L_c C_true with the
  interpolated continuous gain L_c must decay at least at
  ``decay_rate_min`` (decay rate = −max Re λ), and so must the sampled update
  that runs (its equivalent rate −ln ρ / Ts), which must also be
  asymptotically stable (ρ < 1).  Decay reserve: the smaller rate minus
  ``decay_rate_min`` [1/s].  Without L_c only the sampled update is checked.

The **decay reserve** is how much faster the error decays than required
(≥ 0: the point passes).  Stored results written before it had this name
call it ``margin`` (``worst_margin`` for the smallest); both spellings are
read.

Where the interpolation is not usable (a refused node), the update runs
without correction: the point fails as ``unusable``, with the spectral radius
of the open-loop prediction Φ_true recorded for information.  Where the
callback fails, the point fails as ``error`` with its message.

References
----------
Shamma, J. S. & Athans, M. (1990). Analysis of gain scheduled control for
nonlinear plants. IEEE Transactions on Automatic Control 35(8), 898-907.

Shamma, J. S. & Athans, M. (1992). Gain scheduling: potential hazards and
possible remedies. IEEE Control Systems Magazine 12(3), 101-107.

Luenberger, D. G. (1971). An introduction to observers. IEEE Transactions on
Automatic Control 16(6), 596-602.

Franklin, G. F., Powell, J. D. & Workman, M. L. (1998). Digital Control of
Dynamic Systems, 3rd ed. Addison-Wesley (prediction and current estimators,
zero-order-hold sampling).

Al-Mohy, A. H. & Higham, N. J. (2009). A new scaling and squaring algorithm
for the matrix exponential. SIAM Journal on Matrix Analysis and Applications
31(3), 970-989 (``scipy.linalg.expm``).

Anderson, E. et al. (1999). LAPACK Users' Guide, 3rd ed. SIAM (the stacked
eigenvalue computations, through ``numpy.linalg.eigvals``).

Rubinstein, R. Y. (1982). Generating random vectors uniformly distributed
inside and on the surface of different regions. European Journal of
Operational Research 10(2), 205-209 (uniform points in a simplex).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from typing import TYPE_CHECKING, Literal

import numpy as np
from pydantic import AliasChoices, BaseModel, Field

from linobs.errors import UsageError
from linobs.estimator.interpolation import Triangulation, cell_centers
from linobs.estimator.schedule import GainSchedule
from linobs.estimator.settings import ValidationSettings

if TYPE_CHECKING:  # pragma: no cover
    from linobs.linear.linear_model import LinearModel
    from linobs.operating.grid import Grid

__all__ = ["FrozenPoint", "FrozenReport", "error_dynamics", "frozen_point_check", "frozen_points"]

Status = Literal["pass", "fail", "unusable", "error"]


class FrozenPoint(BaseModel):
    """The frozen-point check at one scheduling value."""

    index: int = Field(description="position in the list of points checked")
    values: dict[str, float] = Field(description="the scheduling values")
    status: Status
    passed: bool
    usable: bool = Field(description="every node the interpolation uses has a design")
    outside: bool = Field(description="clamped to the box / nearest node outside the hull")
    spectral_radius: float | None = Field(
        None, description="of the sampled error dynamics that run (unusable: the prediction alone)")
    decay_rate: float | None = Field(
        None, description="continuous designs: −max Re λ(A − L_c C) [1/s]")
    decay_reserve: float | None = Field(
        None, validation_alias=AliasChoices("decay_reserve", "margin"),
        description="how much faster the error decays than required (≥ 0: passes); discrete: "
                    "target − ρ; continuous: decay rate − target [1/s]")
    model_mismatch: float | None = Field(
        None, description="‖[Φ̂ − Φ; Ĉ − C]‖_F / ‖[Φ; C]‖_F, interpolated against true")
    message: str = ""


class FrozenReport(BaseModel):
    """Frozen-point validation of a gain schedule over many scheduling values."""

    kind: Literal["kalman", "luenberger"]
    domain: Literal["discrete", "continuous"]
    form: Literal["predictor", "filter"]
    criterion: str = Field(description="the stability requirement checked")
    target: float = Field(description="spectral_radius_max (discrete) or decay_rate_min [1/s]")
    points: list[FrozenPoint] = Field(description="worst first: errors, unusable, failed by "
                                                  "decay reserve, then passed by decay reserve")
    count: int
    passed: int
    failed: int = Field(description="usable points that miss the required decay")
    unusable: int
    errors: int = Field(description="points where the local model could not be had")
    worst_decay_reserve: float | None = Field(
        None, validation_alias=AliasChoices("worst_decay_reserve", "worst_margin"),
        description="smallest decay reserve of the usable points")
    all_passed: bool


def error_dynamics(Phi: np.ndarray, C: np.ndarray, L: np.ndarray,
                   form: Literal["predictor", "filter"]) -> np.ndarray:
    """Stacked error-dynamics matrices: Φ − L C (predictor) or (I − L C) Φ (filter).

    All arguments may carry leading batch dimensions (``(..., n, n)``,
    ``(..., p, n)``, ``(..., n, p)``).

    References
    ----------
    Franklin, G. F., Powell, J. D. & Workman, M. L. (1998). Digital Control of
    Dynamic Systems, 3rd ed. Addison-Wesley, §8.3.
    """
    LC = L @ C
    if form == "predictor":
        return Phi - LC
    eye = np.broadcast_to(np.eye(Phi.shape[-1]), LC.shape)
    return (eye - LC) @ Phi


def frozen_points(grid: Grid, settings: ValidationSettings) -> list[dict[str, float]]:
    """The scheduling values to check: every cell center, then random interior points.

    Tensor grids: the center of every cell (midpoints along each axis with
    several values, C order), then ``settings.random_points`` points uniform in
    the grid's box.  Scattered grids: the centroid of every Delaunay simplex
    (scaled coordinates, as the schedule interpolates), then random points
    uniform in the convex hull (a simplex drawn with probability proportional
    to its volume, then uniform barycentric coordinates — flat Dirichlet).  A
    flat scattered set (no simplices) gives no points.  Deterministic for
    ``settings.seed``.

    References
    ----------
    Rubinstein, R. Y. (1982). Generating random vectors uniformly distributed
    inside and on the surface of different regions. European Journal of
    Operational Research 10(2), 205-209.
    """
    if not grid.names:
        raise UsageError("the grid has no variables; there is nothing between the nodes to check")
    rng = np.random.default_rng(settings.seed)
    count = int(settings.random_points)
    if grid.kind == "tensor":
        axes = [a.array for a in grid.axes]
        centers = cell_centers(axes)
        lo = np.array([a[0] for a in axes])
        hi = np.array([a[-1] for a in axes])
        random = lo + (hi - lo) * rng.random((count, len(axes)))
    else:
        tri = Triangulation(grid.points)
        centers = tri.centroids()
        if len(tri.simplices):
            volumes = tri.volumes()
            chosen = rng.choice(len(volumes), size=count, p=volumes / volumes.sum())
            bary = rng.dirichlet(np.ones(grid.dims + 1), size=count)
            random = np.einsum("nv,nvk->nk", bary, tri.points[tri.simplices[chosen]])
        else:
            random = np.zeros((0, grid.dims))
    rows = np.vstack([centers, random]) if len(random) else centers
    return [{n: float(v) for n, v in zip(grid.names, row)} for row in rows]


def _true_matrices(model: LinearModel, states: list[str], outputs: list[str]
                   ) -> tuple[np.ndarray, np.ndarray]:
    """A and the measured rows of C of a local model, in the schedule's state order."""
    missing_x = [s for s in states if s not in model.states]
    missing_y = [y for y in outputs if y not in model.outputs]
    if missing_x or missing_y or len(model.states) != len(states):
        raise UsageError(f"the local model's states {model.states} / outputs {model.outputs} do "
                         f"not match the schedule's states {states} and measured outputs "
                         f"{outputs}; linearize the same model")
    xi = [model.states.index(s) for s in states]
    yi = [model.outputs.index(y) for y in outputs]
    A = np.asarray(model.A, dtype=float)[np.ix_(xi, xi)]
    C = np.asarray(model.C, dtype=float)[np.ix_(yi, xi)]
    if not (np.all(np.isfinite(A)) and np.all(np.isfinite(C))):
        raise UsageError("the local model holds non-finite entries")
    return A, C


def _rank(p: FrozenPoint) -> tuple[int, float]:
    order = {"error": 0, "unusable": 1, "fail": 2, "pass": 3}[p.status]
    return order, (p.decay_reserve if p.decay_reserve is not None else -math.inf)


def frozen_point_check(schedule: GainSchedule, points: Sequence[Mapping[str, float]],
                       local_model: Callable[[dict[str, float]], LinearModel],
                       settings: ValidationSettings, *,
                       progress: Callable[[int, int], None] | None = None) -> FrozenReport:
    """Check the schedule's interpolated gain against the true local model at each point.

    Parameters
    ----------
    schedule
        The gain schedule.
    points
        Scheduling values by axis name (e.g. from :func:`frozen_points`).
    local_model
        Called once per point with a copy of the point; returns the true local
        model there (trimmed and linearized by the caller).  An exception is
        recorded as a failed point with its message.
    settings
        ``spectral_radius_max`` (discrete designs) or ``decay_rate_min``
        (continuous designs).
    progress
        Called as ``progress(done, total)`` after each local model.

    Returns
    -------
    FrozenReport
        Per point the values, spectral radius / decay rate, decay reserve, pass/fail,
        usability, model mismatch; the worst points first; counts.

    Raises
    ------
    UsageError
        A point that misses a scheduling variable.
    """
    Ts = schedule.sample_time
    continuous = schedule.domain == "continuous"
    target = settings.decay_rate_min if continuous else settings.spectral_radius_max
    update = "Φ − L C" if schedule.form == "predictor" else "(I − L C) Φ"
    criterion = (f"decay rate of A − L_c C and of the sampled update ≥ {target:g} /s, "
                 f"sampled update spectral radius < 1" if continuous else
                 f"spectral radius of {update} ≤ {target:g}")
    pts = [dict(p) for p in points]
    S = np.array([schedule.point_value(p) for p in pts]).reshape(len(pts), len(schedule.axes))
    batch = schedule.evaluate_many(S) if len(pts) else None
    n, p_out = len(schedule.states), len(schedule.outputs)
    A_true = np.zeros((len(pts), n, n))
    C_true = np.zeros((len(pts), p_out, n))
    problems: dict[int, str] = {}
    for k, point in enumerate(pts):
        try:
            A_true[k], C_true[k] = _true_matrices(local_model(dict(point)), schedule.states,
                                                  schedule.outputs)
        except Exception as exc:  # noqa: BLE001 - any failure of the caller's trim/linearize
            problems[k] = f"no local model: {type(exc).__name__}: {exc}"
        if progress is not None:
            progress(k + 1, len(pts))
    good = np.array([k not in problems for k in range(len(pts))], dtype=bool)
    results: list[FrozenPoint] = []
    if batch is not None and np.any(good):
        from scipy.linalg import expm

        idx = np.flatnonzero(good)
        Phi = expm(A_true[idx] * Ts)
        usable = batch.usable[idx]
        L = np.where(usable[:, None, None], batch.values["L"][idx], 0.0)
        M = np.where(usable[:, None, None], error_dynamics(Phi, C_true[idx], L, schedule.form),
                     Phi)
        rho = np.max(np.abs(np.linalg.eigvals(M)), axis=1)
        decay = None
        if continuous and "L_continuous" in batch.values:
            Lc = np.where(usable[:, None, None], batch.values["L_continuous"][idx], 0.0)
            decay = -np.max(np.linalg.eigvals(A_true[idx] - Lc @ C_true[idx]).real, axis=1)
        ref = np.concatenate([Phi, C_true[idx]], axis=1)
        est = np.concatenate([batch.values["Phi"][idx], batch.values["C"][idx]], axis=1)
        scale = np.linalg.norm(ref, axis=(1, 2))
        mismatch = np.linalg.norm(est - ref, axis=(1, 2)) / np.where(scale > 0, scale, 1.0)
        for row, k in enumerate(idx):
            r = float(rho[row])
            dc = None if decay is None else float(decay[row])
            if continuous:
                sampled = -math.log(r) / Ts if r > 0 else math.inf
                rate = sampled if dc is None else min(dc, sampled)
                reserve = rate - target
                ok = reserve >= 0 and r < 1
                shown = f"decay rate {rate:.4g} /s (target ≥ {target:g})"
            else:
                reserve = target - r
                ok = reserve >= 0
                shown = f"spectral radius {r:.6g} (target ≤ {target:g})"
            if not usable[row]:
                status: Status = "unusable"
                message = (f"the interpolation uses a refused node: the update runs without "
                           f"correction; open-loop prediction {shown}")
            else:
                status = "pass" if ok else "fail"
                message = (shown if ok else
                           f"{shown}: the interpolated gain misses the required decay")
            results.append(FrozenPoint(
                index=int(k), values=pts[k], status=status, passed=status == "pass",
                usable=bool(usable[row]), outside=bool(batch.outside[k]), spectral_radius=r,
                decay_rate=dc if continuous else None, decay_reserve=float(reserve),
                model_mismatch=float(mismatch[row]), message=message))
    for k, message in problems.items():
        results.append(FrozenPoint(
            index=k, values=pts[k], status="error", passed=False,
            usable=bool(batch.usable[k]) if batch is not None else False,
            outside=bool(batch.outside[k]) if batch is not None else False, message=message))
    results.sort(key=lambda fp: (*_rank(fp), fp.index))
    reserves = [fp.decay_reserve for fp in results if fp.usable and fp.decay_reserve is not None
                and fp.status != "error"]
    counts = {s: sum(fp.status == s for fp in results) for s in ("pass", "fail", "unusable",
                                                                 "error")}
    return FrozenReport(kind=schedule.kind, domain=schedule.domain, form=schedule.form,
                        criterion=criterion, target=float(target), points=results,
                        count=len(results), passed=counts["pass"], failed=counts["fail"],
                        unusable=counts["unusable"], errors=counts["error"],
                        worst_decay_reserve=min(reserves) if reserves else None,
                        all_passed=bool(results) and counts["pass"] == len(results))
