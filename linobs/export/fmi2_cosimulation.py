"""The FMI 2.0 co-simulation interface of the estimator FMU, as C source.

:func:`wrapper_source` writes the C file that implements every function of
``fmi2Functions.h`` needed by a co-simulation FMU on top of the generated
estimator code (:mod:`linobs.export.c_code`).  The timing semantics are those
documented in :mod:`linobs.export.estimator_fmu`.  This module holds the
instance, logging, state machine and common functions; the value, step and
status functions are in :mod:`linobs.export.fmi2_cosimulation_calls`.
Memory comes from the importer's ``allocateMemory`` callback only; messages
go through its ``logger``: errors (category ``logStatusError``) and
warnings always, debug messages (``logAll``) when logging is on and
``logAll`` is among the categories given to ``fmi2SetDebugLogging`` (or
none is named).  After an error the instance is in the error state: values
can still be read, and ``fmi2Reset`` or ``fmi2FreeInstance`` come next.

References
----------
Modelica Association (2014). Functional Mock-up Interface for Model Exchange
and Co-Simulation, version 2.0, §2.1 (common functions, logging, memory
callbacks) and §4 (co-simulation: fmi2DoStep, status functions, the state
machine of a slave).
"""

from __future__ import annotations

from collections.abc import Sequence
from string import Template

from linobs.export.c_code import c_double, c_string, comment_block
from linobs.export.fmi2_cosimulation_calls import CALLS

__all__ = ["wrapper_source"]

_BODY = Template(r"""
typedef enum {
    W_INSTANTIATED = 1, W_INITIALIZATION = 2, W_STEPPING = 4, W_TERMINATED = 8, W_ERROR = 16
} w_mode;

typedef struct {
    fmi2CallbackFunctions cb;
    char *name;
    int logging;                          /* debug messages (category logAll) on */
    w_mode mode;
    double time, start_time, stop_time;
    int stop_defined;
    double v[W_VR_COUNT];                 /* every variable, by value reference */
    double x[${P}_STATES];                /* the held estimate */
    double u_prev[${P}_DIM(${P}_INPUTS)]; /* filter: the input of the previous point */
    int started;                          /* a doStep has been taken */
    int fresh;                            /* the outputs in v are up to date */
    double last_sigma[${P}_STATES];       /* predictor: the last update's evaluation */
    double last_usable, last_outside;
} w_instance;

static void w_vlog(const fmi2CallbackFunctions *cb, const char *name, fmi2Status status,
                   const char *category, const char *format, va_list args)
{
    char text[768], escaped[1540];
    size_t i = 0;
    const char *c;
    if (!cb || !cb->logger) return;
    vsnprintf(text, sizeof text, format, args);
    for (c = text; *c && i + 2 < sizeof escaped; ++c) { /* the logger takes a format: keep '%' */
        if (*c == '%') escaped[i++] = '%';
        escaped[i++] = *c;
    }
    escaped[i] = '\0';
    cb->logger(cb->componentEnvironment, name, status, category, escaped);
}

static void w_report(const fmi2CallbackFunctions *cb, const char *name, const char *format, ...)
{
    va_list args;
    va_start(args, format);
    w_vlog(cb, name, fmi2Error, "logStatusError", format, args);
    va_end(args);
}

static void w_debug(w_instance *w, const char *format, ...)
{
    va_list args;
    if (!w->logging) return;
    va_start(args, format);
    w_vlog(&w->cb, w->name, fmi2OK, "logAll", format, args);
    va_end(args);
}

static fmi2Status w_discard(w_instance *w, const char *format, ...)
{
    va_list args;
    va_start(args, format);
    w_vlog(&w->cb, w->name, fmi2Discard, "logStatusDiscard", format, args);
    va_end(args);
    return fmi2Discard;
}

/* Log the error and put the instance in the error state (fmi2Reset or fmi2FreeInstance next). */
static fmi2Status w_fail(w_instance *w, const char *format, ...)
{
    va_list args;
    va_start(args, format);
    w_vlog(&w->cb, w->name, fmi2Error, "logStatusError", format, args);
    va_end(args);
    w->mode = W_ERROR;
    return fmi2Error;
}

static const char *w_mode_name(w_mode mode)
{
    switch (mode) {
    case W_INSTANTIATED: return "instantiated";
    case W_INITIALIZATION: return "initialization mode";
    case W_STEPPING: return "step mode";
    case W_TERMINATED: return "terminated";
    default: return "the error state";
    }
}

static int w_allowed(w_instance *w, const char *function, int modes)
{
    if (w->mode & modes) return 1;
    if (w->mode == W_ERROR) {
        w_fail(w, "%s: the instance is in the error state after an earlier error; call "
               "fmi2Reset or fmi2FreeInstance", function);
    } else {
        w_fail(w, "%s may not be called when the instance is %s (FMI 2.0 co-simulation state "
               "machine)", function, w_mode_name(w->mode));
    }
    return 0;
}

static void w_reset(w_instance *w)
{
    w->mode = W_INSTANTIATED;
    w->time = w->start_time = w->stop_time = 0.0;
    w->stop_defined = 0;
    memcpy(w->v, w_start, sizeof w->v);
    memcpy(w->x, &w->v[W_VR_START], sizeof w->x);
    memset(w->u_prev, 0, sizeof w->u_prev);
    memset(w->last_sigma, 0, sizeof w->last_sigma);
    w->last_usable = w->last_outside = 0.0;
    w->started = 0;
    w->fresh = 0;
}

/* The interpolated node at the scheduling value of (x, u) and the parameters. */
static int w_evaluate(w_instance *w, const double *x, const double *u, ${p}_local *local)
{
    double s[${P}_DIM(${P}_AXES)];
    int status = ${p}_scheduling_value(x, u, &w->v[W_VR_PAR], s);
    if (status == ${P}_OK) status = ${p}_interpolate(s, local);
    if (status != ${P}_OK) {
        w_fail(w, "the scheduling value at t = %.17g s is not finite (the estimate or an input "
               "has diverged); check the initial estimate and the inputs", w->time);
        return 0;
    }
    return 1;
}

static void w_flags(w_instance *w, double usable, double outside, const double *sigma)
{
    w->v[W_VR_USABLE] = usable;
    w->v[W_VR_OUTSIDE] = outside;
#if ${P}_KALMAN
    memcpy(&w->v[W_VR_SIGMA], sigma, sizeof(double) * ${P}_STATES);
#else
    (void)sigma;
#endif
}

/* Bring the outputs up to date with the current inputs. */
static fmi2Status w_refresh(w_instance *w)
{
    ${p}_local local;
    double sigma[${P}_STATES];
    const double *u = &w->v[W_VR_U], *y = &w->v[W_VR_Y];
    if (w->fresh) return fmi2OK;
    if (w->mode & (W_INSTANTIATED | W_INITIALIZATION))
        memcpy(w->x, &w->v[W_VR_START], sizeof w->x);
    if (!w->started || ${P}_FILTER_FORM) {
        if (!w_evaluate(w, w->x, w->started ? w->u_prev : u, &local)) return fmi2Error;
        if (w->started) /* filter: x_hat[k|k] from x_hat[k-1|k-1], u[k-1], y[k], u[k] */
            ${p}_update(&local, w->x, w->u_prev, y, u, &w->v[W_VR_XHAT]);
        else            /* the first point: the initial estimate, no correction */
            memcpy(&w->v[W_VR_XHAT], w->x, sizeof w->x);
        ${p}_standard_deviation(&local, sigma);
        w_flags(w, local.usable, local.outside, sigma);
    } else {            /* predictor: x_hat[k|k-1] is held */
        memcpy(&w->v[W_VR_XHAT], w->x, sizeof w->x);
        w_flags(w, w->last_usable, w->last_outside, w->last_sigma);
    }
    w->fresh = 1;
    return fmi2OK;
}

/* ------------------------------------------------------------------ common functions */
const char *fmi2GetTypesPlatform(void) { return fmi2TypesPlatform; }

const char *fmi2GetVersion(void) { return fmi2Version; }

fmi2Status fmi2SetDebugLogging(fmi2Component c, fmi2Boolean loggingOn, size_t nCategories,
                               const fmi2String categories[])
{
    w_instance *w = (w_instance *)c;
    size_t i;
    int all = nCategories == 0;
    fmi2Status status = fmi2OK;
    if (!w) return fmi2Error;
    for (i = 0; i < nCategories; ++i) {
        const char *name = categories ? categories[i] : NULL;
        if (name && strcmp(name, "logAll") == 0) {
            all = 1;
        } else if (!name || (strcmp(name, "logStatusError") != 0 &&
                             strcmp(name, "logStatusDiscard") != 0 &&
                             strcmp(name, "logStatusWarning") != 0)) {
            status = fmi2Warning;
            if (w->cb.logger)
                w->cb.logger(w->cb.componentEnvironment, w->name, fmi2Warning,
                             "logStatusWarning", "fmi2SetDebugLogging: unknown log category "
                             "ignored; the categories are logStatusError, logStatusWarning, "
                             "logStatusDiscard and logAll");
        }
    }
    w->logging = loggingOn && all;
    return status;
}

fmi2Component fmi2Instantiate(fmi2String instanceName, fmi2Type fmuType, fmi2String fmuGUID,
                              fmi2String fmuResourceLocation,
                              const fmi2CallbackFunctions *functions, fmi2Boolean visible,
                              fmi2Boolean loggingOn)
{
    const char *name = instanceName ? instanceName : "";
    w_instance *w;
    size_t n;
    (void)fmuResourceLocation;
    (void)visible;
    if (!functions || !functions->allocateMemory || !functions->freeMemory) {
        w_report(functions, name, "fmi2Instantiate: the allocateMemory and freeMemory callbacks "
                 "are required");
        return NULL;
    }
    if (!instanceName || !*instanceName) {
        w_report(functions, name, "fmi2Instantiate: give a non-empty instance name");
        return NULL;
    }
    if (fmuType != fmi2CoSimulation) {
        w_report(functions, name, "fmi2Instantiate: this estimator is a co-simulation FMU only; "
                 "instantiate it with fmi2CoSimulation");
        return NULL;
    }
    if (!fmuGUID || strcmp(fmuGUID, W_GUID) != 0) {
        w_report(functions, name, "fmi2Instantiate: the GUID %s does not match this FMU's %s; use "
                 "the modelDescription.xml of this FMU", fmuGUID ? fmuGUID : "(none)", W_GUID);
        return NULL;
    }
    w = (w_instance *)functions->allocateMemory(1, sizeof *w);
    if (!w) {
        w_report(functions, name, "fmi2Instantiate: out of memory");
        return NULL;
    }
    n = strlen(instanceName) + 1;
    w->name = (char *)functions->allocateMemory(n, 1);
    if (!w->name) {
        functions->freeMemory(w);
        w_report(functions, name, "fmi2Instantiate: out of memory");
        return NULL;
    }
    memcpy(w->name, instanceName, n);
    w->cb = *functions;
    w->logging = loggingOn ? 1 : 0;
    w_reset(w);
    w_debug(w, "fmi2Instantiate: %s, GUID %s", W_MODEL_NAME, W_GUID);
    return w;
}

void fmi2FreeInstance(fmi2Component c)
{
    w_instance *w = (w_instance *)c;
    fmi2CallbackFreeMemory release;
    if (!w) return;
    release = w->cb.freeMemory;
    release(w->name);
    release(w);
}

fmi2Status fmi2SetupExperiment(fmi2Component c, fmi2Boolean toleranceDefined, fmi2Real tolerance,
                               fmi2Real startTime, fmi2Boolean stopTimeDefined, fmi2Real stopTime)
{
    w_instance *w = (w_instance *)c;
    (void)toleranceDefined;
    (void)tolerance;
    if (!w) return fmi2Error;
    if (!w_allowed(w, "fmi2SetupExperiment", W_INSTANTIATED)) return fmi2Error;
    if (!isfinite(startTime) || (stopTimeDefined && !(stopTime >= startTime)))
        return w_fail(w, "fmi2SetupExperiment: the start time must be finite and the stop time "
                      "not before it (start %.17g s, stop %.17g s)", startTime, stopTime);
    w->start_time = w->time = startTime;
    w->stop_defined = stopTimeDefined ? 1 : 0;
    w->stop_time = stopTime;
    return fmi2OK;
}

fmi2Status fmi2EnterInitializationMode(fmi2Component c)
{
    w_instance *w = (w_instance *)c;
    if (!w) return fmi2Error;
    if (!w_allowed(w, "fmi2EnterInitializationMode", W_INSTANTIATED)) return fmi2Error;
    w->mode = W_INITIALIZATION;
    w->time = w->start_time;
    w->fresh = 0;
    return fmi2OK;
}

fmi2Status fmi2ExitInitializationMode(fmi2Component c)
{
    w_instance *w = (w_instance *)c;
    if (!w) return fmi2Error;
    if (!w_allowed(w, "fmi2ExitInitializationMode", W_INITIALIZATION)) return fmi2Error;
    memcpy(w->x, &w->v[W_VR_START], sizeof w->x);
    w->started = 0;
    w->fresh = 0;
    w->mode = W_STEPPING;
    w_debug(w, "fmi2ExitInitializationMode: the estimate starts at t = %.17g s", w->time);
    return fmi2OK;
}

fmi2Status fmi2Terminate(fmi2Component c)
{
    w_instance *w = (w_instance *)c;
    if (!w) return fmi2Error;
    if (!w_allowed(w, "fmi2Terminate", W_STEPPING | W_ERROR)) return fmi2Error;
    if (w->mode == W_STEPPING) w_refresh(w);
    w->mode = W_TERMINATED;
    return fmi2OK;
}

fmi2Status fmi2Reset(fmi2Component c)
{
    w_instance *w = (w_instance *)c;
    if (!w) return fmi2Error;
    w_reset(w);
    return fmi2OK;
}

""")


def wrapper_source(*, prefix: str, guid: str, model_name: str, caution: str, header_note: str,
                   offsets: dict[str, int], names: Sequence[str], starts: Sequence[float]) -> str:
    """The C source of the FMI 2.0 co-simulation functions.

    Parameters
    ----------
    prefix : str
        The prefix of the generated estimator code (its header is ``<prefix>.h``).
    guid, model_name : str
        As in the model description.
    caution, header_note : str
        The leading comment.
    offsets : dict
        First value reference of each group: ``U``, ``Y``, ``XHAT``, ``SIGMA``,
        ``USABLE``, ``OUTSIDE``, ``START``, ``PAR`` and the total ``COUNT``.
    names, starts : sequence
        Name and start value (NaN for outputs) of every variable, by value reference.

    References
    ----------
    Modelica Association (2014). Functional Mock-up Interface for Model
    Exchange and Co-Simulation, version 2.0, §2.1 and §4.
    """
    P = prefix.upper()
    head = comment_block(caution, header_note,
                         f"FMI 2.0 co-simulation interface of the scheduled estimator "
                         f"{model_name} (GUID {guid}), generated by linobs.")
    lines = [head, "#include <math.h>", "#include <stdarg.h>", "#include <stdio.h>",
             "#include <string.h>", "", '#include "fmi2Functions.h"', f'#include "{prefix}.h"',
             "", f"#define W_GUID {c_string(guid)}", f"#define W_MODEL_NAME {c_string(model_name)}"]
    lines += [f"#define W_VR_{k} {v}" for k, v in offsets.items()]
    lines.append(f"static const char *const w_names[W_VR_COUNT] = {{\n    "
                 + ",\n    ".join(c_string(n) for n in names) + "\n};")
    lines.append("static const double w_start[W_VR_COUNT] = {\n    "
                 + ",\n    ".join(c_double(v) for v in starts) + "\n};")
    return ("\n".join(lines) + "\n" + _BODY.substitute(p=prefix, P=P)
            + CALLS.substitute(p=prefix, P=P))
