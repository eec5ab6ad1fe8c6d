"""Observer pole policies: which error-dynamics poles a Luenberger design asks for.

Every policy yields n **continuous-time** poles s (1/s); a discrete design
asks for z = e^{s Ts}, the exact image of s under sampling.

``explicit``
    The poles given, as (real, imag) pairs; complex ones in conjugate pairs,
    all with Re s < 0, exactly n of them.
``speedup``
    From the plant eigenvalues λ at the node: s = factor · (−|Re λ| + j Im λ),
    i.e. the plant mode moved ``factor`` times further into the left half
    plane with its damping ratio kept (an unstable plant mode is first
    reflected into the left half plane); then every |Re s| is raised to at
    least ``min_rate`` (imaginary part kept).  A pole that still has
    |Re s| ≤ 1e-9 · max(max |λ|, 1/Ts) (a plant integrator with
    ``min_rate = 0``) would not decay: that is a usage error asking for
    ``min_rate > 0``.
``bandwidth``
    n poles on the circle |s| = ω_n in a Butterworth-like pattern: the
    Butterworth angles from the negative real axis, ψ_k = (2k − 1 − n)·π/(2n)
    for k = 1..n (symmetric about the real axis, the outermost at
    ±(n − 1)π/(2n)), compressed linearly so that the outermost angle is
    arccos ζ: the least damped pair then has damping ratio exactly ζ, the
    others more.  For ζ ≥ 1 (or n = 1) the poles are real, spread evenly over
    −ω_n · [1 − ¼, 1 + ¼] (one pole at −ω_n when n = 1).

Repeated poles
--------------
A pole repeated more often than there are independent measured outputs
cannot be assigned with a diagonalisable error matrix (each pole's
eigenvectors lie in a subspace of dimension rank C; Kautsky, Nichols & Van
Dooren 1985), and repeated poles make the gain sensitive.  Poles that
coincide within 1e-6 relative are therefore separated: the m copies of s
become s · (1 + 0.01 · (i − (m − 1)/2)), i = 0..m−1 (real factors keep the
damping and conjugate symmetry).  ``speedup`` and ``bandwidth`` poles are
always separated; ``explicit`` poles only when a pole is repeated more than
rank C times (the design's message says so).

Consistent poles
----------------
:func:`consistent_poles` picks one pole set for every node, so that the
gains vary smoothly over the grid: the ``speedup`` set of the *slowest* node
— the node whose slowest requested pole has the smallest |Re s| (ties: the
smallest mean |Re s|).  The observer is then ``factor`` × faster than that
node's modes everywhere, and never slower than the grid's slowest mode
sped up.  ``explicit`` and ``bandwidth`` sets do not depend on the node.

References
----------
J. Kautsky, N. K. Nichols and P. Van Dooren (1985), "Robust pole assignment
in linear state feedback", Int. J. Control 41(5):1129-1155.
S. Butterworth (1930), "On the theory of filter amplifiers", Wireless
Engineer 7:536-541 (the pole pattern).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from linobs.errors import UsageError
from linobs.estimator.settings import PolePolicy

COINCIDENT = 1e-6
"""Relative distance below which two poles count as repeated."""
SPREAD = 0.01
"""Relative step between separated copies of a repeated pole."""
STALL = 1e-9
"""|Re s| at or below this (relative to the node's scale) does not decay."""


def _fmt(s: complex) -> str:
    return f"{s.real:.6g}" if s.imag == 0 else f"{s.real:.6g}{s.imag:+.6g}j"


def sorted_poles(poles: np.ndarray) -> np.ndarray:
    """Poles in a fixed order: real part ascending, then imaginary part ascending."""
    poles = np.asarray(poles, dtype=complex)
    return poles[np.lexsort((poles.imag, poles.real))]


def explicit_poles(policy: PolePolicy, n: int) -> np.ndarray:
    """The explicit continuous poles as a complex array, checked.

    Raises
    ------
    UsageError
        Wrong count, a complex pole without its conjugate, or Re s ≥ 0.
    """
    poles = np.array([complex(re, im) for re, im in policy.poles])
    if poles.size != n:
        raise UsageError(f"poles: {poles.size} explicit poles given but the model has {n} "
                         f"states; give exactly {n} (complex ones with their conjugates)")
    bad = [s for s in poles if s.real >= 0]
    if bad:
        raise UsageError(f"poles: the observer pole {_fmt(bad[0])} is not in the left half "
                         "plane; give poles with a negative real part")
    rest = list(poles[poles.imag != 0])
    while rest:
        s = rest.pop()
        partner = [i for i, t in enumerate(rest) if abs(t - np.conj(s)) <= 1e-12 * abs(s)]
        if not partner:
            raise UsageError(f"poles: the complex pole {_fmt(s)} has no conjugate; give both "
                             f"{_fmt(s)} and {_fmt(np.conj(s))}")
        rest.pop(partner[0])
    return sorted_poles(poles)


def speedup_poles(plant_eigenvalues: np.ndarray, policy: PolePolicy,
                  sample_time: float) -> np.ndarray:
    """The speedup rule (module notes) for a stack (k, n) of plant eigenvalues.

    Returns
    -------
    (k, n) complex array of continuous observer poles (repeated ones not yet separated).

    Raises
    ------
    UsageError
        A pole that does not decay (plant integrator with ``min_rate = 0``).
    """
    lam = np.atleast_2d(np.asarray(plant_eigenvalues, dtype=complex))
    real = -policy.factor * np.abs(lam.real)
    real = np.minimum(real, -policy.min_rate)
    poles = real + 1j * policy.factor * lam.imag
    scale = np.maximum(np.max(np.abs(lam), axis=1, initial=0.0), 1.0 / sample_time)
    stalled = np.abs(poles.real) <= STALL * scale[:, None]
    if np.any(stalled):
        row, col = np.argwhere(stalled)[0]
        raise UsageError(f"poles: the plant mode λ = {_fmt(lam[row, col])} 1/s (an integrator) "
                         "gives the speedup observer a pole that does not decay; set "
                         "poles.min_rate > 0 [1/s]")
    return poles


def bandwidth_poles(policy: PolePolicy, n: int) -> np.ndarray:
    """The Butterworth-like pattern of the module notes (n continuous poles)."""
    w, zeta = policy.bandwidth, policy.damping
    if n == 1:
        return np.array([-w + 0j])
    if zeta >= 1.0:
        return -w * (1.0 + 0.25 * np.linspace(-1.0, 1.0, n)) + 0j
    k = np.arange(1, n + 1)
    psi = (2 * k - 1 - n) * np.pi / (2 * n)
    psi *= np.arccos(zeta) / ((n - 1) * np.pi / (2 * n))
    poles = -w * np.cos(psi) + 1j * w * np.sin(psi)
    poles.imag[np.abs(psi) < 1e-15] = 0.0
    return sorted_poles(poles)


def separate_repeated(poles: np.ndarray, limit: int = 0) -> tuple[np.ndarray, bool]:
    """Separate repeated poles (module notes) of one set; ``limit``: allowed multiplicity.

    With ``limit = 0`` every repeated pole is separated; otherwise only groups
    with more than ``limit`` copies.

    Returns
    -------
    (poles, changed)
    """
    poles = sorted_poles(poles).copy()
    used = np.zeros(poles.size, dtype=bool)
    changed = False
    for i in range(poles.size):
        if used[i]:
            continue
        scale = max(abs(poles[i]), 1e-300)
        group = np.flatnonzero(~used & (np.abs(poles - poles[i]) <= COINCIDENT * scale))
        used[group] = True
        m = group.size
        if m > 1 and (limit == 0 or m > limit):
            base = poles[i]
            poles[group] = base * (1.0 + SPREAD * (np.arange(m) - (m - 1) / 2.0))
            changed = True
    return sorted_poles(poles), changed


def consistent_poles(plant_eigenvalues: Sequence[np.ndarray] | np.ndarray, policy: PolePolicy,
                     sample_time: float) -> np.ndarray:
    """One continuous pole set for every node (module notes): the slowest node's.

    Parameters
    ----------
    plant_eigenvalues : per node, the n eigenvalues of A (a (k, n) array or a list)
    policy : the pole policy
    sample_time : Ts (only for the integrator check of ``speedup``)

    Returns
    -------
    (n,) complex array, repeated poles separated for ``speedup`` and ``bandwidth``.
    """
    lam = np.asarray([np.asarray(v, dtype=complex) for v in plant_eigenvalues])
    n = lam.shape[1]
    if policy.kind == "explicit":
        return explicit_poles(policy, n)
    if policy.kind == "bandwidth":
        return separate_repeated(bandwidth_poles(policy, n))[0]
    sets = speedup_poles(lam, policy, sample_time)
    rates = np.abs(sets.real)
    slowest = np.lexsort((rates.mean(axis=1), rates.min(axis=1)))[0]
    return separate_repeated(sets[slowest])[0]


def node_poles(plant_eigenvalues: np.ndarray, policy: PolePolicy, sample_time: float
               ) -> np.ndarray:
    """Per node (k, n) continuous pole sets (the policy applied to each node on its own)."""
    lam = np.atleast_2d(np.asarray(plant_eigenvalues, dtype=complex))
    k, n = lam.shape
    if policy.kind == "explicit":
        return np.tile(explicit_poles(policy, n), (k, 1))
    if policy.kind == "bandwidth":
        return np.tile(separate_repeated(bandwidth_poles(policy, n))[0], (k, 1))
    sets = speedup_poles(lam, policy, sample_time)
    return np.array([separate_repeated(row)[0] for row in sets])


def continuous_to_discrete(poles: np.ndarray, sample_time: float) -> np.ndarray:
    """z = e^{s Ts} (element-wise; conjugate pairs map to conjugate pairs)."""
    return np.exp(np.asarray(poles, dtype=complex) * float(sample_time))
