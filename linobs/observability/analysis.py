"""Observability of one local linear model: the verdict an engineer can trust, and why.

:func:`analyze` (for a :class:`~linobs.linear.linear_model.LinearModel`) and
:func:`analyze_matrices` (for plain arrays) scale the pair by the nominal
values (:mod:`~linobs.observability.scaling`), then on (Ã, C̃):

1. one eigen-decomposition of Ã (shared by every output set tried);
2. the PBH margin of every mode (:mod:`~linobs.observability.pbh`) and the
   orthogonal staircase (:mod:`~linobs.observability.staircase`), combined
   into the unobservable subspace, detectability and the graded verdict
   (:mod:`~linobs.observability.assessment`);
3. the sampled-data check when a sample time is set
   (:mod:`~linobs.observability.sampling`);
4. the observability matrix (reported only) and the Gramian
   (:mod:`~linobs.observability.gramian`);
5. sensor advice for the candidates (:mod:`~linobs.observability.advice`).

Tolerances (relative, on the scaled system): ``unobservable_tolerance``
defaults to 100 · n · ε (n states), the rounding level of n orthogonal
steps; the staircase's absolute rank threshold is that times ‖Ã‖₂ + ‖C̃‖₂;
a mode is stable when Re λ < −tolerance · ‖Ã‖₂.

Modes: one per eigenvalue of Ã, both members of a complex pair (same
margin), in a fixed order (largest real part first) that does not depend on
the outputs, so mode indices (e.g. in the sampled-data pairs) are stable.
Margins use the ``margin_normalization`` argument ("sum", the default, or the
time-unit-free "balanced"; see :mod:`~linobs.observability.pbh`).

Measured outputs: the ``outputs`` argument, else ``settings.outputs``, else
every output row given.  Output rows that are not measured are sensor
candidates, as are the states in ``settings.candidates``.

References
----------
P. Van Dooren (1981), "The generalized eigenstructure problem in linear
system theory", IEEE Trans. Automatic Control 26(1):111-129.
M. L. J. Hautus (1969), "Controllability and observability conditions of
linear autonomous systems", Indag. Math. 31:443-448.
R. E. Kalman, Y. C. Ho and K. S. Narendra (1963), "Controllability of linear
dynamical systems", Contributions to Differential Equations 1(2):189-213.
C. F. Van Loan (1978), "Computing integrals involving the matrix
exponential", IEEE Trans. Automatic Control 23(3):395-404.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np

from linobs.errors import ModelError, UsageError
from linobs.model.catalogue import unknown_name_message
from linobs.observability.advice import Candidate, sensor_advice
from linobs.observability.assessment import assess, sampled_facts, state_facts
from linobs.observability.directions import (
    canonical_basis,
    participations,
    signed_direction,
)
from linobs.observability.gramian import gramian_info, observability_gramian
from linobs.observability.observability_matrix import observability_matrix_info
from linobs.observability.pbh import Normalization
from linobs.observability.report import (
    Mode,
    ObservabilityReport,
    ObservabilitySettings,
    SamplingInfo,
)
from linobs.observability.scaling import (scale_system, scales_with_overrides, scaling_record)
from linobs.observability.summary import summary_line

if TYPE_CHECKING:
    from linobs.linear.linear_model import LinearModel


def _pick(names: Sequence[str], wanted: Sequence[str], what: str) -> list[int]:
    index = {n: i for i, n in enumerate(names)}
    picked = []
    for name in wanted:
        if name not in index:
            message = unknown_name_message(name, list(names))
            raise UsageError(f"{what}: {message}")
        picked.append(index[name])
    return picked


def _checked(A: np.ndarray, C: np.ndarray, state_names: Sequence[str],
             output_names: Sequence[str]) -> tuple[np.ndarray, np.ndarray]:
    A = np.asarray(A, dtype=float)
    n = len(state_names)
    if n == 0:
        raise UsageError("the model has no states; observability needs at least one "
                         "continuous state")
    if A.shape != (n, n):
        raise UsageError(f"A has shape {A.shape} but {n} state names were given; pass an "
                         f"{n}x{n} matrix")
    C = np.asarray(C, dtype=float)
    if C.size == 0:
        C = C.reshape(0, n)
    if C.ndim != 2 or C.shape != (len(output_names), n):
        raise UsageError(f"C has shape {C.shape} but {len(output_names)} output names and {n} "
                         f"states were given; pass a {len(output_names)}x{n} matrix")
    if not (np.all(np.isfinite(A)) and np.all(np.isfinite(C))):
        raise ModelError("the local model has non-finite entries in A or C; linearize again "
                         "at a point where the model evaluates")
    return A, C


def _candidates(requested: Sequence[str], state_names: list[str], output_names: list[str],
                measured: list[int], C_all: np.ndarray) -> list[Candidate]:
    """Unmeasured output rows, then the requested measurable states (unit rows)."""
    taken = set(measured)
    found = [Candidate(output_names[j], "output", C_all[j])
             for j in range(len(output_names)) if j not in taken]
    names = {c.name for c in found}
    n = len(state_names)
    for name in requested:
        if name in names or name in output_names:
            continue      # an output: already a candidate, or already measured
        j = _pick(state_names + output_names, [name], "sensor candidates")[0]
        found.append(Candidate(name, "state", np.eye(n)[j]))
        names.add(name)
    return found


def analyze_matrices(A: np.ndarray, C: np.ndarray, state_names: Sequence[str],
                     output_names: Sequence[str], state_nominal: np.ndarray | None = None,
                     output_nominal: np.ndarray | None = None,
                     settings: ObservabilitySettings | None = None, *,
                     outputs: Sequence[str] | None = None,
                     margin_normalization: Normalization | None = None) -> ObservabilityReport:
    """Observability of dx/dt = A x, y = C x with named variables (see the module notes).

    Parameters
    ----------
    A : (n, n) array
    C : (q, n) array, one row per name in ``output_names``
    state_names, output_names : names of the states and output rows
    state_nominal, output_nominal : scale factors (default 1)
    settings : thresholds and options (default :class:`ObservabilitySettings`)
    outputs : measured outputs (default ``settings.outputs``, else all rows)
    margin_normalization : "balanced" (each block row by its own norm: time-unit free, see
        :func:`~linobs.observability.pbh.normalized_pair`) or "sum" (by ‖A‖ + ‖C‖); default
        ``settings.margin_normalization``

    Returns
    -------
    ObservabilityReport

    Raises
    ------
    UsageError
        Shapes that do not match the names, or unknown output / candidate names.
    ModelError
        Non-finite entries in A or C.
    """
    settings = settings or ObservabilitySettings()
    state_names, output_names = list(state_names), list(output_names)
    A, C = _checked(A, C, state_names, output_names)
    n = len(state_names)
    sx = scales_with_overrides(state_names, np.ones(n) if state_nominal is None else state_nominal,
                               settings.state_scales)
    sy = scales_with_overrides(output_names, np.ones(len(output_names)) if output_nominal is None
                               else output_nominal, settings.output_scales)
    measured_names = list(outputs) if outputs is not None else (
        list(settings.outputs) if settings.outputs is not None else list(output_names))
    measured = _pick(output_names, measured_names, "measured outputs")
    A_s, C_all = scale_system(A, C, sx, sy)
    C_s = C_all[measured]

    facts = state_facts(A_s, settings.unobservable_tolerance)
    sampled = sampled_facts(facts, settings.sample_time) if settings.sample_time else None
    norm_kind = margin_normalization or settings.margin_normalization
    result = assess(facts, C_s, settings.weak_threshold, sampled, norm_kind)

    named = participations(facts.eigenvectors, state_names)
    modes = [Mode(real=float(lam.real), imag=float(lam.imag), margin=float(result.margins[i]),
                  visibility=float(result.visibility[i]),
                  observable=not bool(result.unobservable[i]), stable=bool(facts.stable[i]),
                  participation=named[i])
             for i, lam in enumerate(facts.eigenvalues)]
    basis = [signed_direction(v, state_names) for v in canonical_basis(result.basis).T]

    W, kind, horizon = observability_gramian(A_s, C_s, facts.eigenvalues,
                                             facts.stable_threshold, settings.gramian_horizon)
    sampling = None
    if sampled is not None and result.sampled_margins is not None:
        s_verdict = result.sampled_verdict
        lost = s_verdict in ("unobservable", "unobservable-detectable") and \
            result.continuous_verdict in ("observable", "weak")
        sampling = SamplingInfo(sample_time=sampled.sample_time, lost=lost,
                                pathological_pairs=sampled.pairs,
                                margin=float(np.min(result.sampled_margins)), verdict=s_verdict)

    candidates = _candidates(settings.candidates, state_names, output_names, measured, C_all)
    advice = sensor_advice(facts, C_s, candidates, result.verdict, settings.weak_threshold,
                           W, kind, horizon, sampled, norm_kind) if candidates else []

    unobservable_modes = [m for m in modes if not m.observable]
    summary = summary_line(result.verdict, result.continuous_verdict, modes, basis,
                           settings.weak_threshold, unobservable_modes, sampling)
    measured_names = [output_names[j] for j in measured]
    return ObservabilityReport(
        verdict=result.verdict, margin=result.margin, weak_threshold=settings.weak_threshold,
        unobservable_tolerance=facts.tolerance, margin_normalization=norm_kind,
        outputs=measured_names,
        scaling=scaling_record(state_names, sx, measured_names, sy[measured]),
        modes=modes, unobservable_dimension=len(basis), unobservable_basis=basis,
        detectable=result.detectable, observability_matrix=observability_matrix_info(A_s, C_s),
        gramian=gramian_info(W, kind, horizon, state_names), sampling=sampling,
        sensor_advice=advice, summary=summary)


def analyze(lm: LinearModel, settings: ObservabilitySettings | None = None, *,
            outputs: list[str] | None = None,
            margin_normalization: Normalization | None = None) -> ObservabilityReport:
    """Observability of a local linear model with its measured outputs.

    Parameters
    ----------
    lm : the local model (its A, C, state and output nominal values are used)
    settings : thresholds and options (default :class:`ObservabilitySettings`)
    outputs : measured outputs (default ``settings.outputs``, else every output of ``lm``);
        the other declared outputs are sensor candidates
    margin_normalization : as for :func:`analyze_matrices`

    Returns
    -------
    ObservabilityReport
    """
    return analyze_matrices(lm.A, lm.C, lm.states, lm.outputs, lm.state_nominal,
                            lm.output_nominal, settings, outputs=outputs,
                            margin_normalization=margin_normalization)
