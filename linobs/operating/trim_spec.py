"""What a partial trim solves for (the study's ``[trim]`` table) and what it returns.

At each operating point some variables are fixed (by the grid, the study or
their start values) and some are free: the trim solves for the free states
(and optionally free inputs) so that chosen state derivatives vanish and
chosen outputs meet their targets.  Integrating states (state of charge) stay
pinned at their grid or start value; their non-zero derivative is recorded.
"""

from __future__ import annotations

from typing import Literal

from pydantic import BaseModel, ConfigDict, Field


class TrimSpec(BaseModel):
    """Partial-trim settings.

    The system must be square: the number of unknowns (free states + free
    inputs) equals the number of equations (zero derivatives + output targets).
    """

    model_config = ConfigDict(extra="forbid")

    enabled: bool = Field(True, description="false: linearize at the grid point as given, no trim")
    free_states: list[str] | Literal["all"] = Field(
        "all", description="states to solve for; 'all' = every state not pinned and not on a grid axis")
    pinned_states: list[str] = Field(
        default_factory=list,
        description="integrating states held at their grid or start value (derivative recorded)")
    free_inputs: list[str] = Field(default_factory=list, description="inputs to solve for")
    zero_derivatives: list[str] | None = Field(
        None, description="states whose derivative must vanish; default: the free states")
    output_targets: dict[str, float] = Field(
        default_factory=dict, description="output name -> required value")
    tolerance: float = Field(1e-10, gt=0, description=(
        "convergence when every residual, divided by its scale (the derivative's state nominal "
        "per second, or the output's nominal), is below this"))
    max_iterations: int = Field(50, ge=1, le=10_000)
    broyden_updates: int = Field(
        8, ge=0, le=100, description="Broyden (sparse, Schubert) updates allowed between Jacobian refreshes")
    continuation: bool = Field(True, description="warm start from the nearest solved neighbor")
    fallback: Literal["none", "simulate"] = Field(
        "none", description="when Newton fails: settle the model by simulation to steady state")
    settle_time: float | None = Field(
        None, gt=0, description="simulation horizon for the fallback [s]; default from the model's "
                                "slowest time constant")


class TrimResult(BaseModel):
    """The outcome of one trim: never silently accepted when not converged."""

    status: Literal["converged", "not_converged", "skipped"]
    method: Literal["newton", "simulation", "none"]
    states: dict[str, float]
    inputs: dict[str, float]
    parameters: dict[str, float]
    residual: float = Field(description="largest scaled residual at the returned point")
    residuals: dict[str, float] = Field(
        default_factory=dict, description="unscaled residual per equation (der(x) or output name)")
    iterations: int = 0
    evaluations: int = Field(0, description="FMU evaluations spent (including Jacobians)")
    jacobians: int = Field(0, description="Jacobian evaluations (linearizations)")
    pinned_derivatives: dict[str, float] = Field(
        default_factory=dict, description="derivatives of pinned (integrating) states")
    message: str = ""

    @property
    def converged(self) -> bool:
        return self.status in ("converged", "skipped")

    def point(self) -> dict[str, float]:
        """Every state, input and parameter value: an operating point for linearization."""
        return {**self.parameters, **self.states, **self.inputs}
