"""Operating points: a mapping from variable names to values, resolved against a model.

States and inputs not named take their start values; parameters not named
keep the model's current values.  Values outside a variable's declared
min/max are an error unless explicitly allowed.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import TYPE_CHECKING

import numpy as np
from pydantic import BaseModel, ConfigDict

from linobs.errors import OutOfBoundsError, UsageError

if TYPE_CHECKING:  # pragma: no cover
    from linobs.model.instance import Model


class OperatingPoint(BaseModel):
    """A fully resolved operating point: every state, input and parameter has a value."""

    model_config = ConfigDict(frozen=True)

    states: dict[str, float]
    inputs: dict[str, float]
    parameters: dict[str, float]

    def x(self) -> np.ndarray:
        return np.array(list(self.states.values()), dtype=float)

    def u(self) -> np.ndarray:
        return np.array(list(self.inputs.values()), dtype=float)

    def as_mapping(self) -> dict[str, float]:
        return {**self.parameters, **self.states, **self.inputs}


def parse_assignment(text: str) -> tuple[str, float]:
    """Parse ``NAME=VALUE`` (as given on the command line)."""
    name, sep, value = text.partition("=")
    name = name.strip()
    if not sep or not name:
        raise UsageError(f"expected NAME=VALUE, got {text!r}")
    try:
        number = float(value)
    except ValueError:
        raise UsageError(f"{name}: {value.strip()!r} is not a number") from None
    return name, number


def resolve_point(model: "Model", values: Mapping[str, float] | None = None, *,
                  allow_outside_bounds: bool = False) -> OperatingPoint:
    """Resolve a name -> value mapping into a full :class:`OperatingPoint`.

    Raises
    ------
    UnknownVariableError
        A name the model does not declare (with the closest names).
    UsageError
        A name that is not a state, input or parameter (e.g. an output), or a
        non-finite value.
    OutOfBoundsError
        A value outside the declared min/max, unless ``allow_outside_bounds``.
    """
    values = dict(values or {})
    cat = model.catalogue
    states = {v.name: float(x) for v, x in zip(cat.states, model.x_start)}
    inputs = {v.name: float(x) for v, x in zip(cat.inputs, model.u_start)}
    parameters = model.parameters
    for name, value in values.items():
        var = cat.get(name)
        value = float(value)
        if not math.isfinite(value):
            raise UsageError(f"{name}={value}: operating-point values must be finite")
        if var.role == "state":
            states[name] = value
        elif var.role == "input":
            inputs[name] = value
        elif var.role == "parameter":
            parameters[name] = value
        else:
            raise UsageError(
                f"{name!r} is {_article(var.role)}; an operating point sets states, inputs and parameters "
                f"(outputs and derivatives are results; targets for them belong to trim)")
        if not allow_outside_bounds:
            problem = var.check_bounds(value)
            if problem:
                raise OutOfBoundsError(f"{problem}; choose a value inside the declared range or "
                                       f"allow values outside it explicitly")
    return OperatingPoint(states=states, inputs=inputs, parameters=parameters)


def _article(word: str) -> str:
    return ("an " if word[:1] in "aeiou" else "a ") + word
