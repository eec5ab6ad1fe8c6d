"""The local linear model at an operating point.

    dx/dt ≈ dx0 + A (x − x0) + B (u − u0)
    y     ≈ y0  + C (x − x0) + D (u − u0)

with dx0 = f(x0, u0) (non-zero away from equilibrium, e.g. an integrating
state of charge under load) and y0 = g(x0, u0).
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

import numpy as np
from pydantic import BaseModel, ConfigDict, Field

from linobs.types import Matrix, Vector

if TYPE_CHECKING:  # typing only: linear must not import observability at run time
    from linobs.observability.report import ObservabilityReport, ObservabilitySettings


class JacobianErrors(BaseModel):
    """Estimated absolute error per entry of A, B, C, D (same shapes)."""

    model_config = ConfigDict(arbitrary_types_allowed=True)

    A: Matrix
    B: Matrix
    C: Matrix
    D: Matrix


class ModelIdentity(BaseModel):
    """Which FMU a result came from."""

    model_name: str
    guid: str
    sha256: str
    fmi_version: str


class LinearModel(BaseModel):
    """Local model (A, B, C, D) at an operating point, with how it was obtained.

    Attributes
    ----------
    A, B, C, D
        Jacobians; row = equation (state derivative or output), column = state or input.
    errors
        Estimated absolute error of each entry (exact zeros are structural or
        below the noise level).
    column_schemes
        The difference scheme actually used per column (states, then inputs):
        ``central``, ``forward``, ``backward``, ``one-sided+``/``one-sided-``
        (second-order one-sided), ``exact``, or ``structural-zero``.
    """

    model_config = ConfigDict(arbitrary_types_allowed=True)

    states: list[str]
    inputs: list[str]
    outputs: list[str]
    state_units: list[str | None]
    input_units: list[str | None]
    output_units: list[str | None]
    state_nominal: Vector
    input_nominal: Vector
    output_nominal: Vector
    A: Matrix
    B: Matrix
    C: Matrix
    D: Matrix
    x0: Vector
    u0: Vector
    y0: Vector
    dx0: Vector
    parameters: dict[str, float]
    method: str = Field(description="forward, central or exact (what was used)")
    requested_method: str
    column_schemes: list[str]
    steps: Vector = Field(description="step per column (states, then inputs); 0 for exact")
    errors: JacobianErrors
    evaluations: int = Field(description="FMU evaluations of (dx, y) spent")
    directional_evaluations: int = 0
    column_groups: int = Field(description="number of column groups (colors) perturbed")
    used_structure: bool
    refined_columns: list[str] = Field(
        default_factory=list, description="columns repeated with an error-balancing smaller step")
    warnings: list[str] = Field(default_factory=list)
    model: ModelIdentity

    @property
    def n_states(self) -> int:
        return len(self.states)

    def matrices(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        return self.A, self.B, self.C, self.D

    def jacobian(self) -> np.ndarray:
        """The stacked Jacobian [[A, B], [C, D]]."""
        return np.block([[self.A, self.B], [self.C, self.D]])

    def cli_dict(self) -> dict[str, Any]:
        """The keys of ``linobs linearize --json`` (plus extras)."""
        data = self.model_dump(mode="json")
        return data

    def observability(self, settings: ObservabilitySettings | None = None, *,
                      outputs: list[str] | None = None) -> ObservabilityReport:
        """Observability of this local model: an ``ObservabilityReport``.

        See :func:`linobs.observability.analysis.analyze`; ``settings`` is an
        ``ObservabilitySettings`` (default thresholds when None) and ``outputs``
        the measured outputs (default: every output).
        """
        # linear -> observability: imported lazily, never at module level
        from linobs.observability.analysis import analyze

        return analyze(self, settings, outputs=outputs)

    def to_statespace(self) -> Any:
        """A python-control ``StateSpace`` (needs the optional ``control`` extra)."""
        try:
            import control
        except ImportError:  # pragma: no cover - depends on the environment
            from linobs.errors import UsageError
            raise UsageError("python-control is not installed; `pip install linobs[control]`, "
                             "or use the numpy arrays A, B, C, D directly") from None
        return control.ss(self.A, self.B, self.C, self.D, inputs=self.inputs, outputs=self.outputs,
                          states=self.states)
