"""Console rendering (rich) of catalogues and linear models."""

from __future__ import annotations

from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from typing import Any

import numpy as np
from rich.console import Console
from rich.markup import escape
from rich.progress import (BarColumn, MofNCompleteColumn, Progress, TextColumn,
                           TimeRemainingColumn)
from rich.table import Table

from linobs.linear.linear_model import LinearModel
from linobs.model.catalogue import Variable
from linobs.model.instance import Model

CAUTION = ("Caution: linobs results are engineering aids. Verify every estimator in simulation, "
           "hardware-in-the-loop and test, by qualified engineers, under the applicable "
           "functional-safety standards, local codes and licensed practice.")


def _num(value: float | None) -> str:
    return "" if value is None else f"{value:.6g}"


def variable_table(title: str, variables: Sequence[Variable], *, with_variability: bool = False) -> Table:
    table = Table(title=title, title_justify="left", show_edge=False)
    for col in ("name", "unit", "start", "min", "max", "nominal"):
        table.add_column(col, justify="left" if col in ("name", "unit") else "right")
    if with_variability:
        table.add_column("variability")
    for v in variables:
        row = [v.name, v.unit or "", _num(v.start), _num(v.min), _num(v.max), _num(v.nominal)]
        if with_variability:
            row.append(v.variability or "")
        table.add_row(*row)
    return table


def print_description(console: Console, model: Model) -> None:
    cat, caps = model.catalogue, model.capabilities
    console.print(f"[bold]{model.model_name}[/bold]  FMI {caps.fmi_version} model exchange"
                  f"{' + co-simulation' if caps.co_simulation else ''}   GUID {model.guid}")
    console.print(f"  directional derivatives: {'yes' if caps.directional_derivatives else 'no'};  "
                  f"get/set FMU state: {'yes' if caps.get_set_state else 'no'};  "
                  f"event indicators: {caps.event_indicators};  continuous states: {caps.continuous_states}")
    console.print(f"  file {escape(str(model.path))}  sha256 {model.sha256[:16]}…")
    for title, group, var in (("states", cat.states, False), ("inputs", cat.inputs, False),
                              ("outputs", cat.outputs, False), ("parameters", cat.parameters, True)):
        if group:
            console.print(variable_table(title, group, with_variability=var))


def matrix_table(title: str, M: np.ndarray, rows: Sequence[str], cols: Sequence[str]) -> Table:
    table = Table(title=title, title_justify="left", show_edge=False)
    table.add_column("")
    for c in cols:
        table.add_column(c, justify="right")
    for name, row in zip(rows, M):
        table.add_row(name, *(f"{v: .6g}" if v != 0 else "0" for v in row))
    return table


def print_linear_model(console: Console, lm: LinearModel, derivative_names: Sequence[str]) -> None:
    console.print(f"[bold]{lm.model.model_name}[/bold] linearized by {lm.method} "
                  f"({lm.evaluations} evaluations"
                  + (f", {lm.directional_evaluations} directional-derivative calls" if lm.directional_evaluations else "")
                  + f", {lm.column_groups} column groups"
                  + (", ModelStructure sparsity" if lm.used_structure else ", dense") + ")")
    point = ", ".join(f"{n}={v:.6g}" for n, v in zip(lm.states + lm.inputs, np.concatenate([lm.x0, lm.u0])))
    console.print(f"  at {point}")
    if lm.states:
        console.print(matrix_table("A", lm.A, derivative_names, lm.states))
    if lm.states and lm.inputs:
        console.print(matrix_table("B", lm.B, derivative_names, lm.inputs))
    if lm.outputs and lm.states:
        console.print(matrix_table("C", lm.C, lm.outputs, lm.states))
    if lm.outputs and lm.inputs:
        console.print(matrix_table("D", lm.D, lm.outputs, lm.inputs))
    console.print("  dx0 = " + ", ".join(f"{n}={v:.6g}" for n, v in zip(derivative_names, lm.dx0)))
    console.print("  y0  = " + ", ".join(f"{n}={v:.6g}" for n, v in zip(lm.outputs, lm.y0)))
    ratios = [e[m != 0] / np.abs(m[m != 0]) for e, m in
              ((lm.errors.A, lm.A), (lm.errors.B, lm.B), (lm.errors.C, lm.C), (lm.errors.D, lm.D))]
    worst = max((float(r.max()) for r in ratios if r.size), default=0.0)
    console.print(f"  estimated relative error of the non-zero entries: ≤ {worst:.1e}")
    for w in lm.warnings:
        console.print(f"[yellow]warning:[/yellow] {escape(w)}")


@contextmanager
def run_progress(console: Console) -> Iterator[tuple[Callable[[Any], None], Callable[[str, int, int], None]]]:
    """A rich progress bar for ``linobs run``: points/s, ETA and failure counts."""
    columns = (TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(),
               TextColumn("{task.fields[rate]}"), TimeRemainingColumn(),
               TextColumn("{task.fields[problems]}"))
    with Progress(*columns, console=console, transient=False) as bar:
        task: dict[str, Any] = {}

        def on_stage(stage: str, total: int, done: int) -> None:
            task["id"] = bar.add_task(stage, total=total, completed=done, rate="", problems="")

        def on_progress(state: Any) -> None:
            bad = {k: v for k, v in state.counts.items() if k != "ok" and v}
            problems = ", ".join(f"{v} {k.replace('_', ' ')}" for k, v in bad.items())
            bar.update(task["id"], completed=state.done, rate=f"{state.rate:.0f} points/s",
                       problems=problems)

        yield on_progress, on_stage


def print_run_summary(console: Console, summary: Any, run_dir: Any) -> None:
    table = Table(title="run summary", title_justify="left", show_edge=False)
    for col in ("stage", "points", "ok", "not conv.", "failed", "crashed", "evals/point", "s"):
        table.add_column(col, justify="left" if col == "stage" else "right",
                         no_wrap=col == "stage")
    shown = {"observability-boundary": "  boundary", "observability-empirical": "  nonlinear check"}
    for name, s in summary.stages.items():
        per_point = s.evaluations / s.points if s.points else 0.0
        table.add_row(shown.get(name, name), str(s.points), str(s.ok), str(s.not_converged), str(s.failed),
                      str(s.crashed), f"{per_point:.1f}", f"{s.seconds:.1f}")
    console.print(table)
    if summary.observable is not None:
        console.print(
            f"  observability: {summary.observable} observable, {summary.weak} weak, "
            f"{summary.unobservable_detectable} unobservable but detectable, "
            f"{summary.unobservable} unobservable; {summary.boundary_points} refined boundary "
            f"points; nonlinear check at {summary.empirical_checked} points, "
            f"{summary.empirical_disagreements} disagreeing with the linear verdict")
        for line in summary.regions or []:
            console.print(f"  - {escape(line)}")
    if summary.design_ok is not None:
        console.print(f"  design: {summary.design_ok} nodes designed, {summary.design_refused} "
                      f"refused; {summary.continuity_flags} neighboring gain jumps flagged")
    if summary.validation_frozen_passed is not None:
        worst = summary.validation_worst_decay_reserve
        console.print(f"  frozen-point validation: {summary.validation_frozen_passed} passed, "
                      f"{summary.validation_frozen_failed} failed; smallest decay reserve "
                      f"{'n/a' if worst is None else f'{worst:.3g}'}")
    if summary.validation_rms:
        rms = ", ".join(f"{k} {v:.3g}" if v is not None else f"{k} diverged"
                        for k, v in summary.validation_rms.items())
        console.print(f"  nonlinear validation, RMS error of the schedule: {rms}")
        for line in summary.comparison or []:
            console.print(f"  - {escape(line)}")
    if summary.export_usable is not None:
        failed = summary.export_failed or 0
        console.print(f"  export: {summary.export_usable} nodes usable"
                      + (f", {failed} failed validation and marked unusable (--allow-failed)"
                         if failed else "") + "; verify with `linobs verify "
                      f"{escape(summary.files.get('schedule_table', 'TABLE.json'))} "
                      f"{escape(summary.fmu)}`")
    for note in summary.notes:
        console.print(f"  note: {escape(note)}")
    console.print(f"  wrote {escape(str(run_dir))}/summary.json and run.sqlite")
    for role, path in summary.files.items():
        console.print(f"  {role.replace('_', ' ')}: {escape(path)}")
    console.print(f"[dim]Caution: {escape(summary.caution)}[/dim]")
