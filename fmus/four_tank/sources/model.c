/*
 * four_tank -- the quadruple-tank process, FMI 2.0 model exchange with
 * analytic directional derivatives.
 *
 * Model: K. H. Johansson (2000), "The quadruple-tank process: a multivariable
 * laboratory process with an adjustable zero", IEEE Transactions on Control
 * Systems Technology 8(3):456-465, eq. (1).  Parameter values and the two
 * operating points P- and P+ are those of the paper's tables, quoted from
 * memory (not re-checked against the printed paper).
 *
 *   dh1/dt = -a1/A1 q(h1) + a3/A1 q(h3) + gamma1 k1/A1 v1
 *   dh2/dt = -a2/A2 q(h2) + a4/A2 q(h4) + gamma2 k2/A2 v2
 *   dh3/dt = -a3/A3 q(h3) + (1 - gamma2) k2/A3 v2
 *   dh4/dt = -a4/A4 q(h4) + (1 - gamma1) k1/A4 v1
 *   y1 = kc h1,  y2 = kc h2
 *
 * q(h) = sqrt(2 g h) is Torricelli's outflow law.  Below H_REG = 0.01 cm it is
 * replaced by the cubic that matches value, slope and curvature at H_REG (so
 * q is C2 there), and for h < 0 (a solver overshoot) by its tangent at 0; this
 * keeps q and dq/dh finite for an empty tank.  Units: cm, s, V.
 */
#include "lo_model.h"

#define H_REG 0.01 /* cm; regularization of the square root, our choice */

enum {
    VR_H1, VR_H2, VR_H3, VR_H4,
    VR_DER_H1, VR_DER_H2, VR_DER_H3, VR_DER_H4,
    VR_V1, VR_V2,
    VR_Y1, VR_Y2,
    VR_A1, VR_A2, VR_A3, VR_A4,     /* tank cross-sections, cm2 */
    VR_a1, VR_a2, VR_a3, VR_a4,     /* outlet hole cross-sections, cm2 */
    VR_KC, VR_G,
    VR_K1, VR_K2, VR_GAMMA1, VR_GAMMA2,
    N_VARS
};

/* Defaults: Johansson (2000), minimum-phase operating point P- (from memory). */
static const lo_variable VARS[N_VARS] = {
    {"h1", LO_STATE, 12.4, 10.0},
    {"h2", LO_STATE, 12.7, 10.0},
    {"h3", LO_STATE, 1.8, 10.0},
    {"h4", LO_STATE, 1.4, 10.0},
    {"der(h1)", LO_DERIVATIVE, 0.0, 1.0},
    {"der(h2)", LO_DERIVATIVE, 0.0, 1.0},
    {"der(h3)", LO_DERIVATIVE, 0.0, 1.0},
    {"der(h4)", LO_DERIVATIVE, 0.0, 1.0},
    {"v1", LO_INPUT, 3.0, 3.0},
    {"v2", LO_INPUT, 3.0, 3.0},
    {"y1", LO_OUTPUT, 0.0, 1.0},
    {"y2", LO_OUTPUT, 0.0, 1.0},
    {"A1", LO_FIXED_PARAMETER, 28.0, 1.0},
    {"A2", LO_FIXED_PARAMETER, 32.0, 1.0},
    {"A3", LO_FIXED_PARAMETER, 28.0, 1.0},
    {"A4", LO_FIXED_PARAMETER, 32.0, 1.0},
    {"a1", LO_FIXED_PARAMETER, 0.071, 1.0},
    {"a2", LO_FIXED_PARAMETER, 0.057, 1.0},
    {"a3", LO_FIXED_PARAMETER, 0.071, 1.0},
    {"a4", LO_FIXED_PARAMETER, 0.057, 1.0},
    {"kc", LO_FIXED_PARAMETER, 0.50, 1.0},
    {"g", LO_FIXED_PARAMETER, 981.0, 1.0},
    {"k1", LO_TUNABLE_PARAMETER, 3.33, 1.0},
    {"k2", LO_TUNABLE_PARAMETER, 3.35, 1.0},
    {"gamma1", LO_TUNABLE_PARAMETER, 0.70, 1.0},
    {"gamma2", LO_TUNABLE_PARAMETER, 0.60, 1.0},
};

static const unsigned STATES[4] = {VR_H1, VR_H2, VR_H3, VR_H4};
static const unsigned DERIVATIVES[4] = {VR_DER_H1, VR_DER_H2, VR_DER_H3, VR_DER_H4};

/* Regularized outflow law q(h) and its slope dq/dh. */
static double outflow(double h, double g, double *slope) {
    if (h >= H_REG) {
        double q = sqrt(2.0 * g * h);
        *slope = g / q;
        return q;
    } else {
        double s = sqrt(2.0 * g * H_REG), x = h / H_REG;
        if (x < 0.0) {
            *slope = s * (15.0 / 8.0) / H_REG;
            return s * (15.0 / 8.0) * x;
        }
        *slope = s * (15.0 / 8.0 - 2.5 * x + (9.0 / 8.0) * x * x) / H_REG;
        return s * x * (15.0 / 8.0 - 1.25 * x + 0.375 * x * x);
    }
}

static lo_status check_parameters(lo_instance *m) {
    const double *v = m->v;
    int i;
    for (i = 0; i < 4; i++) {
        if (!(v[VR_A1 + i] > 0.0)) {
            lo_log(m, LO_ERROR, "%s = %g: tank cross-sections must be positive",
                   VARS[VR_A1 + i].name, v[VR_A1 + i]);
            return LO_ERROR;
        }
        if (!(v[VR_a1 + i] >= 0.0)) {
            lo_log(m, LO_ERROR, "%s = %g: outlet cross-sections must not be negative",
                   VARS[VR_a1 + i].name, v[VR_a1 + i]);
            return LO_ERROR;
        }
    }
    if (!(v[VR_G] > 0.0)) {
        lo_log(m, LO_ERROR, "g = %g must be positive", v[VR_G]);
        return LO_ERROR;
    }
    return LO_OK;
}

static lo_status evaluate(lo_instance *m) {
    double *v = m->v;
    double q[4], dq[4];
    int i;
    lo_status st = check_parameters(m);
    if (st != LO_OK) return st;
    for (i = 0; i < 4; i++) q[i] = outflow(v[VR_H1 + i], v[VR_G], &dq[i]);
    v[VR_DER_H1] = -v[VR_a1] / v[VR_A1] * q[0] + v[VR_a3] / v[VR_A1] * q[2] +
                   v[VR_GAMMA1] * v[VR_K1] / v[VR_A1] * v[VR_V1];
    v[VR_DER_H2] = -v[VR_a2] / v[VR_A2] * q[1] + v[VR_a4] / v[VR_A2] * q[3] +
                   v[VR_GAMMA2] * v[VR_K2] / v[VR_A2] * v[VR_V2];
    v[VR_DER_H3] = -v[VR_a3] / v[VR_A3] * q[2] + (1.0 - v[VR_GAMMA2]) * v[VR_K2] / v[VR_A3] * v[VR_V2];
    v[VR_DER_H4] = -v[VR_a4] / v[VR_A4] * q[3] + (1.0 - v[VR_GAMMA1]) * v[VR_K1] / v[VR_A4] * v[VR_V1];
    v[VR_Y1] = v[VR_KC] * v[VR_H1];
    v[VR_Y2] = v[VR_KC] * v[VR_H2];
    return LO_OK;
}

/* Analytic partial derivatives of the state derivatives and outputs. */
static lo_status partials(lo_instance *m) {
    const double *v = m->v;
    double dq[4];
    int i;
    for (i = 0; i < 4; i++) (void)outflow(v[VR_H1 + i], v[VR_G], &dq[i]);
    LO_JAC(m, VR_DER_H1, VR_H1) = -v[VR_a1] / v[VR_A1] * dq[0];
    LO_JAC(m, VR_DER_H1, VR_H3) = v[VR_a3] / v[VR_A1] * dq[2];
    LO_JAC(m, VR_DER_H1, VR_V1) = v[VR_GAMMA1] * v[VR_K1] / v[VR_A1];
    LO_JAC(m, VR_DER_H2, VR_H2) = -v[VR_a2] / v[VR_A2] * dq[1];
    LO_JAC(m, VR_DER_H2, VR_H4) = v[VR_a4] / v[VR_A2] * dq[3];
    LO_JAC(m, VR_DER_H2, VR_V2) = v[VR_GAMMA2] * v[VR_K2] / v[VR_A2];
    LO_JAC(m, VR_DER_H3, VR_H3) = -v[VR_a3] / v[VR_A3] * dq[2];
    LO_JAC(m, VR_DER_H3, VR_V2) = (1.0 - v[VR_GAMMA2]) * v[VR_K2] / v[VR_A3];
    LO_JAC(m, VR_DER_H4, VR_H4) = -v[VR_a4] / v[VR_A4] * dq[3];
    LO_JAC(m, VR_DER_H4, VR_V1) = (1.0 - v[VR_GAMMA1]) * v[VR_K1] / v[VR_A4];
    LO_JAC(m, VR_Y1, VR_H1) = v[VR_KC];
    LO_JAC(m, VR_Y2, VR_H2) = v[VR_KC];
    return LO_OK;
}

static const lo_model LO_PLANT = {
    "four_tank",
    "{29eb3147-52da-4601-883c-3e6e3fc2d7f2}",
    N_VARS, VARS,
    4, STATES, DERIVATIVES,
    0, NULL,
    0,
    NULL, evaluate, partials,
};

#include "lo_fmi2_me.h"
