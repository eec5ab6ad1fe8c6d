/*
 * lo_model.h -- the plant-side contract of the linobs C framework, and the
 * version-independent core shared by lo_fmi2_me.h and lo_fmi3_me.h.
 *
 * A plant source file
 *   1. includes "lo_model.h" (and "lo_spline.h" if it uses tables),
 *   2. numbers its Real / Float64 variables 0..n-1 (the value references),
 *   3. defines a table of lo_variable (name, kind, start, nominal), the state,
 *      derivative and event-indicator value-reference lists, an evaluate
 *      function and optionally setup and partials functions,
 *   4. fills one `static const lo_model LO_PLANT = {...};`
 *   5. ends with `#include "lo_fmi2_me.h"` or `#include "lo_fmi3_me.h"`,
 *      which defines every exported FMI function.
 * See README.md beside this file for a worked example.
 *
 * All values live in one array `m->v[]` indexed by value reference.  The
 * framework calls `evaluate` lazily (only when a calculated value is asked
 * for after something it depends on was set) and `partials` only for
 * directional derivatives.  Nothing is allocated after instantiation, except
 * FMU-state snapshots, which the importer asks for explicitly.
 */
#ifndef LO_MODEL_H
#define LO_MODEL_H

#include <math.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdio.h>
#include <string.h>

#if defined(__GNUC__) || defined(__clang__)
#define LO_UNUSED __attribute__((unused))
#else
#define LO_UNUSED
#endif

/* Status codes; numerically equal to fmi2Status / fmi3Status. */
typedef enum { LO_OK = 0, LO_WARNING = 1, LO_DISCARD = 2, LO_ERROR = 3, LO_FATAL = 4 } lo_status;

/* What a variable is, in FMI terms (causality + variability). */
typedef enum {
    LO_STATE,              /* continuous state, local/output with initial="exact"      */
    LO_DERIVATIVE,         /* derivative of a state, calculated                        */
    LO_INPUT,              /* causality="input", variability="continuous"              */
    LO_OUTPUT,             /* causality="output", calculated                            */
    LO_FIXED_PARAMETER,    /* causality="parameter", variability="fixed"               */
    LO_TUNABLE_PARAMETER,  /* causality="parameter", variability="tunable"             */
    LO_LOCAL,              /* causality="local", calculated (diagnostics, indicators)  */
    LO_INDEPENDENT         /* the independent variable time (FMI 3.0 only)             */
} lo_kind;

typedef struct {
    const char *name;      /* same name as in modelDescription.xml, for messages */
    lo_kind kind;
    double start;          /* start value (ignored for calculated kinds)          */
    double nominal;        /* nominal value; used for states                      */
} lo_variable;

typedef struct lo_instance lo_instance;

typedef lo_status (*lo_plant_fn)(lo_instance *m);

typedef struct {
    const char *identifier;          /* modelIdentifier                                   */
    const char *token;               /* FMI 2.0 guid / FMI 3.0 instantiationToken          */
    unsigned n_vars;                 /* value references are 0 .. n_vars-1                 */
    const lo_variable *vars;         /* n_vars entries, index = value reference            */
    unsigned n_states;
    const unsigned *state_vr;        /* n_states, in ModelStructure order                  */
    const unsigned *derivative_vr;   /* n_states, derivative_vr[i] belongs to state_vr[i]  */
    unsigned n_event_indicators;
    const unsigned *event_indicator_vr; /* LO_LOCAL variables the plant computes          */
    size_t work_size;                /* bytes of zeroed plant workspace (m->work)          */
    lo_plant_fn setup;               /* optional: once after instantiation (tables)        */
    lo_plant_fn evaluate;            /* required: all calculated values from m->v, m->time */
    lo_plant_fn partials;            /* optional: fill LO_JAC entries; NULL = none         */
} lo_model;

typedef enum {
    LO_MODE_INSTANTIATED = 0,
    LO_MODE_INITIALIZATION = 1,
    LO_MODE_EVENT = 2,
    LO_MODE_CONTINUOUS = 3,
    LO_MODE_TERMINATED = 4
} lo_mode;

#define LO_IN(mode) (1u << (mode))
#define LO_ANY_MODE 0x1Fu
#define LO_AFTER_INSTANTIATION (LO_IN(LO_MODE_INITIALIZATION) | LO_IN(LO_MODE_EVENT) | \
                                LO_IN(LO_MODE_CONTINUOUS) | LO_IN(LO_MODE_TERMINATED))

#define LO_LOG_ERROR   1u
#define LO_LOG_WARNING 2u
#define LO_LOG_EVENTS  4u

struct lo_instance {
    /* --- read and written by the plant --- */
    double time;           /* independent variable                                */
    double *v;             /* values by value reference                           */
    void *work;            /* plant workspace: tables from setup, caches          */
    double *jac;           /* n_vars x n_vars, use LO_JAC (only inside partials)  */
    /* --- framework only --- */
    const lo_model *model;
    char name[128];
    lo_mode mode;
    int stale;             /* calculated values out of date                       */
    int jac_stale;         /* partial derivatives out of date                     */
    int logging_on;
    unsigned categories;   /* LO_LOG_* bits enabled by SetDebugLogging            */
    void (*emit)(lo_instance *m, lo_status s, const char *category, const char *text);
    void *(*alloc)(lo_instance *m, size_t n, size_t size);
    void (*release)(lo_instance *m, void *p);
    char msg[640];
};

/* d(value of unknown_vr) / d(value of known_vr); write only inside `partials`. */
#define LO_JAC(m, unknown_vr, known_vr) \
    ((m)->jac[(size_t)(unknown_vr) * (m)->model->n_vars + (size_t)(known_vr)])

/* ----------------------------------------------------------------- logging */

static const char *lo_mode_name(lo_mode mode) {
    switch (mode) {
    case LO_MODE_INSTANTIATED: return "the instantiated state";
    case LO_MODE_INITIALIZATION: return "initialization mode";
    case LO_MODE_EVENT: return "event mode";
    case LO_MODE_CONTINUOUS: return "continuous-time mode";
    case LO_MODE_TERMINATED: return "the terminated state";
    }
    return "an unknown state";
}

static const char *lo_kind_name(lo_kind kind) {
    switch (kind) {
    case LO_STATE: return "continuous state";
    case LO_DERIVATIVE: return "state derivative";
    case LO_INPUT: return "input";
    case LO_OUTPUT: return "output";
    case LO_FIXED_PARAMETER: return "fixed parameter";
    case LO_TUNABLE_PARAMETER: return "tunable parameter";
    case LO_LOCAL: return "calculated local variable";
    case LO_INDEPENDENT: return "independent variable";
    }
    return "variable";
}

/* Log a message. Errors and warnings always reach the importer's logger;
 * LO_OK messages (events) only when debug logging is on. */
LO_UNUSED static void lo_log(lo_instance *m, lo_status s, const char *fmt, ...) {
    const char *category;
    unsigned bit;
    va_list ap;
    if (!m || !m->emit) return;
    if (s >= LO_ERROR) { category = "logStatusError"; bit = LO_LOG_ERROR; }
    else if (s >= LO_WARNING) { category = "logStatusWarning"; bit = LO_LOG_WARNING; }
    else { category = "logEvents"; bit = LO_LOG_EVENTS; }
    if (s == LO_OK && !(m->logging_on && (m->categories & bit))) return;
    va_start(ap, fmt);
    vsnprintf(m->msg, sizeof m->msg, fmt, ap);
    va_end(ap);
    m->emit(m, s, category, m->msg);
}

/* ------------------------------------------------------------ state machine */

/* 1 when `fname` may be called in the current mode, else logs and returns 0. */
static int lo_allowed(lo_instance *m, const char *fname, unsigned modes) {
    if (modes & LO_IN(m->mode)) return 1;
    lo_log(m, LO_ERROR, "%s is not allowed in %s", fname, lo_mode_name(m->mode));
    return 0;
}

static void lo_set_mode(lo_instance *m, lo_mode mode) {
    m->mode = mode;
    lo_log(m, LO_OK, "now in %s at time %.17g", lo_mode_name(mode), m->time);
}

static void lo_mark_changed(lo_instance *m) {
    m->stale = 1;
    m->jac_stale = 1;
}

static void lo_load_start_values(lo_instance *m) {
    unsigned i;
    const lo_model *md = m->model;
    for (i = 0; i < md->n_vars; i++) {
        lo_kind k = md->vars[i].kind;
        m->v[i] = (k == LO_DERIVATIVE || k == LO_OUTPUT || k == LO_LOCAL || k == LO_INDEPENDENT)
                      ? 0.0 : md->vars[i].start;
    }
    m->time = 0.0;
    lo_mark_changed(m);
}

/* Bring calculated values up to date. */
static lo_status lo_refresh(lo_instance *m) {
    lo_status st;
    unsigned i;
    if (!m->stale) return LO_OK;
    for (i = 0; i < m->model->n_vars; i++)
        if (m->model->vars[i].kind == LO_INDEPENDENT) m->v[i] = m->time;
    st = m->model->evaluate(m);
    if (st < LO_ERROR) m->stale = 0;
    return st;
}

static lo_status lo_refresh_partials(lo_instance *m) {
    lo_status st = lo_refresh(m);
    size_t n = (size_t)m->model->n_vars;
    if (st >= LO_ERROR) return st;
    if (!m->jac_stale) return st;
    memset(m->jac, 0, n * n * sizeof(double));
    {
        lo_status sp = m->model->partials(m);
        if (sp >= LO_ERROR) return sp;
        if (sp > st) st = sp;
    }
    m->jac_stale = 0;
    return st;
}

/* ---------------------------------------------------------- get and set */

static int lo_valid_vr(lo_instance *m, const char *fname, unsigned vr) {
    if (vr < m->model->n_vars) return 1;
    lo_log(m, LO_ERROR, "%s: unknown value reference %u (this model has %u real variables)",
           fname, vr, m->model->n_vars);
    return 0;
}

/* May variable vr be set in the current mode? Logs the reason when not. */
static int lo_settable(lo_instance *m, const char *fname, unsigned vr, const char *init_exit) {
    const lo_variable *var = &m->model->vars[vr];
    lo_mode mode = m->mode;
    switch (var->kind) {
    case LO_STATE:
        if (mode == LO_MODE_INSTANTIATED || mode == LO_MODE_INITIALIZATION) return 1;
        lo_log(m, LO_ERROR, "%s: '%s' is a continuous state; after initialization set it "
               "with SetContinuousStates in continuous-time mode", fname, var->name);
        return 0;
    case LO_INPUT:
    case LO_TUNABLE_PARAMETER:
        if (mode != LO_MODE_TERMINATED) return 1;
        lo_log(m, LO_ERROR, "%s: '%s' cannot be set in %s", fname, var->name, lo_mode_name(mode));
        return 0;
    case LO_FIXED_PARAMETER:
        if (mode == LO_MODE_INSTANTIATED || mode == LO_MODE_INITIALIZATION) return 1;
        lo_log(m, LO_ERROR, "%s: '%s' is a fixed parameter; it can only be set before %s "
               "(call Reset to change it)", fname, var->name, init_exit);
        return 0;
    default:
        lo_log(m, LO_ERROR, "%s: '%s' (%s) is calculated by the model; it cannot be set",
               fname, var->name, lo_kind_name(var->kind));
        return 0;
    }
}

static lo_status lo_get_reals(lo_instance *m, const char *fname, const unsigned vr[], size_t n,
                              double value[]) {
    size_t i;
    lo_status st;
    if (!lo_allowed(m, fname, LO_AFTER_INSTANTIATION)) return LO_ERROR;
    if (n > 0 && (!vr || !value)) {
        lo_log(m, LO_ERROR, "%s: null array argument", fname);
        return LO_ERROR;
    }
    for (i = 0; i < n; i++)
        if (!lo_valid_vr(m, fname, vr[i])) return LO_ERROR;
    st = lo_refresh(m);
    for (i = 0; i < n; i++)
        value[i] = (m->model->vars[vr[i]].kind == LO_INDEPENDENT) ? m->time : m->v[vr[i]];
    return st;
}

/* All-or-nothing: nothing is changed when any value reference is refused. */
static lo_status lo_set_reals(lo_instance *m, const char *fname, const unsigned vr[], size_t n,
                              const double value[], const char *init_exit) {
    size_t i;
    if (!lo_allowed(m, fname, LO_ANY_MODE)) return LO_ERROR;
    if (n > 0 && (!vr || !value)) {
        lo_log(m, LO_ERROR, "%s: null array argument", fname);
        return LO_ERROR;
    }
    for (i = 0; i < n; i++)
        if (!lo_valid_vr(m, fname, vr[i]) || !lo_settable(m, fname, vr[i], init_exit))
            return LO_ERROR;
    for (i = 0; i < n; i++) {
        if (m->v[vr[i]] != value[i] || value[i] != value[i]) {
            m->v[vr[i]] = value[i];
            lo_mark_changed(m);
        }
    }
    return LO_OK;
}

/* ----------------------------------------------------- continuous states */

static int lo_check_count(lo_instance *m, const char *fname, size_t got, size_t want,
                          const char *what) {
    if (got == want) return 1;
    lo_log(m, LO_ERROR, "%s: expected %lu %s, got %lu", fname, (unsigned long)want, what,
           (unsigned long)got);
    return 0;
}

static lo_status lo_set_states(lo_instance *m, const char *fname, const double x[], size_t nx) {
    size_t i;
    if (!lo_allowed(m, fname, LO_IN(LO_MODE_CONTINUOUS))) return LO_ERROR;
    if (!lo_check_count(m, fname, nx, m->model->n_states, "continuous states")) return LO_ERROR;
    if (nx > 0 && !x) { lo_log(m, LO_ERROR, "%s: null array argument", fname); return LO_ERROR; }
    for (i = 0; i < nx; i++) m->v[m->model->state_vr[i]] = x[i];
    lo_mark_changed(m);
    return LO_OK;
}

/* which: 0 states, 1 derivatives, 2 event indicators, 3 nominals of the states */
static lo_status lo_get_vector(lo_instance *m, const char *fname, double out[], size_t n, int which) {
    const lo_model *md = m->model;
    size_t i, want = (which == 2) ? md->n_event_indicators : md->n_states;
    lo_status st = LO_OK;
    unsigned modes = (which == 3) ? LO_ANY_MODE : LO_AFTER_INSTANTIATION;
    if (!lo_allowed(m, fname, modes)) return LO_ERROR;
    if (!lo_check_count(m, fname, n, want, which == 2 ? "event indicators" : "continuous states"))
        return LO_ERROR;
    if (n > 0 && !out) { lo_log(m, LO_ERROR, "%s: null array argument", fname); return LO_ERROR; }
    if (which == 1 || which == 2) st = lo_refresh(m);
    for (i = 0; i < n; i++) {
        switch (which) {
        case 0: out[i] = m->v[md->state_vr[i]]; break;
        case 1: out[i] = m->v[md->derivative_vr[i]]; break;
        case 2: out[i] = m->v[md->event_indicator_vr[i]]; break;
        default: out[i] = md->vars[md->state_vr[i]].nominal; break;
        }
    }
    return st;
}

/* ------------------------------------------------- directional derivatives */

/* adjoint = 0: out[i] = sum_j d unknown_i / d known_j * seed[j]      (forward)
 * adjoint = 1: out[j] = sum_i seed[i] * d unknown_i / d known_j      (reverse) */
static lo_status lo_derivatives(lo_instance *m, const char *fname, const unsigned unknowns[],
                                size_t nu, const unsigned knowns[], size_t nk, const double seed[],
                                double out[], int adjoint) {
    const lo_model *md = m->model;
    size_t i, j;
    lo_status st;
    if (!lo_allowed(m, fname, LO_AFTER_INSTANTIATION)) return LO_ERROR;
    if (!md->partials) {
        lo_log(m, LO_ERROR, "%s: this model does not provide partial derivatives", fname);
        return LO_ERROR;
    }
    if ((nu > 0 && !unknowns) || (nk > 0 && !knowns) || (!adjoint && nk > 0 && !seed) ||
        (adjoint && nu > 0 && !seed)) {
        lo_log(m, LO_ERROR, "%s: null array argument", fname);
        return LO_ERROR;
    }
    for (i = 0; i < nu; i++) {
        if (!lo_valid_vr(m, fname, unknowns[i])) return LO_ERROR;
        if (md->vars[unknowns[i]].kind != LO_DERIVATIVE && md->vars[unknowns[i]].kind != LO_OUTPUT) {
            lo_log(m, LO_ERROR, "%s: unknown '%s' (%s) is not supported; only state derivatives and outputs "
                   "are", fname, md->vars[unknowns[i]].name,
                   lo_kind_name(md->vars[unknowns[i]].kind));
            return LO_ERROR;
        }
    }
    for (j = 0; j < nk; j++) {
        if (!lo_valid_vr(m, fname, knowns[j])) return LO_ERROR;
        if (md->vars[knowns[j]].kind != LO_STATE && md->vars[knowns[j]].kind != LO_INPUT) {
            lo_log(m, LO_ERROR, "%s: known '%s' (%s) is not supported; only continuous states and "
                   "inputs are", fname, md->vars[knowns[j]].name,
                   lo_kind_name(md->vars[knowns[j]].kind));
            return LO_ERROR;
        }
    }
    st = lo_refresh_partials(m);
    if (st >= LO_ERROR) return st;
    if (!adjoint) {
        for (i = 0; i < nu; i++) {
            double s = 0.0;
            for (j = 0; j < nk; j++) s += LO_JAC(m, unknowns[i], knowns[j]) * seed[j];
            out[i] = s;
        }
    } else {
        for (j = 0; j < nk; j++) {
            double s = 0.0;
            for (i = 0; i < nu; i++) s += seed[i] * LO_JAC(m, unknowns[i], knowns[j]);
            out[j] = s;
        }
    }
    return st;
}

/* ------------------------------------------------------------- FMU state */

typedef struct {
    char magic[8];
    unsigned long long token_hash;
    unsigned n_vars;
    unsigned mode;
    double time;
} lo_snapshot_header;

static unsigned long long lo_hash(const char *s) {
    unsigned long long h = 1469598103934665603ULL; /* FNV-1a, Fowler/Noll/Vo (1991) */
    while (s && *s) { h ^= (unsigned char)*s++; h *= 1099511628211ULL; }
    return h;
}

static size_t lo_snapshot_size(const lo_instance *m) {
    return sizeof(lo_snapshot_header) + (size_t)m->model->n_vars * sizeof(double);
}

static void lo_snapshot_write(const lo_instance *m, void *dst) {
    lo_snapshot_header h;
    memset(&h, 0, sizeof h);
    memcpy(h.magic, "LOSNAP01", 8);
    h.token_hash = lo_hash(m->model->token);
    h.n_vars = m->model->n_vars;
    h.mode = (unsigned)m->mode;
    h.time = m->time;
    memcpy(dst, &h, sizeof h);
    memcpy((char *)dst + sizeof h, m->v, (size_t)m->model->n_vars * sizeof(double));
}

static int lo_snapshot_check(lo_instance *m, const char *fname, const void *src, size_t size) {
    lo_snapshot_header h;
    if (!src || size != lo_snapshot_size(m)) {
        lo_log(m, LO_ERROR, "%s: the FMU state has the wrong size for this model", fname);
        return 0;
    }
    memcpy(&h, src, sizeof h);
    if (memcmp(h.magic, "LOSNAP01", 8) != 0 || h.token_hash != lo_hash(m->model->token) ||
        h.n_vars != m->model->n_vars || h.mode > LO_MODE_TERMINATED) {
        lo_log(m, LO_ERROR, "%s: the FMU state was not made by this model", fname);
        return 0;
    }
    return 1;
}

static void lo_snapshot_read(lo_instance *m, const void *src) {
    lo_snapshot_header h;
    memcpy(&h, src, sizeof h);
    m->mode = (lo_mode)h.mode;
    m->time = h.time;
    memcpy(m->v, (const char *)src + sizeof h, (size_t)m->model->n_vars * sizeof(double));
    lo_mark_changed(m);
}

static lo_status lo_get_state(lo_instance *m, const char *fname, void **state) {
    if (!state) { lo_log(m, LO_ERROR, "%s: null state pointer", fname); return LO_ERROR; }
    if (*state == NULL) {
        *state = m->alloc(m, 1, lo_snapshot_size(m));
        if (!*state) { lo_log(m, LO_ERROR, "%s: out of memory", fname); return LO_ERROR; }
    } else if (!lo_snapshot_check(m, fname, *state, lo_snapshot_size(m))) {
        return LO_ERROR;
    }
    lo_snapshot_write(m, *state);
    return LO_OK;
}

static lo_status lo_set_state(lo_instance *m, const char *fname, const void *state) {
    if (!lo_snapshot_check(m, fname, state, lo_snapshot_size(m))) return LO_ERROR;
    lo_snapshot_read(m, state);
    return LO_OK;
}

static lo_status lo_free_state(lo_instance *m, void **state) {
    if (state && *state) { m->release(m, *state); *state = NULL; }
    return LO_OK;
}

static lo_status lo_serialize(lo_instance *m, const char *fname, const void *state,
                              unsigned char *out, size_t size) {
    if (!lo_snapshot_check(m, fname, state, lo_snapshot_size(m))) return LO_ERROR;
    if (!out || size < lo_snapshot_size(m)) {
        lo_log(m, LO_ERROR, "%s: buffer too small, need %lu bytes", fname,
               (unsigned long)lo_snapshot_size(m));
        return LO_ERROR;
    }
    memcpy(out, state, lo_snapshot_size(m));
    return LO_OK;
}

static lo_status lo_deserialize(lo_instance *m, const char *fname, const unsigned char *in,
                                size_t size, void **state) {
    if (!state) { lo_log(m, LO_ERROR, "%s: null state pointer", fname); return LO_ERROR; }
    if (!lo_snapshot_check(m, fname, in, size)) return LO_ERROR;
    if (*state == NULL) {
        *state = m->alloc(m, 1, lo_snapshot_size(m));
        if (!*state) { lo_log(m, LO_ERROR, "%s: out of memory", fname); return LO_ERROR; }
    }
    memcpy(*state, in, size);
    return LO_OK;
}

/* ---------------------------------------------------------- construction */

/* Allocate the arrays of an instance whose model, alloc and release are set. */
static int lo_construct(lo_instance *m, const char *name) {
    const lo_model *md = m->model;
    size_t n = md->n_vars;
    lo_status st;
    snprintf(m->name, sizeof m->name, "%s", name ? name : "");
    m->v = (double *)m->alloc(m, n ? n : 1, sizeof(double));
    m->work = md->work_size ? m->alloc(m, 1, md->work_size) : NULL;
    m->jac = md->partials ? (double *)m->alloc(m, n > 0 ? n * n : 1, sizeof(double)) : NULL;
    if (!m->v || (md->work_size && !m->work) || (md->partials && !m->jac)) {
        lo_log(m, LO_ERROR, "out of memory while instantiating %s", md->identifier);
        return 0;
    }
    if (md->work_size) memset(m->work, 0, md->work_size);
    m->mode = LO_MODE_INSTANTIATED;
    m->categories = LO_LOG_ERROR | LO_LOG_WARNING | LO_LOG_EVENTS;
    lo_load_start_values(m);
    if (md->setup) {
        st = md->setup(m);
        if (st >= LO_ERROR) {
            lo_log(m, LO_ERROR, "setting up %s failed", md->identifier);
            return 0;
        }
    }
    return 1;
}

static void lo_destruct(lo_instance *m) {
    if (m->jac) m->release(m, m->jac);
    if (m->work) m->release(m, m->work);
    if (m->v) m->release(m, m->v);
    m->jac = NULL;
    m->work = NULL;
    m->v = NULL;
}

static lo_status lo_set_debug_logging(lo_instance *m, int on, size_t n, const char *const cats[]) {
    size_t i;
    lo_status st = LO_OK;
    m->logging_on = on;
    if (n == 0) {
        m->categories = LO_LOG_ERROR | LO_LOG_WARNING | LO_LOG_EVENTS;
        return LO_OK;
    }
    m->categories = 0;
    for (i = 0; i < n; i++) {
        const char *c = cats ? cats[i] : NULL;
        if (c && strcmp(c, "logStatusError") == 0) m->categories |= LO_LOG_ERROR;
        else if (c && strcmp(c, "logStatusWarning") == 0) m->categories |= LO_LOG_WARNING;
        else if (c && strcmp(c, "logEvents") == 0) m->categories |= LO_LOG_EVENTS;
        else {
            lo_log(m, LO_WARNING, "unknown log category '%s'; known: logStatusError, "
                   "logStatusWarning, logEvents", c ? c : "(null)");
            st = LO_WARNING;
        }
    }
    return st;
}

#endif /* LO_MODEL_H */
