"""Robust eigenvalue assignment for a stack of systems at once (state-feedback form).

Given F (n×n), G (n×m) and n poles λⱼ (a conjugate-closed set), find K with
eig(F − G K) = {λⱼ}.  The observer designs call this on the dual pair
(Fᵀ, Hᵀ) and transpose the result.

Method: Kautsky, Nichols & Van Dooren (1985), "method 0", on every node of
the stack simultaneously:

1. G = U Σ Vᵀ (SVD), r = rank G, U = [U₀, U₁] (U₀: first r columns).
2. The eigenvector xⱼ of F − G K for λⱼ must lie in
   Sⱼ = null(U₁ᵀ (F − λⱼ I)), of dimension r.
3. Start with one basis vector of each Sⱼ (copies of a repeated pole take
   different basis vectors), then sweep: replace xⱼ by the unit vector of Sⱼ
   closest to the normal of the span of the other columns — that normal is
   the conjugate of row j of X⁻¹ (orthogonal to every xᵢ, i ≠ j) — which
   raises the conditioning of X, i.e. the robustness of the assigned
   eigenvalues (their sensitivity is bounded by κ(X)).  A complex pole's
   vector is updated and its conjugate partner set to the conjugate vector,
   so X Λ X⁻¹ stays real.
4. G K = F − X Λ X⁻¹, so K = V_r Σ_r⁻¹ U₀ᵀ (F − X Λ X⁻¹).

With one input (r = 1) each Sⱼ is a line, X is fixed and the gain is the
unique one (the one Ackermann's formula gives).  Nodes whose X is singular
or very ill conditioned (κ > 1e12) are marked failed; the caller falls back
to scipy's per-node ``place_poles`` (Tits & Yang 1996).

References
----------
J. Kautsky, N. K. Nichols and P. Van Dooren (1985), "Robust pole assignment
in linear state feedback", Int. J. Control 41(5):1129-1155.
A. L. Tits and Y. Yang (1996), "Globally convergent algorithms for robust
pole assignment by state feedback", IEEE Trans. Automatic Control
41(10):1432-1452.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

SWEEPS = 8
"""Upper bound on the KNV sweeps."""
CONDITION_LIMIT = 1e12


class Assignment(NamedTuple):
    K: np.ndarray
    """(k, m, n) real gains."""
    ok: np.ndarray
    """(k,) bool: False where the batch method could not produce a gain."""
    condition: np.ndarray
    """(k,) κ₂(X) of the eigenvector matrix (robustness measure; inf when failed)."""


def _ordered(poles: np.ndarray) -> tuple[np.ndarray, int]:
    """One pole set as [reals ascending, then pairs (s, s̄) with Im s > 0], and the real count."""
    poles = np.asarray(poles, dtype=complex).copy()
    tiny = np.abs(poles.imag) <= 1e-12 * np.maximum(np.abs(poles), 1e-300)
    poles.imag[tiny] = 0.0
    reals = np.sort(poles[poles.imag == 0].real).astype(complex)
    upper = poles[poles.imag > 0]
    upper = upper[np.lexsort((upper.imag, upper.real))]
    pairs = np.empty(2 * upper.size, dtype=complex)
    pairs[0::2], pairs[1::2] = upper, upper.conj()
    out = np.concatenate([reals, pairs])
    if out.size != poles.size:
        raise ValueError("the pole set is not closed under conjugation")
    return out, int(reals.size)


def _inverse(X: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    try:
        return np.linalg.inv(X), np.ones(X.shape[0], dtype=bool)
    except np.linalg.LinAlgError:
        good = np.linalg.cond(X) < 1e15
        out = np.broadcast_to(np.eye(X.shape[1], dtype=X.dtype), X.shape).copy()
        if np.any(good):
            out[good] = np.linalg.inv(X[good])
        return out, good


def _subspaces(F: np.ndarray, U1: np.ndarray, values: np.ndarray, r: int) -> np.ndarray:
    """Bases (g, q, n, r) of null(U₁ᵀ(F − λ I)) for the q values (g, q) of each node."""
    g, n, _ = F.shape
    q = values.shape[1]
    if r == n:
        return np.broadcast_to(np.eye(n, dtype=values.dtype), (g, q, n, n)).copy()
    M = np.swapaxes(U1, 1, 2)[:, None] @ (F[:, None] - values[:, :, None, None] * np.eye(n))
    _, _, vh = np.linalg.svd(M, full_matrices=True)
    return np.swapaxes(vh[..., n - r:, :].conj(), -1, -2)


def _group(F: np.ndarray, G: np.ndarray, poles: np.ndarray, nreal: int, r: int,
           sweeps: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    g, n, _ = F.shape
    U, sv, Vt = np.linalg.svd(G, full_matrices=True)
    U0, U1 = U[:, :, :r], U[:, :, r:]
    independent = list(range(nreal)) + list(range(nreal, n, 2))
    S_real = _subspaces(F, U1, poles[:, :nreal].real, r) if nreal else None
    S_cplx = _subspaces(F.astype(complex), U1.astype(complex), poles[:, nreal::2], r) \
        if nreal < n else None

    def basis(j: int) -> np.ndarray:
        return S_real[:, j] if j < nreal else S_cplx[:, (j - nreal) // 2]

    X = np.zeros((g, n, n), dtype=complex)
    for count, j in enumerate(independent):
        x = basis(j)[:, :, count % r].astype(complex)
        if j >= nreal and r > 1:
            # a real start vector would make x and x̄ equal: mix in a second basis vector
            x = x + 1j * basis(j)[:, :, (count + 1) % r]
        X[:, :, j] = x / np.linalg.norm(x, axis=1, keepdims=True)
        if j >= nreal:
            X[:, :, j + 1] = X[:, :, j].conj()
    good = np.ones(g, dtype=bool)
    if r > 1:
        for _ in range(sweeps):
            change = 0.0
            for j in independent:
                Y, ok = _inverse(X)
                good &= ok
                S = basis(j)
                y = Y[:, j, :].conj()
                x = S @ np.einsum("gnr,gn->gr", S.conj(), y)[:, :, None]
                x = x[:, :, 0]
                if j < nreal:
                    x = x.real.astype(complex)
                size = np.linalg.norm(x, axis=1)
                usable = size > 1e-300
                x = np.where(usable[:, None], x / np.where(usable, size, 1.0)[:, None],
                             X[:, :, j])
                change = max(change, float(np.max(1.0 - np.abs(
                    np.einsum("gn,gn->g", x.conj(), X[:, :, j])))))
                X[:, :, j] = x
                if j >= nreal:
                    X[:, :, j + 1] = x.conj()
            if change < 1e-8:
                break
    cond = np.linalg.cond(X)
    good &= np.isfinite(cond) & (cond < CONDITION_LIMIT)
    Xs = np.where(good[:, None, None], X, np.eye(n))
    XL = Xs * poles[:, None, :]
    # X Λ X⁻¹ = (X⁻ᵀ (X Λ)ᵀ)ᵀ
    closed = np.swapaxes(np.linalg.solve(np.swapaxes(Xs, 1, 2), np.swapaxes(XL, 1, 2)), 1, 2)
    N = (F - closed).real
    Vr = np.swapaxes(Vt[:, :r, :], 1, 2)
    K = Vr @ ((np.swapaxes(U0, 1, 2) @ N) / sv[:, :r, None])
    good &= np.all(np.isfinite(K), axis=(1, 2))
    return K, good, np.where(good, cond, np.inf)


def assign_eigenvalues(F: np.ndarray, G: np.ndarray, poles: np.ndarray, *,
                       sweeps: int = SWEEPS) -> Assignment:
    """Gains K (k, m, n) with eig(F − G K) = poles, for a stack (module notes).

    Parameters
    ----------
    F : (k, n, n) real
    G : (k, n, m) real
    poles : (k, n) complex, each row closed under conjugation; a pole repeated
        more than rank G times cannot be assigned (separate such poles first)
    sweeps : upper bound on the KNV sweeps

    Returns
    -------
    Assignment

    References
    ----------
    J. Kautsky, N. K. Nichols and P. Van Dooren (1985), "Robust pole
    assignment in linear state feedback", Int. J. Control 41(5):1129-1155.
    """
    F = np.asarray(F, dtype=float)
    G = np.asarray(G, dtype=float)
    k, n, _ = F.shape
    m = G.shape[2]
    K = np.zeros((k, m, n))
    ok = np.zeros(k, dtype=bool)
    cond = np.full(k, np.inf)
    if m == 0 or k == 0:
        return Assignment(K, ok, cond)
    sv = np.linalg.svd(G, compute_uv=False)
    rank = np.sum(sv > max(n, m) * np.finfo(float).eps * sv[:, :1], axis=1)
    ordered = np.empty((k, n), dtype=complex)
    nreal = np.empty(k, dtype=int)
    poles = np.asarray(poles, dtype=complex)
    if np.all(poles == poles[:1]):
        first, count = _ordered(poles[0])
        ordered[:], nreal[:] = first, count
    else:
        for i in range(k):
            ordered[i], nreal[i] = _ordered(poles[i])
    keys = rank * (n + 1) + nreal
    for key in np.unique(keys):
        idx = np.flatnonzero(keys == key)
        r, nr = int(rank[idx[0]]), int(nreal[idx[0]])
        if r == 0:
            continue
        Kg, okg, cg = _group(F[idx], G[idx], ordered[idx], nr, r, sweeps)
        K[idx], ok[idx], cond[idx] = Kg, okg, cg
    return Assignment(K, ok, cond)
