"""Initial-state reconstruction from logged samples with the local linear model.

The affine local model (see :mod:`linobs.linear.linear_model`)

    dx/dt = A (x − x0) + B (u − u0) + dx0,   y = y0 + C (x − x0) + D (u − u0)

is discretized exactly for inputs held between samples (zero-order hold):
with δx = x − x0, δu = u − u0 and the constant dx0 treated as one more
held input,

    exp([[A, B, dx0], [0, 0, 0]] Ts) = [[Φ, Γ, γ], [0, I, 0]],
    δx_{k+1} = Φ δx_k + Γ δu_k + γ,    δy_k = C δx_k + D δu_k.

The samples then satisfy r_k = C Φ^k δx(t₀), where r_k is the measured
δy_k minus the response to the inputs from δx = 0.  Stacking k = 0 … N−1
gives the linear least-squares problem O_N δx(t₀) = r with the stacked
discrete-time observability matrix O_N = [C; CΦ; …; CΦ^(N−1)], solved in
scaled coordinates (states by their nominal values, outputs by theirs) with
an SVD-based least-squares solver; its condition number is reported and
a warning is added when it exceeds :data:`CONDITION_WARNING` or the matrix
is rank deficient (then the minimum-norm estimate is returned).

Sampling must be uniform (relative spread of the intervals at most 1e-6).
Otherwise, or when ``sample_time`` differs from the logged interval, the
log is resampled onto t₀ + k·Ts: inputs are held (the value at the latest
logged time at or before each grid time, as a zero-order hold assumes) and
outputs interpolated linearly.

References
----------
G. F. Franklin, J. D. Powell and M. L. Workman (1998), "Digital Control of
Dynamic Systems", 3rd ed., Addison-Wesley, section 4.3 (zero-order-hold
equivalent by the matrix exponential of the augmented system).
C. F. Van Loan (1978), "Computing integrals involving the matrix
exponential", IEEE Trans. Automatic Control 23(3):395-404.
T. Kailath (1980), "Linear Systems", Prentice-Hall, section 2.3 (state
reconstruction from the observability matrix).
G. H. Golub and C. F. Van Loan (2013), "Matrix Computations", 4th ed., Johns
Hopkins University Press, section 5.5 (rank-deficient least squares by SVD).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np
import scipy.linalg
from numpy.typing import ArrayLike
from pydantic import BaseModel, ConfigDict, Field

from linobs.errors import UsageError
from linobs.model.catalogue import unknown_name_message
from linobs.observability.directions import signed_direction
from linobs.observability.report import Direction, Scaling
from linobs.observability.scaling import scaling_record, usable_nominals
from linobs.types import Vector

if TYPE_CHECKING:
    from linobs.linear.linear_model import LinearModel

CONDITION_WARNING = 1e8
"""Condition number of the scaled stacked matrix above which the result carries a warning."""
UNIFORM_SPREAD = 1e-6
"""Largest relative deviation of a sampling interval from the mean that counts as uniform."""


class Reconstruction(BaseModel):
    """The least-squares initial state from samples, and how well the samples determine it."""

    model_config = ConfigDict(arbitrary_types_allowed=True, ser_json_inf_nan="strings")

    states: list[str]
    outputs: list[str]
    initial_state: dict[str, float] = Field(description="estimate of x(t₀), t₀ the first time")
    initial_state_vector: Vector = Field(description="the same, in state order")
    residual_rms: float = Field(description="RMS of the fit residual, scaled outputs")
    condition: float = Field(description="condition number of the scaled stacked matrix O_N")
    rank: int = Field(description="numerical rank of the scaled O_N (SVD least squares)")
    least_determined: Direction = Field(
        description="right singular vector of the smallest singular value of the scaled O_N")
    samples: int = Field(description="number of samples used (after any resampling)")
    sample_time: float
    start_time: float
    resampled: bool
    scaling: Scaling
    warnings: list[str] = Field(default_factory=list)

    @property
    def vector(self) -> np.ndarray:
        return np.asarray(self.initial_state_vector, dtype=float)


def zero_order_hold(A: np.ndarray, B: np.ndarray, sample_time: float) -> tuple[np.ndarray,
                                                                             np.ndarray]:
    """Φ = e^{A Ts} and Γ = ∫₀^Ts e^{As} ds B from one exponential of [[A, B], [0, 0]] Ts."""
    n, m = A.shape[0], B.shape[1]
    block = np.zeros((n + m, n + m))
    block[:n, :n] = A
    block[:n, n:] = B
    E = scipy.linalg.expm(block * sample_time)
    return E[:n, :n], E[:n, n:]


def _samples(values: ArrayLike | None, count: int, width: int, what: str,
             fill: np.ndarray) -> np.ndarray:
    if values is None:
        return np.broadcast_to(fill, (count, width)).copy()
    arr = np.asarray(values, dtype=float)
    if arr.ndim == 1 and width == 1:
        arr = arr.reshape(-1, 1)
    if arr.ndim == 1 and width == 0 and arr.size == 0:
        arr = arr.reshape(count, 0)
    if arr.ndim != 2 or arr.shape != (count, width):
        raise UsageError(f"{what} has shape {arr.shape} but {count} sample times and {width} "
                         f"columns are expected; pass one row per sample time")
    if not np.all(np.isfinite(arr)):
        raise UsageError(f"{what} contains NaN or infinite values; remove those samples")
    return arr


def _held(times: np.ndarray, values: np.ndarray, grid: np.ndarray) -> np.ndarray:
    idx = np.searchsorted(times, grid + 1e-12 * max(abs(times[-1]), 1.0), side="right") - 1
    return values[np.clip(idx, 0, len(times) - 1)]


def _uniform(times: np.ndarray, u: np.ndarray, y: np.ndarray, sample_time: float | None,
             ) -> tuple[np.ndarray, np.ndarray, float, bool]:
    dt = np.diff(times)
    mean = float(dt.mean())
    uniform = bool(np.max(np.abs(dt - mean)) <= UNIFORM_SPREAD * mean)
    if uniform and (sample_time is None or abs(sample_time - mean) <= UNIFORM_SPREAD * mean):
        return u, y, mean if sample_time is None else float(sample_time), False
    ts = float(sample_time) if sample_time is not None else float(np.median(dt))
    count = int(np.floor((times[-1] - times[0]) / ts * (1 + 1e-12))) + 1
    grid = times[0] + ts * np.arange(count)
    u_new = _held(times, u, grid)
    y_new = np.column_stack([np.interp(grid, times, y[:, j]) for j in range(y.shape[1])]) \
        if y.shape[1] else np.zeros((count, 0))
    return u_new, y_new, ts, True


def reconstruct_initial_state(lm: LinearModel, times: ArrayLike, u_samples: ArrayLike | None,
                              y_samples: ArrayLike, *, sample_time: float | None = None,
                              outputs: Sequence[str] | None = None) -> Reconstruction:
    """Least-squares x(t₀) from logged inputs and outputs (see the module notes).

    Parameters
    ----------
    lm : the local linear model the log is explained with
    times : (N,) increasing sample times [s]
    u_samples : (N, m) inputs in ``lm.inputs`` order (or (N,) for one input); None holds
        the inputs at the operating point u0
    y_samples : (N, p) measured outputs in ``outputs`` order (or (N,) for one output)
    sample_time : Ts to use (default: the logged interval; a different value resamples)
    outputs : names of the measured outputs in ``y_samples`` (default: every output of ``lm``)

    Returns
    -------
    Reconstruction

    Raises
    ------
    UsageError
        Fewer than two samples, times not increasing, arrays whose lengths do not match the
        times, unknown output names, a non-positive sample time.
    """
    t = np.asarray(times, dtype=float).reshape(-1)
    if t.size < 2 or not np.all(np.isfinite(t)):
        raise UsageError("times needs at least two finite sample times")
    if np.any(np.diff(t) <= 0):
        raise UsageError("times must be strictly increasing; sort the log and drop duplicates")
    if sample_time is not None and not sample_time > 0:
        raise UsageError(f"sample_time must be positive, got {sample_time}")
    names = list(lm.outputs) if outputs is None else list(outputs)
    index = {n: i for i, n in enumerate(lm.outputs)}
    for name in names:
        if name not in index:
            raise UsageError(f"measured outputs: {unknown_name_message(name, list(lm.outputs))}")
    rows = [index[n] for n in names]
    n, m = lm.A.shape[0], lm.B.shape[1]
    u = _samples(u_samples, t.size, m, "u_samples", np.asarray(lm.u0, dtype=float))
    y = _samples(y_samples, t.size, len(rows), "y_samples", np.zeros(len(rows)))
    u, y, ts, resampled = _uniform(t, u, y, sample_time)
    warnings: list[str] = []
    if resampled:
        warnings.append(f"samples were resampled at Ts = {ts:g} (inputs held, outputs "
                        f"interpolated linearly)")

    C, D = lm.C[rows], lm.D[rows]
    B_aug = np.column_stack([lm.B, lm.dx0])
    Phi, Gamma_aug = zero_order_hold(lm.A, B_aug, ts)
    Gamma, gamma = Gamma_aug[:, :m], Gamma_aug[:, m]
    du = u - lm.u0
    count = u.shape[0]
    forced = np.zeros((count, n))
    for k in range(count - 1):
        forced[k + 1] = Phi @ forced[k] + Gamma @ du[k] + gamma
    resid = y - lm.y0[rows] - du @ D.T - forced @ C.T          # r_k = C Φ^k δx(t₀)

    sx = usable_nominals(lm.state_nominal, n)
    sy = usable_nominals(lm.output_nominal[rows], len(rows))
    Phi_s = Phi * sx[None, :] / sx[:, None]
    C_s = C * sx[None, :] / sy[:, None]
    blocks = [C_s]
    with np.errstate(over="ignore", invalid="ignore"):
        for _ in range(1, count):
            blocks.append(blocks[-1] @ Phi_s)
    stacked = np.vstack(blocks)
    rhs = (resid / sy[None, :]).reshape(-1)
    if not (np.all(np.isfinite(stacked)) and np.all(np.isfinite(rhs))):
        raise UsageError("the log is too long for the model's unstable modes (Φ^k overflows); "
                         "pass a shorter stretch of samples")
    # least squares by the SVD (numpy lstsq's default cut-off: ε · max(rows, columns) · σ_max)
    u_, sv, vh = np.linalg.svd(stacked, full_matrices=stacked.shape[0] < n)
    cut = np.finfo(float).eps * max(stacked.shape) * (sv[0] if sv.size else 0.0)
    keep = sv > cut
    rank = int(np.count_nonzero(keep))
    solution = vh[:sv.size][keep].T @ ((u_[:, :sv.size][:, keep].T @ rhs) / sv[keep])
    smallest = float(sv[-1]) if sv.size == n else 0.0
    condition = float(sv[0] / smallest) if smallest > 0 else float("inf")
    fit = stacked @ solution - rhs
    if rank < n:
        warnings.append(f"the samples determine only {rank} of {n} state directions; the "
                        f"minimum-norm estimate is returned")
    elif condition > CONDITION_WARNING:
        warnings.append(f"the stacked observability matrix is ill-conditioned (condition "
                        f"{condition:.1e}): noise is amplified along the least determined "
                        f"direction")
    x_hat = lm.x0 + sx * solution
    return Reconstruction(
        states=list(lm.states), outputs=names,
        initial_state={s: float(v) for s, v in zip(lm.states, x_hat)},
        initial_state_vector=x_hat, residual_rms=float(np.sqrt(np.mean(fit ** 2))) if fit.size
        else 0.0, condition=condition, rank=int(rank),
        least_determined=signed_direction(vh[-1], lm.states),
        samples=count, sample_time=ts, start_time=float(t[0]), resampled=resampled,
        scaling=scaling_record(lm.states, sx, names, sy), warnings=warnings)
