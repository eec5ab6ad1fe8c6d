"""Regions of the envelope where observability is lost or weak, in plain words.

Points of the grid with the same non-observable verdict and the same weakest
state are joined into connected regions (grid neighbors); each region is
described by the range it covers on every axis, the weakest mode and the
states involved, the smallest margin, and the refined boundary points next to
it.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING, Any

from pydantic import BaseModel, Field

if TYPE_CHECKING:  # pragma: no cover
    from linobs.operating.grid import Grid

NOT_OBSERVABLE = ("weak", "unobservable-detectable", "unobservable")
_WORDS = {"weak": "weakly observable", "unobservable-detectable": "unobservable (but detectable)",
          "unobservable": "unobservable and not detectable"}


class PointVerdict(BaseModel):
    """What the region finder needs of one analyzed point."""

    verdict: str
    margin: float
    mode: str = Field(description="label of the weakest mode")
    states: list[str] = Field(description="states of the weakest mode, largest participation first")


class Region(BaseModel):
    verdict: str
    points: list[int]
    ranges: dict[str, tuple[float, float]]
    whole_axes: list[str] = Field(description="axes the region spans completely")
    margin_min: float
    mode: str
    states: list[str]
    boundary: dict[str, list[tuple[float, float]]] = Field(
        default_factory=dict, description="per axis: clusters (low, high) of the refined "
                                          "boundary values along that axis")
    text: str


def point_verdict(report: Mapping[str, Any]) -> PointVerdict:
    """From a stored ``ObservabilityReport`` (as JSON)."""
    modes = report.get("modes") or []
    weakest = min(modes, key=lambda m: m["margin"]) if modes else None
    if weakest is None:
        return PointVerdict(verdict=report["verdict"], margin=report["margin"], mode="", states=[])
    lam = f"{weakest['real']:.3g}" + (f"{weakest['imag']:+.3g}j" if weakest["imag"] else "")
    states = [n for n, v in weakest["participation"].items() if v >= 0.2] or \
        list(weakest["participation"])[:1]
    top = ", ".join(f"{n} {v:.2f}" for n, v in list(weakest["participation"].items())[:3])
    return PointVerdict(verdict=report["verdict"], margin=report["margin"],
                        mode=f"λ = {lam} ({top})", states=states)


def _components(grid: "Grid", members: set[int]) -> list[list[int]]:
    seen: set[int] = set()
    out = []
    for start in sorted(members):
        if start in seen:
            continue
        stack, comp = [start], []
        seen.add(start)
        while stack:
            i = stack.pop()
            comp.append(i)
            for j in grid.neighbors(i):
                if j in members and j not in seen:
                    seen.add(j)
                    stack.append(j)
        out.append(sorted(comp))
    return out


def _boundary_clusters(near: Sequence[Mapping[str, Any]], bounds: Mapping[str, tuple[float, float]]
                       ) -> dict[str, list[tuple[float, float]]]:
    """Refined boundary values per axis they were bisected along, grouped into clusters
    (a gap of more than a tenth of the axis span starts a new one)."""
    values: dict[str, list[float]] = {}
    for b in near:
        for axis in b.get("moved", ()):
            values.setdefault(axis, []).append(float(b["point"][axis]))
    out: dict[str, list[tuple[float, float]]] = {}
    for axis, vs in values.items():
        vs.sort()
        lo, hi = bounds.get(axis, (min(vs), max(vs)))
        gap = 0.1 * (hi - lo) if hi > lo else 0.0
        clusters = [[vs[0], vs[0]]]
        for v in vs[1:]:
            if v - clusters[-1][1] > gap:
                clusters.append([v, v])
            else:
                clusters[-1][1] = v
        out[axis] = [(a, b) for a, b in clusters]
    return out


def _fmt(v: float) -> str:
    return f"{v:.4g}"


def find_regions(grid: "Grid", verdicts: Mapping[int, PointVerdict],
                 boundary: Sequence[Mapping[str, Any]] = (), *,
                 labels: Mapping[str, str] | None = None,
                 units: Mapping[str, str] | None = None) -> list[Region]:
    """Connected regions of equal non-observable verdict and weakest state, largest first.

    Parameters
    ----------
    grid
        The study's grid.
    verdicts
        Point id -> :class:`PointVerdict` (points without a verdict are left out).
    boundary
        Refined boundary records: ``{"ids": [i, j], "point": {...}, "moved": [axis, ...]}``.
    labels, units
        Optional descriptions and units of the variables, for the text.
    """
    labels = labels or {}
    units = units or {}
    groups: dict[tuple[str, str], set[int]] = {}
    for i, pv in verdicts.items():
        if pv.verdict in NOT_OBSERVABLE:
            key = (pv.verdict, pv.states[0] if pv.states else "")
            groups.setdefault(key, set()).add(i)
    bounds = grid.bounds()
    regions = []
    for (verdict, _state), members in groups.items():
        for comp in _components(grid, members):
            values = [grid.point(i) for i in comp]
            ranges = {n: (min(v[n] for v in values), max(v[n] for v in values)) for n in grid.names}
            whole = [n for n in grid.names if ranges[n] == bounds[n]]
            weakest = min(comp, key=lambda i: verdicts[i].margin)
            pv = verdicts[weakest]
            near = [b for b in boundary if set(b.get("ids", ())) & set(comp) and "point" in b]
            brange = _boundary_clusters(near, bounds)
            regions.append(Region(verdict=verdict, points=comp, ranges=ranges, whole_axes=whole,
                                  margin_min=pv.margin, mode=pv.mode, states=pv.states,
                                  boundary=brange,
                                  text=_describe(verdict, comp, ranges, whole, pv, brange, labels,
                                                 units, grid.names)))
    regions.sort(key=lambda r: (-len(r.points), r.margin_min))
    return regions


def _describe(verdict: str, comp: list[int], ranges: Mapping[str, tuple[float, float]],
              whole: list[str], pv: PointVerdict,
              brange: Mapping[str, list[tuple[float, float]]],
              labels: Mapping[str, str], units: Mapping[str, str], axes: Sequence[str]) -> str:
    def name(n: str) -> str:
        return f"{labels[n]} ({n})" if labels.get(n) else n

    def unit(n: str) -> str:
        return f" {units[n]}" if units.get(n) and units[n] not in ("1", "-") else ""

    who = " and ".join(name(s) for s in pv.states[:2]) or "some state combination"
    where = []
    for n in axes:
        if n in whole:
            continue
        lo, hi = ranges[n]
        where.append(f"{n} = {_fmt(lo)}{unit(n)}" if lo == hi else
                     f"{n} from {_fmt(lo)} to {_fmt(hi)}{unit(n)}")
    everywhere = [n for n in axes if n in whole]
    place = ", ".join(where) if where else "the whole envelope"
    if where and everywhere:
        place += f", at every {' and '.join(everywhere)}"
    text = (f"{who} {'is' if len(pv.states) < 2 else 'are'} {_WORDS.get(verdict, verdict)} for "
            f"{place} ({len(comp)} grid point{'s' if len(comp) != 1 else ''}); weakest mode "
            f"{pv.mode}, margin (distance to unobservability) down to {pv.margin:.2g}")
    if brange:
        parts = []
        for n, clusters in brange.items():
            spots = [_fmt(lo) if hi == lo else f"{_fmt(lo)}…{_fmt(hi)}" for lo, hi in clusters]
            parts.append(f"{n} ≈ {' and '.join(spots)}{unit(n)}")
        text += f"; refined boundary at {'; '.join(parts)}"
    return text
