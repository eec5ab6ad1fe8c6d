"""The exported schedule table: a versioned, checksummed JSON document.

One file holds everything an embedded team needs to run the scheduled
estimator and everything an auditor needs to re-check it: the grid axes
(names, roles, units, values), per node the gain, the local model and the
operating point (the :class:`~linobs.estimator.schedule.ScheduleData`), the
sample time, the estimator kind and design settings, the identity of the FMU
it was designed from (model name, GUID or instantiation token, SHA-256 of the
file), the validation summary per node, the tool version, the creation time,
the safety caution, and a checksum of the content.

Usable nodes
------------
A node is exported as usable only when it has a design and passed
validation: its own error dynamics meet the target, and no frozen-point check
that uses it (a non-zero interpolation weight) failed.  Other nodes stay in
the table, marked (status ``refused`` in the schedule, with the reason), so
the table's arrays are complete and every value that depends on them is
unusable when it runs.  :func:`build_table` refuses to produce a table in
which a designed node failed validation unless ``allow_failed`` is given;
then the caution in the file says so.

Checksum
--------
SHA-256 of the canonical JSON of every field except ``checksum`` (keys
sorted, no spaces, UTF-8): :func:`content_checksum`.  Any edit of a value
changes it; :func:`read_table` rejects a table whose checksum does not match.
It checks the content as stored in the file, so a table written with older
key names keeps its checksum when it is read.

Schema versions
---------------
Version 2 renamed the frozen-point *margin* to the **decay reserve** (how
much faster the error decays than required): ``node_margin`` →
``node_decay_reserve``, ``worst_frozen_margin`` →
``worst_frozen_decay_reserve`` (per node) and ``worst_margin`` →
``worst_decay_reserve`` (``validation``).  Version 1 tables are still read,
under their own key names and checksum; new tables are written as version 2.

References
----------
NIST (2015). FIPS PUB 180-4, Secure Hash Standard (SHA-256).
"""

from __future__ import annotations

import hashlib
import json
import os
from datetime import datetime, timezone
from pathlib import Path
from typing import Any, Literal

from pydantic import AliasChoices, BaseModel, ConfigDict, Field, ValidationError

from linobs.atomic import atomic_write_text
from linobs.errors import LinobsError, UsageError

__all__ = ["FORMAT", "READABLE_SCHEMA_VERSIONS", "SCHEMA_VERSION", "FmuIdentity", "NodeValidation",
           "ScheduleTable", "TableAxis", "TableError", "content_checksum", "fmu_identity",
           "read_table", "seal_table", "table_schema", "write_table"]

FORMAT = "linobs-schedule-table"
SCHEMA_VERSION = 2
READABLE_SCHEMA_VERSIONS = (1, 2)
"""Versions :func:`read_table` accepts (module notes: what changed)."""


class TableError(LinobsError):
    """A schedule table that cannot be read or does not check out."""


class FmuIdentity(BaseModel):
    """The FMU a table was designed from."""

    model_config = ConfigDict(extra="forbid")

    model_name: str
    guid: str = Field(description="FMI 2.0 guid or FMI 3.0 instantiationToken")
    fmi_version: str
    sha256: str = Field(description="SHA-256 of the .fmu file")
    file_name: str


class TableAxis(BaseModel):
    """One scheduling variable."""

    model_config = ConfigDict(extra="forbid")

    name: str
    role: Literal["state", "input", "parameter"]
    unit: str = ""
    values: list[float] = Field(default_factory=list, description="tensor grids: the node values")


class NodeValidation(BaseModel):
    """The validation of one node."""

    model_config = ConfigDict(extra="forbid")

    node: int
    point: dict[str, float]
    designed: bool
    passed: bool = Field(description="designed, its own error dynamics decay as required, and no "
                                     "failing frozen point uses it")
    usable: bool = Field(description="exported as usable")
    node_decay_reserve: float | None = Field(
        None, validation_alias=AliasChoices("node_decay_reserve", "node_margin"),
        description="decay reserve of the node's own error dynamics (≥ 0: passes)")
    frozen_checked: int = Field(0, description="frozen points that use this node")
    frozen_failed: int = 0
    worst_frozen_decay_reserve: float | None = Field(
        None, validation_alias=AliasChoices("worst_frozen_decay_reserve", "worst_frozen_margin"),
        description="smallest decay reserve of the frozen points that use this node")
    message: str = ""


class TableValidation(BaseModel):
    """The validation summary of the whole table."""

    model_config = ConfigDict(extra="forbid")

    criterion: str
    target: float
    frozen_passed: int
    frozen_failed: int
    worst_decay_reserve: float | None = Field(
        validation_alias=AliasChoices("worst_decay_reserve", "worst_margin"),
        description="smallest decay reserve of the frozen points")
    nonlinear_rms: dict[str, float] = Field(default_factory=dict)
    fixed_gain_rms: dict[str, float] = Field(default_factory=dict)
    nodes: list[NodeValidation]


class ScheduleTable(BaseModel):
    """``RUN_DIR/export/schedule_table.json`` (schema: ``linobs table-schema``)."""

    model_config = ConfigDict(extra="forbid")

    format: Literal["linobs-schedule-table"] = FORMAT
    schema_version: int = Field(SCHEMA_VERSION, description="incremented on any incompatible change")
    caution: str
    created: str = Field(description="UTC creation time, ISO 8601")
    linobs_version: str
    study: str
    study_hash: str
    fmu: FmuIdentity
    kind: Literal["kalman", "luenberger"]
    domain: Literal["discrete", "continuous"]
    form: Literal["predictor", "filter"]
    sample_time: float = Field(description="[s]")
    states: list[str]
    inputs: list[str]
    outputs: list[str] = Field(description="the measured outputs")
    units: dict[str, str] = Field(default_factory=dict, description="variable -> unit")
    axes: list[TableAxis]
    design_settings: dict[str, Any] = Field(description="the study's [estimator] table, resolved")
    validation_settings: dict[str, Any] = Field(description="the study's [validation] table, resolved")
    parameters: dict[str, float] = Field(default_factory=dict, description="FMU parameter values "
                                         "of the local models (parameter axes: per node)")
    linearize_method: str = Field("auto", description="how the local models were computed")
    validation: TableValidation
    allow_failed: bool = Field(False, description="written although designed nodes failed validation")
    schedule: Any = Field(description="linobs.estimator.schedule.ScheduleData")
    checksum: str = Field("", description="SHA-256 of the canonical JSON of all other fields")

    def schedule_data(self) -> Any:
        from linobs.estimator.schedule import ScheduleData

        return ScheduleData.model_validate(self.schedule)


def _canonical(data: Any) -> bytes:
    return json.dumps(data, sort_keys=True, separators=(",", ":"), ensure_ascii=False,
                      allow_nan=False).encode("utf-8")


def content_checksum(table: ScheduleTable) -> str:
    """SHA-256 (hex) of the canonical JSON of the table without its checksum."""
    return hashlib.sha256(_canonical(table.model_dump(mode="json", exclude={"checksum"}))).hexdigest()


def table_schema() -> dict[str, Any]:
    """The JSON Schema of the table (the schedule field described by ScheduleData's schema)."""
    from linobs.estimator.schedule import ScheduleData

    schema = ScheduleTable.model_json_schema()
    sub = ScheduleData.model_json_schema()
    defs = schema.setdefault("$defs", {})
    defs.update(sub.pop("$defs", {}))
    defs["ScheduleData"] = sub
    schema["properties"]["schedule"] = {"$ref": "#/$defs/ScheduleData",
                                        "description": "the gain schedule"}
    schema["$id"] = f"linobs:{FORMAT}:{SCHEMA_VERSION}"
    return schema


def fmu_identity(path: str | os.PathLike[str]) -> FmuIdentity:
    """Model name, GUID / instantiation token, FMI version and SHA-256 of an FMU file."""
    import fmpy

    p = Path(path)
    try:
        md = fmpy.read_model_description(str(p))
    except Exception as exc:  # fmpy raises plain exceptions
        raise TableError(f"cannot read the FMU {p}: {str(exc).splitlines()[0] if str(exc) else exc}"
                         ) from None
    token = getattr(md, "guid", None) or getattr(md, "instantiationToken", None) or ""
    digest = hashlib.sha256(p.read_bytes()).hexdigest()
    return FmuIdentity(model_name=str(md.modelName), guid=str(token),
                       fmi_version=str(md.fmiVersion), sha256=digest, file_name=p.name)


def now_utc() -> str:
    return datetime.now(timezone.utc).replace(microsecond=0).isoformat()


def seal_table(table: ScheduleTable) -> ScheduleTable:
    """A copy of the table carrying the checksum of its content.

    The copy is written with this version's key names, so it says
    :data:`SCHEMA_VERSION` (also when the table was read from an older file).
    """
    sealed = table.model_copy(update={"checksum": "", "schema_version": SCHEMA_VERSION})
    return sealed.model_copy(update={"checksum": content_checksum(sealed)})


def write_table(table: ScheduleTable, path: str | os.PathLike[str]) -> Path:
    """Write a sealed table (:func:`seal_table`) atomically; returns the path."""
    if table.checksum != content_checksum(table):
        raise TableError("the table is not sealed (its checksum does not match its content); "
                         "seal it with seal_table before writing")
    return atomic_write_text(path, table_json(table))


def table_json(table: ScheduleTable) -> str:
    """The table's JSON text (deterministic for a given table)."""
    return json.dumps(table.model_dump(mode="json"), indent=1, ensure_ascii=False,
                      allow_nan=False) + "\n"


def read_table(path: str | os.PathLike[str], *, check: bool = True) -> ScheduleTable:
    """Read and check a schedule table.

    Raises
    ------
    TableError
        The file is missing, not JSON (e.g. truncated), of another format or
        schema version, has unknown or missing fields, or (``check``) its
        checksum does not match its content.
    """
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except OSError as exc:
        raise TableError(f"cannot read the table {p}: {exc.strerror or exc}") from None
    try:
        raw = json.loads(text)
    except json.JSONDecodeError as exc:
        raise TableError(f"{p} is not valid JSON (line {exc.lineno}, column {exc.colno}: "
                         f"{exc.msg}); the file may be truncated — export it again") from None
    if not isinstance(raw, dict) or raw.get("format") != FORMAT:
        raise TableError(f"{p} is not a linobs schedule table (its 'format' is not {FORMAT!r})")
    version = raw.get("schema_version")
    if type(version) is not int or version not in READABLE_SCHEMA_VERSIONS:
        shown = " and ".join(str(v) for v in READABLE_SCHEMA_VERSIONS)
        raise TableError(f"{p} has schema_version {version!r}; this linobs reads versions "
                         f"{shown} — export the table again with this version")
    try:
        table = ScheduleTable.model_validate(raw)
        table.schedule_data()
    except ValidationError as exc:
        err = exc.errors()[0]
        where = ".".join(str(x) for x in err["loc"]) or "(top level)"
        what = "unknown field" if err["type"] == "extra_forbidden" else err["msg"].lower()
        raise TableError(f"{p}: {where}: {what}") from None
    if check:
        # over the content as stored: a table with older key names keeps its checksum
        want = hashlib.sha256(_canonical({k: v for k, v in raw.items() if k != "checksum"})
                              ).hexdigest()
        if table.checksum != want:
            raise TableError(f"{p}: the checksum does not match the content (stored "
                             f"{table.checksum[:12] or 'none'}…, computed {want[:12]}…): the table "
                             "was changed after export; do not use it, export it again")
    return table
