"""Node designs built in the tests from reference libraries only (scipy), not from linobs' design code.

Each node: partial trim and linearization by linobs (already tested against published models),
exact zero-order hold by ``scipy.signal.cont2discrete``, process noise discretized by Van Loan's
method (``scipy.linalg.expm``), and the steady-state Kalman gain from
``scipy.linalg.solve_discrete_are`` on (Φᵀ, Cᵀ).

References: Van Loan, C. F. (1978), Computing integrals involving the matrix exponential,
IEEE TAC 23(3), 395-404; Anderson, B. D. O. & Moore, J. B. (1979), Optimal Filtering,
Prentice-Hall, ch. 4 (steady-state filter, prior/posterior covariances).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence

import numpy as np
from scipy.linalg import expm, solve_discrete_are
from scipy.signal import cont2discrete

from linobs.estimator.node import NodeDesign
from linobs.estimator.schedule import GainSchedule, ScheduleData
from linobs.linear.linear_model import LinearModel
from linobs.linear.linearize import linearize
from linobs.operating.trim import find_operating_point
from linobs.operating.trim_spec import TrimSpec


def van_loan(A: np.ndarray, Qc: np.ndarray, Ts: float) -> np.ndarray:
    # Van Loan (1978): Q = ∫₀^Ts e^{As} Qc e^{Aᵀs} ds from one matrix exponential
    n = A.shape[0]
    M = np.zeros((2 * n, 2 * n))
    M[:n, :n], M[:n, n:], M[n:, n:] = -A, Qc, A.T
    F = expm(M * Ts)
    Q = F[n:, n:].T @ F[:n, n:]
    return 0.5 * (Q + Q.T)


def kalman_node(lm: LinearModel, *, Ts: float, form: str, outputs: Sequence[str],
                Q: np.ndarray | Callable[[LinearModel, np.ndarray], np.ndarray],
                R: np.ndarray) -> NodeDesign:
    """A steady-state discrete Kalman node from scipy's DARE (Anderson & Moore 1979)."""
    rows = [lm.outputs.index(o) for o in outputs]
    A, B, C, D = lm.A, lm.B, lm.C[rows], lm.D[rows]
    n = A.shape[0]
    Phi, Gamma, *_ = cont2discrete((A, B, C, D), Ts, method="zoh")
    Gamma0 = cont2discrete((A, np.eye(n), C, np.zeros((len(rows), n))), Ts, method="zoh")[1]
    Qd = Q(lm, Gamma) if callable(Q) else np.asarray(Q, dtype=float)
    P_prior = solve_discrete_are(Phi.T, C.T, Qd, R)
    K = P_prior @ C.T @ np.linalg.inv(C @ P_prior @ C.T + R)
    I_KC = np.eye(n) - K @ C
    P_post = I_KC @ P_prior @ I_KC.T + K @ R @ K.T          # Joseph form
    L = K if form == "filter" else Phi @ K
    closed = I_KC @ Phi if form == "filter" else Phi - L @ C
    P = P_post if form == "filter" else P_prior
    return NodeDesign(
        status="ok", kind="kalman", domain="discrete", form=form, sample_time=Ts,
        states=list(lm.states), inputs=list(lm.inputs), outputs=list(outputs),
        x0=lm.x0, u0=lm.u0, y0=lm.y0[rows], dx0=lm.dx0, A=A, B=B, C=C, D=D, Phi=Phi,
        Gamma=Gamma, Gamma0=Gamma0, L=L,
        error_poles=[(float(z.real), float(z.imag)) for z in np.linalg.eigvals(closed)],
        P_prior=P_prior, P_post=P_post,
        error_std={s: float(np.sqrt(P[i, i])) for i, s in enumerate(lm.states)}, Q=Qd, R=R)


def trimmed_models(model, points: Sequence[Mapping[str, float]], spec: TrimSpec
                   ) -> list[LinearModel]:
    out, guess = [], None
    for point in points:
        res = find_operating_point(model, point, spec, guess=guess)
        assert res.converged, res.message
        guess = {**res.states, **res.inputs}
        out.append(linearize(model, res.point()))
    return out


def tensor_schedule(axes: Sequence[str], values: Sequence[Sequence[float]],
                    roles: Mapping[str, str], nodes: Sequence[NodeDesign]) -> GainSchedule:
    data = ScheduleData(grid_kind="tensor", axes=list(axes),
                        axis_values=[list(map(float, v)) for v in values],
                        axis_roles=dict(roles), nodes=list(nodes))
    return GainSchedule(data)


# ------------------------------------------------------------------ the bundled plants' schedules
# LFP cell: a grid over state of charge (a state: read from the estimate) and cell current (an
# input); soc pinned in the trim, the other states at steady state.  Noise levels are the test's
# own design choices (a 2 mV voltage sensor, a 0.2 K temperature sensor).
CELL_SOCS = (0.05, 0.1, 0.2, 0.35, 0.5, 0.65, 0.8, 0.9, 0.95)
CELL_CURRENTS = (-40.0, 0.0, 40.0)
CELL_NOISE = {"v_term": 0.002, "t_surf": 0.2}
CELL_PSD = (1e-8, 1e-8, 1e-10, 1e-4)   # soc [1/s], v_rc1, v_rc2 [V²/s], temp_cell [K²/s]

# four-tank: a grid over both pump voltages (inputs), every level trimmed
TANK_VOLTS = (2.0, 3.0, 4.0)
TANK_NOISE = {"y1": 0.02, "y2": 0.02}
TANK_PSD = 1e-4                         # cm²/s on every level


def cell_schedule(fmu, *, Ts: float, form: str = "filter") -> tuple[GainSchedule, list[LinearModel]]:
    from linobs.model.loader import load_model

    points = [{"soc": s, "i_cell": i, "t_amb": 25.0} for s in CELL_SOCS for i in CELL_CURRENTS]
    with load_model(fmu) as model:
        lms = trimmed_models(model, points, TrimSpec(pinned_states=["soc"]))
    R = np.diag([CELL_NOISE["v_term"] ** 2, CELL_NOISE["t_surf"] ** 2])
    nodes = [kalman_node(lm, Ts=Ts, form=form, outputs=["v_term", "t_surf"],
                         Q=van_loan(lm.A, np.diag(CELL_PSD), Ts), R=R) for lm in lms]
    return tensor_schedule(["soc", "i_cell"], [CELL_SOCS, CELL_CURRENTS],
                           {"soc": "state", "i_cell": "input"}, nodes), lms


def four_tank_schedule(fmu, *, Ts: float, form: str = "filter"
                       ) -> tuple[GainSchedule, list[LinearModel]]:
    from linobs.model.loader import load_model

    points = [{"v1": a, "v2": b} for a in TANK_VOLTS for b in TANK_VOLTS]
    with load_model(fmu) as model:
        lms = trimmed_models(model, points, TrimSpec())
    R = np.diag([TANK_NOISE["y1"] ** 2, TANK_NOISE["y2"] ** 2])
    nodes = [kalman_node(lm, Ts=Ts, form=form, outputs=["y1", "y2"],
                         Q=van_loan(lm.A, TANK_PSD * np.eye(4), Ts), R=R) for lm in lms]
    return tensor_schedule(["v1", "v2"], [TANK_VOLTS, TANK_VOLTS],
                           {"v1": "input", "v2": "input"}, nodes), lms
