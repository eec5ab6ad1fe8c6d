/* linobs evaluation hot path.
 *
 * One call evaluates an FMI model-exchange instance at one or many points
 * (x, u) -> (dx, y) by calling the FMU's own C functions through the
 * function pointers Python resolved from the FMU's shared library:
 * set continuous states, set the inputs, get the derivatives, get the outputs
 * (and optionally the event indicators).  Buffers are owned by Python
 * (preallocated numpy arrays); nothing is allocated here.
 *
 * FMI 2.0 and FMI 3.0 differ only in the setter/getter signatures for real
 * values (FMI 3.0 passes the number of values as well).
 */
#include <stddef.h>
#include <math.h>

typedef int (*lo_set_states_t)(void *, const double *, size_t);
typedef int (*lo_get_vector_t)(void *, double *, size_t);
typedef int (*lo_set_real2_t)(void *, const unsigned int *, size_t, const double *);
typedef int (*lo_get_real2_t)(void *, const unsigned int *, size_t, double *);
typedef int (*lo_set_real3_t)(void *, const unsigned int *, size_t, const double *, size_t);
typedef int (*lo_get_real3_t)(void *, const unsigned int *, size_t, double *, size_t);

typedef struct {
    void *instance;
    void *set_states;      /* fmi2SetContinuousStates / fmi3SetContinuousStates */
    void *set_real;        /* fmi2SetReal / fmi3SetFloat64 */
    void *get_derivatives; /* fmi2GetDerivatives / fmi3GetContinuousStateDerivatives */
    void *get_real;        /* fmi2GetReal / fmi3GetFloat64 */
    void *get_indicators;  /* fmi2GetEventIndicators / fmi3GetEventIndicators, may be NULL */
    const unsigned int *input_refs;
    const unsigned int *output_refs;
    long long fmi_major;
    long long nx, nu, ny, nz;
    long long failed_call;   /* out: 1..5 which call failed, 6 non-finite */
    long long failed_status; /* out: the FMI status of the failed call */
    long long failed_point;  /* out: index of the failing point in a batch */
    double *x, *u, *dx, *y, *z; /* the instance's own one-point buffers */
} lo_evaluator;

static int lo_nonfinite(const double *v, long long n) {
    long long i;
    for (i = 0; i < n; i++)
        if (!isfinite(v[i])) return 1;
    return 0;
}

static int lo_one(lo_evaluator *e, const double *x, const double *u, double *dx, double *y, double *z) {
    int s;
    size_t nx = (size_t)e->nx, nu = (size_t)e->nu, ny = (size_t)e->ny;
    if (nx) {
        s = ((lo_set_states_t)e->set_states)(e->instance, x, nx);
        if (s) { e->failed_call = 1; e->failed_status = s; return 1; }
    }
    if (nu) {
        if (e->fmi_major == 2)
            s = ((lo_set_real2_t)e->set_real)(e->instance, e->input_refs, nu, u);
        else
            s = ((lo_set_real3_t)e->set_real)(e->instance, e->input_refs, nu, u, nu);
        if (s) { e->failed_call = 2; e->failed_status = s; return 1; }
    }
    if (nx) {
        s = ((lo_get_vector_t)e->get_derivatives)(e->instance, dx, nx);
        if (s) { e->failed_call = 3; e->failed_status = s; return 1; }
    }
    if (ny) {
        if (e->fmi_major == 2)
            s = ((lo_get_real2_t)e->get_real)(e->instance, e->output_refs, ny, y);
        else
            s = ((lo_get_real3_t)e->get_real)(e->instance, e->output_refs, ny, y, ny);
        if (s) { e->failed_call = 4; e->failed_status = s; return 1; }
    }
    if (z && e->nz) {
        s = ((lo_get_vector_t)e->get_indicators)(e->instance, z, (size_t)e->nz);
        if (s) { e->failed_call = 5; e->failed_status = s; return 1; }
    }
    if (lo_nonfinite(dx, e->nx) || lo_nonfinite(y, e->ny)) {
        e->failed_call = 6; e->failed_status = 0; return 1;
    }
    return 0;
}

/* Evaluate `count` points stored row-wise; z may be NULL.  Returns the number
 * of points evaluated successfully before the first failure (== count on success). */
long long lo_evaluate(lo_evaluator *e, long long count, const double *x, const double *u,
                      double *dx, double *y, double *z) {
    long long k;
    e->failed_call = 0;
    e->failed_status = 0;
    e->failed_point = -1;
    for (k = 0; k < count; k++) {
        if (lo_one(e, x + k * e->nx, u + k * e->nu, dx + k * e->nx, y + k * e->ny,
                   z ? z + k * e->nz : NULL)) {
            e->failed_point = k;
            return k;
        }
    }
    return count;
}

/* Evaluate the point held in the evaluator's own buffers (x, u) into (dx, y).
 * Returns 0 on success, else the failing call (see failed_call). */
long long lo_evaluate_buffers(lo_evaluator *e) {
    e->failed_call = 0;
    e->failed_status = 0;
    e->failed_point = -1;
    if (lo_one(e, e->x, e->u, e->dx, e->y, NULL)) {
        e->failed_point = 0;
        return e->failed_call;
    }
    return 0;
}
