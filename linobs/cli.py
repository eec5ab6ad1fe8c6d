"""The ``linobs`` command line.

Errors a user can cause print one line and exit 1 (model or data) or 2
(usage); ``--debug`` shows the traceback instead.  Every command that writes
a file or a folder takes it as ``-o`` / ``--out``.
"""

from __future__ import annotations

import json
import sys
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Annotated, Optional

import typer
from rich.console import Console
from rich.markup import escape

from linobs.errors import LinobsError, UsageError

app = typer.Typer(add_completion=False, no_args_is_help=True, pretty_exceptions_enable=False,
                  help="Operating-envelope linearization, observability and scheduled estimators "
                       "for FMI model-exchange units.")
console = Console()
err_console = Console(stderr=True)
_state = {"debug": False}


@app.callback()
def _main(debug: Annotated[bool, typer.Option("--debug", help="Show tracebacks on errors.")] = False
          ) -> None:
    _state["debug"] = debug


@contextmanager
def _errors() -> Iterator[None]:
    try:
        yield
    except LinobsError as exc:
        if _state["debug"]:
            raise
        err_console.print(f"[red]error:[/red] {escape(str(exc))}", highlight=False, soft_wrap=True)
        raise typer.Exit(exc.exit_code) from None


def _echo_json(data: object) -> None:
    sys.stdout.write(json.dumps(data, indent=2) + "\n")


@app.command()
def describe(
    model_path: Annotated[Path, typer.Argument(metavar="MODEL.fmu", help="The FMU file.")],
    as_json: Annotated[bool, typer.Option("--json", help="Machine-readable output.")] = False,
) -> None:
    """Show the FMU's variables by role and its capabilities."""
    from linobs.model.loader import load_model
    from linobs.report.console import print_description

    with _errors():
        with load_model(model_path) as model:
            if as_json:
                cat = model.catalogue
                _echo_json({
                    "model_name": model.model_name, "guid": model.guid, "sha256": model.sha256,
                    "capabilities": model.capabilities.model_dump(),
                    **{role: [v.model_dump() for v in getattr(cat, role)]
                       for role in ("states", "derivatives", "inputs", "outputs", "parameters")},
                })
            else:
                print_description(console, model)


@app.command()
def linearize(
    model_path: Annotated[Path, typer.Argument(metavar="MODEL.fmu", help="The FMU file.")],
    at: Annotated[Optional[list[str]], typer.Option(
        "--at", metavar="NAME=VALUE",
        help="Operating-point value of a state, input or parameter (repeatable).")] = None,
    method: Annotated[str, typer.Option(
        "--method", help="auto | forward | central | exact")] = "auto",
    allow_outside_bounds: Annotated[bool, typer.Option(
        "--allow-outside-bounds", help="Accept values outside the declared min/max.")] = False,
    as_json: Annotated[bool, typer.Option("--json", help="Machine-readable output.")] = False,
) -> None:
    """Linearize the FMU at one operating point: A, B, C, D with error estimates."""
    from linobs.model.loader import load_model
    from linobs.operating.point import parse_assignment
    from linobs.report.console import print_linear_model

    with _errors():
        point = dict(parse_assignment(a) for a in (at or []))
        with load_model(model_path) as model:
            lm = model.linearize(point, method=method, allow_outside_bounds=allow_outside_bounds)
            if as_json:
                _echo_json(lm.cli_dict())
            else:
                print_linear_model(console, lm, [v.name for v in model.catalogue.derivatives])


@app.command("build-fmu")
def build_fmu_command(
    source: Annotated[Path, typer.Argument(
        metavar="SRC_DIR", help="Folder with modelDescription.xml and sources/*.c, "
                                "or a source FMU (.fmu with sources/).")],
    out: Annotated[Path, typer.Option("-o", "--out", metavar="OUT.fmu",
                                      help="The FMU to write.")],
) -> None:
    """Compile a C-source FMU with the system C compiler into a standard .fmu."""
    from linobs.model.build import build_fmu, build_from_source_fmu

    with _errors():
        if source.is_file() and source.suffix.lower() == ".fmu":
            path = build_from_source_fmu(source, out)
        elif source.is_dir():
            path = build_fmu(source, out)
        else:
            raise UsageError(f"{source}: expected a folder with modelDescription.xml and sources/, "
                             f"or a source .fmu")
        console.print(f"wrote {path}")


@app.command("study-schema")
def study_schema_command() -> None:
    """Print the JSON Schema of the study file."""
    from linobs.study import study_schema

    _echo_json(study_schema())


@app.command()
def run(
    study_path: Annotated[Path, typer.Argument(metavar="STUDY.toml", help="The study file.")],
    out: Annotated[Path, typer.Option("-o", "--out", metavar="RUN_DIR",
                                      help="Run folder (created).")],
    workers: Annotated[Optional[int], typer.Option(
        "--workers", min=1, help="Local worker processes (default: one per core).")] = None,
    dask: Annotated[Optional[str], typer.Option(
        "--dask", metavar="ADDRESS", help="Send the work to this Dask scheduler.")] = None,
    dask_local: Annotated[Optional[int], typer.Option(
        "--dask-local", metavar="N", min=1, help="Start a local Dask cluster of N workers.")] = None,
    resume: Annotated[bool, typer.Option(
        "--resume", help="Continue the run in RUN_DIR; compute only what is missing.")] = False,
    until: Annotated[Optional[str], typer.Option(
        "--until", metavar="STAGE",
        help="Last stage to run: sweep, observability, design, validate or export (default: all).")] = None,
    allow_failed: Annotated[bool, typer.Option(
        "--allow-failed", help="Export although designed nodes failed validation (they are "
                               "marked unusable and every file says so).")] = False,
) -> None:
    """Run a study into RUN_DIR: sweep the grid (trim + linearize), map observability, design
    and validate the scheduled estimator, export the tables and the estimator FMU."""
    from linobs.pipeline import run_study
    from linobs.report.console import print_run_summary, run_progress

    with _errors():
        if dask and dask_local:
            raise UsageError("give either --dask ADDRESS or --dask-local N, not both")
        with run_progress(console) as (progress, on_stage):
            summary = run_study(study_path, out, workers=workers, dask=dask, dask_local=dask_local,
                                resume=resume, until=until, progress=progress, on_stage=on_stage,
                                allow_failed=True if allow_failed else None)
        print_run_summary(console, summary, out)
        if summary.export_refused:
            err_console.print(f"[red]error:[/red] export refused: {escape(summary.export_refused)}",
                              highlight=False, soft_wrap=True)
            raise typer.Exit(1)


@app.command("table-schema")
def table_schema_command() -> None:
    """Print the JSON Schema of the exported schedule table."""
    from linobs.export.table import table_schema

    _echo_json(table_schema())


@app.command()
def verify(
    table: Annotated[Path, typer.Argument(metavar="TABLE.json", help="The exported schedule table.")],
    fmu: Annotated[Path, typer.Argument(metavar="MODEL.fmu", help="The plant FMU to check against.")],
    sample: Annotated[int, typer.Option("--sample", min=1, help="Nodes to re-linearize.")] = 8,
    seed: Annotated[int, typer.Option("--seed", help="Seed of the node sample.")] = 0,
    as_json: Annotated[bool, typer.Option("--json", help="Print the report as JSON.")] = False,
) -> None:
    """Check a schedule table against an FMU: identity, checksum, local models, frozen points."""
    from linobs.export.verify import verify_table

    with _errors():
        report = verify_table(table, fmu, sample=sample, seed=seed)
    if as_json:
        _echo_json(report.model_dump(mode="json"))
    else:
        for line in report.checks:
            console.print(f"ok: {escape(line)}")
        for line in report.reasons:
            console.print(f"[red]FAILED[/red]: {escape(line)}")
        console.print("verified" if report.ok else "[red]not verified[/red]")
    if not report.ok:
        raise typer.Exit(1)


@app.command("export-fmu")
def export_fmu_command(
    table: Annotated[Path, typer.Argument(metavar="TABLE.json", help="The exported schedule table.")],
    out: Annotated[Path, typer.Option("-o", "--out", metavar="OUT.fmu",
                                      help="The estimator FMU to write.")],
) -> None:
    """Build the scheduled estimator of a schedule table as an FMI 2.0 co-simulation FMU."""
    from linobs.export.estimator_fmu import build_estimator_fmu
    from linobs.export.table import read_table
    from linobs.estimator.schedule import GainSchedule

    with _errors():
        t = read_table(table)
        name = "".join(c if c.isalnum() else "_" for c in t.study) + "_estimator"
        note = (f"source FMU {t.fmu.model_name} (GUID {t.fmu.guid}, SHA-256 {t.fmu.sha256}); "
                f"schedule table checksum {t.checksum}")
        path = build_estimator_fmu(GainSchedule(t.schedule_data()), out, model_name=name,
                                   caution=t.caution, header_note=note)
    console.print(f"wrote {path}")


@app.command()
def demo(
    out: Annotated[Optional[Path], typer.Option(
        "-o", "--out", metavar="DIR",
        help="Folder for the demo's run (default: a folder in the cache).")] = None,
    workers: Annotated[Optional[int], typer.Option(
        "--workers", min=1, help="Local worker processes (default: one per core).")] = None,
) -> None:
    """Run the bundled battery-cell study end to end: observability map, Kalman schedule,
    validation against a fixed gain, export, report."""
    from linobs.demo import run_demo

    with _errors():
        run_demo(console, out, workers=workers)


def main() -> None:  # pragma: no cover - console entry point
    app()


if __name__ == "__main__":  # pragma: no cover
    main()
