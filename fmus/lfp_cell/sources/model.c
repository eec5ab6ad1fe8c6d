/*
 * lfp_cell -- lumped electro-thermal model of a lithium iron phosphate (LFP)
 * cell, FMI 2.0 model exchange (no directional derivatives: importers use
 * finite differences, which the C2 table interpolation keeps accurate).
 *
 * DEMO DATA, INVENTED: the tables and parameters describe a plausible ~20 Ah
 * prismatic LFP cell; they are not measurements of any product.
 *
 * Equivalent circuit with two RC branches (common practice):
 *   v_term = OCV(soc,T) - v_rc1 - v_rc2 - R0(soc,T) i          (i > 0: discharge)
 *   dsoc/dt   = -i / (3600 Q_Ah)
 *   dv_rck/dt = -v_rck / (Rk(soc,T) Ck) + i / Ck,   k = 1, 2
 * Lumped thermal state (irreversible heat i (OCV - v_term); entropic heat
 * neglected):
 *   mass cp dT/dt = i (v_rc1 + v_rc2) + R0 i^2 - hA (T - t_amb)
 * Surface temperature: a fixed fraction k_s of the core-to-ambient temperature
 * difference drops inside the cell, t_surf = T - k_s (T - t_amb).
 *
 * OCV, R0, R1 and R2 are tables over soc x temperature (27 x 7 knots),
 * interpolated by tensor-product natural cubic splines (lo_spline.h) whose
 * coefficients are computed once at instantiation.  OCV in V, resistances in
 * mOhm in the tables (Ohm in the variables).  The generating recipe, kept here
 * so the data can be regenerated (values rounded to 5 decimals):
 *   sp(z) = log(1 + exp(z))   (softplus)
 *   OCV25(s) = 3.275 + 0.055 s - 0.18 sp((0.05 - s)/0.03) + 0.15 sp((s - 0.97)/0.03)
 *   dOCV/dT(s) = (0.25 exp(-s/0.08) - 0.04 - 0.06 s) mV/K,  OCV = OCV25 + dOCV/dT (T - 25)
 *   Rk(s,T) = Rk,ref (1 + a exp(-s/b) + c exp(-(1-s)/d)) exp(Ea/Rgas (1/T - 1/298.15 K)), T in K
 *     R0: 1.0 mOhm, a 1.5, b 0.06, c 0.4, d 0.05, Ea 22 kJ/mol
 *     R1: 0.6 mOhm, a 2.0, b 0.08, c 0.5, d 0.05, Ea 35 kJ/mol
 *     R2: 0.8 mOhm, a 1.0, b 0.10, c 0.3, d 0.08, Ea 30 kJ/mol
 * The OCV ends bend on a soc scale of 0.03 (not sharper), so that central
 * differences at the usual step stay accurate to ~1e-8 right up to the ends.
 */
#include "lo_model.h"
#include "lo_spline.h"

enum {
    VR_SOC, VR_V_RC1, VR_V_RC2, VR_TEMP_CELL,
    VR_DER_SOC, VR_DER_V_RC1, VR_DER_V_RC2, VR_DER_TEMP_CELL,
    VR_I_CELL, VR_T_AMB,
    VR_V_TERM, VR_T_SURF,
    VR_Q_AH, VR_C1, VR_C2, VR_MASS, VR_CP, VR_HA, VR_K_S,
    VR_OCV, VR_R0, VR_R1, VR_R2,
    N_VARS
};

static const lo_variable VARS[N_VARS] = {
    {"soc", LO_STATE, 0.5, 1.0},
    {"v_rc1", LO_STATE, 0.0, 0.01},
    {"v_rc2", LO_STATE, 0.0, 0.01},
    {"temp_cell", LO_STATE, 25.0, 25.0},
    {"der(soc)", LO_DERIVATIVE, 0.0, 1.0},
    {"der(v_rc1)", LO_DERIVATIVE, 0.0, 1.0},
    {"der(v_rc2)", LO_DERIVATIVE, 0.0, 1.0},
    {"der(temp_cell)", LO_DERIVATIVE, 0.0, 1.0},
    {"i_cell", LO_INPUT, 0.0, 20.0},
    {"t_amb", LO_INPUT, 25.0, 25.0},
    {"v_term", LO_OUTPUT, 0.0, 1.0},
    {"t_surf", LO_OUTPUT, 0.0, 1.0},
    {"Q_Ah", LO_TUNABLE_PARAMETER, 20.0, 1.0},
    {"C1", LO_TUNABLE_PARAMETER, 25000.0, 1.0},
    {"C2", LO_TUNABLE_PARAMETER, 500000.0, 1.0},
    {"mass", LO_FIXED_PARAMETER, 0.6, 1.0},
    {"cp", LO_FIXED_PARAMETER, 1100.0, 1.0},
    {"hA", LO_TUNABLE_PARAMETER, 0.8, 1.0},
    {"k_s", LO_FIXED_PARAMETER, 0.3, 1.0},
    {"ocv", LO_LOCAL, 0.0, 1.0},
    {"r0", LO_LOCAL, 0.0, 1.0},
    {"r1", LO_LOCAL, 0.0, 1.0},
    {"r2", LO_LOCAL, 0.0, 1.0},
};

static const unsigned STATES[4] = {VR_SOC, VR_V_RC1, VR_V_RC2, VR_TEMP_CELL};
static const unsigned DERIVATIVES[4] = {VR_DER_SOC, VR_DER_V_RC1, VR_DER_V_RC2, VR_DER_TEMP_CELL};

#define N_SOC 27
#define N_TEMP 7

static const double SOC_KNOTS[N_SOC] = {0, 0.01, 0.02, 0.03, 0.045, 0.06, 0.075, 0.09, 0.11,
                                        0.13, 0.16, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.85,
                                        0.88, 0.91, 0.93, 0.95, 0.965, 0.98, 0.99, 1};
static const double TEMP_KNOTS[N_TEMP] = {-20, -10, 0, 10, 25, 40, 60}; /* degC */

/* Tables z[i * N_TEMP + j] at (SOC_KNOTS[i], TEMP_KNOTS[j]); columns are temperatures. */
static const double TABLE_OCV[N_SOC * N_TEMP] = {
    /* soc 0     */ 2.93441, 2.93651, 2.93861, 2.94071, 2.94386, 2.94701, 2.95121,
    /* soc 0.01  */ 2.98534, 2.98714, 2.98894, 2.99074, 2.99344, 2.99614, 2.99974,
    /* soc 0.02  */ 3.03281, 3.03434, 3.03588, 3.03741, 3.03971, 3.04202, 3.04509,
    /* soc 0.03  */ 3.07621, 3.07751, 3.07881, 3.08011, 3.08206, 3.08401, 3.08661,
    /* soc 0.045 */ 3.13260, 3.13359, 3.13459, 3.13559, 3.13708, 3.13858, 3.14058,
    /* soc 0.06  */ 3.17769, 3.17844, 3.17918, 3.17993, 3.18104, 3.18216, 3.18365,
    /* soc 0.075 */ 3.21176, 3.21230, 3.21283, 3.21336, 3.21417, 3.21497, 3.21603,
    /* soc 0.09  */ 3.23623, 3.23659, 3.23694, 3.23730, 3.23784, 3.23837, 3.23909,
    /* soc 0.11  */ 3.25746, 3.25762, 3.25779, 3.25795, 3.25820, 3.25845, 3.25878,
    /* soc 0.13  */ 3.26999, 3.27001, 3.27002, 3.27004, 3.27006, 3.27008, 3.27011,
    /* soc 0.16  */ 3.27997, 3.27981, 3.27965, 3.27949, 3.27926, 3.27902, 3.27870,
    /* soc 0.2   */ 3.28621, 3.28589, 3.28558, 3.28526, 3.28479, 3.28432, 3.28369,
    /* soc 0.3   */ 3.29380, 3.29328, 3.29276, 3.29224, 3.29146, 3.29067, 3.28963,
    /* soc 0.4   */ 3.29980, 3.29918, 3.29856, 3.29793, 3.29700, 3.29606, 3.29482,
    /* soc 0.5   */ 3.30563, 3.30493, 3.30424, 3.30354, 3.30250, 3.30146, 3.30007,
    /* soc 0.6   */ 3.31141, 3.31066, 3.30990, 3.30914, 3.30800, 3.30686, 3.30535,
    /* soc 0.7   */ 3.31721, 3.31639, 3.31557, 3.31475, 3.31352, 3.31229, 3.31065,
    /* soc 0.8   */ 3.32348, 3.32260, 3.32172, 3.32084, 3.31952, 3.31820, 3.31644,
    /* soc 0.85  */ 3.32857, 3.32766, 3.32675, 3.32584, 3.32447, 3.32311, 3.32129,
    /* soc 0.88  */ 3.33486, 3.33394, 3.33301, 3.33208, 3.33069, 3.32930, 3.32744,
    /* soc 0.91  */ 3.34835, 3.34740, 3.34645, 3.34551, 3.34409, 3.34267, 3.34078,
    /* soc 0.93  */ 3.36556, 3.36460, 3.36364, 3.36268, 3.36124, 3.35981, 3.35789,
    /* soc 0.95  */ 3.39377, 3.39280, 3.39183, 3.39086, 3.38941, 3.38795, 3.38601,
    /* soc 0.965 */ 3.42447, 3.42349, 3.42251, 3.42154, 3.42007, 3.41860, 3.41664,
    /* soc 0.98  */ 3.46439, 3.46340, 3.46242, 3.46143, 3.45995, 3.45846, 3.45649,
    /* soc 0.99  */ 3.49608, 3.49508, 3.49409, 3.49310, 3.49161, 3.49011, 3.48813,
    /* soc 1     */ 3.53149, 3.53049, 3.52949, 3.52849, 3.52699, 3.52549, 3.52349
};

static const double TABLE_R0[N_SOC * N_TEMP] = {
    /* soc 0     */ 12.10898, 8.13949, 5.63271, 4.00066, 2.50000, 1.63422, 0.98401,
    /* soc 0.01  */ 10.99361, 7.38975, 5.11388, 3.63215, 2.26972, 1.48369, 0.89337,
    /* soc 0.02  */ 10.04947, 6.75511, 4.67469, 3.32022, 2.07480, 1.35627, 0.81665,
    /* soc 0.03  */ 9.25027, 6.21790, 4.30293, 3.05617, 1.90980, 1.24841, 0.75170,
    /* soc 0.045 */ 8.27552, 5.56269, 3.84951, 2.73413, 1.70855, 1.11686, 0.67249,
    /* soc 0.06  */ 7.51638, 5.05240, 3.49638, 2.48332, 1.55182, 1.01441, 0.61080,
    /* soc 0.075 */ 6.92516, 4.65499, 3.22136, 2.28799, 1.42976, 0.93462, 0.56276,
    /* soc 0.09  */ 6.46472, 4.34549, 3.00718, 2.13586, 1.33470, 0.87247, 0.52534,
    /* soc 0.11  */ 6.00518, 4.03660, 2.79342, 1.98404, 1.23982, 0.81046, 0.48800,
    /* soc 0.13  */ 5.67591, 3.81526, 2.64025, 1.87525, 1.17184, 0.76602, 0.46124,
    /* soc 0.16  */ 5.34842, 3.59513, 2.48791, 1.76705, 1.10423, 0.72182, 0.43463,
    /* soc 0.2   */ 5.10278, 3.43001, 2.37365, 1.68589, 1.05351, 0.68867, 0.41467,
    /* soc 0.3   */ 4.89255, 3.28870, 2.27586, 1.61644, 1.01011, 0.66030, 0.39758,
    /* soc 0.4   */ 4.85285, 3.26202, 2.25739, 1.60332, 1.00191, 0.65494, 0.39436,
    /* soc 0.5   */ 4.84543, 3.25703, 2.25394, 1.60087, 1.00038, 0.65394, 0.39375,
    /* soc 0.6   */ 4.84457, 3.25645, 2.25354, 1.60059, 1.00020, 0.65382, 0.39368,
    /* soc 0.7   */ 4.84846, 3.25906, 2.25535, 1.60187, 1.00100, 0.65434, 0.39400,
    /* soc 0.8   */ 4.87909, 3.27965, 2.26960, 1.61199, 1.00733, 0.65848, 0.39649,
    /* soc 0.85  */ 4.94006, 3.32064, 2.29796, 1.63213, 1.01992, 0.66671, 0.40144,
    /* soc 0.88  */ 5.01935, 3.37394, 2.33484, 1.65833, 1.03629, 0.67741, 0.40789,
    /* soc 0.91  */ 5.16385, 3.47107, 2.40206, 1.70607, 1.06612, 0.69691, 0.41963,
    /* soc 0.93  */ 5.32136, 3.57694, 2.47533, 1.75811, 1.09864, 0.71817, 0.43243,
    /* soc 0.95  */ 5.55634, 3.73489, 2.58463, 1.83574, 1.14715, 0.74988, 0.45152,
    /* soc 0.965 */ 5.80569, 3.90251, 2.70062, 1.91813, 1.19863, 0.78353, 0.47179,
    /* soc 0.98  */ 6.14229, 4.12876, 2.85720, 2.02934, 1.26813, 0.82896, 0.49914,
    /* soc 0.99  */ 6.42983, 4.32204, 2.99095, 2.12434, 1.32749, 0.86777, 0.52251,
    /* soc 1     */ 6.78103, 4.55811, 3.15432, 2.24037, 1.40000, 0.91516, 0.55105
};

static const double TABLE_R1[N_SOC * N_TEMP] = {
    /* soc 0     */ 22.14684, 11.77235, 6.55405, 3.80296, 1.80000, 0.91526, 0.40837,
    /* soc 0.01  */ 20.41195, 10.85016, 6.04063, 3.50506, 1.65900, 0.84356, 0.37638,
    /* soc 0.02  */ 18.88093, 10.03632, 5.58755, 3.24215, 1.53456, 0.78029, 0.34815,
    /* soc 0.03  */ 17.52980, 9.31812, 5.18770, 3.01014, 1.42475, 0.72445, 0.32323,
    /* soc 0.045 */ 15.79487, 8.39590, 4.67427, 2.71223, 1.28374, 0.65275, 0.29124,
    /* soc 0.06  */ 14.35656, 7.63136, 4.24862, 2.46525, 1.16684, 0.59331, 0.26472,
    /* soc 0.075 */ 13.16416, 6.99753, 3.89575, 2.26050, 1.06993, 0.54403, 0.24273,
    /* soc 0.09  */ 12.17563, 6.47206, 3.60321, 2.09075, 0.98958, 0.50318, 0.22451,
    /* soc 0.11  */ 11.11534, 5.90846, 3.28943, 1.90868, 0.90341, 0.45936, 0.20496,
    /* soc 0.13  */ 10.28959, 5.46952, 3.04506, 1.76689, 0.83629, 0.42524, 0.18973,
    /* soc 0.16  */ 9.38044, 4.98626, 2.77601, 1.61077, 0.76240, 0.38766, 0.17297,
    /* soc 0.2   */ 8.59423, 4.56834, 2.54334, 1.47576, 0.69850, 0.35517, 0.15847,
    /* soc 0.3   */ 7.72951, 4.10869, 2.28744, 1.32728, 0.62822, 0.31944, 0.14252,
    /* soc 0.4   */ 7.48178, 3.97701, 2.21413, 1.28474, 0.60809, 0.30920, 0.13796,
    /* soc 0.5   */ 7.41095, 3.93936, 2.19317, 1.27258, 0.60233, 0.30627, 0.13665,
    /* soc 0.6   */ 7.39168, 3.92911, 2.18747, 1.26927, 0.60076, 0.30547, 0.13630,
    /* soc 0.7   */ 7.39377, 3.93022, 2.18808, 1.26963, 0.60093, 0.30556, 0.13633,
    /* soc 0.8   */ 7.45055, 3.96041, 2.20489, 1.27938, 0.60555, 0.30791, 0.13738,
    /* soc 0.85  */ 7.56641, 4.02199, 2.23917, 1.29927, 0.61497, 0.31270, 0.13952,
    /* soc 0.88  */ 7.71738, 4.10224, 2.28385, 1.32520, 0.62724, 0.31893, 0.14230,
    /* soc 0.91  */ 7.99259, 4.24853, 2.36530, 1.37245, 0.64960, 0.33031, 0.14738,
    /* soc 0.93  */ 8.29263, 4.40802, 2.45409, 1.42398, 0.67399, 0.34271, 0.15291,
    /* soc 0.95  */ 8.74028, 4.64597, 2.58656, 1.50084, 0.71037, 0.36121, 0.16116,
    /* soc 0.965 */ 9.21533, 4.89849, 2.72715, 1.58242, 0.74898, 0.38084, 0.16992,
    /* soc 0.98  */ 9.85659, 5.23936, 2.91692, 1.69253, 0.80110, 0.40734, 0.18175,
    /* soc 0.99  */ 10.40439, 5.53055, 3.07903, 1.78660, 0.84562, 0.42998, 0.19185,
    /* soc 1     */ 11.07347, 5.88620, 3.27704, 1.90149, 0.90000, 0.45763, 0.20418
};

static const double TABLE_R2[N_SOC * N_TEMP] = {
    /* soc 0     */ 13.75433, 8.00199, 4.84374, 3.03782, 1.60000, 0.89609, 0.44867,
    /* soc 0.01  */ 13.09988, 7.62124, 4.61327, 2.89328, 1.52387, 0.85346, 0.42732,
    /* soc 0.02  */ 12.50772, 7.27673, 4.40473, 2.76249, 1.45499, 0.81488, 0.40801,
    /* soc 0.03  */ 11.97190, 6.96501, 4.21603, 2.64415, 1.39266, 0.77997, 0.39053,
    /* soc 0.045 */ 11.26225, 6.55214, 3.96612, 2.48741, 1.31010, 0.73373, 0.36738,
    /* soc 0.06  */ 10.65145, 6.19679, 3.75102, 2.35251, 1.23905, 0.69394, 0.34746,
    /* soc 0.075 */ 10.12572, 5.89094, 3.56588, 2.23640, 1.17790, 0.65969, 0.33031,
    /* soc 0.09  */ 9.67323, 5.62769, 3.40653, 2.13646, 1.12526, 0.63021, 0.31555,
    /* soc 0.11  */ 9.16640, 5.33282, 3.22805, 2.02452, 1.06630, 0.59719, 0.29901,
    /* soc 0.13  */ 8.75145, 5.09141, 3.08192, 1.93287, 1.01803, 0.57016, 0.28548,
    /* soc 0.16  */ 8.26569, 4.80881, 2.91085, 1.82559, 0.96152, 0.53851, 0.26963,
    /* soc 0.2   */ 7.80798, 4.54252, 2.74966, 1.72449, 0.90828, 0.50869, 0.25470,
    /* soc 0.3   */ 7.21988, 4.20038, 2.54256, 1.59461, 0.83987, 0.47037, 0.23552,
    /* soc 0.4   */ 7.00426, 4.07494, 2.46663, 1.54698, 0.81479, 0.45633, 0.22848,
    /* soc 0.5   */ 6.92748, 4.03027, 2.43959, 1.53003, 0.80585, 0.45132, 0.22598,
    /* soc 0.6   */ 6.90811, 4.01900, 2.43277, 1.52575, 0.80360, 0.45006, 0.22535,
    /* soc 0.7   */ 6.93195, 4.03287, 2.44116, 1.53101, 0.80637, 0.45162, 0.22612,
    /* soc 0.8   */ 7.04882, 4.10086, 2.48232, 1.55682, 0.81997, 0.45923, 0.22994,
    /* soc 0.85  */ 7.19496, 4.18588, 2.53378, 1.58910, 0.83697, 0.46875, 0.23470,
    /* soc 0.88  */ 7.33855, 4.26942, 2.58435, 1.62081, 0.85367, 0.47811, 0.23939,
    /* soc 0.91  */ 7.54774, 4.39112, 2.65802, 1.66702, 0.87801, 0.49173, 0.24621,
    /* soc 0.93  */ 7.73784, 4.50172, 2.72496, 1.70900, 0.90012, 0.50412, 0.25241,
    /* soc 0.95  */ 7.98200, 4.64376, 2.81095, 1.76293, 0.92852, 0.52003, 0.26038,
    /* soc 0.965 */ 8.20967, 4.77622, 2.89113, 1.81321, 0.95501, 0.53486, 0.26780,
    /* soc 0.98  */ 8.48433, 4.93601, 2.98785, 1.87387, 0.98696, 0.55275, 0.27676,
    /* soc 0.99  */ 8.69823, 5.06045, 3.06318, 1.92112, 1.01184, 0.56669, 0.28374,
    /* soc 1     */ 8.94062, 5.20147, 3.14854, 1.97465, 1.04004, 0.58248, 0.29165
};

enum { T_OCV, T_R0, T_R1, T_R2, N_TABLES };

typedef struct {
    lo_table2d table[N_TABLES];
    double coef[N_TABLES][LO_TABLE2D_COEFS(N_SOC, N_TEMP)];
} workspace;

static lo_status setup(lo_instance *m) {
    workspace *w = (workspace *)m->work;
    const double *data[N_TABLES] = {TABLE_OCV, TABLE_R0, TABLE_R1, TABLE_R2};
    int k;
    for (k = 0; k < N_TABLES; k++) {
        if (!lo_table2d_setup(&w->table[k], N_SOC, SOC_KNOTS, N_TEMP, TEMP_KNOTS, data[k],
                              w->coef[k])) {
            lo_log(m, LO_ERROR, "table %d has knots that are not strictly increasing", k);
            return LO_ERROR;
        }
    }
    return LO_OK;
}

static lo_status check_parameters(lo_instance *m) {
    static const unsigned positive[] = {VR_Q_AH, VR_C1, VR_C2, VR_MASS, VR_CP};
    const double *v = m->v;
    size_t k;
    for (k = 0; k < sizeof positive / sizeof positive[0]; k++) {
        if (!(v[positive[k]] > 0.0)) {
            lo_log(m, LO_ERROR, "%s = %g must be positive", VARS[positive[k]].name, v[positive[k]]);
            return LO_ERROR;
        }
    }
    if (!(v[VR_HA] >= 0.0)) {
        lo_log(m, LO_ERROR, "hA = %g must not be negative", v[VR_HA]);
        return LO_ERROR;
    }
    if (!(v[VR_K_S] >= 0.0 && v[VR_K_S] <= 1.0)) {
        lo_log(m, LO_ERROR, "k_s = %g must lie in [0, 1]", v[VR_K_S]);
        return LO_ERROR;
    }
    return LO_OK;
}

static lo_status evaluate(lo_instance *m) {
    const workspace *w = (const workspace *)m->work;
    double *v = m->v;
    double soc = v[VR_SOC], temp = v[VR_TEMP_CELL], i = v[VR_I_CELL];
    double ocv, r0, r1, r2;
    lo_status st = check_parameters(m);
    if (st != LO_OK) return st;
    ocv = lo_table2d_eval(&w->table[T_OCV], soc, temp, NULL, NULL);
    r0 = 1e-3 * lo_table2d_eval(&w->table[T_R0], soc, temp, NULL, NULL);
    r1 = 1e-3 * lo_table2d_eval(&w->table[T_R1], soc, temp, NULL, NULL);
    r2 = 1e-3 * lo_table2d_eval(&w->table[T_R2], soc, temp, NULL, NULL);
    v[VR_OCV] = ocv;
    v[VR_R0] = r0;
    v[VR_R1] = r1;
    v[VR_R2] = r2;
    if (!(r0 > 0.0 && r1 > 0.0 && r2 > 0.0)) {
        lo_log(m, LO_ERROR, "resistance tables give a non-positive value at soc = %g, "
               "temp_cell = %g degC (far outside the table range)", soc, temp);
        return LO_ERROR;
    }
    v[VR_DER_SOC] = -i / (3600.0 * v[VR_Q_AH]);
    v[VR_DER_V_RC1] = -v[VR_V_RC1] / (r1 * v[VR_C1]) + i / v[VR_C1];
    v[VR_DER_V_RC2] = -v[VR_V_RC2] / (r2 * v[VR_C2]) + i / v[VR_C2];
    v[VR_DER_TEMP_CELL] = (i * (v[VR_V_RC1] + v[VR_V_RC2]) + r0 * i * i -
                           v[VR_HA] * (temp - v[VR_T_AMB])) / (v[VR_MASS] * v[VR_CP]);
    v[VR_V_TERM] = ocv - v[VR_V_RC1] - v[VR_V_RC2] - r0 * i;
    v[VR_T_SURF] = temp - v[VR_K_S] * (temp - v[VR_T_AMB]);
    return LO_OK;
}

static const lo_model LO_PLANT = {
    "lfp_cell",
    "{e17d5c64-7bea-43cf-9387-a1bb658e464d}",
    N_VARS, VARS,
    4, STATES, DERIVATIVES,
    0, NULL,
    sizeof(workspace),
    setup, evaluate, NULL,
};

#include "lo_fmi2_me.h"
