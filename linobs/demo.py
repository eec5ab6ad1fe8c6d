"""``linobs demo``: the whole job on the bundled lithium iron phosphate cell (demo data).

The demo runs the study ``examples/lfp_cell.toml`` (shipped inside the
package) end to end — sweep (trim + linearize over state of charge ×
ambient temperature × current), observability map, a discrete steady-state
Kalman schedule, frozen-point and nonlinear validation against a single
fixed-gain estimator, export of the tables and the estimator FMU, and the
HTML report — and prints where state of charge becomes weakly observable and
how the schedule performs against the fixed gain.  The cell's open-circuit
voltage and resistance tables are invented demo data with the flat mid-range
plateau this chemistry is known for (common practice).
"""

from __future__ import annotations

import os
from importlib import resources
from pathlib import Path

from rich.console import Console
from rich.markup import escape

from linobs.errors import FMUFileError
from linobs.model.bundled import cache_dir

__all__ = ["demo_study_path", "run_demo"]

DEMO_STUDY = "lfp_cell.toml"


def demo_study_path(name: str = DEMO_STUDY) -> Path:
    """An example study file: the installed copy (``linobs/bundled_examples``) or the checkout's."""
    candidates = []
    try:
        candidates.append(Path(str(resources.files("linobs") / "bundled_examples" / name)))
    except (ModuleNotFoundError, TypeError):  # pragma: no cover - exotic loaders
        pass
    candidates.append(Path(__file__).resolve().parents[1] / "examples" / name)
    for path in candidates:
        if path.is_file():
            return path
    raise FMUFileError(f"the example study {name} is missing (looked in "
                       f"{', '.join(str(c) for c in candidates)}); reinstall linobs")


def run_demo(console: Console, out: Path | None = None, *, workers: int | None = None) -> Path:
    """Run the cell demo into ``out`` (default: ``<cache>/demo``); returns the run folder."""
    from linobs.pipeline import run_study
    from linobs.report.console import print_run_summary, run_progress

    target = Path(out) if out is not None else Path(
        os.environ.get("LINOBS_DEMO_OUT", cache_dir() / "demo"))
    study = demo_study_path()
    console.print("[bold]linobs demo[/bold] — lithium iron phosphate cell (demo data, invented "
                  "values), state of charge × ambient temperature × current, Kalman schedule")
    console.print(f"  study: {escape(str(study))}\n  run folder: {escape(str(target))}")
    with run_progress(console) as (progress, on_stage):
        summary = run_study(study, target, workers=workers, progress=progress,
                            on_stage=on_stage, resume=_resumable(target))
    print_run_summary(console, summary, target)
    console.print("\n[bold]What the demo shows[/bold]")
    weak_soc = [r for r in summary.regions or [] if "soc" in r]
    if weak_soc:
        console.print("  Where state of charge is weakly observable from the terminal voltage:")
        for line in weak_soc:
            console.print(f"    - {escape(line)}")
    else:
        console.print(f"  observability: {summary.observable} observable, {summary.weak} weak "
                      "points (no region names soc)")
    rms, fixed = summary.validation_rms or {}, summary.fixed_gain_rms or {}
    if "soc" in rms and "soc" in fixed and rms["soc"] is not None and fixed["soc"]:
        better = 100.0 * (1.0 - rms["soc"] / fixed["soc"])
        console.print(f"  Along the validation scenario the schedule's state-of-charge RMS error "
                      f"is {rms['soc']:.4f} against {fixed['soc']:.4f} for the single fixed-gain "
                      f"estimator designed at the envelope's center: {better:.0f} % "
                      f"{'better' if better > 0 else 'worse'}.")
    if summary.export_refused:
        console.print(f"  Export refused: {escape(summary.export_refused)}")
    report = summary.files.get("report")
    if report:
        console.print(f"  Report: {escape(report)} (open it in a browser)")
    console.print(f"[dim]Caution: {escape(summary.caution)}[/dim]")
    return target


def _resumable(target: Path) -> bool:
    """Re-running the demo into the same folder continues (or reuses) the earlier run."""
    return (target / "run.sqlite").exists()
