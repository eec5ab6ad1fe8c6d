"""Operating grids: a tensor product of axes, or scattered points from a table.

A grid names the variables it sets (states held fixed, inputs, parameters)
and holds one row of values per operating point.  Besides the points it
offers what a sweep needs: the neighbors of a point (where to take a warm
start from), a visiting order in which consecutive points are neighbors
(continuation), and contiguous chunks of that order for the workers.

Everything here is plain numpy; the grid knows nothing of models or files
other than the points table it can parse.
"""

from __future__ import annotations

import csv
import hashlib
import io
import itertools
import json
import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Literal

import numpy as np

from linobs.errors import UsageError

__all__ = ["Axis", "Grid", "PointsTable", "TableProblem", "geometric_values", "linspace_values",
           "parse_points_csv", "read_points_csv", "serpentine_digits"]

GridKind = Literal["tensor", "scattered"]


def linspace_values(start: float, stop: float, num: int) -> np.ndarray:
    """``num`` evenly spaced values from ``start`` to ``stop``, both included (``numpy.linspace``)."""
    return np.linspace(float(start), float(stop), int(num))


def geometric_values(start: float, stop: float, num: int) -> np.ndarray:
    """``num`` values from ``start`` to ``stop`` (both > 0) with a constant ratio (``numpy.geomspace``).

    The ends are exact; the values are evenly spaced in logarithm, which suits
    variables that span decades (flows, rate constants, heat-transfer coefficients).
    """
    return np.geomspace(float(start), float(stop), int(num))


@dataclass(frozen=True)
class Axis:
    """One grid axis: a variable name and its values (finite, strictly increasing)."""

    name: str
    values: tuple[float, ...]

    def __init__(self, name: str, values: Sequence[float] | np.ndarray) -> None:
        vals = tuple(float(v) for v in np.asarray(values, dtype=float).ravel())
        if not name:
            raise ValueError("an axis needs a variable name")
        if not vals:
            raise ValueError(f"axis {name!r} has no values")
        if not all(math.isfinite(v) for v in vals):
            raise ValueError(f"axis {name!r} holds non-finite values")
        if any(b <= a for a, b in itertools.pairwise(vals)):
            raise ValueError(f"the values of axis {name!r} must be strictly increasing")
        object.__setattr__(self, "name", name)
        object.__setattr__(self, "values", vals)

    @property
    def array(self) -> np.ndarray:
        return np.array(self.values, dtype=float)

    def __len__(self) -> int:
        return len(self.values)


def serpentine_digits(shape: Sequence[int]) -> np.ndarray:
    """Multi-indices of a box in boustrophedon order: each step changes one index by one.

    Row ``r`` of the result is the ``r``-th multi-index of the reflected
    mixed-radix Gray code over ``shape``: the first axis varies slowest, and
    every other axis reverses its direction each time the axes before it
    advance, so consecutive rows differ in exactly one position, by one.

    Parameters
    ----------
    shape
        Number of values along each axis (each ≥ 1).

    Returns
    -------
    numpy.ndarray
        Integer array of shape ``(prod(shape), len(shape))``.

    References
    ----------
    D. E. Knuth (2011), *The Art of Computer Programming, Vol. 4A: Combinatorial
    Algorithms, Part 1*, Section 7.2.1.1 (reflected mixed-radix Gray codes).
    """
    shape = [int(n) for n in shape]
    total = int(np.prod(shape, dtype=np.int64)) if shape else 1
    counter = np.arange(total, dtype=np.int64)
    digits = np.empty((total, len(shape)), dtype=np.int64)
    stride = total
    for j, n in enumerate(shape):
        stride //= n
        q = counter // stride          # ordinary counter of axes 0..j
        d = q % n
        passes = q // n                # how often the axes before j have advanced
        digits[:, j] = np.where(passes % 2 == 1, n - 1 - d, d)
    return digits


class Grid:
    """Operating points over named variables, as a tensor product or scattered.

    Build one with :meth:`Grid.tensor` (every combination of the axes' values,
    in C order of the axes as given: the last axis varies fastest) or
    :meth:`Grid.scattered` (an N × k table of points, e.g. an envelope that is
    not a box).  A grid with no axes has one point that sets nothing.

    Attributes
    ----------
    kind
        ``"tensor"`` or ``"scattered"``.
    names
        The variables, one per column of :attr:`points`.
    axes
        The axes (tensor); empty for a scattered grid.
    points
        Float array of shape ``(len(grid), len(names))``, read-only.
    """

    def __init__(self, kind: GridKind, names: Sequence[str], points: np.ndarray,
                 axes: Sequence[Axis] = ()) -> None:
        names = tuple(names)
        if len(set(names)) != len(names):
            raise ValueError(f"grid variable names repeat: {', '.join(names)}")
        pts = np.array(points, dtype=float, copy=True)
        if pts.ndim != 2 or pts.shape[1] != len(names):
            raise ValueError(f"expected an N x {len(names)} array of points, got shape {pts.shape}")
        if kind == "scattered" and len(pts) == 0:
            raise ValueError("a scattered grid needs at least one point")
        if not np.all(np.isfinite(pts)):
            raise ValueError("grid points must be finite")
        pts.setflags(write=False)
        self.kind: GridKind = kind
        self.names: tuple[str, ...] = names
        self.axes: tuple[Axis, ...] = tuple(axes)
        self.points: np.ndarray = pts
        lo, hi = (pts.min(axis=0), pts.max(axis=0)) if len(pts) else (np.zeros(0), np.zeros(0))
        span = hi - lo
        self._low = lo
        self._scale = np.where(span > 0, span, 1.0)

    # ---------------------------------------------------------------- builders
    @classmethod
    def tensor(cls, axes: Sequence[Axis]) -> Grid:
        """Every combination of the axes' values, the last axis varying fastest (C order)."""
        axes = tuple(axes)
        if axes:
            mesh = np.meshgrid(*[a.array for a in axes], indexing="ij")
            points = np.stack([m.ravel() for m in mesh], axis=1)
        else:
            points = np.zeros((1, 0))
        return cls("tensor", [a.name for a in axes], points, axes)

    @classmethod
    def scattered(cls, names: Sequence[str], points: np.ndarray | Sequence[Sequence[float]]) -> Grid:
        """Points given row by row (one column per name)."""
        pts = np.asarray(points, dtype=float)
        if pts.ndim != 2 or pts.shape[1] != len(names):
            raise ValueError(f"expected an N x {len(names)} array of points, got shape {pts.shape}")
        return cls("scattered", names, pts)

    # ------------------------------------------------------------------ access
    @property
    def shape(self) -> tuple[int, ...]:
        """Number of values per axis (tensor); ``(N,)`` for a scattered grid."""
        if self.kind == "tensor":
            return tuple(len(a) for a in self.axes)
        return (len(self.points),)

    @property
    def dims(self) -> int:
        return len(self.names)

    def __len__(self) -> int:
        return int(self.points.shape[0])

    def __repr__(self) -> str:
        dims = " x ".join(f"{n}[{k}]" for n, k in zip(self.names, self.shape)) \
            if self.kind == "tensor" else f"{', '.join(self.names)}"
        return f"Grid({self.kind}, {len(self)} points: {dims or 'no axes'})"

    def _check_index(self, i: int) -> int:
        i = int(i)
        if not 0 <= i < len(self):
            raise IndexError(f"grid point {i} out of range (the grid has {len(self)} points)")
        return i

    def point(self, i: int) -> dict[str, float]:
        """The values at point ``i``, by variable name."""
        row = self.points[self._check_index(i)]
        return {name: float(v) for name, v in zip(self.names, row)}

    def multi_index(self, i: int) -> tuple[int, ...]:
        """The axis indices of flat point ``i`` (tensor grids)."""
        self._require_tensor("multi_index")
        i = self._check_index(i)
        return tuple(int(k) for k in np.unravel_index(i, self.shape)) if self.axes else ()

    def flat_index(self, index: Sequence[int]) -> int:
        """The flat point number of axis indices ``index`` (tensor grids)."""
        self._require_tensor("flat_index")
        index = tuple(int(k) for k in index)
        if len(index) != len(self.axes):
            raise IndexError(f"expected {len(self.axes)} indices, got {len(index)}")
        if not self.axes:
            return 0
        return int(np.ravel_multi_index(index, self.shape))

    def _require_tensor(self, what: str) -> None:
        if self.kind != "tensor":
            raise TypeError(f"{what} is defined for tensor grids only (this grid is scattered)")

    def scaled(self) -> np.ndarray:
        """The points with each column mapped to [0, 1] by its range (a constant column to 0)."""
        return (self.points - self._low) / self._scale

    def bounds(self) -> dict[str, tuple[float, float]]:
        """Smallest and largest value of each variable over the grid."""
        lo, hi = self.points.min(axis=0), self.points.max(axis=0)
        return {n: (float(a), float(b)) for n, a, b in zip(self.names, lo, hi)}

    # -------------------------------------------------------------- neighbors
    def neighbors(self, i: int) -> list[int]:
        """Points next to ``i``.

        Tensor: one step back and forth along each axis (where it exists), in
        axis order.  Scattered: the ``2·dims`` nearest other points (fewer if
        the grid is smaller) by Euclidean distance in coordinates scaled by
        each variable's range, nearest first (ties by point number).
        """
        i = self._check_index(i)
        if self.kind == "tensor":
            idx = list(self.multi_index(i))
            out: list[int] = []
            for d, n in enumerate(self.shape):
                for step in (-1, 1):
                    k = idx[d] + step
                    if 0 <= k < n:
                        out.append(self.flat_index(idx[:d] + [k] + idx[d + 1:]))
            return out
        s = self.scaled()
        dist = np.sqrt(np.sum((s - s[i]) ** 2, axis=1))
        dist[i] = np.inf
        count = min(2 * self.dims, len(self) - 1)
        order = np.lexsort((np.arange(len(self)), dist))
        return [int(k) for k in order[:count]]

    # ------------------------------------------------------------ continuation
    def _slow_columns(self, slow: Sequence[str]) -> list[int]:
        columns = []
        for name in slow:
            if name not in self.names:
                raise UsageError(f"{name!r} is not a grid variable (the grid sets "
                                 f"{', '.join(self.names) or 'nothing'})")
            if self.names.index(name) not in columns:
                columns.append(self.names.index(name))
        return columns

    def continuation_order(self, slow: Sequence[str] = ()) -> list[int]:
        """Every point number once, ordered so that consecutive points are neighbors.

        Tensor grids are walked in boustrophedon order (see
        :func:`serpentine_digits`): every step changes one axis index by one.
        Scattered grids are walked greedily, always to the nearest point not
        yet visited (scaled coordinates), starting from the point nearest the
        lower corner of the envelope.  The variables named in ``slow`` (fixed
        parameters, whose change forces the model to re-initialize) vary
        slowest, so every group of equal slow values is contiguous.

        References
        ----------
        E. L. Allgower and K. Georg (1990), *Numerical Continuation Methods: An
        Introduction*, Springer (warm-starting each solve from its predecessor).
        D. J. Rosenkrantz, R. E. Stearns and P. M. Lewis (1977), "An analysis of
        several heuristics for the traveling salesman problem", SIAM Journal on
        Computing 6(3):563-581 (the nearest-neighbor tour).
        """
        cols = self._slow_columns(slow)
        if self.kind == "tensor":
            if not self.axes:
                return [0]
            perm = cols + [d for d in range(len(self.axes)) if d not in cols]
            digits_perm = serpentine_digits([self.shape[d] for d in perm])
            digits = np.empty_like(digits_perm)
            digits[:, perm] = digits_perm
            return [int(k) for k in np.ravel_multi_index(tuple(digits.T), self.shape)]
        return self._greedy_order(cols)

    def _greedy_order(self, slow_cols: list[int]) -> list[int]:
        s = self.scaled()
        if slow_cols:
            keys = self.points[:, slow_cols]
            _, group_of = np.unique(keys, axis=0, return_inverse=True)
            group_of = np.asarray(group_of).ravel()
        else:
            group_of = np.zeros(len(self), dtype=np.int64)
        order: list[int] = []
        current = np.zeros(self.dims)  # the lower corner in scaled coordinates
        for g in range(int(group_of.max()) + 1):
            members = np.flatnonzero(group_of == g)
            coords = np.ascontiguousarray(s[members].T)   # dims x n: one row per coordinate
            taken = np.zeros(len(members), dtype=bool)
            d2 = np.empty(len(members))
            for _ in range(len(members)):  # O(n^2) in all: fine for the thousands of a table
                d2.fill(0.0)
                for row, c in zip(coords, current):
                    d2 += (row - c) ** 2
                d2[taken] = np.inf
                k = int(np.argmin(d2))     # ties: the lowest point number
                taken[k] = True
                order.append(int(members[k]))
                current = coords[:, k]
        return order

    def chunks(self, order: Sequence[int], size: int, slow: Sequence[str] = ()) -> list[list[int]]:
        """Cut ``order`` into contiguous runs of at most ``size`` points.

        A run never spans a change of the ``slow`` variables' values; each
        stretch between such changes is split into the fewest runs of at most
        ``size`` points, of near-equal lengths.
        """
        if int(size) < 1:
            raise UsageError(f"chunk size must be at least 1, got {size}")
        order = [int(k) for k in order]
        for k in order:
            self._check_index(k)
        if not order:
            return []
        cols = self._slow_columns(slow)
        keys = self.points[np.array(order)][:, cols]
        change = np.flatnonzero(np.any(keys[1:] != keys[:-1], axis=1)) + 1
        out: list[list[int]] = []
        for run in np.split(np.array(order), change):
            pieces = math.ceil(len(run) / int(size))
            out.extend([int(k) for k in piece] for piece in np.array_split(run, pieces))
        return out

    # ----------------------------------------------------------- identity/json
    def fingerprint(self) -> str:
        """SHA-256 of the kind, the names and every point's values (bit for bit)."""
        h = hashlib.sha256()
        header = {"kind": self.kind, "names": list(self.names), "shape": list(self.shape)}
        h.update(json.dumps(header, sort_keys=True).encode())
        h.update(b"\0")
        h.update(np.ascontiguousarray(self.points, dtype="<f8").tobytes())
        return h.hexdigest()

    def describe(self) -> dict[str, object]:
        """A JSON-compatible summary: kind, names, size, shape and (tensor) the axis values."""
        out: dict[str, object] = {"kind": self.kind, "names": list(self.names), "size": len(self),
                                  "shape": list(self.shape), "fingerprint": self.fingerprint()}
        if self.kind == "tensor":
            out["axes"] = {a.name: list(a.values) for a in self.axes}
        return out


# ----------------------------------------------------------------- points CSV
@dataclass(frozen=True)
class TableProblem:
    """Something wrong in a points table: data row (0-based, None = header), column, line."""

    row: int | None
    column: str | None
    line: int
    message: str


@dataclass
class PointsTable:
    """A parsed points table: names, an N × k array (NaN where a cell was bad), problems."""

    names: list[str]
    points: np.ndarray
    lines: list[int] = field(default_factory=list)  # file line of each data row (1-based)
    problems: list[TableProblem] = field(default_factory=list)


def parse_points_csv(text: str) -> PointsTable:
    """Parse a comma-separated points table.

    The first non-blank line that is not a comment (``#``) is the header:
    one variable name per column.  Every following non-blank, non-comment
    line is one point; every cell must be a finite number.  Problems are
    collected (not raised) so that the caller can report all of them.
    """
    names: list[str] | None = None
    rows: list[list[float]] = []
    lines: list[int] = []
    problems: list[TableProblem] = []
    reader = csv.reader(io.StringIO(text.lstrip("\ufeff")), skipinitialspace=True)
    for cells in reader:
        line = reader.line_num
        if not cells or all(not c.strip() for c in cells) or cells[0].lstrip().startswith("#"):
            continue
        if names is None:
            names = [c.strip() for c in cells]
            for col, name in enumerate(names):
                if not name:
                    problems.append(TableProblem(None, None, line, f"column {col + 1} of the header "
                                                 f"has no variable name"))
                elif names.index(name) != col:
                    problems.append(TableProblem(None, name, line, "names the same variable twice"))
            continue
        row = len(rows)
        values = [math.nan] * len(names)
        if len(cells) != len(names):
            problems.append(TableProblem(row, None, line, f"has {len(cells)} values but the header "
                                         f"names {len(names)} columns"))
        for col, (name, cell) in enumerate(zip(names, cells)):
            try:
                value = float(cell.strip())
            except ValueError:
                problems.append(TableProblem(row, name, line, f"not a number: {cell.strip()!r}"))
                continue
            if not math.isfinite(value):
                problems.append(TableProblem(row, name, line, f"must be finite, got {cell.strip()}"))
                continue
            values[col] = value
        rows.append(values)
        lines.append(line)
    if names is None:
        return PointsTable([], np.zeros((0, 0)), [], [TableProblem(None, None, 1, "the table is "
                           "empty; expected a header row of variable names and one row per point")])
    if not rows:
        problems.append(TableProblem(None, None, reader.line_num, "the table has a header but no "
                                     "points; add one row of values per operating point"))
    return PointsTable(names, np.array(rows, dtype=float).reshape(-1, len(names)), lines, problems)


def read_points_csv(path: str | Path) -> PointsTable:
    """Read and parse a points table file (UTF-8, an optional byte-order mark is ignored)."""
    return parse_points_csv(Path(path).read_text(encoding="utf-8"))
