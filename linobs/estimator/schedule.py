"""Gain schedules: node designs over the grid, interpolated between the nodes.

A :class:`GainSchedule` holds one :class:`~linobs.estimator.node.NodeDesign`
per grid node and evaluates the estimator update for any scheduling value —
the same arithmetic the exported tables and the estimator FMU use.

Interpolation
-------------
* **Tensor grids:** multilinear in the scheduling variables, every quantity
  of the node (gain L, Φ, Γ, Γ₀, C, D, x0, u0, y0, dx0, and L_continuous of a
  continuous design) interpolated element-wise over the corners of the cell
  holding the value — the same values as scipy's ``RegularGridInterpolator``
  with method "linear" (the tests check this).  Outside the grid the
  scheduling value is clamped to the grid's box.
* **Scattered points:** barycentric (linear) interpolation on the Delaunay
  triangulation of the nodes in coordinates scaled by each axis' range (the
  same values as scipy's ``LinearNDInterpolator`` with ``rescale=True``);
  outside the convex hull, the nearest node (scaled distance).  With one
  scheduling variable, linear between consecutive nodes.
* Clamped and nearest-node values are flagged in :attr:`Evaluation.outside`.
* A refused node (unobservable, or not detectable for Kalman) is never used:
  a value is **usable** only when every node with a non-zero weight has a
  design.  Every value inside a cell (simplex) touching a refused node is
  therefore unusable; a value on a face whose nodes all have designs is not.
  An unusable evaluation carries NaN gains and the update keeps the
  prediction only (no correction) — the caller decides what to do;
  validation reports it.  The local models of refused nodes are real and are
  interpolated like the others.

Scheduling variables are the grid's axes: an axis over a state is read from
the current estimate, over an input from the measured input, over a
parameter from the value given when the schedule runs.

References
----------
Rugh, W. J. & Shamma, J. S. (2000). Research on gain scheduling.
Automatica 36(10), 1401-1425 (interpolated local designs).

Franklin, G. F., Powell, J. D. & Workman, M. L. (1998). Digital Control of
Dynamic Systems, 3rd ed. Addison-Wesley (the prediction and current-estimate
forms of the discrete observer).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Literal

import numpy as np
from pydantic import BaseModel, Field

from linobs.errors import ModelError, UsageError
from linobs.estimator.interpolation import Triangulation, tensor_edges, tensor_weights
from linobs.estimator.node import NodeDesign
from linobs.estimator.schedule_checks import (
    ROLES,
    check_nodes,
    field_array,
    has_continuous,
    sources,
)

if TYPE_CHECKING:  # pragma: no cover
    from linobs.operating.grid import Grid

__all__ = ["FIELDS", "Evaluation", "EvaluationBatch", "GainSchedule", "ScheduleData",
           "schedule_from_nodes"]

FIELDS = ("L", "Phi", "Gamma", "Gamma0", "C", "D", "x0", "u0", "y0", "dx0")


class ScheduleData(BaseModel):
    """A gain schedule as data (what is stored and exported)."""

    grid_kind: Literal["tensor", "scattered"]
    axes: list[str]
    axis_values: list[list[float]] = Field(default_factory=list, description="tensor grids")
    points: list[list[float]] = Field(default_factory=list, description="scattered: node coordinates")
    axis_roles: dict[str, Literal["state", "input", "parameter"]]
    nodes: list[NodeDesign] = Field(description="tensor: C order of the axes; scattered: as points")


@dataclass
class Evaluation:
    """The interpolated node at one scheduling value."""

    values: dict[str, np.ndarray]
    usable: bool
    outside: bool
    weights: np.ndarray  # of the nodes involved (for inspection; zero weights included)
    nodes: np.ndarray    # their flat indices


@dataclass
class EvaluationBatch:
    """The interpolated nodes at N scheduling values (leading axis N everywhere)."""

    values: dict[str, np.ndarray]
    usable: np.ndarray
    outside: np.ndarray
    weights: np.ndarray
    nodes: np.ndarray

    def __len__(self) -> int:
        return int(self.usable.shape[0])

    def __getitem__(self, i: int) -> Evaluation:
        return Evaluation(values={f: v[i] for f, v in self.values.items()},
                          usable=bool(self.usable[i]), outside=bool(self.outside[i]),
                          weights=self.weights[i], nodes=self.nodes[i])


class GainSchedule:
    """Node designs over the grid and the scheduled estimator update.

    Raises
    ------
    UsageError
        The data is inconsistent (node count, shapes, mixed kinds, forms,
        domains, sample times or variable lists, unknown roles), or no node
        has a design.
    """

    def __init__(self, data: ScheduleData) -> None:
        self.data = data
        if not data.nodes:
            raise UsageError("the schedule has no nodes; design the grid's points first")
        first = next((n for n in data.nodes if n.status == "ok"), None)
        if first is None:
            raise UsageError("no node of the schedule has a design (every node was refused); "
                             "there is nothing to interpolate")
        check_nodes(data.nodes, first)
        self.kind, self.form, self.domain = first.kind, first.form, first.domain
        self.sample_time = first.sample_time
        self.states, self.inputs, self.outputs = list(first.states), list(first.inputs), \
            list(first.outputs)
        self.axes = list(data.axes)
        self.usable = np.array([n.status == "ok" for n in data.nodes])
        self.fields = FIELDS + (("L_continuous",) if has_continuous(data.nodes) else ())
        self._arrays = {f: np.stack([field_array(n, f, first) for n in data.nodes])
                        for f in self.fields}
        self._tri: Triangulation | None = None
        if data.grid_kind == "tensor":
            if len(data.axis_values) != len(self.axes):
                raise UsageError(f"the schedule names {len(self.axes)} axes but gives values for "
                                 f"{len(data.axis_values)}")
            self._grid = [np.asarray(v, dtype=float) for v in data.axis_values]
            for name, v in zip(self.axes, self._grid):
                if v.size == 0 or not np.all(np.isfinite(v)) or np.any(np.diff(v) <= 0):
                    raise UsageError(f"the values of schedule axis {name!r} must be finite and "
                                     f"strictly increasing")
            self.shape = tuple(len(v) for v in self._grid)
            expected = int(np.prod(self.shape, dtype=np.int64))
        else:
            pts = np.asarray(data.points, dtype=float).reshape(len(data.points), -1)
            if pts.shape[1] != len(self.axes) or not np.all(np.isfinite(pts)) or not self.axes:
                raise UsageError(f"the schedule's points must be finite rows of {len(self.axes)} "
                                 f"values (one per axis, at least one axis)")
            self.shape = (len(pts),)
            expected = len(pts)
            self._tri = Triangulation(pts)
        if expected != len(data.nodes):
            raise UsageError(f"the schedule has {len(data.nodes)} nodes but its grid has "
                             f"{expected} points; give one node per grid point")
        self._source = sources(self.axes, data.axis_roles, self.states, self.inputs)

    # ------------------------------------------------------------------ scheduling value
    def scheduling_value(self, x_hat: np.ndarray, u: np.ndarray,
                         parameters: Mapping[str, float] | None = None) -> np.ndarray:
        """The grid coordinates for the current estimate, measured inputs and parameters."""
        s = np.empty(len(self.axes))
        for k, name in enumerate(self.axes):
            role, idx = self._source[name]
            if role == "state":
                s[k] = x_hat[idx]
            elif role == "input":
                s[k] = u[idx]
            else:
                if not parameters or name not in parameters:
                    raise UsageError(f"the schedule runs over the parameter {name!r}: give its "
                                     f"value (parameters={{'{name}': ...}})")
                s[k] = parameters[name]
        return s

    def point_value(self, point: Mapping[str, float]) -> np.ndarray:
        """The scheduling value of an operating point given by name (every axis needed)."""
        missing = [a for a in self.axes if a not in point]
        if missing:
            raise UsageError(f"the point sets no value for the scheduling variable(s) "
                             f"{', '.join(missing)}; give every axis: {', '.join(self.axes)}")
        return np.array([float(point[a]) for a in self.axes])

    # ------------------------------------------------------------------ interpolation
    def weights(self, S: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Nodes, weights and outside flags for scheduling values ``S`` (N × k)."""
        S = np.asarray(S, dtype=float)
        if S.ndim != 2 or S.shape[1] != len(self.axes):
            raise UsageError(f"a scheduling value has {len(self.axes)} entries "
                             f"({', '.join(self.axes)}), got shape {S.shape[1:]}")
        if not np.all(np.isfinite(S)):
            raise ModelError("a scheduling value is not finite (the estimate or an input has "
                             "diverged); check the estimator's initial state and inputs")
        if self._tri is None:
            return tensor_weights(self._grid, S)
        return self._tri.locate(S)

    def evaluate_many(self, S: np.ndarray | Sequence[Sequence[float]]) -> EvaluationBatch:
        """Every node quantity interpolated at each row of ``S`` (N × k)."""
        S = np.asarray(S, dtype=float)
        if S.ndim == 1 and len(self.axes) == 1:
            S = S[:, None]
        nodes, weights, outside = self.weights(S)
        usable = np.all(self.usable[nodes] | (weights == 0.0), axis=1)
        values = {f: np.einsum("nm,nm...->n...", weights, a[nodes])
                  for f, a in self._arrays.items()}
        for f in ("L", "L_continuous"):
            if f in values:
                values[f][~usable] = np.nan
        return EvaluationBatch(values=values, usable=usable, outside=outside, weights=weights,
                               nodes=nodes)

    def evaluate(self, s: np.ndarray | Sequence[float]) -> Evaluation:
        """Every node quantity interpolated at scheduling value ``s``."""
        s = np.asarray(s, dtype=float)
        if s.shape != (len(self.axes),):
            raise UsageError(f"a scheduling value has {len(self.axes)} entries "
                             f"({', '.join(self.axes)}), got shape {s.shape}")
        nodes, weights, outside = self.weights(s[None, :])
        nodes, weights = nodes[0], weights[0]
        active = weights > 0.0
        nodes_a, w = nodes[active], weights[active]
        usable = bool(np.all(self.usable[nodes_a]))
        values = {f: np.tensordot(w, a[nodes_a], axes=(0, 0)) for f, a in self._arrays.items()}
        if not usable:
            for f in ("L", "L_continuous"):
                if f in values:
                    values[f] = np.full_like(values[f], np.nan)
        return Evaluation(values=values, usable=usable, outside=bool(outside[0]), weights=weights,
                          nodes=nodes)

    # ------------------------------------------------------------------ the grid
    def node_point(self, i: int) -> dict[str, float]:
        """The scheduling values of node ``i``, by axis name."""
        if self._tri is not None:
            row = self._tri.points[int(i)]
        else:
            idx = np.unravel_index(int(i), self.shape) if self.shape else ()
            row = [self._grid[d][k] for d, k in enumerate(idx)]
        return {a: float(v) for a, v in zip(self.axes, row)}

    def edges(self) -> list[tuple[int, int, str | None]]:
        """Neighboring node pairs ``(i, j, axis)``: tensor — one step along ``axis``;
        scattered — the Delaunay edges (``axis`` None)."""
        if self._tri is None:
            return [(i, j, self.axes[d]) for i, j, d in tensor_edges(self.shape)]
        return [(i, j, None) for i, j in self._tri.edges()]

    @property
    def triangulation(self) -> Triangulation | None:
        """The simplices over the nodes (scattered grids), None for tensor grids."""
        return self._tri

    # ------------------------------------------------------------------ the update
    def predict(self, ev: Evaluation, x_hat: np.ndarray, u: np.ndarray) -> np.ndarray:
        """x0 + Φ(x̂ − x0) + Γ(u − u0) + Γ₀ dx0 (the local model's one-step prediction)."""
        v = ev.values
        return v["x0"] + v["Phi"] @ (x_hat - v["x0"]) + v["Gamma"] @ (u - v["u0"]) + \
            v["Gamma0"] @ v["dx0"]

    def output(self, ev: Evaluation, x_hat: np.ndarray, u: np.ndarray) -> np.ndarray:
        """y0 + C(x̂ − x0) + D(u − u0) (the local model's output)."""
        v = ev.values
        return v["y0"] + v["C"] @ (x_hat - v["x0"]) + v["D"] @ (u - v["u0"])

    def step(self, x_hat: np.ndarray, u: np.ndarray, y: np.ndarray,
             parameters: Mapping[str, float] | None = None, *,
             u_now: np.ndarray | None = None) -> tuple[np.ndarray, Evaluation]:
        """One estimator update (see :mod:`linobs.estimator.node` for the two forms).

        ``predictor``: from x̂[k|k−1], u[k], y[k] to x̂[k+1|k].
        ``filter``: from x̂[k−1|k−1], u[k−1] (held over the sample) and y[k] to
        x̂[k|k]; the predicted output ŷ⁻[k] uses ``u_now`` = u[k] when given
        (it matters only where D ≠ 0), else ``u``.
        The scheduling value is taken at the incoming estimate and ``u``, and
        the one interpolated node serves the whole step.  Where the
        interpolation is not usable the correction is skipped.
        """
        x_hat = np.asarray(x_hat, dtype=float)
        u = np.asarray(u, dtype=float)
        y = np.asarray(y, dtype=float)
        ev = self.evaluate(self.scheduling_value(x_hat, u, parameters))
        L = ev.values["L"]
        if self.form == "predictor":
            x_next = self.predict(ev, x_hat, u)
            if ev.usable:
                x_next = x_next + L @ (y - self.output(ev, x_hat, u))
            return x_next, ev
        x_prior = self.predict(ev, x_hat, u)
        if not ev.usable:
            return x_prior, ev
        u_meas = u if u_now is None else np.asarray(u_now, dtype=float)
        return x_prior + L @ (y - self.output(ev, x_prior, u_meas)), ev


def schedule_from_nodes(grid: Grid, nodes: Mapping[int, NodeDesign],
                        axis_roles: Mapping[str, str]) -> GainSchedule:
    """Assemble the gain schedule of a grid from its node designs.

    Parameters
    ----------
    grid
        The operating grid (:class:`linobs.operating.grid.Grid`); its variables
        are the scheduling variables.
    nodes
        Grid point number -> design; every point needs one (refused ones too).
    axis_roles
        Grid variable -> ``"state"``, ``"input"`` or ``"parameter"``: where the
        running estimator reads that scheduling variable from.

    Returns
    -------
    GainSchedule
        Tensor grids: nodes in the grid's C order; scattered: the grid's points.

    Raises
    ------
    UsageError
        A grid point without a node, a node number outside the grid, a grid
        without variables, an unknown role, or nodes that do not fit together.
    """
    if not grid.names:
        raise UsageError("the grid has no variables to schedule over; a single design needs no "
                         "schedule (give the grid at least one axis)")
    extra = sorted(int(k) for k in nodes if not 0 <= int(k) < len(grid))
    if extra:
        raise UsageError(f"node design(s) for point(s) {extra[:5]} outside the grid of "
                         f"{len(grid)} points; design the points of this grid")
    missing = [i for i in range(len(grid)) if i not in nodes]
    if missing:
        shown = ", ".join(str(i) for i in missing[:8]) + (" ..." if len(missing) > 8 else "")
        raise UsageError(f"grid point(s) {shown} have no node design ({len(missing)} of "
                         f"{len(grid)}); every point needs one, a refused design included")
    roles = {str(k): str(v) for k, v in axis_roles.items()}
    bad = {k: v for k, v in roles.items() if v not in ROLES}
    if bad:
        raise UsageError(f"unknown scheduling role(s) {bad}; use one of {', '.join(ROLES)}")
    unknown = sorted(set(roles) - set(grid.names))
    if unknown:
        raise UsageError(f"axis_roles names {', '.join(unknown)}, not grid variables "
                         f"({', '.join(grid.names)})")
    ordered = [nodes[i] for i in range(len(grid))]
    if grid.kind == "tensor":
        data = ScheduleData(grid_kind="tensor", axes=list(grid.names),
                            axis_values=[list(a.values) for a in grid.axes],
                            axis_roles=roles, nodes=ordered)  # type: ignore[arg-type]
    else:
        data = ScheduleData(grid_kind="scattered", axes=list(grid.names),
                            points=grid.points.tolist(), axis_roles=roles,
                            nodes=ordered)  # type: ignore[arg-type]
    return GainSchedule(data)
