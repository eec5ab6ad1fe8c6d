"""The verdict on one scaled pair (Ã, C̃): PBH margins and the staircase combined.

Two certificates of (near-)unobservability are combined, each backward
stable on its own:

* the orthogonal staircase finds an unobservable subspace of dimension r > 0
  (the pair is within a small multiple of the tolerance of one that is
  exactly unobservable with that dimension); its eigenvalues (of A restricted
  to the subspace) are matched to the eigenvalues of Ã by an optimal
  assignment, and those modes are unobservable;
* a mode whose PBH margin is below the tolerance is unobservable (a relative
  perturbation of that size makes it so).  If such a mode is not already in
  the staircase's subspace, its PBH null vectors are added to the basis.

A repeated eigenvalue with fewer unobservable directions than copies (a
Jordan block seen at its end) shows margin ≈ 0 at every copy: the PBH test
cannot tell copies apart, the staircase gives the dimension, so every copy
is marked unobservable while ``unobservable_dimension`` stays the
staircase's count.

Grading (thresholds relative, on the margins):

* ``unobservable-detectable``: some direction unobservable, every
  unobservable eigenvalue stable (Re λ < −tolerance · ‖Ã‖₂);
* ``unobservable``: some unobservable eigenvalue not stable;
* ``weak``: all observable, smallest margin below ``weak_threshold``;
* ``observable``: smallest margin at or above ``weak_threshold``.

With a sample time Ts the sampled pair is graded the same way on its own
margins (delta form, see :mod:`linobs.observability.sampling`), and the verdict is the
worse of the continuous and the sampled grade (in the order of
:data:`~linobs.observability.report.VERDICTS`): a point whose samples lose
observability is never ``observable``.

References
----------
P. Van Dooren (1981), "The generalized eigenstructure problem in linear
system theory", IEEE Trans. Automatic Control 26(1):111-129 (staircase).
M. L. J. Hautus (1969), "Controllability and observability conditions of
linear autonomous systems", Indag. Math. 31:443-448 (PBH and detectability).
H. W. Kuhn (1955), "The Hungarian method for the assignment problem", Naval
Research Logistics Quarterly 2:83-97 (matching eigenvalues).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
import scipy.optimize

from linobs.observability.directions import orthonormal_span
from linobs.observability.pbh import (
    Normalization,
    normalized_pair,
    pbh_margins,
    pbh_null_vectors,
)
from linobs.observability.report import VERDICTS, Verdict
from linobs.observability.sampling import (
    delta_form,
    pathological_pairs,
    sampled_margins,
)
from linobs.observability.staircase import Staircase, observability_staircase

NEW_DIRECTION = 1e-6
"""A PBH null vector adds a basis direction when this much of it lies outside the basis."""


class StateFacts(NamedTuple):
    """What depends on Ã only: computed once per point, shared by every output set."""

    A: np.ndarray
    eigenvalues: np.ndarray
    eigenvectors: np.ndarray
    norm: float
    stable_threshold: float
    tolerance: float
    """Relative unobservability tolerance."""

    @property
    def stable(self) -> np.ndarray:
        return self.eigenvalues.real < -self.stable_threshold


class SampledFacts(NamedTuple):
    """The sampled pair in delta form: δ = (e^{ÃTs} − I)/Ts and ν = (e^{λTs} − 1)/Ts."""

    sample_time: float
    delta: np.ndarray
    values: np.ndarray
    pairs: list[tuple[int, int, int]]


class Assessment(NamedTuple):
    verdict: Verdict
    continuous_verdict: Verdict
    margins: np.ndarray
    visibility: np.ndarray
    """Per mode: ‖C̃v‖ / (‖Ã‖ + ‖C̃‖) for the unit eigenvector v (≥ the margin)."""
    unobservable: np.ndarray
    """Per mode: True when the mode is unobservable."""
    basis: np.ndarray
    unobservable_eigenvalues: np.ndarray
    detectable: bool
    staircase: Staircase
    sampled_margins: np.ndarray | None
    sampled_verdict: Verdict | None

    @property
    def margin(self) -> float:
        return float(np.min(self.margins)) if self.margins.size else 1.0


def default_tolerance(n: int) -> float:
    """100 · n · ε, the rounding level of the scaled test (relative)."""
    return 100.0 * max(n, 1) * float(np.finfo(float).eps)


def state_facts(A: np.ndarray, tolerance: float | None = None) -> StateFacts:
    """Eigen-decomposition and norm of Ã, and the thresholds derived from them."""
    n = A.shape[0]
    tol = default_tolerance(n) if tolerance is None else float(tolerance)
    values, vectors = np.linalg.eig(A) if n else (np.zeros(0, complex), np.zeros((0, 0)))
    # a fixed order, independent of the outputs: slowest / least stable first
    order = np.lexsort((-np.asarray(values).imag, -np.asarray(values).real))
    values, vectors = np.asarray(values, dtype=complex)[order], vectors[:, order]
    norm = float(np.linalg.norm(A, 2)) if n else 0.0
    return StateFacts(A=A, eigenvalues=values, eigenvectors=vectors,
                      norm=norm, stable_threshold=tol * norm, tolerance=tol)


def sampled_facts(facts: StateFacts, sample_time: float) -> SampledFacts:
    """The delta form of the sampled pair and its pathological mode pairs."""
    delta, nu = delta_form(facts.A, facts.eigenvalues, sample_time)
    return SampledFacts(sample_time=float(sample_time), delta=delta, values=nu,
                        pairs=pathological_pairs(facts.eigenvalues, sample_time))


def worse(first: Verdict, second: Verdict) -> Verdict:
    """The more severe of two verdicts (order of VERDICTS)."""
    return first if VERDICTS.index(first) >= VERDICTS.index(second) else second


def _grade(margin: float, unobservable_stable: np.ndarray | None, weak: float) -> Verdict:
    if unobservable_stable is not None:
        return "unobservable-detectable" if bool(np.all(unobservable_stable)) else "unobservable"
    return "observable" if margin >= weak else "weak"


def _match(targets: np.ndarray, eigenvalues: np.ndarray) -> np.ndarray:
    """Indices of the eigenvalues closest to ``targets`` (one each, optimal assignment)."""
    if targets.size == 0:
        return np.zeros(0, dtype=int)
    cost = np.abs(targets[:, None] - eigenvalues[None, :])
    _, cols = scipy.optimize.linear_sum_assignment(cost)
    return np.asarray(cols, dtype=int)


def assess(facts: StateFacts, C: np.ndarray, weak_threshold: float,
           sampled: SampledFacts | None = None,
           normalization: Normalization = "sum") -> Assessment:
    """Margins, unobservable subspace, detectability and verdict of (Ã, C̃).

    Parameters
    ----------
    facts : from :func:`state_facts`
    C : (p, n) scaled output matrix
    weak_threshold : relative margin below which an observable pair is weak
    sampled : from :func:`sampled_facts` when a sample time is set
    normalization : of the PBH margins (see :func:`~linobs.observability.pbh.normalized_pair`)

    Returns
    -------
    Assessment
    """
    n = facts.A.shape[0]
    C = np.asarray(C, dtype=float).reshape(-1, n)
    # PBH and staircase work on (A_t, C_t) = (Ã/scale, C̃ or C̃/‖C̃‖): same subspaces
    A, C_t, scale, normalizer = normalized_pair(facts.A, C, normalization, facts.norm)
    lam = facts.eigenvalues / scale
    tol = facts.tolerance
    margins = pbh_margins(A, C_t, lam, normalizer)
    vectors = facts.eigenvectors
    lengths = np.linalg.norm(vectors, axis=0)
    visibility = np.linalg.norm(C_t @ vectors, axis=0) / np.where(lengths > 0, lengths, 1.0) \
        / normalizer if C.size else np.zeros(n)
    stair = observability_staircase(A, C_t, tol * normalizer)
    flagged = margins < tol
    basis = stair.unobservable_basis
    unobs_eigs = np.linalg.eigvals(stair.unobservable_matrix) if stair.unobservable_dimension \
        else np.zeros(0, dtype=complex)
    if unobs_eigs.size:
        matched = _match(unobs_eigs, lam)
        # a defective eigenvalue may be computed far from its unobservable copy: there the
        # margin is taken at the staircase's eigenvalue as well (only where it matters)
        recheck = margins[matched] >= tol
        if np.any(recheck):
            again = pbh_margins(A, C_t, unobs_eigs[recheck], normalizer)
            margins[matched[recheck]] = np.minimum(margins[matched[recheck]], again)
        flagged[matched] = True
        extra = np.setdiff1d(np.flatnonzero(margins < tol), matched)
    else:
        extra = np.flatnonzero(flagged)
    if extra.size:  # PBH sees unobservable modes outside the staircase's subspace
        candidates = orthonormal_span(pbh_null_vectors(A, C_t, lam[extra], tol * normalizer),
                                      NEW_DIRECTION)
        if basis.shape[1] and candidates.shape[1]:
            candidates = candidates - basis @ (basis.T @ candidates)
        if candidates.shape[1]:
            u, s, _ = np.linalg.svd(candidates, full_matrices=False)
            basis = np.hstack([basis, u[:, s > NEW_DIRECTION]])
        unobs_eigs = np.concatenate([unobs_eigs, lam[extra]])
    flagged = flagged | (margins < tol)
    unobservable_any = bool(basis.shape[1] or np.any(flagged))
    unobs_eigs = unobs_eigs * scale        # back to 1/time
    stable_unobs = unobs_eigs.real < -facts.stable_threshold
    if np.any(flagged):
        stable_unobs = np.concatenate([stable_unobs, facts.stable[flagged]])
    detectable = bool(np.all(stable_unobs)) if unobservable_any else True
    margin = float(np.min(margins)) if margins.size else 1.0
    continuous = _grade(margin, stable_unobs if unobservable_any else None, weak_threshold)
    verdict: Verdict = continuous
    s_margins: np.ndarray | None = None
    s_verdict: Verdict | None = None
    if sampled is not None and n:
        s_margins = sampled_margins(C, sampled.delta, sampled.values, normalization,
                                    sampled.sample_time)
        s_flag = s_margins < tol
        s_verdict = _grade(float(np.min(s_margins)),
                           facts.stable[s_flag] if np.any(s_flag) else None, weak_threshold)
        verdict = worse(continuous, s_verdict)
    return Assessment(verdict=verdict, continuous_verdict=continuous, margins=margins,
                      visibility=visibility,
                      unobservable=flagged, basis=basis, unobservable_eigenvalues=unobs_eigs,
                      detectable=detectable, staircase=stair, sampled_margins=s_margins,
                      sampled_verdict=s_verdict)
