"""Checking a study: pydantic errors as field paths, and every name and value against the FMU.

Two halves of :func:`linobs.study.load_study`: :func:`validation_problems`
turns pydantic's ``ValidationError`` into lines ``<field path>: <what is
wrong>``; :func:`check_against_model` checks a structurally valid
configuration against the FMU's variable catalogue (names, roles, declared
ranges, conflicts, a square trim) and resolves the trim.

A later section (observability, estimator, ...) adds its check function to
``CHECKS``.
"""

from __future__ import annotations

import difflib
import json
import math
import re
import typing
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

from pydantic import BaseModel, ConfigDict, Field, ValidationError

from linobs.model.catalogue import Catalogue, Variable, unknown_name_message
from linobs.operating.grid import PointsTable, read_points_csv

if TYPE_CHECKING:  # pragma: no cover
    from linobs.study import StudyConfig

__all__ = ["CHECKS", "ResolvedTrim", "check_against_model", "field_path", "validation_problems"]

#: A tensor grid larger than this is refused (each point costs a trim and a linearization).
MAX_POINTS = 1_000_000


def _g(value: float) -> str:
    return f"{value:.10g}"


# ============================================================== pydantic errors -> field paths
_UNION_TAG = re.compile(r"^(list|dict|tuple|set|frozenset|literal|function-[a-z]+|union|"
                        r"tagged-union|nullable)\[")
_PLAIN = re.compile(r"^[A-Za-z_][A-Za-z0-9_\-]*$")


def field_path(loc: Sequence[str | int]) -> str:
    """``('grid', 'soc', 'values', 3)`` -> ``grid.soc.values[3]`` (odd names quoted)."""
    out = ""
    for seg in loc:
        if isinstance(seg, int):
            out += f"[{seg}]"
        else:
            out += ("." if out else "") + (seg if _PLAIN.match(seg) else json.dumps(seg))
    return out


def _section_at(root: type[BaseModel], loc: Sequence[str | int]) -> type[BaseModel] | None:
    """The section model a location points into (for listing its allowed keys).

    A section whose other keys are themselves sections (``[grid.NAME]``) names
    their model in the class attribute ``extra_section``.
    """
    cls: type[BaseModel] = root
    for seg in loc:
        field = cls.model_fields.get(str(seg))
        if field is None:
            extra = getattr(cls, "extra_section", None)
            if extra is None:
                return None
            cls = extra
            continue
        found = [a for a in (field.annotation, *typing.get_args(field.annotation))
                 if isinstance(a, type) and issubclass(a, BaseModel)]
        if not found:
            return None
        cls = found[0]
    return cls


def _show(value: Any) -> str:
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def _one_error(root: type[BaseModel], err: dict[str, Any], loc: list[str | int]) -> str:
    kind, ctx = err["type"], err.get("ctx") or {}
    if kind == "study_value":
        return f"{field_path([*loc, *ctx.get('at', ())])}: {ctx['message']}"
    path = field_path(loc) or "(top level)"
    if kind == "missing":
        if loc == ["model"]:
            return ("model: the [model] table is missing; add one with fmu = \"plant.fmu\" or "
                    "bundled = \"<name>\"")
        return f"{path}: required, but missing"
    if kind == "extra_forbidden":
        section = _section_at(root, loc[:-1])
        allowed = list(section.model_fields) if section is not None else []
        close = difflib.get_close_matches(str(loc[-1]), allowed, n=1, cutoff=0.6)
        hint = f"; did you mean {close[0]!r}?" if close else ""
        where = "top-level key" if len(loc) == 1 else "key"
        return f"{path}: unknown {where}{hint} (allowed here: {', '.join(allowed)})"
    if kind in ("model_type", "dict_type", "model_attributes_type"):
        what = "a table"
        if len(loc) == 2 and loc[0] == "grid":
            what = "a table (an axis: values, linspace or logspace)"
        return f"{path}: must be {what}, got {_show(err.get('input'))}"
    msg = str(err["msg"]).removeprefix("Value error, ")
    msg = msg.replace("Input should be", "must be").replace("String should", "must")
    msg = msg[:1].lower() + msg[1:]
    return f"{path}: {msg}, got {_show(err.get('input'))}"


def validation_problems(exc: ValidationError, root: type[BaseModel]) -> list[str]:
    """One line per problem of ``exc`` (raised validating ``root``), as ``<field path>: <what>``.

    Where every alternative of a union failed the alternatives are merged into
    one line; where one alternative got further, its errors are reported.
    """
    out: list[str] = []
    unions: dict[tuple[str | int, ...], list[tuple[dict[str, Any], list[str | int]]]] = {}
    for err in exc.errors(include_url=False):
        loc = list(err["loc"])
        tag = next((k for k, s in enumerate(loc) if isinstance(s, str) and _UNION_TAG.match(s)), None)
        if tag is None:
            out.append(_one_error(root, err, loc))
            continue
        key = tuple(loc[:tag])
        if key not in unions:
            unions[key] = []
            out.append(f"\0{len(unions) - 1}")  # placeholder keeps the order
        unions[key].append((err, loc[:tag] + loc[tag + 1:]))
    merged = []
    for key, errs in unions.items():
        deep = [(e, loc) for e, loc in errs if len(loc) > len(key)]
        if deep:  # one alternative got further: the user meant that one
            merged.append("\n".join(_one_error(root, e, loc) for e, loc in deep))
        else:
            alternatives = " or ".join(str(e["msg"]).replace("Input should be", "").strip()
                                       for e, _ in errs)
            merged.append(f"{field_path(key)}: must be {alternatives}, "
                          f"got {_show(errs[0][0].get('input'))}")
    return [merged[int(x[1:])] if x.startswith("\0") else x for x in out]


# ===================================================================== checks against the FMU
class ResolvedTrim(BaseModel):
    """The trim as it will be solved: explicit names, defaults resolved."""

    model_config = ConfigDict(frozen=True)

    enabled: bool
    free_states: tuple[str, ...] = ()
    free_inputs: tuple[str, ...] = ()
    pinned_states: tuple[str, ...] = ()
    zero_derivatives: tuple[str, ...] = Field((), description="states whose derivative must vanish")
    derivative_names: tuple[str, ...] = Field((), description="the derivative variables of those")
    output_targets: dict[str, float] = Field(default_factory=dict)

    @property
    def unknowns(self) -> tuple[str, ...]:
        return self.free_states + self.free_inputs

    @property
    def equations(self) -> tuple[str, ...]:
        return self.derivative_names + tuple(self.output_targets)


_ROLE_PLURAL = {"state": "states", "input": "inputs", "output": "outputs", "parameter": "parameters"}


def _article(word: str) -> str:
    return ("an " if word[:1] in "aeiou" else "a ") + word


def _words(items: Sequence[str]) -> str:
    """``a``, ``a and b``, ``a, b and c``."""
    return " and ".join(items) if len(items) < 3 else f"{', '.join(items[:-1])} and {items[-1]}"


class _Checker:
    """Collects problems while checking a validated config against a catalogue."""

    def __init__(self, config: StudyConfig, catalogue: Catalogue, base: Path) -> None:
        self.config, self.catalogue, self.base = config, catalogue, base
        self.problems: list[str] = []
        self.allow_outside = config.linearize.allow_outside_bounds
        self.table: PointsTable | None = None
        self.grid_names: list[str] = list(config.grid.axes)  # or the table's columns
        self.trim = ResolvedTrim(enabled=config.trim.enabled)

    def add(self, path: str, message: str) -> None:
        self.problems.append(f"{path}: {message}")

    def variable(self, path: str, name: str, roles: tuple[str, ...], purpose: str) -> Variable | None:
        """The variable, or None after reporting an unknown name or a wrong role."""
        var = self.catalogue.by_name.get(name)
        candidates = [v.name for r in roles for v in getattr(self.catalogue, _ROLE_PLURAL[r])]
        if var is None:
            self.add(path, unknown_name_message(name, candidates or list(self.catalogue.by_name)))
            return None
        if var.role not in roles:
            self.add(path, f"{name!r} is {_article(var.role)}; {purpose} (the model's "
                           f"{_words([_ROLE_PLURAL[r] for r in roles])}: "
                           f"{', '.join(candidates) or 'none'})")
            return None
        return var

    def names(self, path: str, names: Sequence[str], roles: tuple[str, ...], purpose: str) -> list[str]:
        """The valid, distinct names of a list field."""
        good: list[str] = []
        for k, name in enumerate(names):
            if name in names[:k]:
                self.add(f"{path}[{k}]", f"{name!r} is listed twice")
            elif self.variable(f"{path}[{k}]", name, roles, purpose) is not None:
                good.append(name)
        return good

    def value(self, path: str, var: Variable, value: float, suffix: str = "") -> None:
        """Report a value outside the declared range, or a fraction for a whole-number variable."""
        lo, hi = var.min, var.max
        problem = None
        if not var.is_real and value != round(value):
            problem = f"must be a whole number ({var.name} is {_article(var.type)}), got {_g(value)}"
        elif self.allow_outside:
            pass
        elif lo is not None and hi is not None and not lo <= value <= hi:
            problem = f"must be within [{_g(lo)}, {_g(hi)}] (declared range of {var.name}), got {_g(value)}"
        elif lo is not None and value < lo:
            problem = f"must be at least {_g(lo)} (declared min of {var.name}), got {_g(value)}"
        elif hi is not None and value > hi:
            problem = f"must be at most {_g(hi)} (declared max of {var.name}), got {_g(value)}"
        if problem:
            self.add(path, problem + suffix)


_SETTABLE = ("state", "input", "parameter")
_GRID_PURPOSE = ("a grid variable is a state (held fixed), an input or a parameter; outputs are "
                 "results (aim one at a value with trim.output_targets)")


def _check_model(ck: _Checker) -> None:
    for name, value in ck.config.model.parameters.items():
        path = f"model.parameters.{field_path([name])}"
        var = ck.variable(path, name, ("parameter",), "model.parameters sets parameters only "
                                                      "(put states and inputs on the grid)")
        if var is not None:
            ck.value(path, var, value)
        if name in ck.config.grid.fixed or name in ck.grid_names:
            ck.add(path, f"{name!r} is also set by the grid; set it in one place")


def _check_outputs(ck: _Checker) -> None:
    outputs = ck.config.outputs
    if outputs is not None:
        if not outputs:
            ck.add("outputs", "must name at least one measured output (omit it to measure all)")
        ck.names("outputs", outputs, ("output",), "list the measured outputs here")


def _check_grid(ck: _Checker) -> None:
    grid = ck.config.grid
    seen: dict[tuple[int, str], str] = {}

    def settable(path: str, name: str) -> Variable | None:
        var = ck.variable(path, name, _SETTABLE, _GRID_PURPOSE)
        if var is not None:
            other = seen.setdefault((var.value_reference, var.type), name)
            if other != name:
                ck.add(path, f"{name!r} and {other!r} are the same model variable (value reference "
                             f"{var.value_reference}); keep one")
        return var

    size = 1
    for name, spec in grid.axes.items():
        path = f"grid.{field_path([name])}"
        var = settable(path, name)
        spacing = spec.linspace if spec.linspace is not None else spec.logspace
        size *= len(spec.values) if spec.values is not None else spacing.num  # type: ignore[union-attr]
        if var is None:
            continue
        if spec.values is not None:
            for k, value in enumerate(spec.values):
                ck.value(f"{path}.values[{k}]", var, value)
        else:  # monotone spacing: the ends are the extremes (numpy sets both exactly)
            assert spacing is not None
            way = "linspace" if spec.linspace is not None else "logspace"
            ck.value(f"{path}.{way}.start", var, spacing.start)
            ck.value(f"{path}.{way}.stop", var, spacing.stop if spacing.num > 1 else spacing.start)
    if size > MAX_POINTS:
        ck.add("grid", f"the axes make {size} points, more than {MAX_POINTS}; use fewer values or "
                       f"split the study")
    if grid.points_csv is not None:
        _check_table(ck, settable)
    for name, value in grid.fixed.items():
        path = f"grid.fixed.{field_path([name])}"
        var = settable(path, name)
        if name in ck.grid_names:
            ck.add(path, f"{name!r} is also a grid variable; a variable is either on the grid or "
                         f"fixed, not both")
        elif var is not None:
            ck.value(path, var, value)


def _check_table(ck: _Checker, settable: Callable[[str, str], Variable | None]) -> None:
    rel = ck.config.grid.points_csv
    assert rel is not None
    file = Path(rel).expanduser()
    file = file if file.is_absolute() else ck.base / file
    try:
        table = read_points_csv(file)
    except FileNotFoundError:
        ck.add("grid.points_csv", f"no such file: {file} (a relative path is taken from the study "
                                  f"file's folder)")
        return
    except (OSError, UnicodeDecodeError) as exc:
        ck.add("grid.points_csv", f"cannot read {file}: {exc}")
        return
    ck.table, ck.grid_names = table, list(table.names)
    for p in table.problems:
        path = "grid.points_csv" + ("" if p.row is None else f"[{p.row}]") + \
            ("" if p.column is None else f".{field_path([p.column])}")
        ck.add(path, f"{p.message} ({file.name} line {p.line})")
    bad_columns = {p.column for p in table.problems if p.row is None}
    variables = {name: settable(f"grid.points_csv.{field_path([name])}", name)
                 for name in table.names if name and name not in bad_columns}
    first_of: dict[tuple[float, ...], int] = {}
    for row, values in enumerate(table.points):
        for name, value in zip(table.names, values):
            var = variables.get(name)
            if var is not None and math.isfinite(value):
                ck.value(f"grid.points_csv[{row}].{field_path([name])}", var, float(value),
                         f" ({file.name} line {table.lines[row]})")
        key = tuple(float(v) for v in values)
        if all(math.isfinite(v) for v in key):
            if key in first_of:
                ck.add(f"grid.points_csv[{row}]", f"repeats the point of row {first_of[key]} "
                                                  f"({file.name} line {table.lines[row]})")
            first_of.setdefault(key, row)


def _check_trim(ck: _Checker) -> None:
    spec, cat = ck.config.trim, ck.catalogue
    before = len(ck.problems)
    held = {n: "grid axis" for n in ck.grid_names} | {n: "grid.fixed" for n in ck.config.grid.fixed}
    pinned = ck.names("trim.pinned_states", spec.pinned_states, ("state",),
                      "trim.pinned_states lists states")
    if spec.free_states == "all":
        free = [v.name for v in cat.states if v.name not in pinned and v.name not in held]
    else:
        free = ck.names("trim.free_states", spec.free_states, ("state",),
                        "trim.free_states lists states")
        for k, name in enumerate(spec.free_states):
            if name in held:
                ck.add(f"trim.free_states[{k}]", f"{name!r} is held fixed by the {held[name]}; a "
                       f"state cannot be both fixed and solved for; remove it from one of them")
            elif name in pinned:
                ck.add(f"trim.free_states[{k}]", f"{name!r} is also in trim.pinned_states; a pinned "
                       f"state keeps its value, so it cannot be free")
    inputs = ck.names("trim.free_inputs", spec.free_inputs, ("input",), "trim.free_inputs lists inputs")
    for k, name in enumerate(spec.free_inputs):
        if name in held:
            ck.add(f"trim.free_inputs[{k}]", f"{name!r} is held fixed by the {held[name]}; an input "
                   f"cannot be both fixed and solved for; remove it from one of them")
    if spec.zero_derivatives is None:
        zero = list(free)
    else:
        zero = ck.names("trim.zero_derivatives", spec.zero_derivatives, ("state",),
                        "trim.zero_derivatives lists the states whose derivative must vanish")
    targets: dict[str, float] = {}
    for name, value in spec.output_targets.items():
        path = f"trim.output_targets.{field_path([name])}"
        if ck.variable(path, name, ("output",), "trim.output_targets aims outputs at values"):
            if math.isfinite(value):
                targets[name] = value
            else:
                ck.add(path, f"must be a finite number, got {value}")
    der = {v.name: v.derivative or f"der({v.name})" for v in cat.states}
    ck.trim = ResolvedTrim(
        enabled=spec.enabled, free_states=tuple(free), free_inputs=tuple(inputs),
        pinned_states=tuple(pinned), zero_derivatives=tuple(zero),
        derivative_names=tuple(der[n] for n in zero), output_targets=targets)
    unknowns, equations = ck.trim.unknowns, ck.trim.equations
    if spec.enabled and len(ck.problems) == before and len(unknowns) != len(equations):
        hint = ("add equations (trim.zero_derivatives, trim.output_targets) or free fewer variables"
                if len(unknowns) > len(equations) else
                "free more states or inputs (trim.free_states, trim.free_inputs) or drop equations")
        ck.add("trim", f"not square: {len(unknowns)} unknowns (free states: "
                       f"{', '.join(free) or 'none'}; free inputs: {', '.join(inputs) or 'none'}) "
                       f"but {len(equations)} equations (zero derivatives: "
                       f"{', '.join(ck.trim.derivative_names) or 'none'}; output targets: "
                       f"{', '.join(targets) or 'none'}); {hint}")


def _check_observability(ck: _Checker) -> None:
    obs = ck.config.observability
    if obs.outputs is not None:
        if not obs.outputs:
            ck.add("observability.outputs", "must name at least one output (omit it to use the "
                                            "study's measured outputs)")
        ck.names("observability.outputs", obs.outputs, ("output",),
                 "the observability analysis uses measured outputs")
    ck.names("observability.candidates", obs.candidates, ("state",),
             "candidates are states that could be measured (unmeasured outputs are candidates "
             "anyway)")
    axes = list(ck.config.grid.axes)
    if obs.map_axes is not None:
        if len(obs.map_axes) != 2 or len(set(obs.map_axes)) != 2:
            ck.add("observability.map_axes", f"must name two different grid axes, got "
                                             f"{obs.map_axes}")
        for k, name in enumerate(obs.map_axes):
            if name not in axes:
                ck.add(f"observability.map_axes[{k}]", unknown_name_message(name, axes)
                       .replace("the model has no variable", "the grid has no axis"))
    for name, value in obs.map_fixed.items():
        path = f"observability.map_fixed.{field_path([name])}"
        if name not in axes:
            ck.add(path, unknown_name_message(name, axes).replace("the model has no variable",
                                                                  "the grid has no axis"))
        elif obs.map_axes is not None and name in obs.map_axes:
            ck.add(path, f"{name!r} is one of the map's axes; fix only the other axes")


def _check_estimator(ck: _Checker) -> None:
    est = ck.config.estimator
    if est is None:
        return
    outputs = ck.config.outputs
    measured = est.outputs if est.outputs is not None else (
        outputs if outputs is not None else [v.name for v in ck.catalogue.outputs])
    if est.outputs is not None:
        ck.names("estimator.outputs", est.outputs, ("output",), "the estimator uses measured outputs")
    for name in est.process_noise:
        ck.variable(f"estimator.process_noise.{field_path([name])}", name, ("state",),
                    "process noise is given per state (noise on its derivative)")
    for name in est.input_noise:
        ck.variable(f"estimator.input_noise.{field_path([name])}", name, ("input",),
                    "input noise is given per input")
    for name in est.measurement_noise:
        ck.variable(f"estimator.measurement_noise.{field_path([name])}", name, ("output",),
                    "measurement noise is given per measured output")
    for table, values in (("process_noise", est.process_noise), ("input_noise", est.input_noise)):
        for name, value in values.items():
            if not value >= 0:
                ck.add(f"estimator.{table}.{field_path([name])}", f"must be at least 0, got {_g(value)}")
    for name, value in est.measurement_noise.items():
        if not value > 0:
            ck.add(f"estimator.measurement_noise.{field_path([name])}",
                   f"must be a positive standard deviation, got {_g(value)}")
    if est.kind == "kalman":
        missing = [n for n in measured if n not in est.measurement_noise]
        if missing:
            ck.add("estimator.measurement_noise", f"a Kalman design needs the noise standard "
                                                  f"deviation of every measured output; missing: "
                                                  f"{', '.join(missing)}")


def _check_validation(ck: _Checker) -> None:
    val = ck.config.validation
    for table, values in (("initial_state", val.initial_state), ("initial_error", val.initial_error)):
        for name in values:
            ck.variable(f"validation.{table}.{field_path([name])}", name, ("state",),
                        f"validation.{table} is given per state")
    for k, segment in enumerate(val.scenario):
        for name, value in segment.inputs.items():
            path = f"validation.scenario[{k}].inputs.{field_path([name])}"
            var = ck.variable(path, name, ("input",), "a scenario sets inputs")
            if var is not None:
                ck.value(path, var, value)


#: One function per section (the grid first: the others need its variables); later sections
#: append theirs.
CHECKS: tuple[Callable[[_Checker], None], ...] = (_check_grid, _check_model, _check_outputs,
                                                   _check_trim, _check_observability,
                                                   _check_estimator, _check_validation)


def check_against_model(config: StudyConfig, catalogue: Catalogue, base: Path
                        ) -> tuple[list[str], ResolvedTrim, PointsTable | None]:
    """Check a structurally valid study against the model's catalogue.

    Parameters
    ----------
    config
        The validated configuration.
    catalogue
        The FMU's variables.
    base
        The study file's folder (relative paths start there).

    Returns
    -------
    problems, trim, table
        Every problem as ``<field path>: <what is wrong>`` (empty: the study is valid), the
        resolved trim, and the parsed points table (None for a tensor grid).
    """
    checker = _Checker(config, catalogue, base)
    for check in CHECKS:
        check(checker)
    return checker.problems, checker.trim, checker.table


