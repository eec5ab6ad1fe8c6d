"""Steady-state Kalman filters for a stack of nodes (discrete at Ts, or continuous).

Noise (conventions of :mod:`linobs.estimator.settings`): Q_c = diag(q) +
B diag(r_u) Bᵀ (PSD on the state derivative), sampled by Van Loan's method
to Q; R = diag(σ²) per sample; a continuous design uses R_c = R · Ts.

Discrete (prior covariance P⁻ from the filter Riccati equation
P⁻ = Φ P⁻ Φᵀ − Φ P⁻ Cᵀ S⁻¹ C P⁻ Φᵀ + Q, S = C P⁻ Cᵀ + R)::

    filter gain       L_f = P⁻ Cᵀ S⁻¹,        P⁺ = P⁻ − L_f S L_fᵀ
    form "filter":    L = L_f        (x̂⁺ = x̂⁻ + L (y − ŷ⁻);  e⁺ = (I − L C) Φ e⁺)
    form "predictor": L = Φ L_f      (x̂[k+1] = Φ x̂ + … + Φ L_f (y[k] − ŷ[k]), the one-step
                                      predictor of the same filter; e = (Φ − L C) e)

``error_std`` is √diag P⁺ for the filter form and √diag P⁻ for the predictor.

Continuous: 0 = A P + P Aᵀ − P Cᵀ R_c⁻¹ C P + Q_c, L_c = P Cᵀ R_c⁻¹; the
discrete update uses the zero-order-hold sampled observer (as for a
continuous Luenberger design, :mod:`linobs.estimator.luenberger`); P_prior =
P_post = P and ``error_std`` = √diag P.

A steady-state Kalman filter exists where the pair (F, C) is detectable and
the noise leaves no mode on the stability boundary unexcited (then the
stabilizing Riccati solution exists).  Undetectable nodes are refused; nodes
where the Riccati equation has no stabilizing solution are refused naming the
modes the noise does not reach.  Where the noise does not reach an unstable
mode that is observable, the stabilizing solution still exists; the design
is kept and its message says so.  Every design's discrete error dynamics is
checked to have spectral radius < 1.

References
----------
R. E. Kalman (1960), "A new approach to linear filtering and prediction
problems", Trans. ASME J. Basic Engineering 82(1):35-45.
R. E. Kalman and R. S. Bucy (1961), "New results in linear filtering and
prediction theory", Trans. ASME J. Basic Engineering 83(1):95-108.
B. D. O. Anderson and J. B. Moore (1979), "Optimal Filtering", Prentice-Hall,
chapter 4 (steady-state filter and predictor; existence of the stabilizing
solution).
C. F. Van Loan (1978), "Computing integrals involving the matrix exponential",
IEEE Trans. Automatic Control 23(3):395-404.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Literal, NamedTuple

import numpy as np

from linobs.errors import UsageError
from linobs.estimator.discretize import held_injection_gain, process_noise_covariance
from linobs.estimator.luenberger import STABILITY_MARGIN, error_dynamics
from linobs.estimator.pair_screen import PairScreen, mode_text, screen_pairs
from linobs.estimator.riccati_batch import (
    filter_riccati_continuous,
    filter_riccati_discrete,
)
from linobs.estimator.settings import EstimatorSettings
from linobs.model.catalogue import unknown_name_message

Form = Literal["predictor", "filter"]
Domain = Literal["discrete", "continuous"]


class KalmanDesigns(NamedTuple):
    """Steady-state Kalman results for a stack of nodes."""

    L: np.ndarray
    L_continuous: np.ndarray | None
    P_prior: np.ndarray
    P_post: np.ndarray
    Q: np.ndarray
    R: np.ndarray
    error_poles: np.ndarray
    ok: np.ndarray
    messages: list[str]
    unmovable: list[np.ndarray]


def _entries(table: Mapping[str, float], names: Sequence[str], what: str, unit: str
             ) -> np.ndarray:
    values = np.zeros(len(names))
    index = {n: i for i, n in enumerate(names)}
    for name, value in table.items():
        if name not in index:
            raise UsageError(f"estimator.{what}: {unknown_name_message(name, list(names))}")
        if not np.isfinite(value) or value < 0:
            raise UsageError(f"estimator.{what}[{name!r}] = {value}: give a finite value ≥ 0 "
                             f"[{unit}]")
        values[index[name]] = float(value)
    return values


def noise_levels(settings: EstimatorSettings, states: Sequence[str], inputs: Sequence[str],
                 outputs: Sequence[str], measured: Sequence[str]
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The per-state PSD q, per-input PSD r_u and per-measured-output σ, checked.

    States without an entry get q = 0, inputs r_u = 0; every measured output
    needs σ > 0.

    Raises
    ------
    UsageError
        An unknown name, a negative value, or a measured output without σ > 0.
    """
    q = _entries(settings.process_noise, states, "process_noise", "unit²/s")
    r_u = _entries(settings.input_noise, inputs, "input_noise", "unit²·s")
    _entries(settings.measurement_noise, outputs, "measurement_noise", "unit")
    missing = [o for o in measured if o not in settings.measurement_noise]
    if missing:
        listing = ", ".join(f"{o!r} = σ" for o in missing)
        raise UsageError(f"estimator.measurement_noise has no standard deviation for the measured "
                         f"output(s) {', '.join(missing)}; add {listing} (one sample's σ) to "
                         "[estimator.measurement_noise]")
    sigma = np.array([settings.measurement_noise[o] for o in measured], dtype=float)
    zero = [o for o, s in zip(measured, sigma) if not s > 0]
    if zero:
        raise UsageError(f"estimator.measurement_noise: the σ of {', '.join(zero)} is 0; a "
                         "Kalman design needs σ > 0 for every measured output")
    return q, r_u, sigma


def continuous_noise(B: np.ndarray, q: np.ndarray, r_u: np.ndarray) -> np.ndarray:
    """Q_c = diag(q) + B diag(r_u) Bᵀ for a stack B (k, n, m)."""
    return np.diag(q)[None] + (B * r_u[None, None, :]) @ np.swapaxes(B, 1, 2)


def _psd_root(Q: np.ndarray) -> np.ndarray:
    w, v = np.linalg.eigh(0.5 * (Q + np.swapaxes(Q, 1, 2)))
    return (v * np.sqrt(np.clip(w, 0.0, None))[:, None, :]) @ np.swapaxes(v, 1, 2)


def unreached_modes(F: np.ndarray, Q: np.ndarray, sx: np.ndarray, domain: Domain
                    ) -> PairScreen:
    """Modes of F that the noise Q does not reach (uncontrollable from Q^½), stacked.

    The PBH screen of the dual pair (F̃ᵀ, Q̃^½) on the scaled model
    (F̃ = S⁻¹ F S, Q̃ = S⁻¹ Q S⁻¹); ``detectable`` of the result means
    "stabilizable by the noise".

    References
    ----------
    M. L. J. Hautus (1969), "Controllability and observability conditions of
    linear autonomous systems", Indag. Math. 31:443-448.
    """
    F_s = F * sx[:, None, :] / sx[:, :, None]
    Q_s = Q / (sx[:, :, None] * sx[:, None, :])
    return screen_pairs(np.swapaxes(F_s, 1, 2), _psd_root(Q_s), None, None, domain)


def kalman_designs(A: np.ndarray, B: np.ndarray, C: np.ndarray, Phi: np.ndarray, *,
                   q: np.ndarray, r_u: np.ndarray, sigma: np.ndarray, form: Form,
                   domain: Domain, sample_time: float, screen: PairScreen, sx: np.ndarray,
                   states: Sequence[str], outputs: Sequence[str], active: np.ndarray
                   ) -> KalmanDesigns:
    """Steady-state Kalman designs for the ``active`` nodes of a stack (module notes).

    Parameters
    ----------
    A, B, C, Phi : (k, n, n), (k, n, m), (k, p, n), (k, n, n)
    q, r_u, sigma : from :func:`noise_levels`
    form, domain, sample_time : from the settings
    screen : unobservable modes of the design pair ((A, C) or (Φ, C))
    sx : (k, n) state scale factors
    states, outputs : names for the messages
    active : nodes to design

    Returns
    -------
    KalmanDesigns

    References
    ----------
    B. D. O. Anderson and J. B. Moore (1979), "Optimal Filtering",
    Prentice-Hall, chapter 4.
    """
    k, n, _ = A.shape
    p = C.shape[1]
    Ts = float(sample_time)
    Qc = continuous_noise(B, q, r_u)
    Q = process_noise_covariance(np.where(active[:, None, None], A, 0.0), Qc, Ts)
    R = np.broadcast_to(np.diag(sigma ** 2), (k, p, p)).copy()
    messages = [""] * k
    unmovable: list[np.ndarray] = [np.zeros(0, dtype=complex)] * k
    for i in np.flatnonzero(active & ~screen.detectable):
        unmovable[i] = screen.unobservable[i]
        unstable = [f"{mode_text(mu, domain, Ts)} (in {', '.join(states[j] for j in js)})"
                    for mu, js in zip(screen.unobservable[i], screen.mode_states[i])]
        messages[i] = (f"Kalman design refused: the pair is not detectable from "
                       f"{', '.join(outputs)} here — the unobservable mode(s) "
                       f"{'; '.join(unstable)} include one that does not decay, so no gain "
                       "makes the error converge; measure an output that sees it")
    for i in np.flatnonzero(active & screen.detectable):
        unmovable[i] = screen.unobservable[i]
    todo = active & screen.detectable
    idx = np.flatnonzero(todo)
    P = np.full((k, n, n), np.nan)
    method = ["failed"] * k
    F = A if domain == "continuous" else Phi
    if idx.size:
        if domain == "discrete":
            sol = filter_riccati_discrete(Phi[idx], C[idx], Q[idx], R[idx])
        else:
            sol = filter_riccati_continuous(A[idx], C[idx], Qc[idx], R[idx] * Ts)
        P[idx] = sol.P
        for j, i in enumerate(idx):
            method[i] = sol.method[j]
    ok = todo & np.array([m != "failed" for m in method])
    Pz = np.where(ok[:, None, None], P, 0.0)
    L_cont = None
    if domain == "discrete":
        S = C @ Pz @ np.swapaxes(C, 1, 2) + R
        Lf = np.swapaxes(np.linalg.solve(S, C @ Pz), 1, 2)        # P⁻ Cᵀ S⁻¹ (S symmetric)
        P_post = Pz - Lf @ S @ np.swapaxes(Lf, 1, 2)
        P_post = 0.5 * (P_post + np.swapaxes(P_post, 1, 2))
        L = Lf if form == "filter" else Phi @ Lf
        P_prior = Pz
    else:
        L_cont = np.swapaxes(np.linalg.solve(R * Ts, C @ Pz), 1, 2)  # P Cᵀ R_c⁻¹
        L = held_injection_gain(A, C, L_cont, Ts)
        if form == "filter":
            L = np.linalg.solve(Phi, L)
        P_prior = P_post = Pz
    L = np.where(ok[:, None, None], L, 0.0)
    E = error_dynamics(Phi, C, L, form)
    error_poles = np.linalg.eigvals(np.where(np.isfinite(E), E, 0.0))
    radius = np.max(np.abs(error_poles), axis=1)
    # what the noise does not reach (for the messages), on the nodes that were designed
    # only nodes with a mode that does not decay by itself can miss one the noise must reach
    lam = screen.eigenvalues
    marginal = np.any(lam.real >= -1e-9 * np.maximum(1.0, np.abs(lam)), axis=1) \
        if domain == "continuous" else np.any(np.abs(lam) >= 1.0 - 1e-9, axis=1)
    stable = radius < 1.0 - STABILITY_MARGIN
    check = np.flatnonzero(todo & (marginal | ~ok | ~stable))
    reached: dict[int, tuple[np.ndarray, list[int]]] = {}
    if check.size:
        reach = unreached_modes(F[check], (Qc if domain == "continuous" else Q)[check],
                                sx[check], domain)
        reached = {int(i): (reach.unobservable[j], reach.mode_states[j])
                   for j, i in enumerate(check)}
    for i in idx:
        modes, dominant = reached.get(int(i), (np.zeros(0, dtype=complex), []))
        names = [f"{mode_text(mu, domain, Ts)} (in {', '.join(states[j] for j in js)})"
                 for mu, js in zip(modes, dominant)]
        slow = [(t, j) for t, mu, j in zip(names, modes, dominant)
                if (mu.real >= -1e-9 * max(1.0, abs(mu)) if domain == "continuous"
                    else abs(mu) >= 1.0 - 1e-9)]
        unstable = [t for t, _ in slow]
        if ok[i] and not stable[i] and domain == "continuous" and not unstable:
            ok[i] = False
            messages[i] = (f"Kalman design refused: the continuous filter sampled at Ts = {Ts:g} s "
                           f"has error dynamics of spectral radius {radius[i]:.4g}, not below 1 "
                           "(the sampled update does not converge); use a shorter sample_time "
                           "or domain = 'discrete'")
            continue
        if not ok[i] or not stable[i]:
            ok[i] = False
            cause = (f"the process noise does not reach {'; '.join(unstable)}, which does "
                     "not decay by itself" if unstable else
                     "the Riccati equation has no stabilizing solution at this node")
            targets = ", ".join(sorted({states[j] for _, js in slow for j in js}))
            fix = (f"; give process_noise for {targets} (or input_noise on an input that "
                   "drives it)" if unstable else "; check the noise levels and the local model")
            messages[i] = f"Kalman design refused: {cause}, so no steady-state gain exists{fix}"
            continue
        notes = []
        if method[i] == "scipy":
            notes.append("Riccati equation solved per node by scipy (the batched doubling "
                         "iteration did not converge)")
        if unstable:
            notes.append(f"the process noise does not reach the unstable {'; '.join(unstable)}; "
                         "the gain comes from the stabilizing Riccati solution")
        messages[i] = "; ".join(notes)
    return KalmanDesigns(L=L, L_continuous=L_cont, P_prior=P_prior, P_post=P_post, Q=Q, R=R,
                         error_poles=error_poles, ok=ok, messages=messages, unmovable=unmovable)
