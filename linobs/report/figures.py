"""Observability figures for reports: the margin map over the envelope and the verdict counts.

Figures are drawn on a bare :class:`matplotlib.figure.Figure` (no pyplot,
no display, no global backend switch) and written as PNG and SVG, each
rendered in memory and then written atomically.  Output is deterministic:
no date in the SVG metadata, a fixed SVG id salt, text kept as text.

Colors come from the perceptually uniform *viridis* map (dark = small
margin, bright = large), which stays ordered in grayscale and for the
common color-vision deficiencies; failed points are light gray with a
hatch, and verdicts are told apart by marker shape, not by color.

References
----------
van der Walt, S. & Smith, N. (2015). A better default colormap for
matplotlib (viridis). SciPy 2015 conference talk.

Crameri, F., Shephard, G. E. & Heron, P. J. (2020). The misuse of colour in
science communication. Nature Communications 11, 5444.
"""

from __future__ import annotations

import io
from collections import Counter
from collections.abc import Mapping, Sequence
from pathlib import Path

import matplotlib
import numpy as np
from matplotlib.colors import LogNorm
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch, Rectangle
from matplotlib.ticker import MaxNLocator

from linobs.atomic import atomic_write_bytes
from linobs.errors import UsageError
from linobs.observability.report import VERDICTS, verdict_key
from linobs.report.map_data import rasterize, ReducedMap, reduce_to_axes

__all__ = ["COUNTS_SIZE", "DPI", "MAP_SIZE", "axis_label", "margin_map", "margin_map_figure",
           "reduce_to_axes", "verdict_counts", "verdict_counts_figure"]

MAP_SIZE = (7.5, 5.8)
"""Margin map size [in]."""
COUNTS_SIZE = (7.0, 4.2)
"""Verdict-count chart size [in]."""
DPI = 150
"""PNG resolution [dots per inch]."""

CMAP = "viridis"
_FAILED_FACE, _FAILED_EDGE, _FAILED_HATCH = "0.85", "0.45", "////"
_MARKERS = {"unobservable-detectable": ("^", 42), "unobservable": ("X", 60)}
_BAR_HATCH = {"observable": "", "weak": "..", "unobservable-detectable": "//", "unobservable": "xx"}
_BAR_LEVEL = {"observable": 0.9, "weak": 0.62, "unobservable-detectable": 0.34,
              "unobservable": 0.06}


def axis_label(name: str, units: Mapping[str, str] | None = None) -> str:
    """``name [unit]``; ``[-]`` for a dimensionless unit ``1``; just the name without a unit."""
    unit = (units or {}).get(name) or ""
    if unit == "1":
        unit = "-"
    return f"{name} [{unit}]" if unit else name


def margin_map_figure(points: np.ndarray, names: Sequence[str], margins: np.ndarray,
                      verdicts: Sequence[str], *, axes: tuple[str, str],
                      fixed: Mapping[str, float] | None = None,
                      boundary: Sequence[Mapping[str, float]] = (), weak_threshold: float,
                      title: str = "", units: Mapping[str, str] | None = None) -> Figure:
    """The margin map as a figure (see :func:`margin_map`)."""
    data = reduce_to_axes(points, names, margins, verdicts, axes=axes, fixed=fixed)
    fig = Figure(figsize=MAP_SIZE, dpi=DPI, layout="constrained")
    ax = fig.add_subplot()
    finite = data.value[np.isfinite(data.value)]
    positive = finite[finite > 0]
    vmin = float(positive.min()) if positive.size else weak_threshold / 100
    vmax = float(positive.max()) if positive.size else 1.0
    if vmax <= vmin * 1.0001:
        vmin, vmax = vmin / 10 ** 0.5, vmax * 10 ** 0.5
    norm = LogNorm(vmin=vmin, vmax=vmax)
    clipped = np.where(np.isfinite(data.value), np.clip(data.value, vmin, None), np.nan)
    xlog, ylog = _use_log(data.x), _use_log(data.y)
    handles: list[object] = []
    if data.kind == "tensor":
        image = _draw_tensor(ax, data, clipped, norm, xlog, ylog, weak_threshold, handles)
    else:
        image = _draw_scattered(ax, data, clipped, norm, weak_threshold, handles)
    _draw_verdicts(ax, data, handles)
    _draw_boundary(ax, data, boundary, handles)
    _draw_failed_legend(data, handles)
    if xlog:
        ax.set_xscale("log")
    if ylog:
        ax.set_yscale("log")
    ax.set_xlabel(axis_label(data.axes[0], units))
    ax.set_ylabel(axis_label(data.axes[1], units))
    cbar = fig.colorbar(image, ax=ax, extend="min" if np.any(finite < vmin) else "neither")
    cbar.set_label("distance to unobservability (relative singular value)")
    if vmin <= weak_threshold <= vmax:
        cbar.ax.axhline(weak_threshold, color="black", linestyle="--", linewidth=1.2)
    fig.suptitle(title or "Margin map: distance to unobservability", fontweight="bold")
    note = _reduction_note(data, units)
    if finite.size and not finite.min() < weak_threshold < finite.max():
        side = "below" if finite.max() <= weak_threshold else "above"
        note += (f"{'; ' if note else ''}every margin is {side} the weak threshold "
                 f"{weak_threshold:g}")
    ax.set_title(note, fontsize=8.5, loc="left", color="0.25")
    if handles:
        fig.legend(handles=handles, loc="outside lower center", ncols=min(3, len(handles)),
                   fontsize=8, frameon=False)
    return fig


def margin_map(points: np.ndarray, names: Sequence[str], margins: np.ndarray,
               verdicts: Sequence[str], *, axes: tuple[str, str],
               fixed: Mapping[str, float] | None = None,
               boundary: Sequence[Mapping[str, float]] = (), weak_threshold: float,
               out_stem: Path, title: str = "", units: Mapping[str, str] | None = None
               ) -> list[Path]:
    """A heat map of the observability margin (distance to unobservability) over two axes.

    Parameters
    ----------
    points : ndarray, shape (N, k)
        Operating points, columns named by ``names`` (tensor grid or scattered).
    names : sequence of str
    margins : ndarray, shape (N,)
        Margin per point; NaN where the point failed.
    verdicts : sequence of str
        Verdict per point, or the status of a point without one (``failed``, ...).
    axes : (str, str)
        The grid axes shown (x, y).
    fixed : mapping, optional
        Values of other axes (the nearest grid value is used); axes not given
        are reduced to their worst case (the smallest margin).
    boundary : sequence of mappings
        Refined boundary points (values of at least the two map axes).
    weak_threshold : float
        Drawn as a contour line and on the color bar.
    out_stem : Path
        Files ``out_stem.png`` and ``out_stem.svg`` are written.
    title : str
    units : mapping, optional
        Unit per axis name, for the axis labels.

    Returns
    -------
    list of Path
        The PNG and the SVG.

    Raises
    ------
    UsageError
        An axis that is not a grid axis, a fixed value for a shown axis, or a
        boundary point without the map axes.
    """
    fig = margin_map_figure(points, names, margins, verdicts, axes=axes, fixed=fixed,
                            boundary=boundary, weak_threshold=weak_threshold, title=title,
                            units=units)
    return _save(fig, Path(out_stem))


def verdict_counts_figure(counts: Mapping[str, int], *, title: str = "") -> Figure:
    """The verdict counts as a figure (see :func:`verdict_counts`)."""
    values: dict[str, int] = dict.fromkeys(VERDICTS, 0)
    extras: dict[str, int] = {}
    by_key = {verdict_key(v): v for v in VERDICTS}
    for key, count in counts.items():
        if isinstance(count, bool) or not float(count).is_integer() or count < 0:
            raise UsageError(f"verdict count {key}={count!r} is not a non-negative whole number")
        name = by_key.get(verdict_key(key))
        if name is not None:
            values[name] += int(count)
        else:
            extras[key] = extras.get(key, 0) + int(count)
    labels = list(values) + [k.replace("_", " ") for k in extras]
    heights = list(values.values()) + list(extras.values())
    cmap = matplotlib.colormaps[CMAP]
    colors = [cmap(_BAR_LEVEL[v]) for v in values] + [_FAILED_FACE] * len(extras)
    hatches = [_BAR_HATCH[v] for v in values] + [_FAILED_HATCH] * len(extras)
    fig = Figure(figsize=COUNTS_SIZE, dpi=DPI, layout="constrained")
    ax = fig.add_subplot()
    rows = np.arange(len(heights))
    bars = ax.barh(rows, heights, color=colors, edgecolor="0.2", linewidth=0.8, hatch=hatches,
                   height=0.68, gid="verdict-bars")
    for bar, level in zip(bars, [_BAR_LEVEL[v] for v in values] + [1.0] * len(extras)):
        bar.set_hatchcolor("white" if level < 0.5 else "0.25")
    total = sum(heights)
    ax.bar_label(bars, labels=[f"{h}" + (f"  ({h / total:.0%})" if total else "")
                               for h in heights], padding=3, fontsize=9)
    ax.set_yticks(rows, labels, fontsize=9)
    ax.invert_yaxis()  # most favorable verdict on top
    ax.set_xlabel("operating points")
    ax.xaxis.set_major_locator(MaxNLocator(integer=True))
    ax.set_xlim(0, max(heights + [1]) * 1.2)
    ax.grid(axis="x", color="0.9", linewidth=0.8)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    fig.suptitle(title or "Observability verdicts", fontweight="bold")
    ax.set_title(f"{total} operating points", fontsize=8.5, loc="left", color="0.25")
    return fig


def verdict_counts(counts: Mapping[str, int], *, out_stem: Path, title: str = "") -> list[Path]:
    """A bar chart of the number of points per verdict (and per failure status), PNG + SVG.

    Parameters
    ----------
    counts : mapping
        Verdict (``unobservable-detectable`` or its key ``unobservable_detectable``)
        or status (``failed``, ``not_converged``, ...) -> number of points.
        The four verdicts are always shown, in order of severity; other
        statuses follow in the order given.
    out_stem : Path
        Files ``out_stem.png`` and ``out_stem.svg`` are written.
    title : str
    """
    return _save(verdict_counts_figure(counts, title=title), Path(out_stem))


# ------------------------------------------------------------------------------ drawing
def _draw_tensor(ax, data: ReducedMap, clipped: np.ndarray, norm: LogNorm, xlog: bool,
                 ylog: bool, weak: float, handles: list[object]):  # type: ignore[no-untyped-def]
    xe, ye = _edges(data.x, xlog), _edges(data.y, ylog)
    mesh = ax.pcolormesh(xe, ye, np.ma.masked_invalid(clipped), rasterized=rasterize(xe, ye), cmap=CMAP, norm=norm,
                         shading="flat", gid="margin-mesh")
    for j, i in zip(*np.nonzero(~np.isfinite(clipped))):
        ax.add_patch(Rectangle((xe[i], ye[j]), xe[i + 1] - xe[i], ye[j + 1] - ye[j],
                               facecolor=_FAILED_FACE, edgecolor=_FAILED_EDGE, hatch=_FAILED_HATCH,
                               linewidth=0, gid="failed-cell"))
    partial = data.failed & np.isfinite(clipped)
    if partial.any():
        jj, ii = np.nonzero(partial)
        handles.append(ax.scatter(data.x[ii], data.y[jj], marker="s", s=22,
                                  facecolor=_FAILED_FACE, edgecolor="0.2", hatch="///",
                                  linewidths=0.6, zorder=4, gid="partly-failed",
                                  label=f"some reduced points failed ({partial.sum()})"))
    log_margin = np.log10(clipped)
    level = np.log10(weak)
    good = log_margin[np.isfinite(log_margin)]
    if min(clipped.shape) >= 2 and good.size and good.min() < level < good.max():
        X, Y = np.meshgrid(data.x, data.y)
        masked = np.ma.masked_invalid(log_margin)
        ax.contour(X, Y, masked, levels=[level], colors="white", linewidths=2.4)
        ax.contour(X, Y, masked, levels=[level], colors="black", linewidths=1.2,
                   linestyles="--")
        handles.append(Line2D([], [], color="black", linestyle="--",
                              label=f"weak threshold (margin {weak:g})"))
    ax.set_xlim(xe[0], xe[-1])
    ax.set_ylim(ye[0], ye[-1])
    return mesh


def _draw_scattered(ax, data: ReducedMap, clipped: np.ndarray, norm: LogNorm, weak: float,
                    handles: list[object]):  # type: ignore[no-untyped-def]
    ok = np.isfinite(clipped)
    order = np.nonzero(ok)[0][np.argsort(-clipped[ok], kind="stable")]  # worst drawn last
    image = ax.scatter(data.x[order], data.y[order], c=clipped[order], cmap=CMAP, norm=norm, s=46,
                       edgecolors="0.25", linewidths=0.4, zorder=3, gid="margin-points")
    if (~ok).any():
        ax.scatter(data.x[~ok], data.y[~ok], marker="s", s=40, facecolor=_FAILED_FACE,
                   edgecolor=_FAILED_EDGE, hatch=_FAILED_HATCH, linewidths=0.6, zorder=3,
                   gid="failed-points")
    level = np.log10(weak)
    logs = np.log10(clipped[ok])
    if ok.sum() >= 3 and logs.min() < level < logs.max():
        try:
            ax.tricontour(data.x[ok], data.y[ok], logs, levels=[level], colors="black",
                          linewidths=1.2, linestyles="--")
            handles.append(Line2D([], [], color="black", linestyle="--",
                                  label=f"weak threshold (margin {weak:g})"))
        except (ValueError, RuntimeError):  # collinear points: no triangulation
            pass
    return image


def _draw_verdicts(ax, data: ReducedMap, handles: list[object]) -> None:
    if data.kind == "tensor":
        Y, X = np.meshgrid(data.y, data.x, indexing="ij")
        xs, ys, vs = X.ravel(), Y.ravel(), data.verdict.ravel()
    else:
        xs, ys, vs = data.x, data.y, data.verdict
    for verdict, (marker, size) in _MARKERS.items():
        hit = np.array([v == verdict for v in vs], dtype=bool)
        if hit.any():
            handles.append(ax.scatter(xs[hit], ys[hit], marker=marker, s=size, facecolor="white",
                                      edgecolor="black", linewidths=0.9, zorder=5,
                                      gid=f"verdict-{verdict}",
                                      label=f"{verdict} ({int(hit.sum())})"))


def _draw_boundary(ax, data: ReducedMap, boundary: Sequence[Mapping[str, float]],
                   handles: list[object]) -> None:
    if not boundary:
        return
    bx, by = [], []
    for k, point in enumerate(boundary):
        missing = [a for a in data.axes if a not in point]
        if missing:
            raise UsageError(f"boundary point {k} has no value for the map axis "
                             f"{', '.join(missing)}; give every boundary point the map axes")
        if all(np.isclose(float(point.get(a, v)), v, rtol=1e-6, atol=1e-12)
               for a, v in data.fixed.items()):
            bx.append(float(point[data.axes[0]]))
            by.append(float(point[data.axes[1]]))
    if bx:
        (line,) = ax.plot(bx, by, linestyle="none", marker="D", markersize=4.5,
                          markerfacecolor="white", markeredgecolor="black", markeredgewidth=0.8,
                          zorder=6, gid="boundary-points",
                          label=f"refined boundary ({len(bx)} points)")
        handles.append(line)


def _draw_failed_legend(data: ReducedMap, handles: list[object]) -> None:
    if not data.failed_points:
        return
    kinds = Counter(s.replace("_", " ") for s in data.failed_status)
    text = ", ".join(f"{n} {k}" for k, n in sorted(kinds.items()))
    label = f"no result: {text}"
    if len(data.failed_points) <= 3:
        where = "; ".join(", ".join(f"{a}={p[a]:.4g}" for a in data.axes)
                          for p in data.failed_points)
        label += f"\n({where})"
    handles.append(Patch(facecolor=_FAILED_FACE, edgecolor=_FAILED_EDGE, hatch=_FAILED_HATCH,
                         label=label))


def _reduction_note(data: ReducedMap, units: Mapping[str, str] | None) -> str:
    parts = []
    for name, value in data.fixed.items():
        unit = (units or {}).get(name) or ""
        parts.append(f"{name} = {value:.4g}{' ' + unit if unit and unit != '1' else ''}")
    note = ("fixed: " + ", ".join(parts)) if parts else ""
    if data.reduced:
        word = "projected" if data.kind == "scattered" else "worst case (smallest margin) over"
        note += ("; " if note else "") + f"{word} {', '.join(data.reduced)}"
    return note or ("all points" if data.kind == "scattered" else "")


def _use_log(values: np.ndarray) -> bool:
    """Log axis for positive values spread over decades with geometric spacing (or > 3 decades)."""
    v = np.unique(np.asarray(values, dtype=float))
    if v.size < 2 or v[0] <= 0 or v[-1] / v[0] < 20:
        return False
    if v[-1] / v[0] >= 1e3:
        return True
    steps = np.diff(np.log(v))
    return v.size >= 3 and bool(np.allclose(steps, steps.mean(), rtol=1e-3))


def _edges(values: np.ndarray, log: bool) -> np.ndarray:
    """Cell edges around grid values: midpoints (geometric means on a log axis), ends mirrored."""
    v = np.log10(values) if log else np.asarray(values, dtype=float)
    if v.size == 1:
        half = 0.5 if log else 0.5 * (abs(float(v[0])) or 1.0)
        e = np.array([v[0] - half, v[0] + half])
    else:
        mid = 0.5 * (v[1:] + v[:-1])
        e = np.concatenate([[v[0] - (mid[0] - v[0])], mid, [v[-1] + (v[-1] - mid[-1])]])
    return 10 ** e if log else e


def _save(fig: Figure, out_stem: Path) -> list[Path]:
    paths = []
    with matplotlib.rc_context({"svg.hashsalt": "linobs", "svg.fonttype": "none"}):
        for fmt, metadata in (("png", {"Software": None}), ("svg", {"Date": None})):
            buf = io.BytesIO()
            fig.savefig(buf, format=fmt, dpi=DPI, metadata=metadata)
            paths.append(atomic_write_bytes(out_stem.with_name(f"{out_stem.name}.{fmt}"),
                                            buf.getvalue()))
    return paths
