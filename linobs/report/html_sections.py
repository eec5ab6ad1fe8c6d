"""Sections of the HTML report after the observability map: schedule, validation, export,
failures (see :mod:`linobs.report.html`)."""

from __future__ import annotations

from collections import Counter
from typing import Any

from linobs.report.html_parts import esc, figure, items, kv_table, num, point_text, table
from linobs.report.run_folder import RunFolder

__all__ = ["SECTIONS", "export_section", "failures_section", "schedule_section",
           "validation_section"]

SECTIONS = (("overview", "At a glance"), ("study", "Study"), ("fmu", "FMU identity"),
            ("observability", "Observability"), ("schedule", "Gain schedule"),
            ("validation", "Validation"), ("export", "Export"),
            ("failures", "Failures and notes"))
"""Section anchors and titles, in page order."""

MAX_ROWS = 25
"""Rows shown per long table (the rest is counted, and is in the named JSON file)."""
MAX_JUMPS = 12
"""Continuity flags shown (largest gain change first)."""


def schedule_section(run: RunFolder) -> str:
    """The gain schedule: design counts, refused nodes, continuity flags, gain maps."""
    s = run.summary
    if "design" not in s.stages:
        return _not_run(run, "No estimator was designed")
    out = [kv_table([("grid nodes with a design", s.design_ok or 0),
                     ("grid nodes refused", s.design_refused or 0),
                     ("continuity flags (neighboring gain jumps)", s.continuity_flags or 0)])]
    first = next((n for n in run.schedule.nodes if n.status == "ok"), None) \
        if run.schedule is not None else None
    if first is not None:
        out.append(f"<p>{esc(first.kind.capitalize())} estimator, {esc(first.domain)} design, "
                   f"{esc(first.form)} form, sample time {esc(num(first.sample_time))} s; "
                   f"states {esc(', '.join(first.states))}; measured outputs "
                   f"{esc(', '.join(first.outputs))}.</p>")
    refused = run.refused or []
    out.append("<h3>Refused nodes</h3>")
    if refused:
        rows = [[r.get("index"), point_text(r.get("point")), r.get("message", ""),
                 _modes(r.get("unmovable_modes"))] for r in refused[:MAX_ROWS]]
        out.append(table(["node", "operating point", "reason", "modes no gain can move"], rows,
                         numeric=(0,)) + _more(len(refused), "design/refused.json"))
    else:
        out.append("<p>No node was refused: every grid node has a design.</p>")
    out.append("<h3>Continuity between neighboring nodes</h3>")
    jumps = run.continuity
    if jumps:
        causes = Counter(str(j.get("cause")) for j in jumps)
        out.append("<p>" + esc("; ".join(f"{n} × {c}" for c, n in causes.most_common())) + "</p>")
        order = sorted(jumps, key=lambda j: -(j.get("relative_change") if
                                              j.get("relative_change") is not None else 1e300))
        rows = [[*_step(j.get("values_a") or {}, j.get("values_b") or {}),
                 num(j.get("relative_change")) if j.get("relative_change") is not None
                 else "refused neighbor", num(j.get("pole_shift")), num(j.get("model_change")),
                 j.get("cause"), j.get("message")] for j in order[:MAX_JUMPS]]
        out.append(table(["where", "step", "relative gain change", "pole shift",
                          "model change", "likely cause", "message"], rows,
                         numeric=(2, 3, 4))
                   + _more(len(jumps), "design/continuity.json", shown=MAX_JUMPS))
    elif jumps is not None:
        out.append("<p>No neighboring gains jump by more than the continuity threshold.</p>")
    else:
        out.append('<p class="missing">No continuity check in the run folder.</p>')
    out.append(figure(run.figure("schedule_gains"), alt="gain maps",
                      caption="Gain maps: the largest gain entries L[state, output] over the grid "
                              "(ranking, slice and scaling are stated in the figure); "
                              "hatched: refused nodes.",
                      missing="No gain-map figure (no schedule in the run folder)."))
    return "\n".join(out)


def validation_section(run: RunFolder) -> str:
    """The validation: frozen points between the nodes, the nonlinear plant, figures."""
    s = run.summary
    frozen = run.frozen
    if frozen is None and run.nonlinear is None:
        return _not_run(run, "The schedule was not validated")
    out = ["<h3>Frozen points between the nodes</h3>"]
    if frozen is not None:
        continuous = frozen.domain == "continuous"
        reserve = "decay reserve [1/s]" if continuous else "decay reserve"
        verdict = ('<span class="pass">every checked point passes</span>' if frozen.all_passed
                   else f'<span class="fail">{frozen.failed + frozen.unusable + frozen.errors} '
                        f"of {frozen.count} points fail</span>")
        out.append(kv_table([("criterion", esc(frozen.criterion)),
                             ("points checked", frozen.count), ("passed", frozen.passed),
                             ("miss the required decay", frozen.failed),
                             ("unusable (a refused node is used)", frozen.unusable),
                             ("no local model", frozen.errors),
                             (f"smallest {reserve}", esc(num(frozen.worst_decay_reserve))),
                             ("result", verdict)], raw=True))
        head = ["#", "scheduling values", "status", "spectral radius"] + \
            (["decay rate [1/s]"] if continuous else []) + [reserve, "model mismatch", "message"]
        rows = [[p.index, point_text(p.values), p.status, num(p.spectral_radius, 6)]
                + ([num(p.decay_rate)] if continuous else [])
                + [num(p.decay_reserve), num(p.model_mismatch), p.message]
                for p in frozen.points[:10]]
        out.append("<p>Worst points first:</p>"
                   + table(head, rows, numeric=(0, 3, 4, 5) if not continuous
                           else (0, 3, 4, 5, 6)) + _more(len(frozen.points),
                                                         "validation/frozen.json", shown=10))
        out.append(figure(run.figure("validation_decay_reserve"),
                          alt="frozen-point decay reserve map",
                          caption="Frozen-point decay reserve (how much faster than required "
                                  "the estimation error decays) over the scheduling axes (other "
                                  "axes reduced or projected as the figure states); crosses: "
                                  "points that miss the required decay."))
    else:
        out.append('<p class="missing">No frozen-point report in the run folder.</p>')
    out.append("<h3>Nonlinear plant</h3>")
    out.append(_nonlinear(run))
    if s.comparison:
        out.append("<p>Schedule against the fixed gain designed at the envelope's center:</p>"
                   + items(s.comparison))
    out.append(figure(run.figure("validation_states"), alt="true and estimated states",
                      caption="True states of the nonlinear plant and the estimates of the "
                              "schedule and of the fixed gain (with the Kalman ±3σ band)."))
    out.append(figure(run.figure("validation_errors"), alt="estimation errors",
                      caption="Estimation error (estimate − truth) of each estimator with its "
                              "±3σ envelope."))
    return "\n".join(out)


def _nonlinear(run: RunFolder) -> str:
    """RMS errors per state of the schedule and the fixed gain, and the NEES windows."""
    data = run.nonlinear
    s = run.summary
    if data is None:
        return '<p class="missing">No nonlinear validation in the run folder.</p>'
    if "error" in data:
        return (f'<div class="refused">The nonlinear run failed: {esc(data["error"])}</div>')
    sched: dict[str, Any] = data.get("schedule") or {}
    fixed: dict[str, Any] = data.get("fixed_gain") or {}
    units = run.fmu.units if run.fmu else {}
    rows = []
    for state, v in (sched.get("per_state") or {}).items():
        fv = (fixed.get("per_state") or {}).get(state) or {}
        unit = units.get(state, "")
        rows.append([f"{state} [{unit}]" if unit and unit != "1" else state, num(v.get("rms")),
                     num(fv.get("rms")) if fv else "—", num(v.get("rms_converged")),
                     num(v.get("convergence_time"))])
    settled = sched.get("settled_time")
    out = [f"<p>{esc(num(sched.get('duration')))} s scenario, {esc(sched.get('samples'))} "
           f"samples; the schedule {'converged' if sched.get('converged') else 'did not converge'}"
           f"{f', settled after {esc(num(settled))} s' if settled is not None else ''}.</p>",
           table(["state", "RMS error, schedule", "RMS error, fixed gain",
                  "RMS after convergence (schedule)", "convergence time [s]"], rows,
                 numeric=(1, 2, 3, 4))]
    nees = sched.get("nees") or []
    if nees:
        windows = [[w.get("window"), w.get("samples"), num(w.get("mean")),
                    f"{num(w.get('lower'))} … {num(w.get('upper'))}",
                    "yes" if w.get("inside") else "no"] for w in nees]
        out.append("<p>Normalized estimation error squared (NEES) of the schedule against its "
                   "covariance:</p>" + table(["window", "samples", "mean NEES",
                                              "confidence bounds", "consistent"], windows,
                                             numeric=(1, 2)))
    notes = sched.get("notes") or []
    if notes:
        out.append(items(notes))
    if not rows and s.validation_rms:
        out.append(items(f"{k}: {num(v)}" for k, v in s.validation_rms.items()))
    return "\n".join(out)


def export_section(run: RunFolder) -> str:
    """The export (or why it was refused) and every file of the run."""
    s = run.summary
    out = []
    if s.export_refused:
        out.append(f'<div class="refused"><strong>Export refused.</strong> '
                   f"{esc(s.export_refused)}</div>")
    elif "export" in s.stages:
        out.append(f'<div class="fine">Tables written: {esc(s.export_usable or 0)} nodes usable, '
                   f"{esc(s.export_failed or 0)} designed nodes failed validation.</div>")
    else:
        out.append(_not_run(run, "Nothing was exported"))
    listed = {k: v for k, v in s.files.items() if k != "report"}  # this file itself
    gains = run.figure("schedule_gains")
    if gains is not None and str(gains) not in listed.values():
        listed["gain maps (drawn by the report)"] = str(gains)
    rows = []
    for role, path in listed.items():
        p = run.locate(path)
        size = f"{p.stat().st_size / 1024:.1f} kB" if p.is_file() else "missing"
        rows.append([role.replace("_", " "), run.relative(p), size])
    if rows:
        out.append("<h3>Files of the run</h3>" + table(["role", "file (in the run folder)",
                                                        "size"], rows, numeric=(2,)))
    return "\n".join(out)


def failures_section(run: RunFolder) -> str:
    """Failed, crashed and unconverged points, validation failures, notes, unreadable files."""
    s = run.summary
    out = [kv_table([("operating points that failed (FMU error or non-finite values)", s.failed),
                     ("operating points whose worker crashed", s.crashed),
                     ("operating points whose trim did not converge", s.not_converged)])]
    rows = [[name, st.failed, st.crashed, st.not_converged] for name, st in s.stages.items()
            if st.failed or st.crashed or st.not_converged]
    if rows:
        out.append("<p>By stage:</p>" + table(["stage", "failed", "crashed", "not converged"],
                                              rows, numeric=(1, 2, 3)))
    else:
        out.append("<p>No point failed, crashed or missed convergence in any stage.</p>")
    frozen = run.frozen
    if frozen is not None and (frozen.failed or frozen.errors or frozen.unusable):
        out.append(f'<p class="fail">Frozen-point validation: {frozen.failed} points miss the '
                   f"required decay, {frozen.unusable} use a refused node, {frozen.errors} have no "
                   f"local model (details under Validation).</p>")
    out.append("<h3>Notes</h3>" + (items(s.notes) or "<p>No notes.</p>"))
    if run.problems:
        out.append("<h3>Files the report could not read</h3>" + items(run.problems))
    return "\n".join(out)


# ------------------------------------------------------------------------------ helpers
def _not_run(run: RunFolder, what: str) -> str:
    why = [n for n in run.summary.notes if n]
    reason = f": {'; '.join(why)}" if why else " (the run ended before this stage)"
    return f'<p class="missing">{esc(what + reason)}.</p>'


def _step(a: dict[str, Any], b: dict[str, Any]) -> list[str]:
    """The values two neighbors share, and the step between them (``x: 1 → 2``)."""
    same = {k: v for k, v in a.items() if b.get(k) == v}
    step = "; ".join(f"{k}: {num(v)} → {num(b.get(k))}" for k, v in a.items() if k not in same)
    return [point_text(same) or "—", step or "—"]


def _modes(modes: Any) -> str:
    if not modes:
        return "—"
    return ", ".join(f"{num(re)}{'+' if im >= 0 else '−'}{num(abs(im))}j" if im else num(re)
                     for re, im in modes)


def _more(total: int, where: str, shown: int = MAX_ROWS) -> str:
    if total <= shown:
        return ""
    return (f'<p class="missing">… and {total - shown} more; all {total} are in '
            f"<span class=\"mono\">{esc(where)}</span>.</p>")
