"""Independent numpy/scipy implementations of the bundled plants.

Each plant has ``<plant>_rhs(x, u, params=None)`` (state derivatives),
``<plant>_outputs(x, u, params=None)`` and ``<plant>_jacobians(x, u,
params=None) -> (A, B, C, D)`` with analytic partial derivatives.  ``params``
is a dict of overrides of the defaults below.  The vector orders are those of
the FMUs' ModelStructure (Derivatives / ContinuousStateDerivative order for
states, Outputs order for outputs, declaration order for inputs):

four_tank (FMI 2.0)
    x = (h1, h2, h3, h4) [cm], u = (v1, v2) [V], y = (y1, y2) [V]
lfp_cell (FMI 2.0)
    x = (soc [1], v_rc1 [V], v_rc2 [V], temp_cell [degC]),
    u = (i_cell [A], t_amb [degC]), y = (v_term [V], t_surf [degC])
jacketed_reactor (FMI 3.0)
    x = (c_a [mol/m3], temp [K], temp_jacket [K]), u = (valve [1], temp_feed [K]),
    y = (temp_meas [K], temp_jacket_meas [K])

These functions are written from the equations (stated in each section), not
from the C sources, so the tests compare two implementations.

References
----------
K. H. Johansson (2000), "The quadruple-tank process: a multivariable laboratory
process with an adjustable zero", IEEE Trans. Control Systems Technology
8(3):456-465.
C. de Boor (1978), "A Practical Guide to Splines", Springer (natural cubic
splines, tensor products).
"""

from __future__ import annotations

from typing import Mapping

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.interpolate import CubicSpline

Array = NDArray[np.float64]
Params = Mapping[str, float] | None


def _merged(defaults: Mapping[str, float], params: Params) -> dict[str, float]:
    merged = dict(defaults)
    if params:
        unknown = set(params) - set(defaults)
        if unknown:
            raise KeyError(f"unknown parameters {sorted(unknown)}")
        merged.update(params)
    return merged


# =============================================================== four_tank
# Johansson (2000), eq. (1): dh_i/dt from Torricelli outflow and pump inflows.
FOUR_TANK_STATES = ("h1", "h2", "h3", "h4")
FOUR_TANK_INPUTS = ("v1", "v2")
FOUR_TANK_OUTPUTS = ("y1", "y2")

FOUR_TANK_PARAMS: dict[str, float] = {
    # Johansson (2000), Table I (geometry, sensor gain, g) -- from memory
    "A1": 28.0, "A2": 32.0, "A3": 28.0, "A4": 32.0,   # cm2
    "a1": 0.071, "a2": 0.057, "a3": 0.071, "a4": 0.057,  # cm2
    "kc": 0.50,   # V/cm
    "g": 981.0,   # cm/s2
    # Johansson (2000), Table II, operating point P- -- from memory
    "k1": 3.33, "k2": 3.35,        # cm3/(V s)
    "gamma1": 0.70, "gamma2": 0.60,
}

#: Johansson (2000), Table II -- from memory: levels, voltages and the tunable parameters.
FOUR_TANK_P_MINUS = {
    "x": (12.4, 12.7, 1.8, 1.4), "u": (3.00, 3.00),
    "params": {"k1": 3.33, "k2": 3.35, "gamma1": 0.70, "gamma2": 0.60},
}
FOUR_TANK_P_PLUS = {
    "x": (12.6, 13.0, 4.8, 4.9), "u": (3.15, 3.15),
    "params": {"k1": 3.14, "k2": 3.29, "gamma1": 0.43, "gamma2": 0.34},
}

#: Level below which sqrt(2 g h) is replaced by a C2 cubic (tangent for h < 0); our choice.
FOUR_TANK_H_REG = 0.01  # cm


def four_tank_outflow(h: float, g: float) -> tuple[float, float]:
    """Regularized Torricelli law q(h) = sqrt(2 g h) and dq/dh.

    For 0 <= h < h_reg the cubic q = s (15/8 x - 5/4 x^2 + 3/8 x^3), x = h/h_reg,
    s = sqrt(2 g h_reg), matches value, slope and curvature of the square root
    at h_reg (analytic); for h < 0 it continues with its tangent at 0.
    """
    if h >= FOUR_TANK_H_REG:
        q = np.sqrt(2.0 * g * h)
        return float(q), float(g / q)
    s = np.sqrt(2.0 * g * FOUR_TANK_H_REG)
    x = h / FOUR_TANK_H_REG
    if x < 0.0:
        return float(s * 15.0 / 8.0 * x), float(s * 15.0 / 8.0 / FOUR_TANK_H_REG)
    q = s * (15.0 / 8.0 * x - 5.0 / 4.0 * x**2 + 3.0 / 8.0 * x**3)
    dq = s * (15.0 / 8.0 - 5.0 / 2.0 * x + 9.0 / 8.0 * x**2) / FOUR_TANK_H_REG
    return float(q), float(dq)


def four_tank_rhs(x: ArrayLike, u: ArrayLike, params: Params = None) -> Array:
    """State derivatives (cm/s) of the quadruple-tank process."""
    p = _merged(FOUR_TANK_PARAMS, params)
    h = np.asarray(x, dtype=float)
    v1, v2 = np.asarray(u, dtype=float)
    q = [four_tank_outflow(hi, p["g"])[0] for hi in h]
    return np.array([
        -p["a1"] / p["A1"] * q[0] + p["a3"] / p["A1"] * q[2] + p["gamma1"] * p["k1"] / p["A1"] * v1,
        -p["a2"] / p["A2"] * q[1] + p["a4"] / p["A2"] * q[3] + p["gamma2"] * p["k2"] / p["A2"] * v2,
        -p["a3"] / p["A3"] * q[2] + (1.0 - p["gamma2"]) * p["k2"] / p["A3"] * v2,
        -p["a4"] / p["A4"] * q[3] + (1.0 - p["gamma1"]) * p["k1"] / p["A4"] * v1,
    ])


def four_tank_outputs(x: ArrayLike, u: ArrayLike, params: Params = None) -> Array:
    """Level sensor voltages y = kc (h1, h2)."""
    p = _merged(FOUR_TANK_PARAMS, params)
    h = np.asarray(x, dtype=float)
    return np.array([p["kc"] * h[0], p["kc"] * h[1]])


def four_tank_jacobians(x: ArrayLike, u: ArrayLike,
                        params: Params = None) -> tuple[Array, Array, Array, Array]:
    """Analytic A (4x4), B (4x2), C (2x4), D (2x2) of the quadruple-tank process."""
    p = _merged(FOUR_TANK_PARAMS, params)
    h = np.asarray(x, dtype=float)
    dq = [four_tank_outflow(hi, p["g"])[1] for hi in h]
    A = np.zeros((4, 4))
    A[0, 0] = -p["a1"] / p["A1"] * dq[0]
    A[0, 2] = p["a3"] / p["A1"] * dq[2]
    A[1, 1] = -p["a2"] / p["A2"] * dq[1]
    A[1, 3] = p["a4"] / p["A2"] * dq[3]
    A[2, 2] = -p["a3"] / p["A3"] * dq[2]
    A[3, 3] = -p["a4"] / p["A4"] * dq[3]
    B = np.zeros((4, 2))
    B[0, 0] = p["gamma1"] * p["k1"] / p["A1"]
    B[1, 1] = p["gamma2"] * p["k2"] / p["A2"]
    B[2, 1] = (1.0 - p["gamma2"]) * p["k2"] / p["A3"]
    B[3, 0] = (1.0 - p["gamma1"]) * p["k1"] / p["A4"]
    C = np.zeros((2, 4))
    C[0, 0] = p["kc"]
    C[1, 1] = p["kc"]
    return A, B, C, np.zeros((2, 2))


# ================================================================ lfp_cell
# Two-RC equivalent circuit with a lumped thermal state (common practice):
#   v_term = OCV - v_rc1 - v_rc2 - R0 i,  dsoc/dt = -i/(3600 Q_Ah),
#   dv_k/dt = -v_k/(R_k C_k) + i/C_k,
#   mass cp dT/dt = i (v_rc1 + v_rc2) + R0 i^2 - hA (T - t_amb),
#   t_surf = T - k_s (T - t_amb).
# Tables and parameters: demo data, invented (same numbers as fmus/lfp_cell).
LFP_STATES = ("soc", "v_rc1", "v_rc2", "temp_cell")
LFP_INPUTS = ("i_cell", "t_amb")
LFP_OUTPUTS = ("v_term", "t_surf")

LFP_PARAMS: dict[str, float] = {  # demo data, invented
    "Q_Ah": 20.0,      # A.h
    "C1": 25000.0,     # F
    "C2": 500000.0,    # F
    "mass": 0.6,       # kg
    "cp": 1100.0,      # J/(kg K)
    "hA": 0.8,         # W/K
    "k_s": 0.3,        # 1
}

LFP_SOC_KNOTS = np.array([0, 0.01, 0.02, 0.03, 0.045, 0.06, 0.075, 0.09, 0.11, 0.13, 0.16, 0.2,
                          0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.85, 0.88, 0.91, 0.93, 0.95, 0.965,
                          0.98, 0.99, 1.0])
LFP_TEMP_KNOTS = np.array([-20.0, -10.0, 0.0, 10.0, 25.0, 40.0, 60.0])  # degC

# Rows: soc knots; columns: temperature knots.  OCV in V, resistances in mOhm.
LFP_TABLE_OCV = np.array([
    [2.93441, 2.93651, 2.93861, 2.94071, 2.94386, 2.94701, 2.95121],  # soc 0
    [2.98534, 2.98714, 2.98894, 2.99074, 2.99344, 2.99614, 2.99974],  # soc 0.01
    [3.03281, 3.03434, 3.03588, 3.03741, 3.03971, 3.04202, 3.04509],  # soc 0.02
    [3.07621, 3.07751, 3.07881, 3.08011, 3.08206, 3.08401, 3.08661],  # soc 0.03
    [3.13260, 3.13359, 3.13459, 3.13559, 3.13708, 3.13858, 3.14058],  # soc 0.045
    [3.17769, 3.17844, 3.17918, 3.17993, 3.18104, 3.18216, 3.18365],  # soc 0.06
    [3.21176, 3.21230, 3.21283, 3.21336, 3.21417, 3.21497, 3.21603],  # soc 0.075
    [3.23623, 3.23659, 3.23694, 3.23730, 3.23784, 3.23837, 3.23909],  # soc 0.09
    [3.25746, 3.25762, 3.25779, 3.25795, 3.25820, 3.25845, 3.25878],  # soc 0.11
    [3.26999, 3.27001, 3.27002, 3.27004, 3.27006, 3.27008, 3.27011],  # soc 0.13
    [3.27997, 3.27981, 3.27965, 3.27949, 3.27926, 3.27902, 3.27870],  # soc 0.16
    [3.28621, 3.28589, 3.28558, 3.28526, 3.28479, 3.28432, 3.28369],  # soc 0.2
    [3.29380, 3.29328, 3.29276, 3.29224, 3.29146, 3.29067, 3.28963],  # soc 0.3
    [3.29980, 3.29918, 3.29856, 3.29793, 3.29700, 3.29606, 3.29482],  # soc 0.4
    [3.30563, 3.30493, 3.30424, 3.30354, 3.30250, 3.30146, 3.30007],  # soc 0.5
    [3.31141, 3.31066, 3.30990, 3.30914, 3.30800, 3.30686, 3.30535],  # soc 0.6
    [3.31721, 3.31639, 3.31557, 3.31475, 3.31352, 3.31229, 3.31065],  # soc 0.7
    [3.32348, 3.32260, 3.32172, 3.32084, 3.31952, 3.31820, 3.31644],  # soc 0.8
    [3.32857, 3.32766, 3.32675, 3.32584, 3.32447, 3.32311, 3.32129],  # soc 0.85
    [3.33486, 3.33394, 3.33301, 3.33208, 3.33069, 3.32930, 3.32744],  # soc 0.88
    [3.34835, 3.34740, 3.34645, 3.34551, 3.34409, 3.34267, 3.34078],  # soc 0.91
    [3.36556, 3.36460, 3.36364, 3.36268, 3.36124, 3.35981, 3.35789],  # soc 0.93
    [3.39377, 3.39280, 3.39183, 3.39086, 3.38941, 3.38795, 3.38601],  # soc 0.95
    [3.42447, 3.42349, 3.42251, 3.42154, 3.42007, 3.41860, 3.41664],  # soc 0.965
    [3.46439, 3.46340, 3.46242, 3.46143, 3.45995, 3.45846, 3.45649],  # soc 0.98
    [3.49608, 3.49508, 3.49409, 3.49310, 3.49161, 3.49011, 3.48813],  # soc 0.99
    [3.53149, 3.53049, 3.52949, 3.52849, 3.52699, 3.52549, 3.52349],  # soc 1
])

LFP_TABLE_R0 = np.array([
    [12.10898, 8.13949, 5.63271, 4.00066, 2.50000, 1.63422, 0.98401],  # soc 0
    [10.99361, 7.38975, 5.11388, 3.63215, 2.26972, 1.48369, 0.89337],  # soc 0.01
    [10.04947, 6.75511, 4.67469, 3.32022, 2.07480, 1.35627, 0.81665],  # soc 0.02
    [9.25027, 6.21790, 4.30293, 3.05617, 1.90980, 1.24841, 0.75170],  # soc 0.03
    [8.27552, 5.56269, 3.84951, 2.73413, 1.70855, 1.11686, 0.67249],  # soc 0.045
    [7.51638, 5.05240, 3.49638, 2.48332, 1.55182, 1.01441, 0.61080],  # soc 0.06
    [6.92516, 4.65499, 3.22136, 2.28799, 1.42976, 0.93462, 0.56276],  # soc 0.075
    [6.46472, 4.34549, 3.00718, 2.13586, 1.33470, 0.87247, 0.52534],  # soc 0.09
    [6.00518, 4.03660, 2.79342, 1.98404, 1.23982, 0.81046, 0.48800],  # soc 0.11
    [5.67591, 3.81526, 2.64025, 1.87525, 1.17184, 0.76602, 0.46124],  # soc 0.13
    [5.34842, 3.59513, 2.48791, 1.76705, 1.10423, 0.72182, 0.43463],  # soc 0.16
    [5.10278, 3.43001, 2.37365, 1.68589, 1.05351, 0.68867, 0.41467],  # soc 0.2
    [4.89255, 3.28870, 2.27586, 1.61644, 1.01011, 0.66030, 0.39758],  # soc 0.3
    [4.85285, 3.26202, 2.25739, 1.60332, 1.00191, 0.65494, 0.39436],  # soc 0.4
    [4.84543, 3.25703, 2.25394, 1.60087, 1.00038, 0.65394, 0.39375],  # soc 0.5
    [4.84457, 3.25645, 2.25354, 1.60059, 1.00020, 0.65382, 0.39368],  # soc 0.6
    [4.84846, 3.25906, 2.25535, 1.60187, 1.00100, 0.65434, 0.39400],  # soc 0.7
    [4.87909, 3.27965, 2.26960, 1.61199, 1.00733, 0.65848, 0.39649],  # soc 0.8
    [4.94006, 3.32064, 2.29796, 1.63213, 1.01992, 0.66671, 0.40144],  # soc 0.85
    [5.01935, 3.37394, 2.33484, 1.65833, 1.03629, 0.67741, 0.40789],  # soc 0.88
    [5.16385, 3.47107, 2.40206, 1.70607, 1.06612, 0.69691, 0.41963],  # soc 0.91
    [5.32136, 3.57694, 2.47533, 1.75811, 1.09864, 0.71817, 0.43243],  # soc 0.93
    [5.55634, 3.73489, 2.58463, 1.83574, 1.14715, 0.74988, 0.45152],  # soc 0.95
    [5.80569, 3.90251, 2.70062, 1.91813, 1.19863, 0.78353, 0.47179],  # soc 0.965
    [6.14229, 4.12876, 2.85720, 2.02934, 1.26813, 0.82896, 0.49914],  # soc 0.98
    [6.42983, 4.32204, 2.99095, 2.12434, 1.32749, 0.86777, 0.52251],  # soc 0.99
    [6.78103, 4.55811, 3.15432, 2.24037, 1.40000, 0.91516, 0.55105],  # soc 1
])

LFP_TABLE_R1 = np.array([
    [22.14684, 11.77235, 6.55405, 3.80296, 1.80000, 0.91526, 0.40837],  # soc 0
    [20.41195, 10.85016, 6.04063, 3.50506, 1.65900, 0.84356, 0.37638],  # soc 0.01
    [18.88093, 10.03632, 5.58755, 3.24215, 1.53456, 0.78029, 0.34815],  # soc 0.02
    [17.52980, 9.31812, 5.18770, 3.01014, 1.42475, 0.72445, 0.32323],  # soc 0.03
    [15.79487, 8.39590, 4.67427, 2.71223, 1.28374, 0.65275, 0.29124],  # soc 0.045
    [14.35656, 7.63136, 4.24862, 2.46525, 1.16684, 0.59331, 0.26472],  # soc 0.06
    [13.16416, 6.99753, 3.89575, 2.26050, 1.06993, 0.54403, 0.24273],  # soc 0.075
    [12.17563, 6.47206, 3.60321, 2.09075, 0.98958, 0.50318, 0.22451],  # soc 0.09
    [11.11534, 5.90846, 3.28943, 1.90868, 0.90341, 0.45936, 0.20496],  # soc 0.11
    [10.28959, 5.46952, 3.04506, 1.76689, 0.83629, 0.42524, 0.18973],  # soc 0.13
    [9.38044, 4.98626, 2.77601, 1.61077, 0.76240, 0.38766, 0.17297],  # soc 0.16
    [8.59423, 4.56834, 2.54334, 1.47576, 0.69850, 0.35517, 0.15847],  # soc 0.2
    [7.72951, 4.10869, 2.28744, 1.32728, 0.62822, 0.31944, 0.14252],  # soc 0.3
    [7.48178, 3.97701, 2.21413, 1.28474, 0.60809, 0.30920, 0.13796],  # soc 0.4
    [7.41095, 3.93936, 2.19317, 1.27258, 0.60233, 0.30627, 0.13665],  # soc 0.5
    [7.39168, 3.92911, 2.18747, 1.26927, 0.60076, 0.30547, 0.13630],  # soc 0.6
    [7.39377, 3.93022, 2.18808, 1.26963, 0.60093, 0.30556, 0.13633],  # soc 0.7
    [7.45055, 3.96041, 2.20489, 1.27938, 0.60555, 0.30791, 0.13738],  # soc 0.8
    [7.56641, 4.02199, 2.23917, 1.29927, 0.61497, 0.31270, 0.13952],  # soc 0.85
    [7.71738, 4.10224, 2.28385, 1.32520, 0.62724, 0.31893, 0.14230],  # soc 0.88
    [7.99259, 4.24853, 2.36530, 1.37245, 0.64960, 0.33031, 0.14738],  # soc 0.91
    [8.29263, 4.40802, 2.45409, 1.42398, 0.67399, 0.34271, 0.15291],  # soc 0.93
    [8.74028, 4.64597, 2.58656, 1.50084, 0.71037, 0.36121, 0.16116],  # soc 0.95
    [9.21533, 4.89849, 2.72715, 1.58242, 0.74898, 0.38084, 0.16992],  # soc 0.965
    [9.85659, 5.23936, 2.91692, 1.69253, 0.80110, 0.40734, 0.18175],  # soc 0.98
    [10.40439, 5.53055, 3.07903, 1.78660, 0.84562, 0.42998, 0.19185],  # soc 0.99
    [11.07347, 5.88620, 3.27704, 1.90149, 0.90000, 0.45763, 0.20418],  # soc 1
])

LFP_TABLE_R2 = np.array([
    [13.75433, 8.00199, 4.84374, 3.03782, 1.60000, 0.89609, 0.44867],  # soc 0
    [13.09988, 7.62124, 4.61327, 2.89328, 1.52387, 0.85346, 0.42732],  # soc 0.01
    [12.50772, 7.27673, 4.40473, 2.76249, 1.45499, 0.81488, 0.40801],  # soc 0.02
    [11.97190, 6.96501, 4.21603, 2.64415, 1.39266, 0.77997, 0.39053],  # soc 0.03
    [11.26225, 6.55214, 3.96612, 2.48741, 1.31010, 0.73373, 0.36738],  # soc 0.045
    [10.65145, 6.19679, 3.75102, 2.35251, 1.23905, 0.69394, 0.34746],  # soc 0.06
    [10.12572, 5.89094, 3.56588, 2.23640, 1.17790, 0.65969, 0.33031],  # soc 0.075
    [9.67323, 5.62769, 3.40653, 2.13646, 1.12526, 0.63021, 0.31555],  # soc 0.09
    [9.16640, 5.33282, 3.22805, 2.02452, 1.06630, 0.59719, 0.29901],  # soc 0.11
    [8.75145, 5.09141, 3.08192, 1.93287, 1.01803, 0.57016, 0.28548],  # soc 0.13
    [8.26569, 4.80881, 2.91085, 1.82559, 0.96152, 0.53851, 0.26963],  # soc 0.16
    [7.80798, 4.54252, 2.74966, 1.72449, 0.90828, 0.50869, 0.25470],  # soc 0.2
    [7.21988, 4.20038, 2.54256, 1.59461, 0.83987, 0.47037, 0.23552],  # soc 0.3
    [7.00426, 4.07494, 2.46663, 1.54698, 0.81479, 0.45633, 0.22848],  # soc 0.4
    [6.92748, 4.03027, 2.43959, 1.53003, 0.80585, 0.45132, 0.22598],  # soc 0.5
    [6.90811, 4.01900, 2.43277, 1.52575, 0.80360, 0.45006, 0.22535],  # soc 0.6
    [6.93195, 4.03287, 2.44116, 1.53101, 0.80637, 0.45162, 0.22612],  # soc 0.7
    [7.04882, 4.10086, 2.48232, 1.55682, 0.81997, 0.45923, 0.22994],  # soc 0.8
    [7.19496, 4.18588, 2.53378, 1.58910, 0.83697, 0.46875, 0.23470],  # soc 0.85
    [7.33855, 4.26942, 2.58435, 1.62081, 0.85367, 0.47811, 0.23939],  # soc 0.88
    [7.54774, 4.39112, 2.65802, 1.66702, 0.87801, 0.49173, 0.24621],  # soc 0.91
    [7.73784, 4.50172, 2.72496, 1.70900, 0.90012, 0.50412, 0.25241],  # soc 0.93
    [7.98200, 4.64376, 2.81095, 1.76293, 0.92852, 0.52003, 0.26038],  # soc 0.95
    [8.20967, 4.77622, 2.89113, 1.81321, 0.95501, 0.53486, 0.26780],  # soc 0.965
    [8.48433, 4.93601, 2.98785, 1.87387, 0.98696, 0.55275, 0.27676],  # soc 0.98
    [8.69823, 5.06045, 3.06318, 1.92112, 1.01184, 0.56669, 0.28374],  # soc 0.99
    [8.94062, 5.20147, 3.14854, 1.97465, 1.04004, 0.58248, 0.29165],  # soc 1
])


LFP_TABLES = {"ocv": LFP_TABLE_OCV, "r0": LFP_TABLE_R0, "r1": LFP_TABLE_R1, "r2": LFP_TABLE_R2}
#: Factor from table units to variable units (V, Ohm).
LFP_TABLE_SCALE = {"ocv": 1.0, "r0": 1e-3, "r1": 1e-3, "r2": 1e-3}


class TensorSpline:
    """Tensor-product natural cubic spline of ``table[i, j, ...]`` over (x_knots, y_knots).

    Built from scipy ``CubicSpline(bc_type="natural")``: every column is splined
    along x; along y the (linear) natural-spline operator is applied through
    its cardinal basis, i.e. the spline through the unit vectors, which gives
    the same function as splining the x-interpolated values along y.  Outside
    the knot range each axis is extended linearly with its end value and slope
    (this keeps a natural spline C2).
    """

    def __init__(self, x_knots: ArrayLike, y_knots: ArrayLike, table: ArrayLike) -> None:
        self.x = np.asarray(x_knots, dtype=float)
        self.y = np.asarray(y_knots, dtype=float)
        values = np.asarray(table, dtype=float)
        self._along_x = CubicSpline(self.x, values, axis=0, bc_type="natural")
        self._basis_y = CubicSpline(self.y, np.eye(len(self.y)), axis=0, bc_type="natural")

    @staticmethod
    def _axis(spline: CubicSpline, knots: Array, t: float, nu: int) -> Array:
        if knots[0] <= t <= knots[-1]:
            return spline(t, nu)
        end = knots[0] if t < knots[0] else knots[-1]
        if nu == 0:
            return spline(end) + spline(end, 1) * (t - end)
        return spline(end, 1)

    def __call__(self, x: float, y: float, dx: int = 0, dy: int = 0) -> Array:
        """Value (or first partial derivative with dx=1 / dy=1) at (x, y)."""
        w = self._axis(self._along_x, self.x, x, dx)      # shape (ny, ...)
        b = self._axis(self._basis_y, self.y, y, dy)      # shape (ny,)
        return np.tensordot(b, w, axes=(0, 0))


def natural_spline_2d(x_knots: Array, y_knots: Array, table: Array, x: float, y: float,
                      dx: int = 0, dy: int = 0) -> float:
    """Tensor-product natural cubic spline of ``table[i, j]`` at (x, y); see :class:`TensorSpline`."""
    return float(TensorSpline(x_knots, y_knots, table)(x, y, dx, dy))


_LFP_NAMES = ("ocv", "r0", "r1", "r2")
_LFP_SPLINE = TensorSpline(LFP_SOC_KNOTS, LFP_TEMP_KNOTS,
                           np.stack([LFP_TABLES[n] * LFP_TABLE_SCALE[n] for n in _LFP_NAMES], axis=-1))


def lfp_tables(soc: float, temp: float, dsoc: int = 0, dtemp: int = 0) -> dict[str, float]:
    """OCV (V), R0, R1, R2 (Ohm) at (soc, temp), or their first partial derivatives."""
    values = _LFP_SPLINE(soc, temp, dsoc, dtemp)
    return dict(zip(_LFP_NAMES, (float(v) for v in values)))


def lfp_table(name: str, soc: float, temp: float, dsoc: int = 0, dtemp: int = 0) -> float:
    """One of OCV (V) or R0/R1/R2 (Ohm) at (soc, temp), or a first partial derivative."""
    return lfp_tables(soc, temp, dsoc, dtemp)[name]


def lfp_cell_rhs(x: ArrayLike, u: ArrayLike, params: Params = None) -> Array:
    """State derivatives of the LFP cell."""
    p = _merged(LFP_PARAMS, params)
    soc, v1, v2, temp = np.asarray(x, dtype=float)
    i, t_amb = np.asarray(u, dtype=float)
    t = lfp_tables(soc, temp)
    r0, r1, r2 = t["r0"], t["r1"], t["r2"]
    return np.array([
        -i / (3600.0 * p["Q_Ah"]),
        -v1 / (r1 * p["C1"]) + i / p["C1"],
        -v2 / (r2 * p["C2"]) + i / p["C2"],
        (i * (v1 + v2) + r0 * i * i - p["hA"] * (temp - t_amb)) / (p["mass"] * p["cp"]),
    ])


def lfp_cell_outputs(x: ArrayLike, u: ArrayLike, params: Params = None) -> Array:
    """Terminal voltage and surface temperature of the LFP cell."""
    p = _merged(LFP_PARAMS, params)
    soc, v1, v2, temp = np.asarray(x, dtype=float)
    i, t_amb = np.asarray(u, dtype=float)
    t = lfp_tables(soc, temp)
    return np.array([
        t["ocv"] - v1 - v2 - t["r0"] * i,
        temp - p["k_s"] * (temp - t_amb),
    ])


def lfp_cell_jacobians(x: ArrayLike, u: ArrayLike,
                       params: Params = None) -> tuple[Array, Array, Array, Array]:
    """Analytic A (4x4), B (4x2), C (2x4), D (2x2) of the LFP cell (spline derivatives)."""
    p = _merged(LFP_PARAMS, params)
    soc, v1, v2, temp = np.asarray(x, dtype=float)
    i, t_amb = np.asarray(u, dtype=float)
    val = lfp_tables(soc, temp)
    ds = lfp_tables(soc, temp, dsoc=1)
    dt = lfp_tables(soc, temp, dtemp=1)
    mcp = p["mass"] * p["cp"]
    A = np.zeros((4, 4))
    B = np.zeros((4, 2))
    for row, (name, cap, v) in enumerate((("r1", p["C1"], v1), ("r2", p["C2"], v2)), start=1):
        r = val[name]
        A[row, row] = -1.0 / (r * cap)
        A[row, 0] = v / (r * r * cap) * ds[name]
        A[row, 3] = v / (r * r * cap) * dt[name]
        B[row, 0] = 1.0 / cap
    B[0, 0] = -1.0 / (3600.0 * p["Q_Ah"])
    A[3, 0] = ds["r0"] * i * i / mcp
    A[3, 1] = i / mcp
    A[3, 2] = i / mcp
    A[3, 3] = (dt["r0"] * i * i - p["hA"]) / mcp
    B[3, 0] = (v1 + v2 + 2.0 * val["r0"] * i) / mcp
    B[3, 1] = p["hA"] / mcp
    C = np.array([
        [ds["ocv"] - ds["r0"] * i, -1.0, -1.0, dt["ocv"] - dt["r0"] * i],
        [0.0, 0.0, 0.0, 1.0 - p["k_s"]],
    ])
    D = np.array([[-val["r0"], 0.0], [0.0, p["k_s"]]])
    return A, B, C, D


# ======================================================== jacketed_reactor
# Textbook CSTR balances (common practice), see fmus/jacketed_reactor:
#   dc_a/dt = F/V (c_a_feed - c_a) - k c_a,   k = k0 exp(-e_act/(R T))
#   dT/dt   = F/V (T_feed - T) + (-dh_rxn) k c_a / rho_cp - UA (T - T_j)/(V rho_cp)
#   dT_j/dt = F_c/V_j (T_c,in - T_j) + UA (T - T_j)/(V_j rho_cp_coolant)
#   F_c = flow_coolant_max * min(max(valve, 0), 1)
REACTOR_STATES = ("c_a", "temp", "temp_jacket")
REACTOR_INPUTS = ("valve", "temp_feed")
REACTOR_OUTPUTS = ("temp_meas", "temp_jacket_meas")

REACTOR_PARAMS: dict[str, float] = {  # demo data, invented
    "volume": 2.0,              # m3
    "flow_feed": 0.005,         # m3/s
    "c_a_feed": 2000.0,         # mol/m3
    "k0": 2.0e9,                # 1/s
    "e_act": 75000.0,           # J/mol
    "dh_rxn": -50000.0,         # J/mol
    "rho_cp": 4.18e6,           # J/(m3 K)
    "ua": 15000.0,              # W/K
    "volume_jacket": 0.4,       # m3
    "rho_cp_coolant": 4.18e6,   # J/(m3 K)
    "flow_coolant_max": 0.01,   # m3/s
    "temp_coolant_in": 285.0,   # K
}

R_GAS = 8.314462618  # J/(mol K), CODATA 2018


def _valve_opening(valve: float) -> tuple[float, float]:
    """min(max(valve, 0), 1) and its slope, taken as 0 at the limits."""
    if valve >= 1.0:
        return 1.0, 0.0
    if valve <= 0.0:
        return 0.0, 0.0
    return float(valve), 1.0


def reactor_rate_constant(temp: float, params: Params = None) -> float:
    """Arrhenius rate constant k(T) in 1/s."""
    p = _merged(REACTOR_PARAMS, params)
    return float(p["k0"] * np.exp(-p["e_act"] / (R_GAS * temp)))


def jacketed_reactor_rhs(x: ArrayLike, u: ArrayLike, params: Params = None) -> Array:
    """State derivatives of the jacketed CSTR."""
    p = _merged(REACTOR_PARAMS, params)
    c_a, temp, temp_j = np.asarray(x, dtype=float)
    valve, temp_feed = np.asarray(u, dtype=float)
    k = reactor_rate_constant(temp, p)
    fc = p["flow_coolant_max"] * _valve_opening(valve)[0]
    dil = p["flow_feed"] / p["volume"]
    return np.array([
        dil * (p["c_a_feed"] - c_a) - k * c_a,
        dil * (temp_feed - temp) - p["dh_rxn"] * k * c_a / p["rho_cp"]
        - p["ua"] * (temp - temp_j) / (p["volume"] * p["rho_cp"]),
        fc / p["volume_jacket"] * (p["temp_coolant_in"] - temp_j)
        + p["ua"] * (temp - temp_j) / (p["volume_jacket"] * p["rho_cp_coolant"]),
    ])


def jacketed_reactor_outputs(x: ArrayLike, u: ArrayLike, params: Params = None) -> Array:
    """Ideal temperature sensors."""
    c_a, temp, temp_j = np.asarray(x, dtype=float)
    return np.array([temp, temp_j])


def jacketed_reactor_jacobians(x: ArrayLike, u: ArrayLike,
                               params: Params = None) -> tuple[Array, Array, Array, Array]:
    """Analytic A (3x3), B (3x2), C (2x3), D (2x2) of the jacketed CSTR."""
    p = _merged(REACTOR_PARAMS, params)
    c_a, temp, temp_j = np.asarray(x, dtype=float)
    valve, temp_feed = np.asarray(u, dtype=float)
    k = reactor_rate_constant(temp, p)
    dk = k * p["e_act"] / (R_GAS * temp**2)
    opening, slope = _valve_opening(valve)
    dil = p["flow_feed"] / p["volume"]
    heat = -p["dh_rxn"] / p["rho_cp"]
    ua_r = p["ua"] / (p["volume"] * p["rho_cp"])
    ua_j = p["ua"] / (p["volume_jacket"] * p["rho_cp_coolant"])
    A = np.array([
        [-dil - k, -c_a * dk, 0.0],
        [heat * k, -dil + heat * c_a * dk - ua_r, ua_r],
        [0.0, ua_j, -p["flow_coolant_max"] * opening / p["volume_jacket"] - ua_j],
    ])
    B = np.array([
        [0.0, 0.0],
        [0.0, dil],
        [p["flow_coolant_max"] * slope / p["volume_jacket"] * (p["temp_coolant_in"] - temp_j), 0.0],
    ])
    C = np.array([[0.0, 1.0, 0.0], [0.0, 0.0, 1.0]])
    return A, B, C, np.zeros((2, 2))


def jacketed_reactor_energy_residual(temp: float, valve: float, temp_feed: float,
                                     params: Params = None) -> float:
    """Steady-state energy balance residual (W) after eliminating c_a and temp_jacket.

    With the mass and jacket balances at steady state, c_a = F c_in / (F + V k(T))
    and T_j = (F_c rho_cp_c T_c,in + UA T) / (F_c rho_cp_c + UA) (analytic), so
    every steady state is a root of this function of T alone.
    """
    p = _merged(REACTOR_PARAMS, params)
    k = reactor_rate_constant(temp, p)
    flow, vol = p["flow_feed"], p["volume"]
    c_a = flow * p["c_a_feed"] / (flow + vol * k)
    cool = p["flow_coolant_max"] * _valve_opening(valve)[0] * p["rho_cp_coolant"]
    temp_j = (cool * p["temp_coolant_in"] + p["ua"] * temp) / (cool + p["ua"])
    return float(flow * p["rho_cp"] * (temp_feed - temp) - p["dh_rxn"] * vol * k * c_a
                 - p["ua"] * (temp - temp_j))
