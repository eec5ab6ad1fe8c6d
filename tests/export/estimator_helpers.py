"""Helpers of the C-code and estimator-FMU tests: synthetic schedules and a ctypes harness.

The synthetic nodes are built from reference libraries only: exact zero-order hold by
``scipy.signal.cont2discrete``, Luenberger gains by ``scipy.signal.place_poles`` (Kautsky,
Nichols & Van Dooren 1985, Int. J. Control 41(5)), steady-state Kalman gains from
``scipy.linalg.solve_discrete_are`` (Anderson & Moore 1979, Optimal Filtering, ch. 4).  The
plant family itself is invented (demo numbers): three states, two inputs, two outputs, with
every matrix depending on the scheduling variables so that interpolation matters.
"""

from __future__ import annotations

import ctypes
import itertools
import subprocess
from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np
from scipy.linalg import solve_discrete_are
from scipy.signal import cont2discrete, place_poles

from linobs.estimator.node import NodeDesign
from linobs.estimator.schedule import Evaluation, GainSchedule, ScheduleData
from linobs.export.c_code import c_sources, parameter_axes
from linobs.model.build import find_c_compiler

CAUTION = ("CAUTION (test): engineering aid only; verify by simulation, hardware-in-the-loop "
           "and test before use; functional-safety standards apply.")

STATES, INPUTS, OUTPUTS = ["T", "x2", "x3"], ["q", "w"], ["ya", "yb"]
# T: a state axis; q: an input axis; theta: a parameter axis; z: a one-valued parameter axis
SYNTH_AXES = {"T": [20.0, 30.0, 45.0], "q": [0.0, 2.0], "theta": [0.5, 1.0, 2.0], "z": [1.0]}
SYNTH_ROLES = {"T": "state", "q": "input", "theta": "parameter", "z": "parameter"}


def local_model(T: float, q: float, theta: float) -> dict[str, np.ndarray]:
    """The invented plant's affine local model at (T, q, theta)."""
    A = np.array([[-0.5 - 0.1 * theta, 0.02 * T, 0.0],
                  [0.1, -1.0 - 0.05 * q, 0.3],
                  [0.0, 0.2, -0.3 - 0.02 * T]])
    B = np.array([[1.0, 0.0], [0.1 * theta, 0.5], [0.0, 0.2 + 0.01 * q]])
    C = np.array([[1.0, 0.0, 0.5], [0.0, 1.0 + 0.1 * theta, 0.0]])
    D = np.array([[0.01 * q, 0.0], [0.0, 0.2]])
    x0 = np.array([T, 0.5 * q, theta])
    u0 = np.array([q, 1.0])
    return {"A": A, "B": B, "C": C, "D": D, "x0": x0, "u0": u0,
            "y0": C @ x0 + D @ u0 + np.array([0.3, -0.1]),
            "dx0": np.array([0.01 * theta, -0.02, 0.005 * T])}


def synthetic_node(T: float, q: float, theta: float, *, kind: str, form: str, Ts: float,
                   refused: bool = False) -> NodeDesign:
    lm = local_model(T, q, theta)
    A, B, C, D = lm["A"], lm["B"], lm["C"], lm["D"]
    n = A.shape[0]
    Phi, Gamma, *_ = cont2discrete((A, B, C, D), Ts, method="zoh")
    Gamma0 = cont2discrete((A, np.eye(n), C, np.zeros((C.shape[0], n))), Ts, method="zoh")[1]
    extra: dict = {}
    if refused:
        L = np.zeros((0, 0))
    elif kind == "luenberger":
        poles = np.array([0.5, 0.6, 0.7])
        K = place_poles(Phi.T, C.T, poles).gain_matrix.T   # eig(Φ − K C) = poles
        L = K if form == "predictor" else np.linalg.solve(Phi, K)
    else:
        Q, R = np.diag([1e-3, 2e-3, 5e-4]), np.diag([1e-2, 4e-2])
        P_prior = solve_discrete_are(Phi.T, C.T, Q, R)
        Kf = P_prior @ C.T @ np.linalg.inv(C @ P_prior @ C.T + R)
        I_KC = np.eye(n) - Kf @ C
        P_post = I_KC @ P_prior @ I_KC.T + Kf @ R @ Kf.T            # Joseph form
        L = Kf if form == "filter" else Phi @ Kf
        extra = {"P_prior": P_prior, "P_post": P_post, "Q": Q, "R": R}
    return NodeDesign(status="refused" if refused else "ok", kind=kind, domain="discrete",
                      form=form, sample_time=Ts, states=STATES, inputs=INPUTS, outputs=OUTPUTS,
                      x0=lm["x0"], u0=lm["u0"], y0=lm["y0"], dx0=lm["dx0"], A=A, B=B, C=C, D=D,
                      Phi=Phi, Gamma=Gamma, Gamma0=Gamma0, L=L, **extra)


def synthetic_schedule(*, kind: str, form: str, Ts: float = 0.2,
                       refused: Sequence[int] = (7,)) -> GainSchedule:
    """A tensor schedule over SYNTH_AXES (C order), the nodes in ``refused`` without design."""
    nodes = []
    for i, (T, q, theta, _) in enumerate(itertools.product(*SYNTH_AXES.values())):
        nodes.append(synthetic_node(T, q, theta, kind=kind, form=form, Ts=Ts,
                                    refused=i in refused))
    data = ScheduleData(grid_kind="tensor", axes=list(SYNTH_AXES),
                        axis_values=list(SYNTH_AXES.values()), axis_roles=SYNTH_ROLES,
                        nodes=nodes)
    return GainSchedule(data)


def refuse(schedule: GainSchedule, index: int) -> GainSchedule:
    """The schedule with node ``index`` refused (no gain, no covariance)."""
    nodes = list(schedule.data.nodes)
    nodes[index] = nodes[index].model_copy(update={"status": "refused", "L": np.zeros((0, 0)),
                                                   "P_prior": None, "P_post": None,
                                                   "error_std": {}})
    return GainSchedule(schedule.data.model_copy(update={"nodes": nodes}))


# ------------------------------------------------------------------------------ ctypes harness
FIELD_SIZES = (("L", "np"), ("Phi", "nn"), ("Gamma", "nm"), ("Gamma0", "nn"), ("C", "pn"),
               ("D", "pm"), ("x0", "n"), ("u0", "m"), ("y0", "p"), ("dx0", "n"),
               ("variance", "n"))
SHAPES = {"np": lambda n, m, p: (n, p), "nn": lambda n, m, p: (n, n),
          "nm": lambda n, m, p: (n, m), "pn": lambda n, m, p: (p, n),
          "pm": lambda n, m, p: (p, m), "n": lambda n, m, p: (n,),
          "m": lambda n, m, p: (m,), "p": lambda n, m, p: (p,)}


class CEstimator:
    """The generated C code, compiled as a shared library and called through ctypes."""

    def __init__(self, schedule: GainSchedule, folder: Path, prefix: str = "est") -> None:
        self.schedule = schedule
        self.prefix = prefix
        self.files = c_sources(schedule, prefix=prefix, caution=CAUTION,
                               header_note="test build")
        for name, text in self.files.items():
            (folder / name).write_text(text, encoding="utf-8")
        lib = folder / f"lib{prefix}.so"
        cmd = [*find_c_compiler().split(), "-std=c99", "-Wall", "-Wextra", "-pedantic",
               "-Werror", "-O2", "-shared", "-fPIC", str(folder / f"{prefix}.c"), "-o",
               str(lib), "-lm"]
        proc = subprocess.run(cmd, capture_output=True, text=True, check=False)
        assert proc.returncode == 0, proc.stderr
        self.compiler_output = proc.stderr
        self.lib = ctypes.CDLL(str(lib))
        self.n, self.m, self.p = (len(schedule.states), len(schedule.inputs),
                                  len(schedule.outputs))
        dims = {k: SHAPES[k](self.n, self.m, self.p) for _, k in FIELD_SIZES}
        self.shapes = {f: dims[k] for f, k in FIELD_SIZES}
        fields = [(f, ctypes.c_double * max(1, int(np.prod(s)))) for f, s in self.shapes.items()]
        fields += [("usable", ctypes.c_int), ("outside", ctypes.c_int)]
        self.Local = type("Local", (ctypes.Structure,), {"_fields_": fields})
        self.params_order = parameter_axes(schedule)

    @staticmethod
    def _vec(values: Sequence[float] | np.ndarray | None) -> ctypes.Array | None:
        if values is None:
            return None
        arr = np.asarray(values, dtype=float).ravel()
        return (ctypes.c_double * max(1, arr.size))(*arr)

    def params(self, parameters: Mapping[str, float]) -> list[float]:
        return [float(parameters[a]) for a in self.params_order]

    def interpolate(self, s: Sequence[float]) -> tuple[int, dict[str, np.ndarray], bool, bool]:
        out = self.Local()
        status = getattr(self.lib, f"{self.prefix}_interpolate")(self._vec(s), ctypes.byref(out))
        values = {f: np.array(getattr(out, f)[:int(np.prod(shape))]).reshape(shape)
                  for f, shape in self.shapes.items()}
        return status, values, bool(out.usable), bool(out.outside)

    def scheduling_value(self, x: np.ndarray, u: np.ndarray,
                         params: Sequence[float] | None) -> tuple[int, np.ndarray]:
        s = (ctypes.c_double * max(1, len(self.schedule.axes)))()
        status = getattr(self.lib, f"{self.prefix}_scheduling_value")(
            self._vec(x), self._vec(u), self._vec(params), s)
        return status, np.array(s[:len(self.schedule.axes)])

    def step(self, x: np.ndarray, u: np.ndarray, y: np.ndarray, u_now: np.ndarray | None,
             params: Sequence[float] | None) -> tuple[int, np.ndarray, bool, bool]:
        x_out = (ctypes.c_double * self.n)()
        usable, outside = ctypes.c_int(-1), ctypes.c_int(-1)
        status = getattr(self.lib, f"{self.prefix}_step")(
            self._vec(x), self._vec(u), self._vec(y), self._vec(u_now), self._vec(params),
            x_out, ctypes.byref(usable), ctypes.byref(outside))
        return status, np.array(x_out[:]), bool(usable.value), bool(outside.value)


def interpolated_variance(schedule: GainSchedule, ev: Evaluation) -> np.ndarray:
    """Σ wᵢ diag(Pᵢ) over the nodes with a weight, NaN if one has no covariance — the rule of
    linobs.estimator.nonlinear.run_estimator (P_post for the filter form, P_prior else)."""
    which = "P_post" if schedule.form == "filter" else "P_prior"
    total = np.zeros(len(schedule.states))
    for i, w in zip(ev.nodes, ev.weights):
        if w <= 0:
            continue
        node = schedule.data.nodes[int(i)]
        P = getattr(node, which)
        if node.status != "ok" or P is None:
            return np.full(len(schedule.states), np.nan)
        total += w * np.diag(np.asarray(P, dtype=float))
    return total
