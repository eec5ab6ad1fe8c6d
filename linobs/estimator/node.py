"""The estimator designed at one grid node (what the design stage stores per point).

The local model is affine, in deviation from the operating point::

    x' = dx0 + A (x − x0) + B (u − u0),      y = y0 + C (x − x0) + D (u − u0)

and its exact zero-order-hold discretization at Ts is::

    x[k+1] = x0 + Φ (x[k] − x0) + Γ (u[k] − u0) + Γ₀ dx0,     Γ₀ = ∫₀^Ts e^{As} ds

Estimator update (the same in Python, in the exported C code and in the estimator FMU):

* ``form = "predictor"``:  x̂[k+1] = x0 + Φ(x̂[k] − x0) + Γ(u[k] − u0) + Γ₀ dx0 + L (y[k] − ŷ[k])
* ``form = "filter"`` (current estimate): predict x̂⁻ as above without the correction, then
  x̂[k] = x̂⁻[k] + L (y[k] − ŷ⁻[k]),

with ŷ = y0 + C(x̂ − x0) + D(u − u0).  A continuous design (``domain = "continuous"``)
stores its continuous gain in ``L_continuous`` and, in ``L``, the gain of the same observer
discretized by zero-order hold, so that every node runs the discrete update above.
"""

from __future__ import annotations

from typing import Literal

from pydantic import BaseModel, Field

from linobs.types import Matrix, Vector


class NodeDesign(BaseModel):
    """One node of a gain schedule."""

    status: Literal["ok", "refused"]
    message: str = ""
    kind: Literal["kalman", "luenberger"]
    domain: Literal["discrete", "continuous"]
    form: Literal["predictor", "filter"]
    sample_time: float
    states: list[str]
    inputs: list[str]
    outputs: list[str] = Field(description="the measured outputs (rows of C, D and columns of L)")
    # local model (present for refused nodes too, so that they can be inspected)
    x0: Vector
    u0: Vector
    y0: Vector
    dx0: Vector
    A: Matrix
    B: Matrix
    C: Matrix
    D: Matrix
    Phi: Matrix
    Gamma: Matrix
    Gamma0: Matrix = Field(description="∫₀^Ts e^{As} ds (multiplies dx0 in the affine update)")
    # the design (empty matrices for refused nodes)
    L: Matrix = Field(description="discrete gain used by the update, n × p")
    L_continuous: Matrix | None = None
    error_poles: list[tuple[float, float]] = Field(
        default_factory=list, description="eigenvalues of the error dynamics (z-plane for the "
                                          "discrete update), (real, imag)")
    requested_poles: list[tuple[float, float]] = Field(default_factory=list)
    P_prior: Matrix | None = Field(None, description="Kalman: steady-state prior covariance")
    P_post: Matrix | None = Field(None, description="Kalman: steady-state posterior covariance")
    error_std: dict[str, float] = Field(
        default_factory=dict, description="Kalman: √diag of the covariance of the form used")
    Q: Matrix | None = Field(None, description="discrete process-noise covariance used")
    R: Matrix | None = Field(None, description="discrete measurement-noise covariance used")
    unmovable_modes: list[tuple[float, float]] = Field(
        default_factory=list, description="refused: unobservable modes that no gain can move")
