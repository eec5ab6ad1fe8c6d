"""The Popov–Belevitch–Hautus (PBH) test, graded: how far each mode is from unobservable.

A mode λ of A is unobservable exactly when [λI − A; C] loses column rank.
Its *margin* is the smallest singular value of that stacked matrix relative
to ‖A‖₂ + ‖C‖₂:

    margin(λ) = σ_min([λI − A; C]) / (‖A‖₂ + ‖C‖₂).

σ_min is the 2-norm of the smallest perturbation [ΔA; ΔC] that makes λ an
unobservable eigenvalue (Eising 1984), so the margin is a relative distance
to unobservability of that mode, independent of any rank tolerance.  The
minimum over all λ ∈ ℂ is the distance to unobservability; the minimum over
the eigenvalues is its usual, cheaper, upper bound.

Normalization.  ``"sum"`` (the default) is the formula above.  It adds a
rate (‖A‖, 1/time) to a ratio (‖C‖ of the scaled system), so it depends on
the time unit: a model in hours instead of seconds has a 3600× larger A and
other margins.  ``"balanced"`` removes that dependence by dividing each
block row by its own norm first,

    margin(λ) = σ_min([(λI − A)/‖A‖₂; C/‖C‖₂]) / 2,

which is the "sum" margin of the pair (A/‖A‖₂, C/‖C‖₂): invariant under a
change of time unit and under a common scaling of all outputs.

Complex pairs: [λ̄I − A; C] is the complex conjugate of [λI − A; C] for real
A, C, so both members of a pair have the same margin; it is computed once
and both members are reported.

References
----------
V. M. Popov (1973), "Hyperstability of Control Systems", Springer;
V. Belevitch (1968), "Classical Network Theory", Holden-Day;
M. L. J. Hautus (1969), "Controllability and observability conditions of
linear autonomous systems", Indag. Math. 31:443-448 (the rank test).
R. Eising (1984), "Between controllable and uncontrollable", Systems &
Control Letters 4(5):263-264 (σ_min as the distance to uncontrollability).
"""

from __future__ import annotations

from typing import Literal

import numpy as np

Normalization = Literal["sum", "balanced"]


def pbh_normalizer(A: np.ndarray, C: np.ndarray) -> float:
    """‖A‖₂ + ‖C‖₂, the scale margins are relative to (1 if both are zero)."""
    total = float(np.linalg.norm(A, 2) if A.size else 0.0)
    total += float(np.linalg.norm(C, 2) if C.size else 0.0)
    return total if total > 0.0 else 1.0


def normalized_pair(A: np.ndarray, C: np.ndarray, normalization: Normalization = "sum",
                    norm_a: float | None = None) -> tuple[np.ndarray, np.ndarray, float, float]:
    """The pair the margins are computed on, its time scale and its normalizer.

    Returns
    -------
    (A_t, C_t, scale, normalizer)
        A_t = A / scale, C_t (C, or C/‖C‖₂ when balanced); eigenvalues are
        divided by ``scale`` before testing; margins are σ_min / normalizer
        with normalizer = ‖A_t‖₂ + ‖C_t‖₂ (1 if both vanish).
    """
    na = float(np.linalg.norm(A, 2)) if norm_a is None else float(norm_a)
    nc = float(np.linalg.norm(C, 2)) if C.size else 0.0
    if normalization == "sum":
        total = na + nc
        return A, C, 1.0, total if total > 0 else 1.0
    if normalization != "balanced":
        raise ValueError(f"unknown normalization {normalization!r}")
    scale = na if na > 0 else 1.0
    cs = nc if nc > 0 else 1.0
    total = (1.0 if na > 0 else 0.0) + (1.0 if nc > 0 else 0.0)
    return A / scale, C / cs, scale, total if total > 0 else 1.0


def _stacks(A: np.ndarray, C: np.ndarray, values: np.ndarray) -> np.ndarray:
    """[λI − A; C] for every λ, as one (k, n + p, n) array."""
    n, p = A.shape[0], C.shape[0]
    dtype = np.result_type(A.dtype, values.dtype)
    stack = np.empty((values.size, n + p, n), dtype=dtype)
    stack[:, :n, :] = -A
    stack[:, n:, :] = C
    diag = np.arange(n)
    stack[:, diag, diag] += values[:, None]
    return stack


def smallest_singular_values(A: np.ndarray, C: np.ndarray, values: np.ndarray) -> np.ndarray:
    """σ_min([λI − A; C]) for every λ in ``values`` (absolute, not relative).

    Real values use real arithmetic; of a complex pair only the member with
    positive imaginary part is computed (the other has the same σ_min).
    """
    values = np.asarray(values, dtype=complex).reshape(-1)
    out = np.empty(values.size)
    n = A.shape[0]
    if values.size == 0:
        return out
    if n == 0:
        out[:] = 0.0
        return out
    is_real = values.imag == 0.0
    if np.any(is_real):
        s = np.linalg.svd(_stacks(A, C, values[is_real].real), compute_uv=False)
        out[is_real] = s[:, -1]
    cplx = np.flatnonzero(~is_real)
    if cplx.size:
        # a conjugate pair collapses onto its member with positive imaginary part
        key = values[cplx].real + 1j * np.abs(values[cplx].imag)
        unique, inverse = np.unique(key, return_inverse=True)
        s = np.linalg.svd(_stacks(A, C, unique), compute_uv=False)
        out[cplx] = s[:, -1][inverse.reshape(-1)]
    return out


def pbh_margins(A: np.ndarray, C: np.ndarray, eigenvalues: np.ndarray,
                normalizer: float | None = None) -> np.ndarray:
    """Relative PBH margin of every eigenvalue (see the module notes).

    Parameters
    ----------
    A : (n, n) array
    C : (p, n) array
    eigenvalues : (k,) array, the eigenvalues of A to test
    normalizer : ‖A‖₂ + ‖C‖₂ if already known

    Returns
    -------
    (k,) array of margins in [0, 1].
    """
    scale = pbh_normalizer(A, C) if normalizer is None else normalizer
    return smallest_singular_values(A, C, eigenvalues) / scale


def pbh_null_vectors(A: np.ndarray, C: np.ndarray, eigenvalues: np.ndarray,
                     threshold: float) -> np.ndarray:
    """Right singular vectors of [λI − A; C] with σ ≤ ``threshold`` (absolute), all λ.

    These are the (approximate) unobservable eigenvectors; for a repeated
    eigenvalue with several unobservable directions every small singular value
    contributes one vector.  Returns an (n, k) complex array (k may be 0).
    """
    vectors = []
    n = A.shape[0]
    for lam in np.unique(np.asarray(eigenvalues, dtype=complex)):
        stack = np.vstack([lam * np.eye(n) - A, C.astype(complex)])
        _, s, vh = np.linalg.svd(stack)
        small = np.flatnonzero(s <= threshold)
        vectors.extend(vh[i].conj() for i in small)
    if not vectors:
        return np.zeros((n, 0), dtype=complex)
    return np.array(vectors).T
