"""Luenberger observers by pole placement, for a stack of nodes.

Error dynamics of the update forms of :mod:`linobs.estimator.node` (e = x̂ − x):

* continuous observer x̂' = … + L_c (y − ŷ):      e' = (A − L_c C) e
* discrete predictor x̂[k+1] = … + L (y[k] − ŷ[k]):  e[k+1] = (Φ − L C) e[k]
* discrete filter x̂⁺ = x̂⁻ + L (y − C x̂⁻), x̂⁻ = Φ x̂⁺_prev + …:
  e⁺[k] = (I − L C) Φ e⁺[k−1] = (Φ − L (C Φ)) e⁺[k−1].

So every case is "eig(F − L H) = requested poles" for a pair (F, H):
(A, C), (Φ, C) or (Φ, C Φ).  The filter gain is thus placed directly on the
pair (Φ, CΦ) — no inverse of Φ, which would be huge for stiff models — and
(Φ, CΦ) has the observable modes of (Φ, C) since Φ = e^{ATs} is invertible.
Placement is the dual state-feedback problem: K with eig(Fᵀ − Hᵀ K) = poles,
L = Kᵀ (robust assignment, :mod:`linobs.estimator.assignment`; per node
scipy's ``place_poles`` where the batch fails).

A continuous design stores L_c and, as the gain of the discrete update, the
zero-order-hold sampled observer (:func:`~linobs.estimator.discretize.held_injection_gain`):
the predictor gain Γ_L = ∫₀^Ts e^{(A − L_c C)s} ds L_c; for the filter form
Φ⁻¹ Γ_L, which has the same error poles, since (I − Φ⁻¹Γ_L C)Φ =
Φ⁻¹(Φ − Γ_L C)Φ is similar to the predictor's Φ − Γ_L C.  Its sampled error
poles equal e^{sTs} of the continuous ones to second order in Ts only; a node
whose sampled update is not stable (spectral radius ≥ 1) is refused.

Unobservable nodes: a mode μ of F that is unobservable from H is an
eigenvalue of F − L H for every L.  When every such mode is among the
requested poles (within 1e-4 relative), the other poles are placed on the
observable part of the orthogonal staircase (Z = [Z_o, Z_u], ZᵀFZ =
[[F_o, 0], [·, F_u]], HZ = [H_o, 0]; L = Z_o L_o); otherwise the node is
refused, naming the modes.

References
----------
D. G. Luenberger (1964), "Observing the state of a linear system", IEEE
Trans. Military Electronics 8(2):74-80.
J. Kautsky, N. K. Nichols and P. Van Dooren (1985), "Robust pole assignment
in linear state feedback", Int. J. Control 41(5):1129-1155.
G. F. Franklin, J. D. Powell and M. L. Workman (1998), "Digital Control of
Dynamic Systems", 3rd ed., Addison-Wesley, section 8.2 (predictor and
current estimators).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Literal, NamedTuple

import numpy as np

from linobs.estimator.assignment import assign_eigenvalues
from linobs.estimator.discretize import held_injection_gain
from linobs.estimator.pair_screen import PairScreen, mode_text, scaled_pair
from linobs.observability.assessment import default_tolerance
from linobs.observability.staircase import observability_staircase

CONTAINED = 1e-4
"""Relative distance at which a requested pole counts as an unobservable mode."""
PLACEMENT_TOLERANCE = 1e-6
"""Placed poles must match the requested ones to this, relative to max(|poles|, ‖F‖₂)."""

STABILITY_MARGIN = 1e-10
"""A discrete update is stable when its error dynamics' spectral radius is below 1 − this
(a pole closer to 1 is rounding of an unmoved marginal mode, or decays over > 1e10 samples)."""

Form = Literal["predictor", "filter"]
Domain = Literal["discrete", "continuous"]


class ObserverDesigns(NamedTuple):
    """Pole-placement results for a stack of nodes."""

    L: np.ndarray
    """(k, n, p) gain of the discrete update (zeros where refused)."""
    L_continuous: np.ndarray | None
    """(k, n, p) continuous gain (continuous designs)."""
    requested: np.ndarray
    """(k, n) requested poles in the design domain (s or z)."""
    error_poles: np.ndarray
    """(k, n) eigenvalues of the discrete update's error dynamics."""
    ok: np.ndarray
    messages: list[str]
    unmovable: list[np.ndarray]


def _t(M: np.ndarray) -> np.ndarray:
    return np.swapaxes(M, -1, -2)


def error_dynamics(Phi: np.ndarray, C: np.ndarray, L: np.ndarray, form: Form) -> np.ndarray:
    """Φ − L C (predictor) or (I − L C) Φ (filter), stacked."""
    if form == "predictor":
        return Phi - L @ C
    return Phi - L @ (C @ Phi)


def pole_distance(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Per row, the Hausdorff distance between the pole sets a (k, n) and b (k, n)."""
    d = np.abs(a[:, :, None] - b[:, None, :])
    return np.maximum(d.min(axis=2).max(axis=1), d.min(axis=1).max(axis=1))


def design_pair(A: np.ndarray, C: np.ndarray, Phi: np.ndarray, domain: Domain, form: Form
                ) -> tuple[np.ndarray, np.ndarray]:
    """The pair (F, H) whose eig(F − L H) the gain places (module notes)."""
    if domain == "continuous":
        return A, C
    return (Phi, C) if form == "predictor" else (Phi, C @ Phi)


def _per_node_placement(F: np.ndarray, H: np.ndarray, poles: np.ndarray) -> np.ndarray | None:
    """scipy's robust placement on the dual pair (Tits & Yang 1996), None on failure."""
    try:
        import scipy.signal  # slow to import (0.5 s); needed only for the fallback

        result = scipy.signal.place_poles(F.T, H.T, poles, method="YT", maxiter=50)
    except (ValueError, np.linalg.LinAlgError):
        return None
    return np.asarray(result.gain_matrix, dtype=float).T


def _observable_part_gain(F: np.ndarray, H: np.ndarray, poles: np.ndarray, sx: np.ndarray,
                          sy: np.ndarray) -> np.ndarray | None:
    """Place the requested poles other than the unobservable modes on the observable part."""
    F_s, H_s = scaled_pair(F[None], H[None], sx[None], sy[None])
    F_s, H_s = F_s[0], H_s[0]
    n = F.shape[0]
    normalizer = float(np.linalg.norm(F_s, 2) + np.linalg.norm(H_s, 2)) or 1.0
    stair = observability_staircase(F_s, H_s, default_tolerance(n) * normalizer)
    no = stair.observable_dimension
    if stair.unobservable_dimension == 0:
        return None
    remaining = list(np.asarray(poles, dtype=complex))
    for mu in np.linalg.eigvals(stair.unobservable_matrix):
        dist = [abs(p - mu) for p in remaining]
        j = int(np.argmin(dist))
        if dist[j] > CONTAINED * max(abs(mu), 1e-12):
            return None
        remaining.pop(j)
    if no == 0:
        return np.zeros((n, H.shape[0]))
    Zo = stair.transform[:, :no]
    F_o, H_o = Zo.T @ F_s @ Zo, H_s @ Zo
    got = assign_eigenvalues(F_o.T[None], H_o.T[None], np.asarray(remaining)[None])
    L_o = got.K[0].T if got.ok[0] else _per_node_placement(F_o, H_o, np.asarray(remaining))
    if L_o is None:
        return None
    L_s = Zo @ L_o
    return L_s * sx[:, None] / sy[None, :]


def _refusal(modes: np.ndarray, states: Sequence[str], involved: Sequence[Sequence[int]],
             outputs: Sequence[str], domain: Domain, sample_time: float) -> str:
    parts = [f"{mode_text(mu, domain, sample_time)} (in {', '.join(states[j] for j in js)})"
             for mu, js in zip(modes, involved)]
    watched = sorted({states[j] for js in involved for j in js})
    return (f"pole placement refused: {'; '.join(parts)} cannot be observed from "
            f"{', '.join(outputs)} here, so no observer gain moves them and the requested poles "
            f"are impossible; measure an output that sees {', '.join(watched)}, keep the mode "
            "among explicit poles, or use a Kalman design (it accepts stable unobservable modes)")


def luenberger_designs(A: np.ndarray, C: np.ndarray, Phi: np.ndarray, poles_s: np.ndarray, *,
                       form: Form, domain: Domain, sample_time: float, screen: PairScreen,
                       sx: np.ndarray, sy: np.ndarray, states: Sequence[str],
                       outputs: Sequence[str], active: np.ndarray) -> ObserverDesigns:
    """Pole-placement observers for the ``active`` nodes of a stack (module notes).

    Parameters
    ----------
    A, C, Phi : (k, n, n), (k, p, n), (k, n, n) local models and their sampling
    poles_s : (k, n) requested continuous poles (conjugate-closed rows)
    form, domain, sample_time : from the settings
    screen : unobservable modes of the design pair (A, C) or (Φ, C)
    sx, sy : (k, n), (k, p) scale factors of states and measured outputs
    states, outputs : names (for the messages)
    active : (k,) nodes to design (the others are left refused with an empty message)

    Returns
    -------
    ObserverDesigns

    References
    ----------
    J. Kautsky, N. K. Nichols and P. Van Dooren (1985), "Robust pole
    assignment in linear state feedback", Int. J. Control 41(5):1129-1155.
    """
    k, n, _ = A.shape
    p = C.shape[1]
    requested = poles_s if domain == "continuous" else np.exp(poles_s * sample_time)
    F, H = design_pair(A, C, Phi, domain, form)
    Ld = np.zeros((k, n, p))
    ok = np.zeros(k, dtype=bool)
    messages = [""] * k
    unmovable: list[np.ndarray] = [np.zeros(0, dtype=complex)] * k
    observable = active & np.array([u.size == 0 for u in screen.unobservable])
    idx = np.flatnonzero(observable)
    if idx.size:
        got = assign_eigenvalues(_t(F[idx]), _t(H[idx]), requested[idx])
        Ld[idx] = _t(got.K)
        ok[idx] = got.ok
    for i in np.flatnonzero(active & ~observable):
        unmovable[i] = screen.unobservable[i]
        L_i = _observable_part_gain(F[i], H[i], requested[i], sx[i], sy[i])
        if L_i is None:
            messages[i] = _refusal(screen.unobservable[i], states, screen.mode_states[i],
                                   outputs, domain, sample_time)
            continue
        Ld[i], ok[i] = L_i, True
        messages[i] = ("the unobservable modes " + ", ".join(
            mode_text(mu, domain, sample_time) for mu in screen.unobservable[i]) +
            " are kept (they are among the requested poles)")
    # verify the placement; per node fallback to scipy where the batch result is off
    scale = np.maximum(np.max(np.abs(requested), axis=1), np.linalg.norm(F, 2, axis=(1, 2)))
    placed = np.linalg.eigvals(F - Ld @ H)
    off = ok & (pole_distance(placed, requested) > PLACEMENT_TOLERANCE * scale)
    retry = np.flatnonzero((observable & ~ok) | (off & observable))
    for i in retry:
        L_i = _per_node_placement(F[i], H[i], requested[i])
        if L_i is not None and pole_distance(np.linalg.eigvals(F[i] - L_i @ H[i])[None],
                                             requested[i][None])[0] <= \
                PLACEMENT_TOLERANCE * scale[i]:
            Ld[i], ok[i] = L_i, True
            messages[i] = "placed per node (scipy's place_poles): the batch assignment failed"
        else:
            ok[i] = False
            messages[i] = ("pole placement failed numerically at this node (the pair is close "
                           "to unobservable for these poles); choose slower or different poles, "
                           "or add a measured output")
    # the gain the discrete update uses
    L_cont = None
    if domain == "continuous":
        L_cont = Ld
        L = held_injection_gain(A, C, np.where(ok[:, None, None], Ld, 0.0), sample_time)
        if form == "filter":
            L = np.linalg.solve(Phi, L)
    else:
        L = Ld
    L = np.where(ok[:, None, None], L, 0.0)
    E = error_dynamics(Phi, C, L, form)
    error_poles = np.linalg.eigvals(np.where(np.isfinite(E), E, 0.0))
    if domain == "continuous":
        radius = np.max(np.abs(error_poles), axis=1)
        bad = ok & ~(radius < 1.0 - STABILITY_MARGIN)
        for i in np.flatnonzero(bad):
            ok[i] = False
            messages[i] = (f"Luenberger design refused: the continuous observer sampled at "
                           f"Ts = {sample_time:g} s has error "
                           f"dynamics of spectral radius {radius[i]:.4g}, not below 1 (no decay); "
                           "use a shorter sample_time, slower poles, or domain = 'discrete'")
    return ObserverDesigns(L=L, L_continuous=L_cont, requested=requested,
                           error_poles=error_poles, ok=ok, messages=messages,
                           unmovable=unmovable)
