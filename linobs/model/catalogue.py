"""The typed catalogue of an FMU's variables, by role, and its capabilities.

Built from fmpy's parsed ``modelDescription.xml``.  Roles follow the FMI
standard: continuous states (with the derivative that belongs to each),
inputs, outputs, parameters (``fixed`` or ``tunable``), and locals.
"""

from __future__ import annotations

import difflib
import math
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field

from linobs.errors import UnknownVariableError

Role = Literal["state", "derivative", "input", "output", "parameter", "local", "other"]

_REAL_TYPES = {"Real", "Float64", "Float32"}


class Variable(BaseModel):
    """One model variable as declared in the model description."""

    model_config = ConfigDict(frozen=True)

    name: str
    value_reference: int
    role: Role
    type: str = Field(description="FMI type name (Real, Float64, Integer, Boolean, ...)")
    causality: str | None = None
    variability: str | None = None
    description: str | None = None
    unit: str | None = None
    nominal: float = 1.0
    min: float | None = None
    max: float | None = None
    start: float | None = None
    derivative_of: str | None = Field(
        default=None, description="for a derivative: the name of its state")
    derivative: str | None = Field(
        default=None, description="for a state: the name of its derivative variable")

    @property
    def is_real(self) -> bool:
        return self.type in _REAL_TYPES

    @property
    def tunable(self) -> bool:
        return self.variability == "tunable"

    def check_bounds(self, value: float) -> str | None:
        """Return a description of the violated bound, or None when within min/max."""
        if self.min is not None and value < self.min:
            return f"{self.name}={value:g} is below its declared min {self.min:g}"
        if self.max is not None and value > self.max:
            return f"{self.name}={value:g} is above its declared max {self.max:g}"
        return None

    def describe(self) -> str:
        unit = f" [{self.unit}]" if self.unit else ""
        rng = ""
        if self.min is not None or self.max is not None:
            lo = "-inf" if self.min is None else f"{self.min:g}"
            hi = "inf" if self.max is None else f"{self.max:g}"
            rng = f" in [{lo}, {hi}]"
        start = "" if self.start is None else f", start {self.start:g}"
        return f"{self.name}{unit}{rng}{start}"


class Capabilities(BaseModel):
    """What the FMU can do, as it declares in its model description."""

    model_config = ConfigDict(frozen=True)

    fmi_version: str
    model_exchange: bool
    co_simulation: bool
    directional_derivatives: bool
    get_set_state: bool
    event_indicators: int
    continuous_states: int
    needs_execution_tool: bool = False


def _float(text: object) -> float | None:
    if text is None or text == "":
        return None
    if isinstance(text, bool):
        return float(text)
    try:
        value = float(text)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        lowered = str(text).strip().lower()
        if lowered in ("true", "false"):
            return 1.0 if lowered == "true" else 0.0
        return None
    return value


def _attr(var: object, name: str) -> object:
    """A variable attribute, falling back to its declared type (FMI 2 SimpleType)."""
    value = getattr(var, name, None)
    if value is None:
        declared = getattr(var, "declaredType", None)
        if declared is not None:
            value = getattr(declared, name, None)
    return value


class Catalogue(BaseModel):
    """Variables by role, in model-structure order."""

    model_config = ConfigDict(frozen=True)

    states: tuple[Variable, ...]
    derivatives: tuple[Variable, ...]
    inputs: tuple[Variable, ...]
    outputs: tuple[Variable, ...]
    parameters: tuple[Variable, ...]
    locals: tuple[Variable, ...] = ()
    event_indicators: tuple[Variable, ...] = ()

    # ------------------------------------------------------------------ lookup
    @property
    def by_name(self) -> dict[str, Variable]:
        cache = self.__dict__.get("_by_name")
        if cache is None:
            cache = {}
            for group in (self.locals, self.parameters, self.outputs, self.inputs,
                          self.derivatives, self.states):
                for v in group:
                    cache[v.name] = v
            self.__dict__["_by_name"] = cache
        return cache

    def names(self, role: str) -> list[str]:
        return [v.name for v in getattr(self, role)]

    def get(self, name: str) -> Variable:
        """The variable called ``name``; a clear error with the closest names otherwise."""
        try:
            return self.by_name[name]
        except KeyError:
            raise UnknownVariableError(unknown_name_message(name, self.by_name)) from None

    def index(self, role: str, name: str) -> int:
        group = getattr(self, role)
        for i, v in enumerate(group):
            if v.name == name:
                return i
        var = self.get(name)  # raises with suggestions when the name is unknown
        raise UnknownVariableError(
            f"{name!r} is a {var.role}, not one of the model's {role}: {', '.join(self.names(role)) or 'none'}")

    # ----------------------------------------------------------------- builder
    @classmethod
    def from_model_description(cls, md: object) -> "Catalogue":
        """Build the catalogue from an fmpy ``ModelDescription``."""
        variables = list(getattr(md, "modelVariables", []))
        derivative_unknowns = list(getattr(md, "derivatives", []))
        output_unknowns = list(getattr(md, "outputs", []))

        state_of: dict[int, object] = {}  # id(derivative var) -> state var
        state_order: list[object] = []
        deriv_order: list[object] = []
        for unk in derivative_unknowns:
            dvar = unk.variable
            svar = getattr(dvar, "derivative", None)
            if svar is None:
                continue
            state_of[id(dvar)] = svar
            state_order.append(svar)
            deriv_order.append(dvar)
        if not deriv_order:  # no ModelStructure: fall back to derivative= links
            for dvar in variables:
                svar = getattr(dvar, "derivative", None)
                if svar is not None and getattr(dvar, "variability", None) == "continuous":
                    state_of[id(dvar)] = svar
                    state_order.append(svar)
                    deriv_order.append(dvar)
        state_ids = {id(s) for s in state_order}
        deriv_of_state = {id(s): d for s, d in zip(state_order, deriv_order)}

        output_order = [u.variable for u in output_unknowns] or [
            v for v in variables if getattr(v, "causality", None) == "output"]
        output_ids = {id(v) for v in output_order}

        def make(var: object, role: Role) -> Variable:
            nominal = _float(_attr(var, "nominal"))
            if nominal is None or nominal == 0.0 or not math.isfinite(nominal):
                nominal = 1.0
            unit = _attr(var, "unit")
            derivative_of = None
            derivative = None
            if id(var) in state_of:
                derivative_of = getattr(state_of[id(var)], "name", None)
            if id(var) in deriv_of_state:
                derivative = getattr(deriv_of_state[id(var)], "name", None)
            return Variable(
                name=var.name,
                value_reference=int(var.valueReference),
                role=role,
                type=str(getattr(var, "type", "Real")),
                causality=getattr(var, "causality", None),
                variability=getattr(var, "variability", None),
                description=getattr(var, "description", None),
                unit=None if unit is None else str(unit),
                nominal=abs(nominal),
                min=_float(_attr(var, "min")),
                max=_float(_attr(var, "max")),
                start=_float(getattr(var, "start", None)),
                derivative_of=derivative_of,
                derivative=derivative,
            )

        states = tuple(make(v, "state") for v in state_order)
        derivatives = tuple(make(v, "derivative") for v in deriv_order)
        outputs = tuple(make(v, "output") for v in output_order)
        inputs = []
        parameters = []
        locals_ = []
        deriv_ids = {id(v) for v in deriv_order}
        for v in variables:
            if id(v) in state_ids or id(v) in deriv_ids or id(v) in output_ids:
                continue
            if getattr(v, "alias", None) is not None:
                continue
            causality = getattr(v, "causality", None)
            if causality == "input":
                inputs.append(make(v, "input"))
            elif causality in ("parameter", "structuralParameter"):
                parameters.append(make(v, "parameter"))
            elif causality in ("local", "calculatedParameter"):
                locals_.append(make(v, "local"))
        by_vr = {(v.valueReference, getattr(v, "type", None)): v for v in variables}
        indicators = []
        for unk in getattr(md, "eventIndicators", []) or []:
            var = unk.variable
            if var is not None:
                indicators.append(make(by_vr.get((var.valueReference, var.type), var), "other"))
        return cls(states=states, derivatives=derivatives, inputs=tuple(inputs),
                   outputs=outputs, parameters=tuple(parameters), locals=tuple(locals_),
                   event_indicators=tuple(indicators))


def unknown_name_message(name: str, known: dict[str, Variable] | list[str]) -> str:
    """One-line message for an unknown variable name, suggesting the closest names."""
    names = list(known)
    close = difflib.get_close_matches(name, names, n=3, cutoff=0.5)
    if not close:
        lowered = {n.lower(): n for n in names}
        close = [lowered[n] for n in difflib.get_close_matches(name.lower(), list(lowered), n=3, cutoff=0.4)]
    hint = f"; did you mean {', '.join(repr(c) for c in close)}?" if close else \
        "; run `linobs describe MODEL.fmu` to list the variables"
    return f"the model has no variable named {name!r}{hint}"
