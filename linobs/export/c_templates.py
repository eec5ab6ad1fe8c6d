"""The fixed parts of the generated C99 estimator (helpers of :mod:`linobs.export.c_code`).

The templates use :class:`string.Template` placeholders: ``$p`` is the
identifier prefix (``linobs_schedule``) and ``$P`` its upper-case form for the
macros.  The tables (sizes, axis values, node data, names) are written by
:mod:`linobs.export.c_code`; these templates hold the code that reads them.

References
----------
Weiser, A. & Zarantonello, S. E. (1988). A note on piecewise linear and
multilinear table interpolation in many dimensions. Mathematics of
Computation 50(181), 189-196 (the multilinear cell weights).

Franklin, G. F., Powell, J. D. & Workman, M. L. (1998). Digital Control of
Dynamic Systems, 3rd ed. Addison-Wesley (prediction and current-estimate
observer forms).
"""

from __future__ import annotations

from string import Template

__all__ = ["HEADER_API", "SOURCE_FUNCTIONS"]

#: Declarations after the size macros in the header.
HEADER_API = Template(r"""
#define ${P}_DIM(n) ((n) > 0 ? (n) : 1) /* array length: C99 has no empty arrays */

/* where each axis reads its scheduling value (${p}_axis_source) */
#define ${P}_SOURCE_STATE 0     /* the estimate x_hat[index] */
#define ${P}_SOURCE_INPUT 1     /* the measured input u[index] */
#define ${P}_SOURCE_PARAMETER 2 /* params[index] */

/* return codes */
#define ${P}_OK 0
#define ${P}_NOT_FINITE (-1)    /* a scheduling value is NaN or infinite: nothing written */
#define ${P}_NO_PARAMETERS (-2) /* params is NULL but an axis reads a parameter */

/* The node quantities interpolated at one scheduling value.  Matrices are
 * row-major: Phi[i * ${P}_STATES + j] is row i, column j. */
typedef struct {
    double L[${P}_DIM(${P}_STATES * ${P}_OUTPUTS)];     /* gain, n x p; NaN when not usable */
    double Phi[${P}_DIM(${P}_STATES * ${P}_STATES)];    /* transition matrix, n x n */
    double Gamma[${P}_DIM(${P}_STATES * ${P}_INPUTS)];  /* input matrix, n x m */
    double Gamma0[${P}_DIM(${P}_STATES * ${P}_STATES)]; /* multiplies dx0, n x n */
    double C[${P}_DIM(${P}_OUTPUTS * ${P}_STATES)];     /* output matrix, p x n */
    double D[${P}_DIM(${P}_OUTPUTS * ${P}_INPUTS)];     /* feedthrough, p x m */
    double x0[${P}_DIM(${P}_STATES)];                   /* operating point: states */
    double u0[${P}_DIM(${P}_INPUTS)];                   /* operating point: inputs */
    double y0[${P}_DIM(${P}_OUTPUTS)];                  /* operating point: outputs */
    double dx0[${P}_DIM(${P}_STATES)];                  /* state derivative there */
    double variance[${P}_DIM(${P}_STATES)]; /* Kalman: diagonal of the steady-state
                                               covariance of the form used; NaN: none */
    int usable;  /* 1: every node with a non-zero weight has a design */
    int outside; /* 1: the value lay outside the grid's box and was clamped */
} ${p}_local;

extern const char *const ${p}_state_names[${P}_DIM(${P}_STATES)];
extern const char *const ${p}_input_names[${P}_DIM(${P}_INPUTS)];
extern const char *const ${p}_output_names[${P}_DIM(${P}_OUTPUTS)];
extern const char *const ${p}_axis_names[${P}_DIM(${P}_AXES)];
extern const double *const ${p}_axis_values[${P}_DIM(${P}_AXES)];
extern const int ${p}_axis_length[${P}_DIM(${P}_AXES)];
extern const int ${p}_axis_source[${P}_DIM(${P}_AXES)];
extern const int ${p}_axis_index[${P}_DIM(${P}_AXES)];
extern const unsigned char ${p}_node_usable[${P}_NODES];

/* s[a] for every axis a from the estimate, the measured inputs and the
 * parameter values (params may be NULL when ${P}_PARAMETERS is 0). */
int ${p}_scheduling_value(const double *x_hat, const double *u, const double *params,
                          double *s);

/* Every node quantity at scheduling value s (multilinear over the cell holding
 * s, s clamped to the grid's box first). */
int ${p}_interpolate(const double *s, ${p}_local *out);

/* One update with the interpolated quantities v (see the file comment).
 * x_out may be x_in; u_now may be NULL (then u is used). */
void ${p}_update(const ${p}_local *v, const double *x_in, const double *u, const double *y,
                 const double *u_now, double *x_out);

/* sigma[i] = sqrt(max(0, variance[i])); NaN where the variance is NaN. */
void ${p}_standard_deviation(const ${p}_local *v, double *sigma);

/* The scheduled estimator update: scheduling value at (x_in, u, params),
 * interpolation, update.  usable / outside may be NULL. */
int ${p}_step(const double *x_in, const double *u, const double *y, const double *u_now,
              const double *params, double *x_out, int *usable, int *outside);
""")

#: The functions of the generated source file (after its tables).
SOURCE_FUNCTIONS = Template(r"""
static void ${p}_add(double *out, const double *row, double w, size_t n)
{
    size_t i;
    for (i = 0; i < n; ++i) out[i] += w * row[i];
}

static void ${p}_fill(double *out, double value, size_t n)
{
    size_t i;
    for (i = 0; i < n; ++i) out[i] = value;
}

int ${p}_scheduling_value(const double *x_hat, const double *u, const double *params,
                          double *s)
{
    int a;
    (void)x_hat; (void)u; (void)params; (void)s;
    for (a = 0; a < ${P}_AXES; ++a) {
        int i = ${p}_axis_index[a];
        if (${p}_axis_source[a] == ${P}_SOURCE_STATE) {
            s[a] = x_hat[i];
        } else if (${p}_axis_source[a] == ${P}_SOURCE_INPUT) {
            s[a] = u[i];
        } else {
            if (!params) return ${P}_NO_PARAMETERS;
            s[a] = params[i];
        }
    }
    return ${P}_OK;
}

int ${p}_interpolate(const double *s, ${p}_local *out)
{
    long low[${P}_DIM(${P}_AXES)];
    double frac[${P}_DIM(${P}_AXES)];
    long node[${P}_CORNERS];
    double weight[${P}_CORNERS];
    double total = 0.0;
    int a, c, outside = 0, usable = 1, covered = ${P}_KALMAN;
    (void)s;
    for (a = 0; a < ${P}_AXES; ++a) {
        const double *x = ${p}_axis_values[a];
        int n = ${p}_axis_length[a], lo = 0, hi = n - 2;
        double v = s[a];
        if (!isfinite(v)) return ${P}_NOT_FINITE;
        if (v < x[0] || v > x[n - 1]) outside = 1;
        low[a] = 0;
        frac[a] = 0.0;
        if (n < 2) continue;
        if (v < x[0]) v = x[0];
        if (v > x[n - 1]) v = x[n - 1];
        while (lo < hi) { /* the last i <= n - 2 with x[i] <= v */
            int mid = lo + (hi - lo + 1) / 2;
            if (x[mid] <= v) lo = mid; else hi = mid - 1;
        }
        low[a] = lo;
        frac[a] = (v - x[lo]) / (x[lo + 1] - x[lo]);
    }
    for (c = 0; c < ${P}_CORNERS; ++c) {
        long index = 0;
        double w = 1.0;
        int bit = 0;
        for (a = 0; a < ${P}_AXES; ++a) {
            long i = low[a];
            if (${p}_axis_length[a] >= 2) {
                if ((c >> bit) & 1) { i += 1; w *= frac[a]; } else { w *= 1.0 - frac[a]; }
                ++bit;
            }
            index += i * ${p}_axis_stride[a];
        }
        node[c] = index;
        weight[c] = w > ${P}_WEIGHT_FLOOR ? w : 0.0;
        total += weight[c];
    }
    if (!(total > 0.0)) total = 1.0;
    memset(out, 0, sizeof *out);
    for (c = 0; c < ${P}_CORNERS; ++c) {
        double w = weight[c] / total;
        long k = node[c];
        if (!(w > 0.0)) continue;
        if (!${p}_node_usable[k]) usable = 0;
        ${p}_add(out->L, ${p}_node_L[k], w, ${P}_STATES * ${P}_OUTPUTS);
        ${p}_add(out->Phi, ${p}_node_Phi[k], w, ${P}_STATES * ${P}_STATES);
        ${p}_add(out->Gamma, ${p}_node_Gamma[k], w, ${P}_STATES * ${P}_INPUTS);
        ${p}_add(out->Gamma0, ${p}_node_Gamma0[k], w, ${P}_STATES * ${P}_STATES);
        ${p}_add(out->C, ${p}_node_C[k], w, ${P}_OUTPUTS * ${P}_STATES);
        ${p}_add(out->D, ${p}_node_D[k], w, ${P}_OUTPUTS * ${P}_INPUTS);
        ${p}_add(out->x0, ${p}_node_x0[k], w, ${P}_STATES);
        ${p}_add(out->u0, ${p}_node_u0[k], w, ${P}_INPUTS);
        ${p}_add(out->y0, ${p}_node_y0[k], w, ${P}_OUTPUTS);
        ${p}_add(out->dx0, ${p}_node_dx0[k], w, ${P}_STATES);
#if ${P}_KALMAN
        if (${p}_node_has_variance[k]) ${p}_add(out->variance, ${p}_node_variance[k], w,
                                                ${P}_STATES);
        else covered = 0;
#endif
    }
    if (!usable) ${p}_fill(out->L, NAN, ${P}_STATES * ${P}_OUTPUTS);
    if (!covered) ${p}_fill(out->variance, NAN, ${P}_STATES);
    out->usable = usable;
    out->outside = outside;
    return ${P}_OK;
}

/* out = x0 + Phi (x - x0) + Gamma (u - u0) + Gamma0 dx0 */
static void ${p}_predict(const ${p}_local *v, const double *x, const double *u, double *out)
{
    double dx[${P}_DIM(${P}_STATES)], du[${P}_DIM(${P}_INPUTS)];
    int i, j;
    for (j = 0; j < ${P}_STATES; ++j) dx[j] = x[j] - v->x0[j];
    for (j = 0; j < ${P}_INPUTS; ++j) du[j] = u[j] - v->u0[j];
    for (i = 0; i < ${P}_STATES; ++i) {
        double a = 0.0, b = 0.0, g = 0.0;
        for (j = 0; j < ${P}_STATES; ++j) a += v->Phi[i * ${P}_STATES + j] * dx[j];
        for (j = 0; j < ${P}_INPUTS; ++j) b += v->Gamma[i * ${P}_INPUTS + j] * du[j];
        for (j = 0; j < ${P}_STATES; ++j) g += v->Gamma0[i * ${P}_STATES + j] * v->dx0[j];
        out[i] = v->x0[i] + a + b + g;
    }
}

/* out = y0 + C (x - x0) + D (u - u0) */
static void ${p}_output(const ${p}_local *v, const double *x, const double *u, double *out)
{
    double dx[${P}_DIM(${P}_STATES)], du[${P}_DIM(${P}_INPUTS)];
    int i, j;
    for (j = 0; j < ${P}_STATES; ++j) dx[j] = x[j] - v->x0[j];
    for (j = 0; j < ${P}_INPUTS; ++j) du[j] = u[j] - v->u0[j];
    for (i = 0; i < ${P}_OUTPUTS; ++i) {
        double a = 0.0, b = 0.0;
        for (j = 0; j < ${P}_STATES; ++j) a += v->C[i * ${P}_STATES + j] * dx[j];
        for (j = 0; j < ${P}_INPUTS; ++j) b += v->D[i * ${P}_INPUTS + j] * du[j];
        out[i] = v->y0[i] + a + b;
    }
}

void ${p}_update(const ${p}_local *v, const double *x_in, const double *u, const double *y,
                 const double *u_now, double *x_out)
{
    double x[${P}_DIM(${P}_STATES)], y_hat[${P}_DIM(${P}_OUTPUTS)];
    int i, k;
    (void)u_now;
    ${p}_predict(v, x_in, u, x);
    if (v->usable) {
#if ${P}_FILTER_FORM
        ${p}_output(v, x, u_now ? u_now : u, y_hat);  /* current estimate: y[k] against x_prior */
#else
        ${p}_output(v, x_in, u, y_hat);               /* prediction: y[k] against x_hat[k|k-1] */
#endif
        for (i = 0; i < ${P}_STATES; ++i) {
            double g = 0.0;
            for (k = 0; k < ${P}_OUTPUTS; ++k) g += v->L[i * ${P}_OUTPUTS + k] * (y[k] - y_hat[k]);
            x[i] += g;
        }
    }
    memcpy(x_out, x, sizeof(double) * ${P}_STATES);
}

void ${p}_standard_deviation(const ${p}_local *v, double *sigma)
{
    int i;
    for (i = 0; i < ${P}_STATES; ++i) {
        double q = v->variance[i];
        sigma[i] = isnan(q) ? NAN : sqrt(q > 0.0 ? q : 0.0);
    }
}

int ${p}_step(const double *x_in, const double *u, const double *y, const double *u_now,
              const double *params, double *x_out, int *usable, int *outside)
{
    double s[${P}_DIM(${P}_AXES)];
    ${p}_local v;
    int status = ${p}_scheduling_value(x_in, u, params, s);
    if (status != ${P}_OK) return status;
    status = ${p}_interpolate(s, &v);
    if (status != ${P}_OK) return status;
    ${p}_update(&v, x_in, u, y, u_now, x_out);
    if (usable) *usable = v.usable;
    if (outside) *outside = v.outside;
    return ${P}_OK;
}
""")
