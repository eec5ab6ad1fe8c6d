"""Continuity of a gain schedule: large gain changes between neighboring nodes.

Interpolating between two nodes whose gains differ a lot gives, in between,
a gain neither design vouches for; and a design that changes character from
one node to the next (a different pole pattern, a node the observability
analysis calls weak, a refused node) usually signals a problem in the
design, not in the plant.  :func:`gain_jumps` lists every neighboring pair
whose relative gain change

    ‖L_i − L_j‖_F / max(‖L_i‖_F, ‖L_j‖_F)

exceeds a threshold, with the likely cause, and every pair where one node is
refused (the edge of the usable region).

Neighbors are the tensor-grid nodes one step apart along one axis, or the
Delaunay edges of scattered nodes (the pairs the interpolation blends).

Likely causes, decided in this order
------------------------------------
``verdict change``
    One node is refused, or the observability verdicts of the two nodes
    differ, or one is ``weak`` (when verdicts are given).
``model change``
    The local model changes about as much as the gain: the relative change of
    [Φ; C] is at least half the gain's.  The grid is too coarse there.
``eigenvector swap``
    The error poles are the same (after matching them, within
    ``pole_tolerance`` relative) but the gain is not: a multi-output
    placement (or a change of the dominant direction) picked another
    eigenvector assignment for the same poles.
``pole change``
    The error poles themselves moved (a pole policy that follows the plant).

References
----------
Rugh, W. J. & Shamma, J. S. (2000). Research on gain scheduling. Automatica
36(10), 1401-1425 (why neighboring designs must vary smoothly).

Kautsky, J., Nichols, N. K. & Van Dooren, P. (1985). Robust pole assignment in
linear state feedback. International Journal of Control 41(5), 1129-1155 (the
freedom in the eigenvectors of a multi-input placement).

Kuhn, H. W. (1955). The Hungarian method for the assignment problem. Naval
Research Logistics Quarterly 2(1-2), 83-97 (matching the two pole sets,
through ``scipy.optimize.linear_sum_assignment``).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any, Literal

import numpy as np
from pydantic import BaseModel, Field

from linobs.errors import UsageError
from linobs.estimator.node import NodeDesign
from linobs.estimator.schedule import GainSchedule

__all__ = ["Cause", "Jump", "gain_jumps", "pole_shift", "relative_change"]

Cause = Literal["verdict change", "model change", "eigenvector swap", "pole change"]

_ADVICE: dict[str, str] = {
    "verdict change": "the design changes character here; refine the grid at the edge of the "
                      "observable region or keep the schedule away from it",
    "model change": "the local model changes fast here; add grid values between these nodes",
    "eigenvector swap": "same poles, different gain; fix the eigenvector choice (consistent "
                        "poles, fewer free directions) or move a pole slightly",
    "pole change": "the error poles move between these nodes; use one pole pattern for the grid "
                   "(consistent_poles) or a finer grid",
}


class Jump(BaseModel):
    """One pair of neighboring nodes whose gains differ a lot (or whose designs differ in kind)."""

    node_a: int
    node_b: int
    values_a: dict[str, float] = Field(description="scheduling values of node_a")
    values_b: dict[str, float] = Field(description="scheduling values of node_b")
    axis: str | None = Field(None, description="tensor: the axis along which they neighbor")
    relative_change: float | None = Field(
        description="‖ΔL‖_F / max(‖L_a‖_F, ‖L_b‖_F); None when a node is refused")
    pole_shift: float | None = Field(
        None, description="largest matched error-pole distance / largest pole magnitude")
    model_change: float = Field(description="relative change of [Φ; C] between the nodes")
    cause: Cause
    message: str


def relative_change(a: np.ndarray, b: np.ndarray) -> float:
    """‖a − b‖_F / max(‖a‖_F, ‖b‖_F), zero when both are zero."""
    a, b = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
    scale = max(float(np.linalg.norm(a)), float(np.linalg.norm(b)))
    return float(np.linalg.norm(a - b)) / scale if scale > 0 else 0.0


def pole_shift(poles_a: list[tuple[float, float]], poles_b: list[tuple[float, float]]
               ) -> float | None:
    """Largest distance between optimally matched poles, relative to the largest magnitude.

    None when either set is missing or the sets differ in size.

    References
    ----------
    Kuhn, H. W. (1955). The Hungarian method for the assignment problem. Naval
    Research Logistics Quarterly 2(1-2), 83-97.
    """
    if not poles_a or not poles_b or len(poles_a) != len(poles_b):
        return None
    from scipy.optimize import linear_sum_assignment

    za = np.array([complex(r, i) for r, i in poles_a])
    zb = np.array([complex(r, i) for r, i in poles_b])
    cost = np.abs(za[:, None] - zb[None, :])
    rows, cols = linear_sum_assignment(cost)
    scale = max(float(np.max(np.abs(za))), float(np.max(np.abs(zb))))
    worst = float(np.max(cost[rows, cols]))
    return worst / scale if scale > 0 else 0.0


def _model_change(a: NodeDesign, b: NodeDesign) -> float:
    return relative_change(np.vstack([a.Phi, a.C]), np.vstack([b.Phi, b.C]))


def gain_jumps(schedule: GainSchedule, threshold: float, *,
               verdicts: Mapping[int, str] | None = None,
               pole_tolerance: float = 0.05) -> list[Jump]:
    """Neighboring nodes whose gains change by more than ``threshold`` (relative).

    Parameters
    ----------
    schedule
        The gain schedule.
    threshold
        Relative change ‖ΔL‖_F / max ‖L‖_F above which a pair is flagged
        (``EstimatorSettings.continuity_threshold``).
    verdicts
        Optional node number -> observability verdict (``observable``,
        ``weak``, ...): pairs of designed nodes are then also flagged when the
        verdicts differ or one is weak, whatever their gain change.
    pole_tolerance
        Relative pole shift below which two designs count as having the same
        poles (see :func:`pole_shift`).

    Returns
    -------
    list[Jump]
        Largest relative change first; pairs with a refused node (no relative
        change) last, in node order.  Pairs where both nodes are refused are
        not listed.

    Raises
    ------
    UsageError
        ``threshold`` or ``pole_tolerance`` not positive.
    """
    if not threshold > 0:
        raise UsageError(f"the continuity threshold must be positive, got {threshold}")
    if not pole_tolerance > 0:
        raise UsageError(f"the pole tolerance must be positive, got {pole_tolerance}")
    verdicts = {int(k): str(v) for k, v in (verdicts or {}).items()}
    nodes = schedule.data.nodes
    jumps: list[Jump] = []
    for i, j, axis in schedule.edges():
        a, b = nodes[i], nodes[j]
        model = _model_change(a, b)
        common: dict[str, Any] = {"node_a": i, "node_b": j, "axis": axis, "model_change": model,
                                  "values_a": schedule.node_point(i),
                                  "values_b": schedule.node_point(j)}
        if a.status != "ok" or b.status != "ok":
            if a.status != "ok" and b.status != "ok":
                continue
            refused = i if a.status != "ok" else j
            jumps.append(Jump(**common, relative_change=None, pole_shift=None,
                              cause="verdict change",
                              message=f"node {refused} is refused; "
                                      f"{_ADVICE['verdict change']}"))
            continue
        change = relative_change(a.L, b.L)
        shift = pole_shift(a.error_poles, b.error_poles)
        va, vb = verdicts.get(i), verdicts.get(j)
        verdict_differs = (va is not None and vb is not None and va != vb) or "weak" in (va, vb)
        if change <= threshold and not verdict_differs:
            continue
        if verdict_differs:
            cause: Cause = "verdict change"
            what = f"verdicts {va or '?'} / {vb or '?'}"
        elif model >= 0.5 * change:
            cause = "model change"
            what = f"the local model changes by {model:.3g}"
        elif shift is not None and shift <= pole_tolerance:
            cause = "eigenvector swap"
            what = f"the error poles agree within {shift:.2g}"
        else:
            cause = "pole change"
            what = "the error poles move" + (f" by {shift:.3g}" if shift is not None else "")
        jumps.append(Jump(**common, relative_change=change, pole_shift=shift, cause=cause,
                          message=f"gain changes by {change:.3g} (relative); {what}; "
                                  f"{_ADVICE[cause]}"))
    numeric = sorted((jp for jp in jumps if jp.relative_change is not None),
                     key=lambda jp: (-float(jp.relative_change or 0.0), jp.node_a, jp.node_b))
    boundary = [jp for jp in jumps if jp.relative_change is None]
    return numeric + boundary
