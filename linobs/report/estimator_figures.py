"""Estimator figures: estimates against the truth, error envelopes, the frozen-point decay reserve.

Drawn like the observability figures (:mod:`linobs.report.figures`): bare
:class:`~matplotlib.figure.Figure` objects, no pyplot, written as PNG and
deterministic SVG (no date, fixed id salt, text as text), each file
atomically.  Colors come from *viridis*; estimators are told apart by line
style as well as color, failed points by marker shape and hatching.

* :func:`state_estimates` — one panel per state: the true state (black), each
  estimator's estimate (the schedule, the fixed gain, ...) and, for a Kalman
  filter, its ±3σ band from the interpolated steady-state covariance.
* :func:`estimation_errors` — one panel per state: estimate − truth of each
  estimator with its ±3σ envelope, on a symmetric-log axis whose linear
  part is the typical band (so the initial transient and the settled error
  are both readable).
* :func:`frozen_decay_reserve_map` — the frozen-point decay reserve (how
  much faster than required the estimation error decays) over two
  scheduling axes (one axis: the reserve against that axis): color =
  decay reserve, crosses =
  points that fail, hatched = no result; other axes are reduced to their
  worst case (tensor point sets) or projected (scattered points), with the
  reduction of :func:`linobs.report.map_data.reduce_to_axes`.

Long runs are drawn at most :data:`MAX_POINTS` samples per line (every k-th
sample); the numbers in the validation report use every sample.

References
----------
van der Walt, S. & Smith, N. (2015). A better default colormap for
matplotlib (viridis). SciPy 2015 conference talk.

Crameri, F., Shephard, G. E. & Heron, P. J. (2020). The misuse of colour in
science communication. Nature Communications 11, 5444.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import TYPE_CHECKING

import matplotlib
import numpy as np
from matplotlib.colors import Normalize
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch, Rectangle

from linobs.errors import UsageError
from linobs.report.figures import DPI, _edges, _save, axis_label
from linobs.report.map_data import rasterize, reduce_to_axes

if TYPE_CHECKING:  # pragma: no cover
    from linobs.estimator.nonlinear import EstimatorRun

__all__ = ["MAX_POINTS", "estimation_errors", "estimation_errors_figure",
           "frozen_decay_reserve_map", "frozen_decay_reserve_map_figure", "state_estimates",
           "state_estimates_figure"]

MAX_POINTS = 2000
"""Samples drawn per line at most."""

CMAP = "viridis"
_RUN_LEVELS = (0.18, 0.62, 0.85, 0.40)
_RUN_STYLES = ("-", "--", "-.", ":")
_FAILED_FACE, _FAILED_EDGE, _FAILED_HATCH = "0.85", "0.45", "////"
_PASS, _FAIL = "observable", "unobservable"  # reduce_to_axes' least / most severe verdicts


# ------------------------------------------------------------------------------ trajectories
def state_estimates_figure(runs: Sequence[EstimatorRun], *, band: float = 3.0, title: str = "",
                           units: Mapping[str, str] | None = None) -> Figure:
    """True and estimated states (see :func:`state_estimates`)."""
    runs = _check_runs(runs)
    first = runs[0]
    t, t_label = _time_axis(first.times)
    idx = _stride(len(t))
    fig, axes = _panels(len(first.state_names))
    handles: list[object] = [Line2D([], [], color="black", linewidth=1.4, label="truth")]
    for k, (ax, name) in enumerate(zip(axes, first.state_names)):
        for r, run in enumerate(runs):
            color, style = _style(r)
            if run.sigma is not None:
                lo = run.estimates[idx, k] - band * run.sigma[idx, k]
                hi = run.estimates[idx, k] + band * run.sigma[idx, k]
                ax.fill_between(t[idx], lo, hi, color=color, alpha=0.18, linewidth=0,
                                gid=f"band-{r}-{name}")
            ax.plot(t[idx], run.estimates[idx, k], color=color, linestyle=style, linewidth=1.1,
                    gid=f"estimate-{r}-{name}")
        ax.plot(t[idx], first.truth[idx, k], color="black", linewidth=1.4, gid=f"truth-{name}")
        ax.set_ylabel(axis_label(name, units))
        _tidy(ax)
    axes[-1].set_xlabel(t_label)
    for r, run in enumerate(runs):
        color, style = _style(r)
        handles.append(Line2D([], [], color=color, linestyle=style, label=run.label))
    if any(run.sigma is not None for run in runs):
        handles.append(Patch(color=_style(0)[0], alpha=0.18, label=f"±{band:g}σ (Kalman)"))
    fig.legend(handles=handles, loc="outside lower center", ncols=min(4, len(handles)),
               fontsize=8, frameon=False)
    fig.suptitle(title or "True and estimated states", fontweight="bold")
    axes[0].set_title(_note(first), fontsize=8.5, loc="left", color="0.25")
    return fig


def state_estimates(runs: Sequence[EstimatorRun], *, out_stem: Path, band: float = 3.0,
                    title: str = "", units: Mapping[str, str] | None = None) -> list[Path]:
    """True vs estimated states over the scenario, one panel per state (PNG + SVG).

    Parameters
    ----------
    runs : sequence of EstimatorRun
        Runs along the same plant run (e.g. the schedule, then the fixed gain).
    out_stem : Path
        Files ``out_stem.png`` and ``out_stem.svg`` are written.
    band : float
        Half-width of the Kalman band in standard deviations.
    title : str
    units : mapping, optional
        Unit per state name, for the axis labels.

    Returns
    -------
    list of Path
        The PNG and the SVG.
    """
    return _save(state_estimates_figure(runs, band=band, title=title, units=units),
                 Path(out_stem))


def estimation_errors_figure(runs: Sequence[EstimatorRun], *, band: float = 3.0,
                             title: str = "", units: Mapping[str, str] | None = None) -> Figure:
    """Estimation errors and their ±3σ envelopes (see :func:`estimation_errors`)."""
    runs = _check_runs(runs)
    first = runs[0]
    t, t_label = _time_axis(first.times)
    idx = _stride(len(t))
    fig, axes = _panels(len(first.state_names))
    handles: list[object] = []
    for k, (ax, name) in enumerate(zip(axes, first.state_names)):
        ax.axhline(0.0, color="0.55", linewidth=0.8)
        for r, run in enumerate(runs):
            color, style = _style(r)
            if run.sigma is not None:
                env = band * run.sigma[idx, k]
                for sign in (1, -1):
                    ax.plot(t[idx], sign * env, color=color, linestyle=":", linewidth=0.9,
                            gid=f"envelope-{r}-{name}")
            ax.plot(t[idx], run.errors[idx, k], color=color, linestyle=style, linewidth=1.0,
                    gid=f"error-{r}-{name}")
        threshold = _linear_part(runs, k, band)
        if threshold is not None:
            ax.set_yscale("symlog", linthresh=threshold, linscale=2.0)
            _symlog_ticks(ax, threshold)
        ax.set_ylabel("error in " + axis_label(name, units))
        _tidy(ax)
    axes[-1].set_xlabel(t_label)
    for r, run in enumerate(runs):
        color, style = _style(r)
        handles.append(Line2D([], [], color=color, linestyle=style,
                              label=f"{run.label}: estimate − truth"))
    if any(run.sigma is not None for run in runs):
        handles.append(Line2D([], [], color="0.3", linestyle=":", label=f"±{band:g}σ"))
    fig.legend(handles=handles, loc="outside lower center", ncols=min(3, len(handles)),
               fontsize=8, frameon=False)
    fig.suptitle(title or "Estimation errors", fontweight="bold")
    axes[0].set_title(_note(first) + "\nsymmetric-log axes, linear within the band",
                      fontsize=8.5, loc="left", color="0.25")
    return fig


def estimation_errors(runs: Sequence[EstimatorRun], *, out_stem: Path, band: float = 3.0,
                      title: str = "", units: Mapping[str, str] | None = None) -> list[Path]:
    """Estimation error and ±3σ envelope per state over the scenario (PNG + SVG).

    Parameters as :func:`state_estimates`.
    """
    return _save(estimation_errors_figure(runs, band=band, title=title, units=units),
                 Path(out_stem))


# ------------------------------------------------------------------------------ frozen points
def frozen_decay_reserve_map_figure(points: np.ndarray, names: Sequence[str],
                                    reserves: Sequence[float | None], passed: Sequence[bool], *,
                                    axes: tuple[str, str] | None = None,
                                    fixed: Mapping[str, float] | None = None, title: str = "",
                                    reserve_label: str = "decay reserve",
                                    units: Mapping[str, str] | None = None) -> Figure:
    """The frozen-point decay reserve over the scheduling axes (see
    :func:`frozen_decay_reserve_map`)."""
    pts = np.atleast_2d(np.asarray(points, dtype=float))
    names = list(names)
    if pts.shape[1] != len(names) or len(reserves) != len(pts) or len(passed) != len(pts):
        raise UsageError(f"frozen decay reserve map: {len(pts)} points with {pts.shape[1]} "
                         f"columns, {len(names)} names, {len(reserves)} decay reserves and "
                         f"{len(passed)} pass flags do not match")
    m = np.array([math.nan if v is None else float(v) for v in reserves])
    verdicts = ["failed" if not np.isfinite(v) else (_PASS if ok else _FAIL)
                for v, ok in zip(m, passed)]
    fig = Figure(figsize=(7.5, 5.8), dpi=DPI, layout="constrained")
    ax = fig.add_subplot()
    finite = m[np.isfinite(m)]
    lo, hi = (float(finite.min()), float(finite.max())) if finite.size else (-1.0, 1.0)
    if hi <= lo:
        lo, hi = lo - 0.5 * (abs(lo) or 1.0), hi + 0.5 * (abs(hi) or 1.0)
    norm = Normalize(vmin=lo, vmax=hi)
    handles: list[object] = []
    if len(names) == 1:
        _draw_reserve_line(ax, pts[:, 0], m, verdicts, handles)
        ax.set_xlabel(axis_label(names[0], units))
        ax.set_ylabel(reserve_label)
        note = "all points"
    else:
        axes = axes or (names[0], names[1])
        data = reduce_to_axes(pts, names, m, verdicts, axes=axes, fixed=fixed)
        if data.kind == "tensor":
            image = _draw_tensor(ax, data, norm)
            Y, X = np.meshgrid(data.y, data.x, indexing="ij")
            xs, ys, vs = X.ravel(), Y.ravel(), data.verdict.ravel()
        else:
            image = _draw_scattered(ax, data, norm)
            xs, ys, vs = data.x, data.y, data.verdict
        bad = np.array([v == _FAIL for v in vs], dtype=bool)
        if bad.any():
            handles.append(ax.scatter(xs[bad], ys[bad], marker="X", s=60, facecolor="white",
                                      edgecolor="black", linewidths=0.9, zorder=5,
                                      gid="failing-points",
                                      label=f"misses the required decay ({int(bad.sum())})"))
        cbar = fig.colorbar(image, ax=ax)
        cbar.set_label(reserve_label)
        if lo < 0.0 < hi:
            cbar.ax.axhline(0.0, color="black", linestyle="--", linewidth=1.2)
        ax.set_xlabel(axis_label(data.axes[0], units))
        ax.set_ylabel(axis_label(data.axes[1], units))
        parts = [f"{k} = {v:.4g}" for k, v in data.fixed.items()]
        if data.reduced:
            word = "projected" if data.kind == "scattered" else "worst case over"
            parts.append(f"{word} {', '.join(data.reduced)}")
        note = "; ".join(parts) or "all points"
    missing = int(np.sum(~np.isfinite(m)))
    if missing:
        handles.append(Patch(facecolor=_FAILED_FACE, edgecolor=_FAILED_EDGE, hatch=_FAILED_HATCH,
                             label=f"no result ({missing})"))
    failing = int(sum(1 for v in verdicts if v == _FAIL))
    ax.set_title(f"{note}; {failing} of {len(pts)} points miss the required decay",
                 fontsize=8.5, loc="left", color="0.25")
    fig.suptitle(title or "Frozen-point decay reserve of the schedule", fontweight="bold")
    if handles:
        fig.legend(handles=handles, loc="outside lower center", ncols=min(3, len(handles)),
                   fontsize=8, frameon=False)
    return fig


def frozen_decay_reserve_map(points: np.ndarray, names: Sequence[str],
                             reserves: Sequence[float | None], passed: Sequence[bool], *,
                             out_stem: Path, axes: tuple[str, str] | None = None,
                             fixed: Mapping[str, float] | None = None, title: str = "",
                             reserve_label: str = "decay reserve",
                             units: Mapping[str, str] | None = None) -> list[Path]:
    """A map of the frozen-point decay reserve (the smallest per cell), PNG + SVG.

    Parameters
    ----------
    points : ndarray, shape (N, k)
        Scheduling values checked, columns named by ``names``.
    names : sequence of str
    reserves : sequence of float or None
        Decay reserve per point (≥ 0: passes); None where the point has no result.
    passed : sequence of bool
    axes : (str, str), optional
        The two axes shown (default the first two); ignored for one axis.
    fixed : mapping, optional
        Values of other axes (nearest value present); others are reduced.
    out_stem : Path
        Files ``out_stem.png`` and ``out_stem.svg`` are written.
    title, reserve_label : str
    units : mapping, optional

    Raises
    ------
    UsageError
        Inconsistent lengths, or axes that are not among ``names``.
    """
    return _save(frozen_decay_reserve_map_figure(points, names, reserves, passed, axes=axes,
                                                 fixed=fixed, title=title,
                                                 reserve_label=reserve_label, units=units),
                 Path(out_stem))


# ------------------------------------------------------------------------------ helpers
def _check_runs(runs: Sequence[EstimatorRun]) -> list[EstimatorRun]:
    runs = list(runs)
    if not runs:
        raise UsageError("no estimator run to draw; run the estimator first")
    first = runs[0]
    for run in runs[1:]:
        if run.state_names != first.state_names or run.times.shape != first.times.shape:
            raise UsageError(f"the runs {first.label!r} and {run.label!r} do not follow the same "
                             f"plant run; draw runs of one scenario together")
    return runs


def _time_axis(times: np.ndarray) -> tuple[np.ndarray, str]:
    span = float(times[-1] - times[0]) if len(times) else 0.0
    if span > 4 * 3600:
        return times / 3600.0, "time [h]"
    if span > 1200:
        return times / 60.0, "time [min]"
    return times, "time [s]"


def _stride(n: int) -> np.ndarray:
    step = max(1, math.ceil(n / MAX_POINTS))
    idx = np.arange(0, n, step)
    return idx if idx[-1] == n - 1 else np.append(idx, n - 1)


def _panels(count: int) -> tuple[Figure, list]:  # type: ignore[type-arg]
    fig = Figure(figsize=(7.5, 1.2 + 1.7 * count), dpi=DPI, layout="constrained")
    axes = list(np.atleast_1d(fig.subplots(count, 1, sharex=True, squeeze=False)[:, 0]))
    return fig, axes


def _style(r: int) -> tuple[tuple[float, float, float, float], str]:
    return (matplotlib.colormaps[CMAP](_RUN_LEVELS[r % len(_RUN_LEVELS)]),
            _RUN_STYLES[r % len(_RUN_STYLES)])


def _tidy(ax) -> None:  # type: ignore[no-untyped-def]
    ax.grid(color="0.92", linewidth=0.7)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)


def _note(run: EstimatorRun) -> str:
    noise = ", ".join(f"σ({k}) = {v:.3g}" for k, v in run.noise_std.items())
    ts = float(run.times[1] - run.times[0]) if len(run.times) > 1 else 0.0
    return f"{len(run.times)} samples, Ts = {ts:g} s; measurement noise {noise or 'none'}"


def _linear_part(runs: Sequence[EstimatorRun], k: int, band: float) -> float | None:
    """Linear range of the symmetric-log error axis: the median band, else 5 % of |e₀|."""
    for run in runs:
        if run.sigma is not None:
            s = band * run.sigma[:, k]
            s = s[np.isfinite(s) & (s > 0)]
            if s.size:
                return float(np.median(s))
    e0 = max(abs(float(run.errors[0, k])) for run in runs)
    return 0.05 * e0 if e0 > 0 else None


def _symlog_ticks(ax, threshold: float) -> None:  # type: ignore[no-untyped-def]
    """Ticks at 0, at ± the band (one significant digit) and at the decades well outside it."""
    from matplotlib.ticker import FixedLocator, FuncFormatter, NullLocator

    lo, hi = ax.get_ylim()
    top = max(abs(lo), abs(hi))
    exponent = math.floor(math.log10(threshold))
    inner = math.floor(threshold / 10.0 ** exponent) * 10.0 ** exponent
    decades = [10.0 ** k for k in range(exponent + 1, math.floor(math.log10(top)) + 1)
               if 10.0 ** k >= 3 * threshold] if top > 0 else []
    levels = [inner, *decades]
    ticks = sorted({0.0, *[d for d in levels if d <= hi], *[-d for d in levels if -d >= lo]})
    ax.yaxis.set_major_locator(FixedLocator(ticks))
    ax.yaxis.set_minor_locator(NullLocator())
    ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:.3g}"))


def _draw_reserve_line(ax, x: np.ndarray, m: np.ndarray,  # type: ignore[no-untyped-def]
                       verdicts: Sequence[str], handles: list[object]) -> None:
    order = np.argsort(x, kind="stable")
    ok = np.isfinite(m[order])
    ax.plot(x[order][ok], m[order][ok], color=matplotlib.colormaps[CMAP](0.35), linewidth=1.0,
            marker="o", markersize=3.5, gid="reserve-line")
    ax.axhline(0.0, color="black", linestyle="--", linewidth=1.0)
    bad = np.array([v == _FAIL for v in verdicts], dtype=bool)
    if bad.any():
        handles.append(ax.scatter(x[bad], m[bad], marker="X", s=60, facecolor="white",
                                  edgecolor="black", linewidths=0.9, zorder=5,
                                  gid="failing-points",
                                  label=f"misses the required decay ({int(bad.sum())})"))
    _tidy(ax)


def _draw_tensor(ax, data, norm: Normalize):  # type: ignore[no-untyped-def]
    xe, ye = _edges(data.x, False), _edges(data.y, False)
    mesh = ax.pcolormesh(xe, ye, np.ma.masked_invalid(data.value), rasterized=rasterize(xe, ye), cmap=CMAP, norm=norm,
                         shading="flat", gid="reserve-mesh")
    for j, i in zip(*np.nonzero(~np.isfinite(data.value))):
        ax.add_patch(Rectangle((xe[i], ye[j]), xe[i + 1] - xe[i], ye[j + 1] - ye[j],
                               facecolor=_FAILED_FACE, edgecolor=_FAILED_EDGE, hatch=_FAILED_HATCH,
                               linewidth=0, gid="no-result-cell"))
    ok = data.value[np.isfinite(data.value)]
    if min(data.value.shape) >= 2 and ok.size and ok.min() < 0.0 < ok.max():
        X, Y = np.meshgrid(data.x, data.y)
        ax.contour(X, Y, np.ma.masked_invalid(data.value), levels=[0.0], colors="black",
                   linewidths=1.2, linestyles="--")
    ax.set_xlim(xe[0], xe[-1])
    ax.set_ylim(ye[0], ye[-1])
    return mesh


def _draw_scattered(ax, data, norm: Normalize):  # type: ignore[no-untyped-def]
    ok = np.isfinite(data.value)
    order = np.nonzero(ok)[0][np.argsort(-data.value[ok], kind="stable")]  # worst drawn last
    image = ax.scatter(data.x[order], data.y[order], c=data.value[order], cmap=CMAP, norm=norm,
                       s=46, edgecolors="0.25", linewidths=0.4, zorder=3, gid="reserve-points")
    if (~ok).any():
        ax.scatter(data.x[~ok], data.y[~ok], marker="s", s=40, facecolor=_FAILED_FACE,
                   edgecolor=_FAILED_EDGE, hatch=_FAILED_HATCH, linewidths=0.6, zorder=3,
                   gid="no-result-points")
    _tidy(ax)
    return image
