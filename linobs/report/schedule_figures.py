"""Gain-map figure of a gain schedule: the largest gain entries over the grid.

Drawn like the other report figures (:mod:`linobs.report.figures`): a bare
:class:`~matplotlib.figure.Figure`, no pyplot, PNG and deterministic SVG,
each file written atomically.

* **Which entries.**  The entries ``L[state, output]`` with the largest peak
  magnitude over the designed nodes, after scaling each by its output's and
  state's scale (``|L_ij| · s(y_j) / s(x_i)``, a dimensionless gain when the
  scales are nominal values; without scales, model units).  The figure says
  which scaling ranked them.
* **Tensor grids, two or more axes.**  One heat map per entry over two axes
  (the first two unless chosen); every other axis is held at its middle grid
  value (or a given value, the nearest grid value), and the figure states the
  slice.  Values are written in the cells of small grids.  A gain that
  changes sign in the slice is drawn on a diverging map centered at zero,
  otherwise on *viridis*.
* **Scattered points.**  The nodes as points on two axes colored by the gain;
  other axes are projected (every node is shown).
* **One axis.**  The gain against the axis, one panel per entry.
* **Refused nodes** (no design) are hatched light-gray cells, gray squares,
  or dotted vertical lines on a one-axis plot — never a color of the map.

References
----------
van der Walt, S. & Smith, N. (2015). A better default colormap for
matplotlib (viridis). SciPy 2015 conference talk.

Harrower, M. & Brewer, C. A. (2003). ColorBrewer.org: an online tool for
selecting colour schemes for maps. The Cartographic Journal 40(1), 27-37
(the diverging purple-orange scheme, safe for color-vision deficiencies).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from linobs.report.map_data import rasterize
from matplotlib.colors import Normalize, TwoSlopeNorm
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch, Rectangle

from linobs.errors import UsageError
from linobs.estimator.schedule import ScheduleData
from linobs.report.figures import DPI, _edges, _save, _use_log, axis_label

__all__ = ["GainEntry", "gain_maps", "gain_maps_figure", "largest_gains"]

CMAP, CMAP_SIGNED = "viridis", "PuOr_r"
_REFUSED_FACE, _REFUSED_EDGE, _REFUSED_HATCH = "0.85", "0.45", "////"
_ANNOTATE_CELLS = 64
"""Write the values into the cells of heat maps with at most this many cells."""


@dataclass(frozen=True)
class GainEntry:
    """One gain entry chosen for the figure."""

    state: int
    output: int
    name: str       # ``L[state,output]``
    peak: float     # largest |L_ij| over the designed nodes (model units)
    score: float    # the ranking value: peak of the scaled |L_ij|


def largest_gains(data: ScheduleData, count: int = 4,
                  scales: Mapping[str, float] | None = None) -> list[GainEntry]:
    """The ``count`` gain entries with the largest peak (scaled) magnitude over the nodes.

    Parameters
    ----------
    data : ScheduleData
    count : int
        At most this many entries (entries that are zero at every node are left out).
    scales : mapping, optional
        Scale per state and output name (e.g. the nominal values); missing,
        zero or non-finite scales count as 1.

    Raises
    ------
    UsageError
        No node has a design, or ``count`` < 1.
    """
    if count < 1:
        raise UsageError(f"the gain figure needs at least one entry, got count={count}")
    gains, first = _gain_stack(data)
    sx = np.array([_scale(scales, s) for s in first.states])
    sy = np.array([_scale(scales, y) for y in first.outputs])
    peak = np.nanmax(np.abs(gains), axis=0)
    score = peak * sy[None, :] / sx[:, None]
    order = np.argsort(-score, axis=None, kind="stable")
    chosen = []
    for flat in order:
        i, j = np.unravel_index(flat, score.shape)
        if score[i, j] > 0 and len(chosen) < count:
            chosen.append(GainEntry(int(i), int(j), f"L[{first.states[i]},{first.outputs[j]}]",
                                    float(peak[i, j]), float(score[i, j])))
    return chosen


def gain_maps_figure(data: ScheduleData, *, entries: int = 4,
                     axes: Sequence[str] | None = None,
                     fixed: Mapping[str, float] | None = None,
                     scales: Mapping[str, float] | None = None,
                     units: Mapping[str, str] | None = None, title: str = "") -> Figure:
    """The gain-map figure (see :func:`gain_maps`)."""
    chosen = largest_gains(data, entries, scales)
    gains, first = _gain_stack(data)
    shown = _shown_axes(data, axes)
    coords = _coordinates(data)
    keep, slice_note = _slice(data, coords, shown, fixed, units)
    refused = np.array([n.status != "ok" for n in data.nodes])
    count = max(1, len(chosen))
    two_d = len(shown) == 2
    cols = 2 if two_d and count > 1 else 1
    rows = -(-count // cols)
    size = (5.0 * cols + 0.6, 4.1 * rows + 1.2) if two_d else (7.5, 1.3 + 2.0 * count)
    fig = Figure(figsize=size, dpi=DPI, layout="constrained")
    panels = list(np.atleast_1d(fig.subplots(rows, cols, squeeze=False, sharex=not two_d)
                                .ravel()))
    for extra in panels[len(chosen):]:
        extra.set_axis_off()
    handles: list[object] = []
    if not chosen:
        panels[0].text(0.5, 0.5, "every gain entry is zero at every designed node",
                       ha="center", va="center", transform=panels[0].transAxes)
    for ax, entry in zip(panels, chosen):
        values = gains[:, entry.state, entry.output]
        unit = _gain_unit(first.states[entry.state], first.outputs[entry.output], units)
        label = f"{entry.name} [{unit}]" if unit else entry.name
        if not two_d:
            _draw_line(ax, coords[keep, shown[0]], values[keep], refused[keep], label)
            continue
        if data.grid_kind == "tensor":
            image = _draw_tensor(ax, data, shown, keep, values, refused,
                                 f"value-{entry.state}-{entry.output}")
        else:
            image = _draw_scattered(ax, coords[keep][:, shown], values[keep], refused[keep])
        cbar = fig.colorbar(image, ax=ax, shrink=0.92)
        cbar.set_label(label, fontsize=8.5)
        ax.set_title(entry.name, fontsize=10, loc="left")
        ax.set_xlabel(axis_label(data.axes[shown[0]], units))
        ax.set_ylabel(axis_label(data.axes[shown[1]], units))
    if not two_d and chosen:
        panels[len(chosen) - 1].set_xlabel(axis_label(data.axes[shown[0]], units))
    if refused[keep].any():
        handles.append(Patch(facecolor=_REFUSED_FACE, edgecolor=_REFUSED_EDGE,
                             hatch=_REFUSED_HATCH,
                             label=f"refused node, no design ({int(refused[keep].sum())})")
                       if two_d else Line2D([], [], color="0.45", linestyle=":",
                                            label=f"refused node ({int(refused[keep].sum())})"))
    ranked = ("peak |L| scaled by the state and output scales (|L_ij|·s(y_j)/s(x_i))"
              if scales else "peak |L| in model units")
    total = len(first.states) * len(first.outputs)
    fig.suptitle(title or "Gain maps: the largest gain entries", fontweight="bold")
    note = f"{len(chosen)} of {total} entries, ranked by {ranked}"
    legend = fig.legend(handles=handles, loc="outside lower center", fontsize=8, frameon=False,
                        title=note + (f"; {slice_note}" if slice_note else ""), title_fontsize=8)
    legend.get_title().set_color("0.25")
    return fig


def gain_maps(data: ScheduleData, *, out_stem: Path, entries: int = 4,
              axes: Sequence[str] | None = None, fixed: Mapping[str, float] | None = None,
              scales: Mapping[str, float] | None = None,
              units: Mapping[str, str] | None = None, title: str = "") -> list[Path]:
    """Heat maps (or lines) of the largest gain entries over the grid, PNG + SVG.

    Parameters
    ----------
    data : ScheduleData
        The schedule (``RUN_DIR/design/schedule.json``).
    out_stem : Path
        Files ``out_stem.png`` and ``out_stem.svg`` are written.
    entries : int
        At most this many gain entries (default 4).
    axes : sequence of str, optional
        The one or two grid axes shown (default: the first two, or the only one).
    fixed : mapping, optional
        Tensor grids: values of the other axes (nearest grid value); axes not
        given are held at their middle grid value.
    scales : mapping, optional
        Scale per state and output (e.g. nominal values) used to rank the entries.
    units : mapping, optional
        Unit per variable name, for the axis and gain labels.
    title : str

    Returns
    -------
    list of Path
        The PNG and the SVG.

    Raises
    ------
    UsageError
        No node has a design; an axis that is not a grid axis; a fixed value
        for a shown axis.
    """
    return _save(gain_maps_figure(data, entries=entries, axes=axes, fixed=fixed,
                                  scales=scales, units=units, title=title), Path(out_stem))


# ------------------------------------------------------------------------------ data
def _gain_stack(data: ScheduleData):  # type: ignore[no-untyped-def]
    """Gains of all nodes, shape (N, n, p), NaN for refused nodes; and the first designed node."""
    first = next((n for n in data.nodes if n.status == "ok"), None)
    if first is None:
        raise UsageError("no node of the schedule has a design; there is no gain to draw")
    n, p = len(first.states), len(first.outputs)
    stack = np.full((len(data.nodes), n, p), np.nan)
    for k, node in enumerate(data.nodes):
        if node.status == "ok":
            L = np.asarray(node.L, dtype=float)
            if L.shape != (n, p):
                raise UsageError(f"node {k} has a gain of shape {L.shape}, the schedule's first "
                                 f"design has {(n, p)}; the schedule is inconsistent")
            stack[k] = L
    return stack, first


def _scale(scales: Mapping[str, float] | None, name: str) -> float:
    value = float((scales or {}).get(name, 1.0) or 1.0)
    return abs(value) if np.isfinite(value) and value != 0 else 1.0


def _shown_axes(data: ScheduleData, axes: Sequence[str] | None) -> list[int]:
    names = list(data.axes)
    if not names:
        raise UsageError("the schedule has no scheduling axes; there is no surface to draw")
    chosen = list(axes) if axes else names[:2]
    for a in chosen:
        if a not in names:
            raise UsageError(f"{a!r} is not a scheduling axis; choose among {', '.join(names)}")
    if len(chosen) not in (1, 2) or len(set(chosen)) != len(chosen):
        raise UsageError(f"the gain figure shows one or two different axes, got {chosen}")
    return [names.index(a) for a in chosen]


def _coordinates(data: ScheduleData) -> np.ndarray:
    """Node coordinates, shape (N, k): the C-order tensor product, or the scattered points."""
    if data.grid_kind == "tensor":
        mesh = np.meshgrid(*[np.asarray(v, float) for v in data.axis_values], indexing="ij")
        coords = np.stack([m.ravel() for m in mesh], axis=1)
    else:
        coords = np.asarray(data.points, dtype=float).reshape(len(data.points), len(data.axes))
    if len(coords) != len(data.nodes):
        raise UsageError(f"the schedule has {len(data.nodes)} nodes but {len(coords)} grid "
                         f"points; the schedule is inconsistent")
    return coords


def _slice(data: ScheduleData, coords: np.ndarray, shown: list[int],
           fixed: Mapping[str, float] | None, units: Mapping[str, str] | None
           ) -> tuple[np.ndarray, str]:
    """Nodes on the slice through the other axes (tensor) or all nodes (scattered)."""
    fixed = dict(fixed or {})
    for a in fixed:
        if a not in data.axes:
            raise UsageError(f"{a!r} is not a scheduling axis; fixed values can be given for "
                             f"{', '.join(n for i, n in enumerate(data.axes) if i not in shown)}")
        if data.axes.index(a) in shown:
            raise UsageError(f"{a!r} is shown in the figure and cannot also be fixed")
    keep = np.ones(len(coords), dtype=bool)
    others = [j for j in range(len(data.axes)) if j not in shown]
    if not others:
        return keep, ""
    if data.grid_kind != "tensor":
        return keep, f"projected over {', '.join(data.axes[j] for j in others)}"
    parts = []
    for j in others:
        name, values = data.axes[j], np.asarray(data.axis_values[j], dtype=float)
        chosen = values[int(np.argmin(np.abs(values - float(fixed[name]))))] if name in fixed \
            else values[len(values) // 2]
        keep &= np.isclose(coords[:, j], chosen, rtol=0, atol=1e-12 * max(1.0, abs(chosen)))
        unit = (units or {}).get(name) or ""
        parts.append(f"{name} = {chosen:.4g}{' ' + unit if unit and unit != '1' else ''}")
    how = "at" if fixed else "at the middle grid value"
    return keep, f"slice {how} {', '.join(parts)}"


def _gain_unit(state: str, output: str, units: Mapping[str, str] | None) -> str:
    ux = (units or {}).get(state) or ""
    uy = (units or {}).get(output) or ""
    if not ux and not uy:
        return ""
    ux, uy = ("" if u == "1" else u for u in (ux, uy))
    if ux == uy:
        return "-"
    return f"{ux or '1'}/{uy}" if uy else ux


# ------------------------------------------------------------------------------ drawing
def _norm(values: np.ndarray) -> tuple[Normalize, str]:
    finite = values[np.isfinite(values)]
    lo, hi = (float(finite.min()), float(finite.max())) if finite.size else (0.0, 1.0)
    if lo < 0 < hi:
        top = max(-lo, hi)
        return TwoSlopeNorm(vcenter=0.0, vmin=-top, vmax=top), CMAP_SIGNED
    if hi <= lo:
        pad = abs(lo) * 0.05 or 1.0
        lo, hi = lo - pad, hi + pad
    return Normalize(vmin=lo, vmax=hi), CMAP


def _draw_tensor(ax, data: ScheduleData, shown: list[int],  # type: ignore[no-untyped-def]
                 keep: np.ndarray, values: np.ndarray, refused: np.ndarray, gid: str):
    ia, ib = shown
    xs = np.asarray(data.axis_values[ia], dtype=float)
    ys = np.asarray(data.axis_values[ib], dtype=float)
    shape = [len(v) for v in data.axis_values]
    grid = values.reshape(shape)
    no_design = refused.reshape(shape)
    mask = keep.reshape(shape)
    # move the shown axes to the end and take the single slice of the others
    sel = np.moveaxis(grid, (ib, ia), (-2, -1))[np.moveaxis(mask, (ib, ia), (-2, -1))]
    field = sel.reshape(len(ys), len(xs))
    gone = np.moveaxis(no_design, (ib, ia), (-2, -1))[np.moveaxis(mask, (ib, ia), (-2, -1))]
    gone = gone.reshape(len(ys), len(xs))
    xlog, ylog = _use_log(xs), _use_log(ys)
    xe, ye = _edges(xs, xlog), _edges(ys, ylog)
    norm, cmap = _norm(field)
    mesh = ax.pcolormesh(xe, ye, np.ma.masked_invalid(field), rasterized=rasterize(xe, ye), cmap=cmap, norm=norm,
                         shading="flat", gid="gain-mesh")
    for j, i in zip(*np.nonzero(gone | ~np.isfinite(field))):
        ax.add_patch(Rectangle((xe[i], ye[j]), xe[i + 1] - xe[i], ye[j + 1] - ye[j],
                               facecolor=_REFUSED_FACE, edgecolor=_REFUSED_EDGE,
                               hatch=_REFUSED_HATCH, linewidth=0, gid="refused-cell"))
    if field.size <= _ANNOTATE_CELLS and min(_narrowest(xe, xlog), _narrowest(ye, ylog)) >= 0.1:
        cmap_obj = mesh.get_cmap()
        for j in range(len(ys)):
            for i in range(len(xs)):
                v = field[j, i]
                if np.isfinite(v):
                    r, g, b, _ = cmap_obj(norm(v))
                    dark = 0.2126 * r + 0.7152 * g + 0.0722 * b < 0.5
                    ax.text(xs[i], ys[j], f"{v:.3g}", ha="center", va="center", fontsize=7,
                            color="white" if dark else "black", gid=f"{gid}-{i}-{j}")
    if xlog:
        ax.set_xscale("log")
    if ylog:
        ax.set_yscale("log")
    ax.set_xlim(xe[0], xe[-1])
    ax.set_ylim(ye[0], ye[-1])
    return mesh


def _narrowest(edges: np.ndarray, log: bool) -> float:
    """The narrowest cell as a fraction of the axis span (in log coordinates on a log axis)."""
    e = np.log10(edges) if log else np.asarray(edges, dtype=float)
    span = float(e[-1] - e[0])
    return float(np.min(np.diff(e))) / span if span > 0 else 1.0


def _draw_scattered(ax, xy: np.ndarray, values: np.ndarray,  # type: ignore[no-untyped-def]
                    refused: np.ndarray):
    ok = np.isfinite(values) & ~refused
    norm, cmap = _norm(values[ok])
    order = np.nonzero(ok)[0][np.argsort(np.abs(values[ok]), kind="stable")]  # largest on top
    image = ax.scatter(xy[order, 0], xy[order, 1], c=values[order], cmap=cmap, norm=norm, s=46,
                       edgecolors="0.25", linewidths=0.4, zorder=3, gid="gain-points")
    if (~ok).any():
        ax.scatter(xy[~ok, 0], xy[~ok, 1], marker="s", s=40, facecolor=_REFUSED_FACE,
                   edgecolor=_REFUSED_EDGE, hatch=_REFUSED_HATCH, linewidths=0.6, zorder=3,
                   gid="refused-points")
    ax.grid(color="0.92", linewidth=0.7)
    return image


def _draw_line(ax, x: np.ndarray, values: np.ndarray,  # type: ignore[no-untyped-def]
               refused: np.ndarray, label: str) -> None:
    order = np.argsort(x, kind="stable")
    x, values, refused = x[order], values[order], refused[order]
    ok = np.isfinite(values) & ~refused
    ax.plot(x, np.where(ok, values, np.nan), color="#3b528b", linewidth=1.1, marker="o",
            markersize=3.5, gid="gain-line")
    for xv in x[refused]:
        ax.axvline(xv, color="0.45", linestyle=":", linewidth=1.0, gid="refused-node")
    ax.set_ylabel(label, fontsize=8.5)
    ax.grid(color="0.92", linewidth=0.7)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
