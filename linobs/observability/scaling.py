"""Scaling of a local model by nominal values before any rank or tolerance decision.

With the diagonal scalings S_x = diag(x_nom) and S_y = diag(y_nom), the
scaled variables x̃ = S_x⁻¹ x and ỹ = S_y⁻¹ y obey

    dx̃/dt = Ã x̃,   ỹ = C̃ x̃,   Ã = S_x⁻¹ A S_x,   C̃ = S_y⁻¹ C S_x.

Ã is similar to A (same eigenvalues); a unit change of every scaled state
is a change of one nominal value, so singular values and margins compare
like with like.  A nominal that is zero, negative or not finite cannot
scale anything: its magnitude is used when it is positive and finite, and 1
otherwise (the variable is then analyzed in its own units).

References
----------
G. H. Golub and C. F. Van Loan (2013), "Matrix Computations", 4th ed., Johns
Hopkins University Press, section 3.5.2 (row and column scaling before rank
and condition decisions).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np

from linobs.errors import UsageError

from linobs.observability.report import Scaling


def usable_nominals(nominal: np.ndarray | Sequence[float], size: int) -> np.ndarray:
    """Positive finite scale factors from declared nominal values.

    Parameters
    ----------
    nominal
        Declared nominal values (any sign; zeros or non-finite values allowed).
    size
        Expected length.

    Returns
    -------
    numpy.ndarray
        ``|nominal|`` where that is positive and finite, 1 elsewhere.
    """
    values = np.abs(np.asarray(nominal, dtype=float).reshape(-1))
    if values.size != size:
        raise ValueError(f"expected {size} nominal values, got {values.size}")
    good = np.isfinite(values) & (values > 0.0)
    return np.where(good, values, 1.0)


def scale_system(A: np.ndarray, C: np.ndarray, state_scale: np.ndarray,
                 output_scale: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The scaled pair (Ã, C̃) = (S_x⁻¹ A S_x, S_y⁻¹ C S_x).

    Parameters
    ----------
    A : (n, n) array
    C : (p, n) array
    state_scale : (n,) array of positive factors (see :func:`usable_nominals`)
    output_scale : (p,) array of positive factors

    Returns
    -------
    (Ã, C̃)
    """
    A = np.asarray(A, dtype=float)
    C = np.asarray(C, dtype=float).reshape(-1, A.shape[0])
    A_s = A * state_scale[None, :] / state_scale[:, None]
    C_s = C * state_scale[None, :] / output_scale[:, None]
    return A_s, C_s


def scale_output_row(row: np.ndarray, state_scale: np.ndarray, nominal: float) -> np.ndarray:
    """One output row c (unscaled) as a scaled row c̃ = c S_x / y_nom."""
    factor = float(usable_nominals([nominal], 1)[0])
    return np.asarray(row, dtype=float).reshape(-1) * state_scale / factor


def scaling_record(state_names: Sequence[str], state_scale: np.ndarray,
                   output_names: Sequence[str], output_scale: np.ndarray) -> Scaling:
    """The :class:`~linobs.observability.report.Scaling` that was used."""
    return Scaling(states={n: float(v) for n, v in zip(state_names, state_scale)},
                   outputs={n: float(v) for n, v in zip(output_names, output_scale)})


def scales_with_overrides(names: Sequence[str], nominal: np.ndarray | Sequence[float],
                          overrides: Mapping[str, float] | None) -> np.ndarray:
    """Usable nominal values with some replaced by explicit scales (by name).

    Raises
    ------
    UsageError
        An override for a name not in ``names``, or a scale that is not positive and finite.
    """
    scales = usable_nominals(nominal, len(names))
    for name, value in (overrides or {}).items():
        if name not in names:
            from linobs.model.catalogue import unknown_name_message
            raise UsageError(f"scale given for {name!r}: " + unknown_name_message(name, list(names)))
        if not (np.isfinite(value) and value > 0):
            raise UsageError(f"the scale of {name} must be positive and finite, got {value!r}")
        scales[list(names).index(name)] = float(value)
    return scales
