"""The study file: one TOML file that says which FMU to sweep, where, and how.

:func:`load_study` reads the file, validates its structure (pydantic,
unknown keys refused everywhere), then checks every name and value against
the FMU's model description (read without instantiating the model) and
returns a :class:`Study`: the typed configuration, the FMU (path and
SHA-256), the variable catalogue, the resolved trim and the operating
:class:`~linobs.operating.grid.Grid`.

Every problem is reported at once, one per line, as ``<field path>: <what
is wrong>``, e.g. ``grid.soc.values[3]: must be within [0, 1] (declared range
of soc), got 1.2``.  See ``docs/study-file.md`` for every field.

Later sections (observability, estimator, validation, export) are added as
further optional section models on :class:`StudyConfig` plus a check
function in :data:`linobs.study_checks.CHECKS`.
"""

from __future__ import annotations

import hashlib
import json
import os
import tomllib
from pathlib import Path
from typing import Any, ClassVar, Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationError, model_validator
from pydantic_core import PydanticCustomError

from linobs.errors import LinobsError, ModelError, StudyError, UnsupportedFMUError
from linobs.model.bundled import BUNDLED_PLANTS, bundled_fmu
from linobs.model.catalogue import Catalogue
from linobs.model.loader import file_sha256, read_description
from linobs.operating.grid import Axis, Grid, geometric_values, linspace_values
from linobs.estimator.settings import EstimatorSettings, ValidationSettings
from linobs.observability.report import ObservabilitySettings
from linobs.operating.trim_spec import TrimSpec
from linobs.study_checks import (
    ResolvedTrim,
    check_against_model,
    field_path,
    validation_problems,
)

__all__ = ["AxisSpec", "GridSection", "LinearizeSection", "ModelSection", "ResolvedTrim",
           "RunSection", "Study", "StudyConfig", "canonical_json", "field_path", "load_study",
           "study_hash", "study_schema"]

#: At most this many problems are listed; the rest are counted.
MAX_PROBLEMS = 50


# =========================================================================== configuration
class _Section(BaseModel):
    model_config = ConfigDict(extra="forbid", strict=True, allow_inf_nan=False)


def _at(at: tuple[str | int, ...], message: str) -> PydanticCustomError:
    """A validation error located ``at`` (relative to the model raising it)."""
    return PydanticCustomError("study_value", "{message}", {"at": at, "message": message})


def _g(value: float) -> str:
    return f"{value:.10g}"


class ModelSection(_Section):
    """``[model]``: the FMU and the parameters held for the whole study."""

    fmu: str | None = Field(None, description="path of the .fmu file (relative to the study "
                                              "file's folder)", examples=["plant.fmu"])
    bundled: Literal[BUNDLED_PLANTS] | None = Field(  # type: ignore[valid-type]
        None, description="a plant that ships with linobs, built on first use")
    parameters: dict[str, float] = Field(default_factory=dict, description=(
        "parameter name -> value, applied at every point"), examples=[{"Q_Ah": 18.5}])

    @model_validator(mode="after")
    def _one_source(self) -> ModelSection:
        if (self.fmu is None) == (self.bundled is None):
            found = "both are given" if self.fmu is not None else "neither is given"
            raise _at((), f"give exactly one of fmu = \"plant.fmu\" or bundled = \"<name>\" "
                          f"({found}; bundled plants: {', '.join(BUNDLED_PLANTS)})")
        return self


class _Spacing(_Section):
    start: float = Field(description="first value")
    stop: float = Field(description="last value")
    num: int = Field(ge=1, description="number of values (both ends included)")

    @model_validator(mode="after")
    def _increasing(self) -> _Spacing:
        start, stop = self.start, self.stop
        if self.num > 1 and not stop > start:
            raise _at(("stop",), f"must be greater than start ({_g(start)}) when num > 1, "
                                 f"got {_g(stop)}")
        return self


class LinspaceSpec(_Spacing):
    """Evenly spaced values from ``start`` to ``stop``."""


class LogspaceSpec(_Spacing):
    """Values from ``start`` to ``stop`` (both > 0) with a constant ratio."""

    start: float = Field(gt=0, description="first value (> 0)")
    stop: float = Field(gt=0, description="last value (> 0)")


class AxisSpec(_Section):
    """``[grid.NAME]``: the values of one grid axis (exactly one of the three ways)."""

    values: list[float] | None = Field(None, description="explicit values, strictly increasing",
                                       examples=[[0.1, 0.5, 0.9]])
    linspace: LinspaceSpec | None = Field(None, description="evenly spaced values")
    logspace: LogspaceSpec | None = Field(None, description="geometrically spaced values")

    @model_validator(mode="after")
    def _one_way(self) -> AxisSpec:
        given = [k for k in ("values", "linspace", "logspace") if getattr(self, k) is not None]
        if len(given) != 1:
            found = " and ".join(given) if given else "none"
            raise _at((), f"give exactly one of values, linspace or logspace (found {found})")
        if self.values is not None:
            if not self.values:
                raise _at(("values",), "must hold at least one value")
            for k in range(1, len(self.values)):
                if not self.values[k] > self.values[k - 1]:
                    raise _at(("values", k), f"values must be strictly increasing; got "
                                             f"{_g(self.values[k])} after {_g(self.values[k - 1])}")
        return self

    def resolve(self) -> list[float]:
        """The axis values."""
        if self.values is not None:
            return list(self.values)
        if self.linspace is not None:
            s = self.linspace
            return linspace_values(s.start, s.stop, s.num).tolist()
        s2 = self.logspace
        assert s2 is not None
        return geometric_values(s2.start, s2.stop, s2.num).tolist()


class GridSection(_Section):
    """``[grid]``: axes (one sub-table per variable) or a points table, plus fixed values."""

    model_config = ConfigDict(extra="allow", json_schema_extra={
        "description": "every other key is an axis: a [grid.NAME] table named after a state, "
                       "input or parameter; the grid is the tensor product of the axes in the "
                       "order written"})
    __pydantic_extra__: dict[str, AxisSpec] = Field(init=False)
    extra_section: ClassVar[type[BaseModel]] = AxisSpec  # for error messages: what other keys are

    points_csv: str | None = Field(None, description=(
        "CSV file of scattered points (relative to the study file's folder); header row = "
        "variable names; not together with axes"))
    fixed: dict[str, float] = Field(default_factory=dict, description=(
        "state, input or parameter name -> value applied at every point"))

    @property
    def axes(self) -> dict[str, AxisSpec]:
        """The axes in the order written."""
        return dict(self.__pydantic_extra__ or {})

    @model_validator(mode="after")
    def _axes_or_table(self) -> GridSection:
        if self.points_csv is not None and self.axes:
            raise _at((), f"give either axes or points_csv, not both (found points_csv and the "
                          f"axes {', '.join(self.axes)})")
        return self


class LinearizeSection(_Section):
    """``[linearize]``: how the local models are computed."""

    method: Literal["auto", "forward", "central", "exact"] = Field("auto", description=(
        "auto: exact directional derivatives when the FMU offers them, else central differences"))
    allow_outside_bounds: bool = Field(False, description=(
        "accept grid values outside the variables' declared min/max"))


class RunSection(_Section):
    """``[run]``: how the work is cut up."""

    chunk_size: int | None = Field(None, ge=1, description=(
        "points per unit of work handed to a worker; omitted: chosen automatically"))


class ExportSection(_Section):
    """What the ``export`` stage writes into ``RUN_DIR/export``."""

    allow_failed: bool = Field(False, description=(
        "write the tables although designed nodes failed validation (they are marked unusable "
        "and the caution says so)"))
    csv: bool = Field(True, description="also write schedule_table.csv and its units sidecar")
    c_code: bool = Field(True, description="also write the C99 header and source")
    estimator_fmu: bool = Field(True, description=(
        "also build the estimator as an FMI 2.0 co-simulation FMU (needs a C compiler)"))
    c_prefix: str = Field("linobs_schedule", pattern=r"^[A-Za-z_][A-Za-z0-9_]{0,40}$",
                          description="prefix of the C file names and identifiers")


class StudyConfig(_Section):
    """A whole study file."""

    name: str = Field(min_length=1, description="a short name for the study")
    description: str | None = Field(None, description="free text")
    model: ModelSection
    outputs: list[str] | None = Field(None, description=(
        "measured outputs (a subset of the FMU's outputs); omitted: all outputs"))
    grid: GridSection = Field(default_factory=GridSection)
    trim: TrimSpec = Field(default_factory=TrimSpec)
    linearize: LinearizeSection = Field(default_factory=LinearizeSection)
    run: RunSection = Field(default_factory=RunSection)
    observability: ObservabilitySettings = Field(default_factory=ObservabilitySettings)
    estimator: EstimatorSettings | None = Field(
        None, description="the scheduled estimator to design; omitted: no design or validation")
    validation: ValidationSettings = Field(default_factory=ValidationSettings)
    export: ExportSection = Field(default_factory=ExportSection)


# ================================================================================ the study
class Study:
    """A validated study: configuration, FMU, catalogue, resolved trim and grid."""

    def __init__(self, config: StudyConfig, path: Path, fmu_path: Path, fmu_sha256: str,
                 catalogue: Catalogue, trim: ResolvedTrim, grid: Grid) -> None:
        self.config = config
        self.path = path
        self.fmu_path = fmu_path
        self.fmu_sha256 = fmu_sha256
        self.catalogue = catalogue
        self.trim = trim
        self.grid = grid

    def __repr__(self) -> str:
        return f"Study({self.config.name!r}, {self.fmu_path.name}, {self.grid!r})"

    @property
    def name(self) -> str:
        return self.config.name

    @property
    def parameters(self) -> dict[str, float]:
        """``[model] parameters``: held for the whole study."""
        return dict(self.config.model.parameters)

    @property
    def fixed(self) -> dict[str, float]:
        """``grid.fixed``: applied at every point."""
        return dict(self.config.grid.fixed)

    @property
    def outputs(self) -> tuple[str, ...]:
        """The measured outputs (all the FMU's outputs unless the study names some)."""
        if self.config.outputs is None:
            return tuple(self.catalogue.names("outputs"))
        return tuple(self.config.outputs)

    @property
    def trim_unknowns(self) -> tuple[str, ...]:
        return self.trim.unknowns

    @property
    def trim_equations(self) -> tuple[str, ...]:
        return self.trim.equations

    @property
    def slow_axes(self) -> tuple[str, ...]:
        """Grid variables that are ``fixed`` parameters: changing one re-initializes the model."""
        by_name = self.catalogue.by_name
        return tuple(n for n in self.grid.names
                     if by_name[n].role == "parameter" and by_name[n].variability == "fixed")

    def point_values(self, i: int) -> dict[str, float]:
        """The values set at grid point ``i``: the grid's variables and ``grid.fixed``."""
        return {**self.grid.point(i), **self.config.grid.fixed}

    def continuation_order(self) -> list[int]:
        """The grid's continuation order with the fixed parameters varying slowest."""
        return self.grid.continuation_order(slow=self.slow_axes)


def _resolve_fmu(config: StudyConfig, base: Path, cache: str | os.PathLike[str] | None) -> Path:
    if config.model.bundled is not None:
        return bundled_fmu(config.model.bundled, cache=cache)
    assert config.model.fmu is not None
    path = Path(config.model.fmu).expanduser()
    path = path if path.is_absolute() else base / path
    if not path.is_file():
        what = "is a folder, not an .fmu file" if path.is_dir() else "no such file"
        raise StudyError(f"model.fmu: {what}: {path} (a relative path is taken from the study "
                         f"file's folder {base})")
    return path


def _read_catalogue(config: StudyConfig, fmu: Path) -> Catalogue:
    key = "model.bundled" if config.model.bundled is not None else "model.fmu"
    try:
        md, _, _ = read_description(fmu)
    except LinobsError as exc:  # keep the class (a model problem exits 1), name the field
        try:
            raise type(exc)(f"{key}: {exc}") from None
        except TypeError:
            raise ModelError(f"{key}: {exc}") from None
    if md.modelExchange is None:
        raise UnsupportedFMUError(f"{key}: {fmu.name} offers no model-exchange interface; linobs "
                                  f"needs model exchange to evaluate the model at arbitrary points")
    return Catalogue.from_model_description(md)


def _raise_problems(problems: list[str]) -> None:
    if len(problems) > MAX_PROBLEMS:
        problems = problems[:MAX_PROBLEMS] + [f"... and {len(problems) - MAX_PROBLEMS} more problems"]
    exc = StudyError("\n".join(problems))
    exc.problems = problems  # type: ignore[attr-defined]
    raise exc


def load_study(path: str | os.PathLike[str], *,
               bundled_cache: str | os.PathLike[str] | None = None) -> Study:
    """Read, validate and resolve a study file.

    Parameters
    ----------
    path
        The ``.toml`` study file.
    bundled_cache
        Cache folder for ``bundled = ...`` plants (default: the linobs cache).

    Returns
    -------
    Study

    Raises
    ------
    StudyError
        The file is missing or not TOML, or the study is malformed; the message lists every
        problem, one per line, as ``<field path>: <what is wrong>``.
    ModelError
        The FMU exists but cannot be read (the message starts with ``model.fmu:``).
    """
    path = Path(path).expanduser().resolve()
    if not path.is_file():
        raise StudyError(f"{path}: " + ("is a folder; pass the study's .toml file" if path.is_dir()
                                        else "no such study file"))
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except UnicodeDecodeError as exc:
        raise StudyError(f"{path.name}: not UTF-8 text ({exc.reason} at byte {exc.start})") from None
    except tomllib.TOMLDecodeError as exc:
        raise StudyError(f"{path.name}: not valid TOML: {exc}") from None
    try:
        config = StudyConfig.model_validate(data, strict=True)
    except ValidationError as exc:
        _raise_problems(validation_problems(exc, StudyConfig))
    fmu = _resolve_fmu(config, path.parent, bundled_cache)
    catalogue = _read_catalogue(config, fmu)
    problems, trim, table = check_against_model(config, catalogue, path.parent)
    if problems:
        _raise_problems(problems)
    if table is not None:
        grid = Grid.scattered(table.names, table.points)
    else:
        grid = Grid.tensor([Axis(n, spec.resolve()) for n, spec in config.grid.axes.items()])
    return Study(config, path, fmu, file_sha256(fmu), catalogue, trim, grid)


def _sorted_keys(value: Any) -> Any:
    if isinstance(value, dict):
        return {k: _sorted_keys(value[k]) for k in sorted(value)}
    if isinstance(value, list):
        return [_sorted_keys(v) for v in value]
    return value


RENAMED_SETTINGS: dict[tuple[str, str], str] = {
    ("observability", "margin_normalization"): "margin_normalisation",
}
"""Settings renamed after linobs 0.1.0: (table, new name) -> the name they had.

A study file may still use the earlier name.  The study hash is taken over the
settings under their earlier names, so that renaming a setting does not change
the identity of a study (a run folder from before the rename still resumes)."""


def canonical_json(config: StudyConfig, *, earlier_names: bool = False) -> str:
    """The configuration as canonical JSON, itself a valid study configuration.

    Every setting appears with its default filled in and keys are sorted, except the grid
    axes, which keep their written order (it fixes the numbering of the points).
    ``earlier_names``: renamed settings under the names they had
    (:data:`RENAMED_SETTINGS`), as the study hash takes them.
    """
    dumped = config.model_dump(mode="json")
    if earlier_names:
        for (section, name), earlier in RENAMED_SETTINGS.items():
            table = dumped.get(section)
            if isinstance(table, dict) and name in table:
                table[earlier] = table.pop(name)
    data = _sorted_keys(dumped)
    grid = config.grid.model_dump(mode="json")
    axes = {name: _sorted_keys(grid.pop(name)) for name in config.grid.axes}
    data["grid"] = {**_sorted_keys(grid), **axes}
    return json.dumps(data, separators=(",", ":"), ensure_ascii=False)


def study_hash(study: Study) -> str:
    """SHA-256 identifying a study: its canonical configuration, the FMU's SHA-256 and the grid.

    Identical study files (and FMU, and points table) give identical hashes; any change to a
    setting, the FMU or the points gives a different one.  Comments and layout do not count,
    nor does the spelling of a renamed setting (:data:`RENAMED_SETTINGS`).
    """
    h = hashlib.sha256(canonical_json(study.config, earlier_names=True).encode("utf-8"))
    h.update(b"\0fmu\0" + study.fmu_sha256.encode())
    h.update(b"\0grid\0" + study.grid.fingerprint().encode())
    return h.hexdigest()


def study_schema() -> dict[str, Any]:
    """The JSON Schema (draft 2020-12) of a study file."""
    schema = StudyConfig.model_json_schema()
    return {"$schema": "https://json-schema.org/draft/2020-12/schema", "title": "linobs study file",
            **{k: v for k, v in schema.items() if k != "title"}}
