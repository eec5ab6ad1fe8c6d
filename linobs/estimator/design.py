"""Estimator designs at the grid's nodes: the whole batch at once.

:func:`design_nodes` takes the local models of every node and returns one
:class:`~linobs.estimator.node.NodeDesign` each.  The per-node arithmetic is
done on stacked arrays (points, n, n): the zero-order hold, the
observability screen of the design pair, the pole placement or the Riccati
equations, the gains and their error dynamics; only rare nodes (nearly
unobservable, batch iteration not converged) take a per-node path, and the
NodeDesign objects are built at the end.

Which pair is designed on, and what the gain means, is set out in
:mod:`linobs.estimator.luenberger` (pole placement, including the filter
form on (Φ, CΦ)) and :mod:`linobs.estimator.kalman` (steady-state filters).

Pole conventions in the result: ``requested_poles`` and ``unmovable_modes``
are in the design domain (s in 1/s for a continuous design, z for a
discrete one); ``error_poles`` are always the eigenvalues of the error
dynamics of the discrete update the node runs (z-plane).  Kalman nodes
store Q (the sampled process-noise covariance of Van Loan's method) and
R = diag(σ²) — the covariances the sampled plant sees — also for a
continuous design, whose Riccati equation used Q_c and R_c = R · Ts.

References
----------
W. J. Rugh and J. S. Shamma (2000), "Research on gain scheduling",
Automatica 36(10):1401-1425 (local designs at frozen operating points).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import TYPE_CHECKING

import numpy as np

from linobs.errors import UsageError
from linobs.estimator.discretize import zero_order_hold
from linobs.estimator.kalman import kalman_designs, noise_levels
from linobs.estimator.luenberger import luenberger_designs
from linobs.estimator.node import NodeDesign
from linobs.estimator.pair_screen import screen_pairs
from linobs.estimator.poles import (
    consistent_poles,
    explicit_poles,
    node_poles,
    separate_repeated,
)
from linobs.estimator.settings import EstimatorSettings
from linobs.model.catalogue import unknown_name_message

if TYPE_CHECKING:
    from linobs.linear.linear_model import LinearModel

CHUNK = 2048
"""Nodes per batch (memory bound; progress is reported per chunk)."""

Progress = Callable[[int, int], None]


def measured_outputs(declared: Sequence[str], settings: EstimatorSettings,
                     outputs: Sequence[str] | None = None) -> list[str]:
    """The measured outputs: ``outputs``, else ``settings.outputs``, else every declared output.

    Raises
    ------
    UsageError
        An unknown name, a repeated one, or no output at all.
    """
    chosen = list(outputs) if outputs is not None else (
        list(settings.outputs) if settings.outputs is not None else list(declared))
    for name in chosen:
        if name not in declared:
            raise UsageError(f"estimator outputs: {unknown_name_message(name, list(declared))}")
    if len(set(chosen)) != len(chosen):
        raise UsageError(f"estimator outputs: {', '.join(chosen)} names an output twice; list "
                         "each measured output once")
    if not chosen:
        raise UsageError("an estimator needs at least one measured output; set "
                         "estimator.outputs (or the study's outputs)")
    return chosen


def _nominals(values: np.ndarray) -> np.ndarray:
    """|nominal| where positive and finite, else 1 (the observability package's rule)."""
    a = np.abs(values)
    return np.where(np.isfinite(a) & (a > 0), a, 1.0)


def _pairs(values: np.ndarray) -> list[tuple[float, float]]:
    if not len(values):
        return []
    v = np.asarray(values, dtype=complex)
    return list(zip(v.real.tolist(), v.imag.tolist()))


def _pair_rows(values: np.ndarray) -> list[list[tuple[float, float]]]:
    v = np.asarray(values, dtype=complex)
    return [list(zip(re, im)) for re, im in zip(v.real.tolist(), v.imag.tolist())]


def _same_names(models: Sequence[LinearModel]) -> None:
    first = models[0]
    for i, lm in enumerate(models[1:], start=1):
        if lm.states != first.states or lm.inputs != first.inputs or lm.outputs != first.outputs:
            raise UsageError(f"the local model of node {i} has other states, inputs or outputs "
                             "than node 0; design every node of one schedule from the same model")


def _pole_sets(A: np.ndarray, finite: np.ndarray, settings: EstimatorSettings, rank: int,
               notes: list[str]) -> np.ndarray:
    """(k, n) continuous poles requested at every node (poles module rules)."""
    k, n, _ = A.shape
    policy = settings.poles
    if policy.kind == "explicit":
        poles, changed = separate_repeated(explicit_poles(policy, n), limit=max(rank, 1))
        if changed:
            notes.append("explicit poles repeated more often than there are independent "
                         "measured outputs were separated by 1 %")
        return np.tile(poles, (k, 1))
    lam = np.zeros((k, n), dtype=complex)
    if np.any(finite):
        lam[finite] = np.linalg.eigvals(A[finite])
    if settings.consistent_poles and np.any(finite):
        return np.tile(consistent_poles(lam[finite], policy, settings.sample_time), (k, 1))
    if np.any(finite):
        out = np.tile(-np.ones(n, dtype=complex), (k, 1))
        out[finite] = node_poles(lam[finite], policy, settings.sample_time)
        return out
    return np.tile(-np.ones(n, dtype=complex), (k, 1))


def design_nodes(models: Sequence[LinearModel], settings: EstimatorSettings, *,
                 outputs: Sequence[str] | None = None,
                 progress: Progress | None = None) -> list[NodeDesign]:
    """The estimator design at every node (module notes).

    Parameters
    ----------
    models : the local models, one per node, all with the same states, inputs and outputs
    settings : what to design (kind, domain, form, noise, pole policy)
    outputs : measured outputs (default ``settings.outputs``, else every output)
    progress : called as ``progress(done, total)`` after each batch of nodes

    Returns
    -------
    list of NodeDesign, in the order of ``models``; nodes that cannot have a
    design are ``status = "refused"`` with a message saying why.

    Raises
    ------
    UsageError
        Inconsistent models, unknown outputs, missing measurement noise, or a
        pole policy that cannot give decaying poles.

    References
    ----------
    W. J. Rugh and J. S. Shamma (2000), "Research on gain scheduling",
    Automatica 36(10):1401-1425.
    """
    models = list(models)
    if not models:
        return []
    _same_names(models)
    first = models[0]
    states, inputs = list(first.states), list(first.inputs)
    measured = measured_outputs(first.outputs, settings, outputs)
    rows = [first.outputs.index(o) for o in measured]
    n, m, p = len(states), len(inputs), len(measured)
    if n == 0:
        raise UsageError("the model has no states; an estimator needs at least one state")
    noise = noise_levels(settings, states, inputs, first.outputs, measured) \
        if settings.kind == "kalman" else None

    def stacked(name: str, shape: tuple[int, ...]) -> np.ndarray:
        try:
            out = np.array([getattr(lm, name) for lm in models], dtype=float)
        except ValueError:
            out = None
        if out is None or out.shape != (len(models), *shape):
            raise UsageError(f"a local model's {name} does not have the shape {shape} of its "
                             "names; linearize again")
        return out

    p_all = len(first.outputs)
    A, B = stacked("A", (n, n)), stacked("B", (n, m))
    C, D = stacked("C", (p_all, n))[:, rows, :], stacked("D", (p_all, m))[:, rows, :]
    x0, u0, dx0 = stacked("x0", (n,)), stacked("u0", (m,)), stacked("dx0", (n,))
    y0 = stacked("y0", (p_all,))[:, rows]
    sx = _nominals(stacked("state_nominal", (n,)))
    sy = _nominals(stacked("output_nominal", (p_all,))[:, rows])
    finite = np.all(np.isfinite(A), axis=(1, 2)) & np.all(np.isfinite(B), axis=(1, 2)) & \
        np.all(np.isfinite(C), axis=(1, 2)) & np.all(np.isfinite(D), axis=(1, 2)) & \
        np.all(np.isfinite(np.hstack([x0, u0, y0, dx0])), axis=1)
    k = len(models)
    A_safe = np.where(finite[:, None, None], A, 0.0)
    B_safe = np.where(finite[:, None, None], B, 0.0)
    C_safe = np.where(finite[:, None, None], C, 0.0)
    notes: list[str] = []
    rank = int(np.min(np.linalg.matrix_rank(C_safe[finite]))) \
        if settings.kind == "luenberger" and np.any(finite) else p
    poles_s = _pole_sets(A_safe, finite, settings, rank, notes) \
        if settings.kind == "luenberger" else None

    nodes: list[NodeDesign] = []
    for start in range(0, k, CHUNK):
        sl = slice(start, min(start + CHUNK, k))
        nodes.extend(_design_chunk(
            A_safe[sl], B_safe[sl], C_safe[sl], finite[sl], sx[sl], sy[sl],
            None if poles_s is None else poles_s[sl], noise, settings, states, inputs,
            measured, notes,
            raw={"A": A[sl], "B": B[sl], "C": C[sl], "D": D[sl], "x0": x0[sl], "u0": u0[sl],
                 "y0": y0[sl], "dx0": dx0[sl]}))
        if progress is not None:
            progress(min(start + CHUNK, k), k)
    return nodes


def _design_chunk(A: np.ndarray, B: np.ndarray, C: np.ndarray, finite: np.ndarray,
                  sx: np.ndarray, sy: np.ndarray, poles_s: np.ndarray | None,
                  noise: tuple[np.ndarray, np.ndarray, np.ndarray] | None,
                  settings: EstimatorSettings, states: list[str], inputs: list[str],
                  measured: list[str], notes: list[str], raw: dict[str, np.ndarray]
                  ) -> list[NodeDesign]:
    Ts = float(settings.sample_time)
    k = A.shape[0]
    Phi, Gamma, Gamma0 = zero_order_hold(A, B, Ts)
    bad = ~finite
    for M in (Phi, Gamma, Gamma0):
        M[bad] = np.nan
    F_screen = A if settings.domain == "continuous" else np.where(bad[:, None, None], 0.0, Phi)
    screen = screen_pairs(F_screen, C, sx, sy, settings.domain)
    Phi_safe = np.where(bad[:, None, None], 0.0, Phi)
    common = {"form": settings.form, "domain": settings.domain, "sample_time": Ts,
              "screen": screen, "sx": sx, "states": states, "outputs": measured,
              "active": finite}
    if settings.kind == "luenberger":
        assert poles_s is not None
        res = luenberger_designs(A, C, Phi_safe, poles_s, sy=sy, **common)
        P_prior = P_post = Q = R = None
        requested = res.requested
    else:
        assert noise is not None
        q, r_u, sigma = noise
        res = kalman_designs(A, B, C, Phi_safe, q=q, r_u=r_u, sigma=sigma, **common)
        P_prior, P_post, Q, R = res.P_prior, res.P_post, res.Q, res.R
        requested = None
    use_post = settings.form == "filter" or settings.domain == "continuous"
    # per-node values as Python objects, computed for the whole chunk at once
    error_poles = _pair_rows(res.error_poles)
    requested_rows = _pair_rows(requested) if requested is not None else None
    std_rows = None
    if P_prior is not None:
        cov = P_post if use_post else P_prior
        std_rows = np.sqrt(np.clip(np.diagonal(cov, axis1=1, axis2=2), 0.0, None)).tolist()
    empty = np.zeros((0, 0))
    template = NodeDesign.model_construct(
        status="refused", kind=settings.kind, domain=settings.domain, form=settings.form,
        sample_time=Ts)
    n_mess = ("the local model has non-finite entries (A, B, C, D or the operating point); "
              "linearize again at a point where the model evaluates")
    fixed = {"kind": settings.kind, "domain": settings.domain, "form": settings.form,
             "sample_time": Ts}
    none = [None] * k
    # per-field sequences of per-node views (one C-level split per field, no per-node indexing)
    rows = zip(res.ok.tolist(), finite.tolist(), res.messages, list(raw["x0"]), list(raw["u0"]),
               list(raw["y0"]), list(raw["dx0"]), list(raw["A"]), list(raw["B"]),
               list(raw["C"]), list(raw["D"]), list(Phi), list(Gamma), list(Gamma0), list(res.L),
               none if res.L_continuous is None else list(res.L_continuous),
               error_poles, none if requested_rows is None else requested_rows,
               none if P_prior is None else list(P_prior), none if P_post is None else list(P_post),
               none if std_rows is None else std_rows, none if Q is None else list(Q),
               none if R is None else list(R), res.unmovable)
    out = []
    for (ok, fin, mess, x0_i, u0_i, y0_i, dx0_i, A_i, B_i, C_i, D_i, Phi_i, Gam_i, Gam0_i, L_i,
         Lc_i, ep_i, req_i, Pp_i, Pq_i, std_i, Q_i, R_i, unm_i) in rows:
        if not fin:
            message = n_mess
        elif ok and notes:
            message = "; ".join(t for t in [mess, *notes] if t)
        else:
            message = mess
        fields = {
            **fixed, "status": "ok" if ok else "refused", "message": message,
            "states": list(states), "inputs": list(inputs), "outputs": list(measured),
            "x0": x0_i, "u0": u0_i, "y0": y0_i, "dx0": dx0_i, "A": A_i, "B": B_i, "C": C_i,
            "D": D_i, "Phi": Phi_i, "Gamma": Gam_i, "Gamma0": Gam0_i,
            "L": L_i if ok else empty,
            "L_continuous": Lc_i if ok else None,
            "error_poles": ep_i if ok else [],
            "requested_poles": req_i if req_i is not None and fin else [],
            "P_prior": Pp_i if ok else None,
            "P_post": Pq_i if ok else None,
            "error_std": dict(zip(states, std_i)) if ok and std_i is not None else {},
            "Q": Q_i if fin else None,
            "R": R_i if fin else None,
            "unmovable_modes": _pairs(unm_i)}
        # every field is built and checked above: copy a template instead of validating
        # each array again (pydantic's validation dominates the cost of a 4-state node)
        out.append(template.model_copy(update=fields))
    return out


def design_node(lm: LinearModel, settings: EstimatorSettings, *,
                outputs: Sequence[str] | None = None) -> NodeDesign:
    """The estimator design at one node (see :func:`design_nodes`).

    Note that with ``consistent_poles`` a single node's pole set is its own
    (the grid's slowest node is that node).
    """
    return design_nodes([lm], settings, outputs=outputs)[0]
