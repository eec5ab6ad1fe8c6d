"""The run report: one self-contained HTML file, ``RUN_DIR/report.html``.

:func:`write_report` reads a finished run folder (see
:mod:`linobs.report.run_folder`) and writes a single page that a reviewer can
open anywhere, offline: the study, the FMU's identity, the observability
map and its regions in plain words, the gain schedule (designs, refusals,
continuity flags, the largest gains over the grid), the validation (frozen
points between the nodes, the nonlinear plant, the schedule against the
fixed gain), the export (or why it was refused), and every failure and note
— with the safety caution at the top and at the bottom.

It never recomputes a design or a check; the only thing it may draw is the
gain-map figure (``figures/schedule_gains``), when the schedule is there
and the figure is not.  Figures are embedded as base64 PNG data URIs, style
and script are inline, all text is escaped, and the page's
content-security policy forbids loading anything from anywhere.
"""

from __future__ import annotations

from pathlib import Path

from linobs.atomic import atomic_write_text
from linobs.errors import LinobsError
from linobs.report.html_parts import (CSP, CSS, SCRIPT, esc, figure, items, kv_table, num,
                                      seconds, table)
from linobs.report.html_sections import (SECTIONS, export_section, failures_section,
                                         schedule_section, validation_section)
from linobs.report.run_folder import RunFolder, read_run_folder

__all__ = ["REPORT_FILE", "write_report"]

REPORT_FILE = "report.html"
_VERDICTS = (("observable", "observable"), ("weak", "weak"),
             ("unobservable_detectable", "unobservable-detectable"),
             ("unobservable", "unobservable"))


def write_report(run_dir: str | Path) -> Path:
    """Write ``RUN_DIR/report.html`` from the run folder and return its path.

    Parameters
    ----------
    run_dir : str or Path
        A folder written by ``linobs run`` (it must hold ``summary.json``;
        every other file is optional and its absence is reported in words).

    Returns
    -------
    Path
        The report, written atomically.

    Raises
    ------
    UsageError
        ``run_dir`` holds no readable ``summary.json``.
    """
    run = read_run_folder(run_dir)
    _ensure_gain_figure(run)
    return atomic_write_text(run.root / REPORT_FILE, render(run))


def render(run: RunFolder) -> str:
    """The report page as a string."""
    s = run.summary
    name = run.study_name
    nav = "".join(f'<a href="#{key}">{esc(title)}</a>' for key, title in SECTIONS)
    body = [
        f"<h1>Run report: {esc(name)}</h1>",
        f'<p class="sub">{esc(run.study.get("description") or "")}</p>' if
        run.study.get("description") else "",
        _caution(s.caution, "caution-top"),
        f"<nav>{nav}</nav>",
        _section("overview", _overview(run)),
        _section("study", _study(run)),
        _section("fmu", _fmu(run)),
        _section("observability", _observability(run)),
        _section("schedule", schedule_section(run)),
        _section("validation", validation_section(run)),
        _section("export", export_section(run)),
        _section("failures", failures_section(run)),
        _caution(s.caution, "caution-bottom"),
        f'<p class="sub">linobs {esc(s.linobs_version)} · study hash '
        f'<span class="mono">{esc(s.study_hash)}</span></p>',
    ]
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            f'<meta http-equiv="Content-Security-Policy" content="{esc(CSP)}">'
            '<meta name="viewport" content="width=device-width, initial-scale=1">'
            '<meta name="referrer" content="no-referrer">'
            f"<title>linobs run report: {esc(name)}</title>"
            f"<style>{CSS}</style><script>{SCRIPT}</script></head>\n<body>\n"
            + "\n".join(part for part in body if part) + "\n</body></html>\n")


# ------------------------------------------------------------------------------ sections
def _section(key: str, content: str) -> str:
    title = dict(SECTIONS)[key]
    return f'<section id="{key}"><h2>{esc(title)}</h2>\n{content}\n</section>'


def _caution(text: str, anchor: str) -> str:
    return (f'<div class="caution" id="{anchor}" role="note"><strong>Caution.</strong> '
            f"{esc(text)}</div>")


def _overview(run: RunFolder) -> str:
    s = run.summary
    lines = [f"{s.points} operating points: {s.ok} trimmed and linearized, {s.failed} failed, "
             f"{s.crashed} crashed, {s.not_converged} did not converge"]
    if s.observable is not None:
        lines.append(", ".join(f"{getattr(s, key) or 0} {label}" for key, label in _VERDICTS))
    if s.design_ok is not None:
        lines.append(f"estimator designed at {s.design_ok} grid nodes, refused at "
                     f"{s.design_refused or 0}; {s.continuity_flags or 0} continuity flags")
    if s.validation_frozen_passed is not None:
        lines.append(f"frozen-point validation: {s.validation_frozen_passed} passed, "
                     f"{s.validation_frozen_failed or 0} failed; smallest decay reserve "
                     f"{num(s.validation_worst_decay_reserve)}")
    if s.export_refused:
        lines.append(f"export refused: {s.export_refused}")
    elif s.export_usable is not None:
        lines.append(f"export: {s.export_usable} nodes usable, {s.export_failed or 0} failed "
                     f"validation")
    return items(lines)


def _study(run: RunFolder) -> str:
    s, study = run.summary, run.study
    est = study.get("estimator") or {}
    pairs: list[tuple[str, object]] = [
        ("study", run.study_name), ("study file", s.study), ("study hash", s.study_hash),
        ("measured outputs", ", ".join(study.get("outputs") or []) or "—"),
        ("grid", _grid_text(run)), ("grid points", s.points),
        ("estimator", f"{est.get('kind')}, sample time {num(est.get('sample_time'))} s"
         if est else "none (the study has no [estimator] table)"),
        ("executor", s.executor), ("run created", run.created or "—"),
        ("total stage time", seconds(s.seconds)), ("FMU evaluations", s.evaluations),
    ]
    head = ["stage", "points", "ok", "failed", "crashed", "not converged", "evaluations",
            "time", "computed now", "stage counts"]
    rows = [[name, st.points, st.ok, st.failed, st.crashed, st.not_converged, st.evaluations,
             seconds(st.seconds), st.computed_now, _counts_text(st.counts)]
            for name, st in s.stages.items()]
    return (kv_table(pairs) + "<h3>Stages</h3>"
            + table(head, rows, numeric=range(1, 9)))


def _grid_text(run: RunFolder) -> str:
    units = run.fmu.units if run.fmu else {}
    sched = run.schedule
    parts = []
    if sched is not None and sched.grid_kind == "tensor":
        for name, values in zip(sched.axes, sched.axis_values):
            parts.append(_axis_text(name, sched.axis_roles.get(name, ""), len(values),
                                    values[0], values[-1], units.get(name, "")))
        return "tensor grid; " + "; ".join(parts)
    grid = run.study.get("grid") or {}
    if grid.get("points_csv"):
        return f"scattered points from {grid['points_csv']}"
    for name, spec in grid.items():
        if name in ("points_csv", "fixed") or not isinstance(spec, dict):
            continue
        if spec.get("values"):
            v = spec["values"]
            parts.append(_axis_text(name, "", len(v), min(v), max(v), units.get(name, "")))
        else:
            rng = spec.get("linspace") or spec.get("logspace") or {}
            spacing = "linear" if spec.get("linspace") else "logarithmic"
            parts.append(_axis_text(name, "", rng.get("num", "?"), rng.get("start"),
                                    rng.get("stop"), units.get(name, "")) + f" ({spacing})")
    if sched is not None:
        return f"{sched.grid_kind} grid; " + "; ".join(parts)
    return ("tensor grid; " + "; ".join(parts)) if parts else "—"


def _axis_text(name: str, role: str, count: object, lo: object, hi: object, unit: str) -> str:
    unit = "" if unit in ("", "1") else f" {unit}"
    what = f"{name} ({role})" if role else name
    return f"{what}: {count} values, {num(lo)} … {num(hi)}{unit}"


def _counts_text(counts: dict[str, object]) -> str:
    return ", ".join(f"{k.replace('_', ' ')} {num(v)}" for k, v in counts.items()
                     if isinstance(v, (int, float)) or v is None)


def _fmu(run: RunFolder) -> str:
    info = run.fmu
    if info is None:  # pragma: no cover - read_run_folder always fills it
        return '<p class="missing">no FMU identity recorded</p>'
    token = "instantiation token" if str(info.fmi_version or "").startswith("3") else "GUID"
    pairs: list[tuple[str, object]] = [
        ("model name", info.model_name or "— (not recorded; the FMU file is not readable)"),
        ("FMI version", info.fmi_version or "—"),
        (f"{token}", info.guid or "—"),
        ("SHA-256 of the FMU file", f'<span class="mono">{esc(info.sha256)}</span>'),
        ("FMU file", f'<span class="mono">{esc(info.path)}</span>'),
        ("name and GUID from", info.source),
    ]
    out = kv_table([(k, v if k.startswith(("SHA", "FMU file")) else esc(v)) for k, v in pairs],
                   raw=True)
    if info.file_sha256 is None:
        out += ('<p class="missing">The FMU file is not at the recorded path any more; the '
                "identity above is what the run recorded.</p>")
    elif info.file_sha256 != info.sha256:
        out += (f'<div class="refused">The file at the recorded path has changed since the run '
                f'(its SHA-256 is now <span class="mono">{esc(info.file_sha256)}</span>): the '
                f"results belong to the FMU with the SHA-256 above, not to that file.</div>")
    return out


def _observability(run: RunFolder) -> str:
    s = run.summary
    if s.observable is None:
        return '<p class="missing">The run stopped before the observability map.</p>'
    counts = [(label, getattr(s, key) or 0) for key, label in _VERDICTS]
    total = sum(c for _, c in counts) or 1
    rows = [[label, count, f"{100 * count / total:.0f} %"] for label, count in counts]
    out = [table(["verdict", "operating points", "share"], rows, numeric=(1, 2)),
           kv_table([("refined boundary points", s.boundary_points or 0),
                     ("nonlinear (empirical Gramian) checks", s.empirical_checked or 0),
                     ("disagreements with the linear verdict", s.empirical_disagreements or 0)]),
           "<h3>Where observability is lost or weak</h3>",
           items(run.regions) or '<p class="missing">no regions recorded</p>',
           figure(run.figure("observability_margin"),
                  alt="margin map: distance to unobservability",
                  caption="Margin map: the distance to unobservability of the weakest mode (PBH "
                          "test, relative singular value, log scale) over two grid axes; "
                          "dashed: the weak threshold; diamonds: refined boundary points; "
                          "hatched: points without a result.",
                  missing="No margin map (it needs at least two grid axes, or figures were off)."),
           figure(run.figure("observability_verdicts"), alt="verdict counts",
                  caption="Operating points per observability verdict and per failure status.")]
    return "\n".join(out)


def _ensure_gain_figure(run: RunFolder) -> None:
    """Draw ``figures/schedule_gains`` from the stored schedule when it is missing."""
    if run.schedule is None or run.figure("schedule_gains") is not None:
        return
    from linobs.report.schedule_figures import gain_maps

    info = run.fmu
    try:
        gain_maps(run.schedule, out_stem=run.root / "figures" / "schedule_gains",
                  scales=(info.nominals or None) if info else None,
                  units=(info.units or None) if info else None,
                  title=f"{run.study_name}: gain maps of the largest gain entries")
    except (LinobsError, ValueError) as exc:
        run.problems.append(f"the gain-map figure could not be drawn ({exc})")
