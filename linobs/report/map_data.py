"""What a map over two axes shows: a value per point on two chosen axes of the envelope.

The value is the observability margin, the distance to unobservability (the
margin map), or the frozen-point decay reserve; smaller is worse for both.  A
tensor grid is reshaped to its axes; every other axis is either fixed at a
given value (the nearest grid value) or reduced to its worst case, the
smallest value over that axis (and the most severe verdict).  Scattered
points are kept as points: fixed axes select the points at the nearest
value present, the other axes are projected (no reduction is possible
without a grid).

A point counts as *failed* when its value is NaN or its verdict is not one
of the four observability verdicts (e.g. ``failed``, ``not_converged``).  A
reduced cell takes the minimum over its points that did not fail, and
remembers that some failed; a cell whose points all failed is NaN.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Literal

import numpy as np

from linobs.errors import UsageError
from linobs.observability.report import VERDICTS

__all__ = ["ReducedMap", "reduce_to_axes", "severity"]

_RANK = {v: k for k, v in enumerate(VERDICTS)}  # observable 0 … unobservable 3


def severity(verdict: str) -> int:
    """0 (observable) … 3 (unobservable); −1 for anything that is not a verdict (failed)."""
    return _RANK.get(verdict, -1)


@dataclass(frozen=True)
class ReducedMap:
    """Values on the two map axes.

    For a tensor grid ``value``, ``verdict`` and ``failed`` are 2-D with rows
    along the second axis (``y``) and columns along the first (``x``), the
    layout of ``pcolormesh``; for scattered points they are 1-D, one entry
    per point kept, like ``x`` and ``y``.
    """

    kind: Literal["tensor", "scattered"]
    axes: tuple[str, str]
    x: np.ndarray
    y: np.ndarray
    value: np.ndarray
    verdict: np.ndarray
    failed: np.ndarray
    fixed: dict[str, float] = field(default_factory=dict)
    reduced: list[str] = field(default_factory=list)
    failed_points: list[dict[str, float]] = field(default_factory=list)
    failed_status: list[str] = field(default_factory=list)


def reduce_to_axes(points: np.ndarray, names: Sequence[str], values: np.ndarray,
                   verdicts: Sequence[str], *, axes: tuple[str, str],
                   fixed: Mapping[str, float] | None = None) -> ReducedMap:
    """The value field on ``axes`` (see the module notes).

    Parameters
    ----------
    points : ndarray, shape (N, k)
        One row per operating point, columns named by ``names``.
    names : sequence of str
        The grid's axis (column) names.
    values : ndarray, shape (N,)
        Value per point, smaller is worse (NaN where the point failed).
    verdicts : sequence of str, length N
        Verdict per point, or a status such as ``failed``.
    axes : (str, str)
        The two axes shown (x, then y).
    fixed : mapping, optional
        Values of other axes to hold; axes not given are reduced to their worst case.

    Raises
    ------
    UsageError
        Unknown axis names, the same axis twice, a fixed value for a shown
        axis, or arrays of inconsistent length.
    """
    points = np.atleast_2d(np.asarray(points, dtype=float))
    names = list(names)
    values = np.asarray(values, dtype=float).reshape(-1)
    verdicts = [str(v) for v in verdicts]
    fixed = dict(fixed or {})
    _check(points, names, values, verdicts, axes, fixed)
    failed = ~np.isfinite(values) | np.array([severity(v) < 0 for v in verdicts], dtype=bool)
    ia, ib = names.index(axes[0]), names.index(axes[1])
    levels = [_levels(points[:, j]) for j in range(len(names))]
    shape = tuple(len(lv) for lv, _ in levels)
    index = np.stack([idx for _, idx in levels], axis=1) if names else np.zeros((0, 0), int)
    tensor = int(np.prod(shape)) == len(points) and \
        len({tuple(r) for r in index.tolist()}) == len(points)
    others = [j for j in range(len(names)) if j not in (ia, ib)]
    fixed_used = {}
    keep = np.ones(len(points), dtype=bool)
    for j in others:
        if names[j] in fixed:
            lv, idx = levels[j]
            chosen = int(np.argmin(np.abs(lv - float(fixed[names[j]]))))
            fixed_used[names[j]] = float(lv[chosen])
            keep &= idx == chosen
    reduced = [names[j] for j in others if names[j] not in fixed]
    failed_points = [dict(zip(names, map(float, points[k]))) for k in np.nonzero(keep & failed)[0]]
    failed_status = [verdicts[k] for k in np.nonzero(keep & failed)[0]]
    if not tensor:
        sel = np.nonzero(keep)[0]
        return ReducedMap("scattered", (axes[0], axes[1]), points[sel, ia], points[sel, ib],
                          np.where(failed[sel], np.nan, values[sel]),
                          np.array([verdicts[k] for k in sel], dtype=object), failed[sel],
                          fixed_used, reduced, failed_points, failed_status)
    nx, ny = shape[ia], shape[ib]
    cell = index[:, ia] + nx * index[:, ib]
    least = np.full(nx * ny, np.inf)
    worst = np.full(nx * ny, -1)
    any_failed = np.zeros(nx * ny, dtype=bool)
    status: dict[int, str] = {}
    for k in np.nonzero(keep)[0]:
        c = cell[k]
        if failed[k]:
            any_failed[c] = True
            status.setdefault(c, verdicts[k])
            continue
        least[c] = min(least[c], values[k])
        worst[c] = max(worst[c], severity(verdicts[k]))
    verdict = np.array([VERDICTS[w] if w >= 0 else status.get(c, "missing")
                        for c, w in enumerate(worst)], dtype=object)
    least[np.isinf(least) & (worst < 0)] = np.nan
    return ReducedMap("tensor", (axes[0], axes[1]), levels[ia][0], levels[ib][0],
                      least.reshape(ny, nx), verdict.reshape(ny, nx), any_failed.reshape(ny, nx),
                      fixed_used, reduced, failed_points, failed_status)


def _check(points: np.ndarray, names: list[str], values: np.ndarray, verdicts: list[str],
           axes: tuple[str, str], fixed: dict[str, float]) -> None:
    if len(axes) != 2 or axes[0] == axes[1]:
        raise UsageError(f"a map needs two different axes, got {list(axes)}; choose two "
                         f"of the grid axes {', '.join(names)}")
    for a in axes:
        if a not in names:
            raise UsageError(f"{a!r} is not a grid axis; choose the map axes among "
                             f"{', '.join(names)}")
    for a in fixed:
        if a not in names:
            raise UsageError(f"{a!r} is not a grid axis; fixed values can be given for "
                             f"{', '.join(n for n in names if n not in axes) or 'no axis'}")
        if a in axes:
            raise UsageError(f"{a!r} is shown on the map and cannot also be fixed; fix only "
                             f"the other axes")
    if points.shape[1] != len(names) or len(values) != len(points) or \
            len(verdicts) != len(points):
        raise UsageError(f"map: {len(points)} points with {points.shape[1]} columns, "
                         f"{len(names)} names, {len(values)} values and {len(verdicts)} "
                         f"verdicts do not match")


def _levels(column: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Distinct values of a column (values within 1e-9 of the span merged) and each row's level."""
    if column.size == 0:
        return np.zeros(0), np.zeros(0, dtype=int)
    order = np.argsort(column, kind="stable")
    sorted_values = column[order]
    span = float(sorted_values[-1] - sorted_values[0])
    tol = 1e-9 * max(span, float(np.max(np.abs(sorted_values))), 1e-300)
    new = np.concatenate([[True], np.diff(sorted_values) > tol])
    group = np.cumsum(new) - 1
    index = np.empty_like(group)
    index[order] = group
    return sorted_values[new], index


RASTER_CELLS = 400
"""Meshes with more cells than this are drawn as one embedded image inside the SVG."""


def rasterize(xe: np.ndarray, ye: np.ndarray) -> bool:
    """Whether a mesh on the cell edges ``xe``, ``ye`` goes into the SVG as an image.

    A vector mesh costs one path per cell: thousands of cells make the SVG
    slow to write and to open, while an image of the same mesh at the figure's
    resolution looks the same (axes, labels and markers stay vector).
    """
    cells = max(np.size(xe) - 1, 1) * max(np.size(ye) - 1, 1) if np.ndim(xe) <= 1 \
        else np.size(xe)
    return bool(cells > RASTER_CELLS)
