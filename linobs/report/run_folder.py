"""Reading a finished run folder for the report: what is there, and what could not be read.

Everything is read from ``RUN_DIR`` itself (``summary.json``, the stage files,
the figures, the run store's identity); only the FMU's model description is
read from the file named in the summary, when it is still there, for the
model name, GUID / instantiation token, units and nominal values.  A file
that is missing is ``None`` (a study without an estimator stops after the
observability map; a refused export writes no table); a file that exists
but cannot be read is listed in :attr:`RunFolder.problems`, never fatal.
"""

from __future__ import annotations

import hashlib
import json
import sqlite3
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from pydantic import ValidationError

from linobs.errors import UsageError
from linobs.estimator.frozen import FrozenReport
from linobs.estimator.schedule import ScheduleData

if TYPE_CHECKING:  # pragma: no cover
    from linobs.pipeline import RunSummary

__all__ = ["FIGURES", "FORMER_FIGURES", "FmuInfo", "RunFolder", "read_run_folder"]

FIGURES = ("observability_margin", "observability_verdicts", "schedule_gains",
           "validation_decay_reserve", "validation_states", "validation_errors")
"""Figure stems the report embeds (``RUN_DIR/figures/<stem>.png``)."""

FORMER_FIGURES = {"validation_decay_reserve": ("validation_margin",)}
"""Earlier stems of renamed figures, looked for in run folders written before the rename."""


@dataclass
class FmuInfo:
    """Identity of the FMU a run was made from."""

    sha256: str
    path: str
    model_name: str | None = None
    guid: str | None = None
    fmi_version: str | None = None
    source: str = "summary"  # where name and GUID came from
    file_sha256: str | None = None  # of the file at ``path`` now, when it could be read
    units: dict[str, str] = field(default_factory=dict)
    nominals: dict[str, float] = field(default_factory=dict)
    descriptions: dict[str, str] = field(default_factory=dict)


@dataclass
class RunFolder:
    """The contents of a run folder (``None`` where a file is missing)."""

    root: Path
    summary: "RunSummary"
    study: dict[str, Any] = field(default_factory=dict)  # the study as recorded in the store
    created: str | None = None
    fmu: FmuInfo | None = None
    schedule: ScheduleData | None = None
    refused: list[dict[str, Any]] | None = None
    continuity: list[dict[str, Any]] | None = None
    frozen: FrozenReport | None = None
    nonlinear: dict[str, Any] | None = None
    table: dict[str, Any] | None = None
    regions: list[str] = field(default_factory=list)
    boundary: list[dict[str, Any]] | None = None
    problems: list[str] = field(default_factory=list)

    def figure(self, stem: str) -> Path | None:
        """``figures/<stem>.png`` (or the file of an earlier name of it) when it exists."""
        for name in (stem, *FORMER_FIGURES.get(stem, ())):
            path = self.root / "figures" / f"{name}.png"
            if path.is_file():
                return path
        return None

    def locate(self, path: str | Path) -> Path:
        """A file the summary names, found in this folder when the run folder was moved.

        The summary records absolute paths; when one is not inside this folder,
        ``<folder>/<its parent's name>/<its name>``, then ``<folder>/<its name>``, are tried
        (the run layout).
        """
        p = Path(path)
        if p.is_absolute() and not p.is_relative_to(self.root.resolve()):
            for moved in (self.root / p.parent.name / p.name, self.root / p.name):
                if moved.is_file():
                    return moved
        return p

    def relative(self, path: str | Path) -> str:
        """``path`` relative to the run folder when inside it, else as given."""
        p = Path(path)
        try:
            return str(p.resolve().relative_to(self.root.resolve()))
        except ValueError:
            return str(p)

    @property
    def study_name(self) -> str:
        name = self.study.get("name") or (self.table or {}).get("study")
        return str(name) if name else Path(self.summary.study).stem


def read_run_folder(run_dir: str | Path) -> RunFolder:
    """Read everything the report shows from ``run_dir``.

    Raises
    ------
    UsageError
        ``run_dir`` has no readable ``summary.json`` (not a finished run).
    """
    from linobs.pipeline import RunSummary  # here, so that the pipeline may import the report

    root = Path(run_dir)
    path = root / "summary.json"
    if not path.is_file():
        raise UsageError(f"{root} holds no summary.json; give the folder of a finished "
                         f"`linobs run`")
    try:
        summary = RunSummary.model_validate_json(path.read_text(encoding="utf-8"))
    except (ValidationError, ValueError, OSError) as exc:
        raise UsageError(f"{path} is not a readable run summary ({_first_line(exc)}); run the "
                         f"study again into a new folder") from None
    run = RunFolder(root=root, summary=summary)
    run.study, run.created = _store_identity(root, run.problems)
    schedule = _json(run, "design/schedule.json")
    if schedule is not None:
        try:
            run.schedule = ScheduleData.model_validate(schedule)
        except ValidationError as exc:
            run.problems.append(f"design/schedule.json: {_first_line(exc)}")
    frozen = _json(run, "validation/frozen.json")
    if frozen is not None:
        try:
            run.frozen = FrozenReport.model_validate(frozen)
        except ValidationError as exc:
            run.problems.append(f"validation/frozen.json: {_first_line(exc)}")
    run.refused = _json(run, "design/refused.json")
    run.continuity = _json(run, "design/continuity.json")
    run.nonlinear = _json(run, "validation/nonlinear.json")
    run.table = _json(run, "export/schedule_table.json")
    run.boundary = _json(run, "observability/boundary.json")
    regions = root / "observability" / "regions.txt"
    if regions.is_file():
        run.regions = [ln for ln in regions.read_text(encoding="utf-8").splitlines() if ln.strip()]
    else:
        run.regions = list(summary.regions or [])
    run.fmu = _fmu_info(run)
    return run


def _json(run: RunFolder, relative: str) -> Any:
    path = run.root / relative
    if not path.is_file():
        return None
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (ValueError, OSError) as exc:
        run.problems.append(f"{relative}: not readable ({_first_line(exc)})")
        return None


def _store_identity(root: Path, problems: list[str]) -> tuple[dict[str, Any], str | None]:
    """The study and creation time recorded in ``run.sqlite`` (opened read-only)."""
    path = root / "run.sqlite"
    if not path.is_file():
        return {}, None
    try:
        # immutable: no lock, no -wal/-shm files left behind (a finished run is checkpointed)
        db = sqlite3.connect(f"{path.resolve().as_uri()}?mode=ro&immutable=1", uri=True)
        try:
            meta = dict(db.execute("SELECT key, value FROM meta").fetchall())
        finally:
            db.close()
        return json.loads(meta.get("study") or "{}"), meta.get("created")
    except (sqlite3.Error, ValueError) as exc:
        problems.append(f"run.sqlite: the recorded study could not be read ({_first_line(exc)})")
        return {}, None


def _fmu_info(run: RunFolder) -> FmuInfo:
    s = run.summary
    info = FmuInfo(sha256=s.fmu_sha256, path=s.fmu)
    fmu = (run.table or {}).get("fmu")
    if isinstance(fmu, dict):
        info.model_name, info.guid = fmu.get("model_name"), fmu.get("guid")
        info.fmi_version, info.source = fmu.get("fmi_version"), "export table"
    path = Path(s.fmu)
    if not path.is_file():
        return info
    try:
        import fmpy

        from linobs.model.catalogue import Catalogue

        md = fmpy.read_model_description(str(path))
        digest = hashlib.sha256()
        with path.open("rb") as f:
            for block in iter(lambda: f.read(1 << 20), b""):
                digest.update(block)
        info.file_sha256 = digest.hexdigest()
        if info.model_name is None:
            info.model_name, info.guid = md.modelName, md.guid
            info.fmi_version, info.source = md.fmiVersion, "model description"
        cat = Catalogue.from_model_description(md)
        for v in (*cat.states, *cat.inputs, *cat.outputs, *cat.parameters):
            info.units[v.name] = v.unit or ""
            info.nominals[v.name] = v.nominal
            if v.description:
                info.descriptions[v.name] = v.description
    except Exception as exc:  # noqa: BLE001 — a damaged FMU must not stop the report
        run.problems.append(f"{path}: the model description could not be read "
                            f"({_first_line(exc)})")
    return info


def _first_line(exc: BaseException) -> str:
    text = str(exc).strip().splitlines()
    return text[0] if text else type(exc).__name__
