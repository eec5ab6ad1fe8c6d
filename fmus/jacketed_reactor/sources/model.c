/*
 * jacketed_reactor -- jacketed continuous stirred-tank reactor (CSTR) with one
 * exothermic first-order reaction A -> B, FMI 3.0 model exchange with analytic
 * directional (and adjoint) derivatives.
 *
 * DEMO DATA, INVENTED: a 2 m3 liquid-phase reactor with a water jacket; the
 * numbers are plausible, not those of a real plant.
 *
 * Balances (textbook CSTR model, common practice):
 *   dc_a/dt        = F/V (c_a_feed - c_a) - k(T) c_a
 *   dT/dt          = F/V (T_feed - T) + (-dh_rxn) k(T) c_a / rho_cp - UA (T - T_j) / (V rho_cp)
 *   dT_j/dt        = F_c/V_j (T_c,in - T_j) + UA (T - T_j) / (V_j rho_cp_coolant)
 *   k(T)           = k0 exp(-e_act / (R T))                      (Arrhenius)
 *   F_c            = flow_coolant_max * min(max(valve, 0), 1)   (valve saturates)
 * Event indicators: z1 = 1 - valve (saturation), z2 = valve (closure).  The
 * min/max act directly in the continuous equations; the indicators only report
 * where the switching surfaces are.  At valve exactly 0 or 1 the derivative
 * with respect to valve is taken as 0 (the saturated side).
 *
 * Adiabatic temperature rise (-dh_rxn) c_a_feed / rho_cp ~ 24 K; with
 * e_act/R ~ 9000 K the number dT_ad e_act/(R T^2) stays below 4 in the
 * declared envelope, below the classical threshold for multiple steady states
 * of a first-order CSTR; the tests also count the steady states numerically.
 */
#include "lo_model.h"

#define R_GAS 8.314462618 /* J/(mol K), CODATA 2018 */

enum {
    VR_TIME,
    VR_C_A, VR_TEMP, VR_TEMP_JACKET,
    VR_DER_C_A, VR_DER_TEMP, VR_DER_TEMP_JACKET,
    VR_VALVE, VR_TEMP_FEED,
    VR_TEMP_MEAS, VR_TEMP_JACKET_MEAS,
    VR_VOLUME, VR_FLOW_FEED, VR_C_A_FEED, VR_K0, VR_E_ACT, VR_DH_RXN, VR_RHO_CP, VR_UA,
    VR_VOLUME_JACKET, VR_RHO_CP_COOLANT, VR_FLOW_COOLANT_MAX, VR_TEMP_COOLANT_IN,
    VR_VALVE_SATURATION_MARGIN, VR_VALVE_CLOSURE_MARGIN,
    VR_RATE_CONSTANT, VR_DAMKOHLER, VR_FLOW_COOLANT,
    N_VARS
};

static const lo_variable VARS[N_VARS] = {
    {"time", LO_INDEPENDENT, 0.0, 1.0},
    {"c_a", LO_STATE, 808.4, 1000.0},
    {"temp", LO_STATE, 333.85, 300.0},
    {"temp_jacket", LO_STATE, 305.41, 300.0},
    {"der(c_a)", LO_DERIVATIVE, 0.0, 1.0},
    {"der(temp)", LO_DERIVATIVE, 0.0, 1.0},
    {"der(temp_jacket)", LO_DERIVATIVE, 0.0, 1.0},
    {"valve", LO_INPUT, 0.5, 1.0},
    {"temp_feed", LO_INPUT, 340.0, 300.0},
    {"temp_meas", LO_OUTPUT, 0.0, 1.0},
    {"temp_jacket_meas", LO_OUTPUT, 0.0, 1.0},
    {"volume", LO_FIXED_PARAMETER, 2.0, 1.0},
    {"flow_feed", LO_TUNABLE_PARAMETER, 0.005, 1.0},
    {"c_a_feed", LO_TUNABLE_PARAMETER, 2000.0, 1.0},
    {"k0", LO_FIXED_PARAMETER, 2.0e9, 1.0},
    {"e_act", LO_FIXED_PARAMETER, 75000.0, 1.0},
    {"dh_rxn", LO_FIXED_PARAMETER, -50000.0, 1.0},
    {"rho_cp", LO_FIXED_PARAMETER, 4.18e6, 1.0},
    {"ua", LO_TUNABLE_PARAMETER, 15000.0, 1.0},
    {"volume_jacket", LO_FIXED_PARAMETER, 0.4, 1.0},
    {"rho_cp_coolant", LO_FIXED_PARAMETER, 4.18e6, 1.0},
    {"flow_coolant_max", LO_FIXED_PARAMETER, 0.01, 1.0},
    {"temp_coolant_in", LO_TUNABLE_PARAMETER, 285.0, 1.0},
    {"valve_saturation_margin", LO_LOCAL, 0.0, 1.0},
    {"valve_closure_margin", LO_LOCAL, 0.0, 1.0},
    {"rate_constant", LO_LOCAL, 0.0, 1.0},
    {"damkohler", LO_LOCAL, 0.0, 1.0},
    {"flow_coolant", LO_LOCAL, 0.0, 1.0},
};

static const unsigned STATES[3] = {VR_C_A, VR_TEMP, VR_TEMP_JACKET};
static const unsigned DERIVATIVES[3] = {VR_DER_C_A, VR_DER_TEMP, VR_DER_TEMP_JACKET};
static const unsigned INDICATORS[2] = {VR_VALVE_SATURATION_MARGIN, VR_VALVE_CLOSURE_MARGIN};

/* Valve opening min(max(valve, 0), 1) and its slope (0 at and beyond the limits). */
static double opening(double valve, double *slope) {
    if (valve >= 1.0) { *slope = 0.0; return 1.0; }
    if (valve <= 0.0) { *slope = 0.0; return 0.0; }
    *slope = 1.0;
    return valve;
}

static lo_status check(lo_instance *m) {
    static const unsigned positive[] = {VR_VOLUME, VR_FLOW_FEED, VR_RHO_CP, VR_VOLUME_JACKET,
                                        VR_RHO_CP_COOLANT};
    const double *v = m->v;
    size_t k;
    for (k = 0; k < sizeof positive / sizeof positive[0]; k++) {
        if (!(v[positive[k]] > 0.0)) {
            lo_log(m, LO_ERROR, "%s = %g must be positive", VARS[positive[k]].name, v[positive[k]]);
            return LO_ERROR;
        }
    }
    if (!(v[VR_TEMP] > 0.0)) {
        lo_log(m, LO_ERROR, "temp = %g K is not a physical temperature", v[VR_TEMP]);
        return LO_ERROR;
    }
    return LO_OK;
}

static lo_status evaluate(lo_instance *m) {
    double *v = m->v;
    double slope, k, fc, rate;
    lo_status st = check(m);
    if (st != LO_OK) return st;
    k = v[VR_K0] * exp(-v[VR_E_ACT] / (R_GAS * v[VR_TEMP]));
    fc = v[VR_FLOW_COOLANT_MAX] * opening(v[VR_VALVE], &slope);
    rate = k * v[VR_C_A];
    v[VR_DER_C_A] = v[VR_FLOW_FEED] / v[VR_VOLUME] * (v[VR_C_A_FEED] - v[VR_C_A]) - rate;
    v[VR_DER_TEMP] = v[VR_FLOW_FEED] / v[VR_VOLUME] * (v[VR_TEMP_FEED] - v[VR_TEMP]) +
                     (-v[VR_DH_RXN]) * rate / v[VR_RHO_CP] -
                     v[VR_UA] * (v[VR_TEMP] - v[VR_TEMP_JACKET]) / (v[VR_VOLUME] * v[VR_RHO_CP]);
    v[VR_DER_TEMP_JACKET] = fc / v[VR_VOLUME_JACKET] * (v[VR_TEMP_COOLANT_IN] - v[VR_TEMP_JACKET]) +
                            v[VR_UA] * (v[VR_TEMP] - v[VR_TEMP_JACKET]) /
                                (v[VR_VOLUME_JACKET] * v[VR_RHO_CP_COOLANT]);
    v[VR_TEMP_MEAS] = v[VR_TEMP];
    v[VR_TEMP_JACKET_MEAS] = v[VR_TEMP_JACKET];
    v[VR_VALVE_SATURATION_MARGIN] = 1.0 - v[VR_VALVE];
    v[VR_VALVE_CLOSURE_MARGIN] = v[VR_VALVE];
    v[VR_RATE_CONSTANT] = k;
    v[VR_DAMKOHLER] = k * v[VR_VOLUME] / v[VR_FLOW_FEED];
    v[VR_FLOW_COOLANT] = fc;
    return LO_OK;
}

static lo_status partials(lo_instance *m) {
    const double *v = m->v;
    double slope, fc, k = v[VR_RATE_CONSTANT], T = v[VR_TEMP];
    double dk_dT = k * v[VR_E_ACT] / (R_GAS * T * T);
    double dil = v[VR_FLOW_FEED] / v[VR_VOLUME];
    double heat = -v[VR_DH_RXN] / v[VR_RHO_CP];
    double ua_r = v[VR_UA] / (v[VR_VOLUME] * v[VR_RHO_CP]);
    double ua_j = v[VR_UA] / (v[VR_VOLUME_JACKET] * v[VR_RHO_CP_COOLANT]);
    fc = v[VR_FLOW_COOLANT_MAX] * opening(v[VR_VALVE], &slope);
    LO_JAC(m, VR_DER_C_A, VR_C_A) = -dil - k;
    LO_JAC(m, VR_DER_C_A, VR_TEMP) = -v[VR_C_A] * dk_dT;
    LO_JAC(m, VR_DER_TEMP, VR_C_A) = heat * k;
    LO_JAC(m, VR_DER_TEMP, VR_TEMP) = -dil + heat * v[VR_C_A] * dk_dT - ua_r;
    LO_JAC(m, VR_DER_TEMP, VR_TEMP_JACKET) = ua_r;
    LO_JAC(m, VR_DER_TEMP, VR_TEMP_FEED) = dil;
    LO_JAC(m, VR_DER_TEMP_JACKET, VR_TEMP) = ua_j;
    LO_JAC(m, VR_DER_TEMP_JACKET, VR_TEMP_JACKET) = -fc / v[VR_VOLUME_JACKET] - ua_j;
    LO_JAC(m, VR_DER_TEMP_JACKET, VR_VALVE) = v[VR_FLOW_COOLANT_MAX] * slope / v[VR_VOLUME_JACKET] *
                                              (v[VR_TEMP_COOLANT_IN] - v[VR_TEMP_JACKET]);
    LO_JAC(m, VR_TEMP_MEAS, VR_TEMP) = 1.0;
    LO_JAC(m, VR_TEMP_JACKET_MEAS, VR_TEMP_JACKET) = 1.0;
    return LO_OK;
}

static const lo_model LO_PLANT = {
    "jacketed_reactor",
    "{701db178-4547-4cf9-81a9-adb89f91aa38}",
    N_VARS, VARS,
    3, STATES, DERIVATIVES,
    2, INDICATORS,
    0,
    NULL, evaluate, partials,
};

#include "lo_fmi3_me.h"
