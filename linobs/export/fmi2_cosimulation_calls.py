"""The value, step and status functions of the estimator FMU's FMI 2.0 interface (C source).

The second half of the C file written by
:func:`linobs.export.fmi2_cosimulation.wrapper_source` (it uses the instance,
logging and state helpers of the first half): ``fmi2GetReal``/``fmi2SetReal``
and the other variable types, the functions of capabilities the FMU does not
offer (FMU state, directional derivatives, input interpolation), ``fmi2DoStep``
and the status inquiries.

References
----------
Modelica Association (2014). Functional Mock-up Interface for Model Exchange
and Co-Simulation, version 2.0, §2.1.7 (getting and setting values) and §4.2
(fmi2DoStep, fmi2CancelStep, the status functions).
"""

from __future__ import annotations

from string import Template

__all__ = ["CALLS"]

#: The C text after the common functions; ``$p`` / ``$P`` as in the estimator code.
CALLS = Template(r"""
/* ------------------------------------------------------------------ values */
static int w_is_output(fmi2ValueReference r) { return r >= W_VR_XHAT && r < W_VR_START; }

fmi2Status fmi2GetReal(fmi2Component c, const fmi2ValueReference vr[], size_t nvr,
                       fmi2Real value[])
{
    w_instance *w = (w_instance *)c;
    size_t i;
    int outputs = 0;
    if (!w) return fmi2Error;
    if (!w_allowed(w, "fmi2GetReal", W_INITIALIZATION | W_STEPPING | W_TERMINATED | W_ERROR))
        return fmi2Error;
    if (nvr && (!vr || !value)) return w_fail(w, "fmi2GetReal: NULL value references or values");
    for (i = 0; i < nvr; ++i) {
        if (vr[i] >= W_VR_COUNT)
            return w_fail(w, "fmi2GetReal: unknown value reference %u; this FMU has %d Real "
                          "variables (0 to %d)", (unsigned)vr[i], W_VR_COUNT, W_VR_COUNT - 1);
        outputs |= w_is_output(vr[i]);
    }
    if (outputs && w->mode != W_ERROR && w_refresh(w) != fmi2OK) return fmi2Error;
    for (i = 0; i < nvr; ++i) value[i] = w->v[vr[i]];
    return fmi2OK;
}

fmi2Status fmi2SetReal(fmi2Component c, const fmi2ValueReference vr[], size_t nvr,
                       const fmi2Real value[])
{
    w_instance *w = (w_instance *)c;
    size_t i;
    if (!w) return fmi2Error;
    if (!w_allowed(w, "fmi2SetReal", W_INSTANTIATED | W_INITIALIZATION | W_STEPPING))
        return fmi2Error;
    if (nvr && (!vr || !value)) return w_fail(w, "fmi2SetReal: NULL value references or values");
    for (i = 0; i < nvr; ++i) {
        fmi2ValueReference r = vr[i];
        if (r >= W_VR_COUNT)
            return w_fail(w, "fmi2SetReal: unknown value reference %u; this FMU has %d Real "
                          "variables (0 to %d)", (unsigned)r, W_VR_COUNT, W_VR_COUNT - 1);
        if (w_is_output(r))
            return w_fail(w, "fmi2SetReal: %s is an output of the estimator and cannot be set",
                          w_names[r]);
        if (r >= W_VR_START && w->mode == W_STEPPING)
            return w_fail(w, "fmi2SetReal: %s is a fixed parameter; set it before "
                          "fmi2ExitInitializationMode", w_names[r]);
        if (!isfinite(value[i]))
            return w_fail(w, "fmi2SetReal: %s = %g is not finite; give a finite value",
                          w_names[r], value[i]);
    }
    for (i = 0; i < nvr; ++i) w->v[vr[i]] = value[i];
    if (nvr) w->fresh = 0;
    return fmi2OK;
}

#define W_NO_VARIABLES(function, type, qualifier)                                          \
    fmi2Status function(fmi2Component c, const fmi2ValueReference vr[], size_t nvr,        \
                        qualifier value[])                                                 \
    {                                                                                      \
        w_instance *w = (w_instance *)c;                                                   \
        (void)value;                                                                       \
        if (!w) return fmi2Error;                                                          \
        if (nvr == 0) return fmi2OK;                                                       \
        return w_fail(w, #function ": this FMU has no " type " variables (value reference " \
                      "%u); its variables are all Real", vr ? (unsigned)vr[0] : 0u);       \
    }

W_NO_VARIABLES(fmi2GetInteger, "Integer", fmi2Integer)
W_NO_VARIABLES(fmi2GetBoolean, "Boolean", fmi2Boolean)
W_NO_VARIABLES(fmi2GetString, "String", fmi2String)
W_NO_VARIABLES(fmi2SetInteger, "Integer", const fmi2Integer)
W_NO_VARIABLES(fmi2SetBoolean, "Boolean", const fmi2Boolean)
W_NO_VARIABLES(fmi2SetString, "String", const fmi2String)

/* ------------------------------------------------------------------ not supported */
#define W_UNSUPPORTED(c, what)                                                             \
    do {                                                                                   \
        w_instance *w_ = (w_instance *)(c);                                                \
        if (!w_) return fmi2Error;                                                         \
        return w_fail(w_, what);                                                           \
    } while (0)

fmi2Status fmi2GetFMUstate(fmi2Component c, fmi2FMUstate *FMUstate)
{
    (void)FMUstate;
    W_UNSUPPORTED(c, "fmi2GetFMUstate: this FMU cannot save its state (canGetAndSetFMUstate = "
                  "false)");
}

fmi2Status fmi2SetFMUstate(fmi2Component c, fmi2FMUstate FMUstate)
{
    (void)FMUstate;
    W_UNSUPPORTED(c, "fmi2SetFMUstate: this FMU cannot restore a state (canGetAndSetFMUstate "
                  "= false)");
}

fmi2Status fmi2FreeFMUstate(fmi2Component c, fmi2FMUstate *FMUstate)
{
    (void)FMUstate;
    W_UNSUPPORTED(c, "fmi2FreeFMUstate: this FMU has no states to free (canGetAndSetFMUstate "
                  "= false)");
}

fmi2Status fmi2SerializedFMUstateSize(fmi2Component c, fmi2FMUstate FMUstate, size_t *size)
{
    (void)FMUstate;
    (void)size;
    W_UNSUPPORTED(c, "fmi2SerializedFMUstateSize: this FMU cannot serialize its state "
                  "(canSerializeFMUstate = false)");
}

fmi2Status fmi2SerializeFMUstate(fmi2Component c, fmi2FMUstate FMUstate, fmi2Byte serializedState[],
                                 size_t size)
{
    (void)FMUstate;
    (void)serializedState;
    (void)size;
    W_UNSUPPORTED(c, "fmi2SerializeFMUstate: this FMU cannot serialize its state "
                  "(canSerializeFMUstate = false)");
}

fmi2Status fmi2DeSerializeFMUstate(fmi2Component c, const fmi2Byte serializedState[], size_t size,
                                   fmi2FMUstate *FMUstate)
{
    (void)serializedState;
    (void)size;
    (void)FMUstate;
    W_UNSUPPORTED(c, "fmi2DeSerializeFMUstate: this FMU cannot restore a state "
                  "(canSerializeFMUstate = false)");
}

fmi2Status fmi2GetDirectionalDerivative(fmi2Component c, const fmi2ValueReference vUnknown_ref[],
                                        size_t nUnknown, const fmi2ValueReference vKnown_ref[],
                                        size_t nKnown, const fmi2Real dvKnown[],
                                        fmi2Real dvUnknown[])
{
    (void)vUnknown_ref; (void)nUnknown; (void)vKnown_ref; (void)nKnown; (void)dvKnown;
    (void)dvUnknown;
    W_UNSUPPORTED(c, "fmi2GetDirectionalDerivative: not provided "
                  "(providesDirectionalDerivative = false)");
}

fmi2Status fmi2SetRealInputDerivatives(fmi2Component c, const fmi2ValueReference vr[], size_t nvr,
                                       const fmi2Integer order[], const fmi2Real value[])
{
    (void)vr; (void)nvr; (void)order; (void)value;
    W_UNSUPPORTED(c, "fmi2SetRealInputDerivatives: the inputs are held over a step "
                  "(canInterpolateInputs = false)");
}

fmi2Status fmi2GetRealOutputDerivatives(fmi2Component c, const fmi2ValueReference vr[],
                                        size_t nvr, const fmi2Integer order[], fmi2Real value[])
{
    (void)vr; (void)nvr; (void)order; (void)value;
    W_UNSUPPORTED(c, "fmi2GetRealOutputDerivatives: not provided (maxOutputDerivativeOrder = 0)");
}

fmi2Status fmi2CancelStep(fmi2Component c)
{
    W_UNSUPPORTED(c, "fmi2CancelStep: no step is running (fmi2DoStep never returns "
                  "fmi2Pending)");
}

/* ------------------------------------------------------------------ co-simulation */
fmi2Status fmi2DoStep(fmi2Component c, fmi2Real currentCommunicationPoint,
                      fmi2Real communicationStepSize, fmi2Boolean noSetFMUStatePriorToCurrentPoint)
{
    w_instance *w = (w_instance *)c;
    const double t = currentCommunicationPoint, h = communicationStepSize;
    const double *u, *y;
    double steps, tol;
    long m, j;
    ${p}_local local;
    (void)noSetFMUStatePriorToCurrentPoint;
    if (!w) return fmi2Error;
    if (!w_allowed(w, "fmi2DoStep", W_STEPPING)) return fmi2Error;
    u = &w->v[W_VR_U];
    y = &w->v[W_VR_Y];
    if (!(isfinite(t) && isfinite(h) && h > 0.0))
        return w_fail(w, "fmi2DoStep: the communication step size must be a positive number of "
                      "seconds, got %.17g at t = %.17g s", h, t);
    steps = floor(h / ${P}_SAMPLE_TIME + 0.5);
    if (steps < 1.0 || fabs(h - steps * ${P}_SAMPLE_TIME) > 1e-9 * h)
        return w_fail(w, "fmi2DoStep: the communication step size %.17g s is not a whole multiple "
                      "of the estimator's sample time %.17g s; step by k times the sample time "
                      "(k = 1, 2, ...)", h, ${P}_SAMPLE_TIME);
    if (steps > 1e9)
        return w_fail(w, "fmi2DoStep: %.17g s is more than 1e9 samples in one step; take shorter "
                      "communication steps", h);
    tol = 1e-9 * (fabs(w->time) > ${P}_SAMPLE_TIME ? fabs(w->time) : ${P}_SAMPLE_TIME);
    if (fabs(t - w->time) > tol)
        return w_fail(w, "fmi2DoStep: the step starts at t = %.17g s but the estimator is at "
                      "t = %.17g s; it cannot go back or skip time", t, w->time);
    if (w->stop_defined && t + h > w->stop_time + tol)
        return w_fail(w, "fmi2DoStep: the step to t = %.17g s passes the stop time %.17g s given "
                      "to fmi2SetupExperiment", t + h, w->stop_time);
    m = (long)steps;
#if ${P}_FILTER_FORM
    /* commit x_hat[k|k] and u[k]; then m - 1 updates with the inputs held */
    if (w_refresh(w) != fmi2OK) return fmi2Error;
    memcpy(w->x, &w->v[W_VR_XHAT], sizeof w->x);
    memcpy(w->u_prev, u, sizeof(double) * ${P}_INPUTS);
    for (j = 1; j < m; ++j) {
        if (!w_evaluate(w, w->x, w->u_prev, &local)) return fmi2Error;
        ${p}_update(&local, w->x, w->u_prev, y, u, w->x);
    }
#else
    /* m updates x_hat[k+1|k] = step(x_hat[k|k-1], u[k], y[k]) with the inputs held */
    for (j = 0; j < m; ++j) {
        if (!w_evaluate(w, w->x, u, &local)) return fmi2Error;
        ${p}_update(&local, w->x, u, y, u, w->x);
    }
    w->last_usable = local.usable;
    w->last_outside = local.outside;
    ${p}_standard_deviation(&local, w->last_sigma);
#endif
    w->started = 1;
    w->fresh = 0;
    w->time = t + h;
    w_debug(w, "fmi2DoStep: t = %.17g s to %.17g s, %ld update(s)", t, t + h, m);
    return fmi2OK;
}

fmi2Status fmi2GetStatus(fmi2Component c, const fmi2StatusKind s, fmi2Status *value)
{
    w_instance *w = (w_instance *)c;
    (void)s;
    (void)value;
    if (!w) return fmi2Error;
    return w_discard(w, "fmi2GetStatus: no status to report (fmi2DoStep never returns "
                     "fmi2Pending)");
}

fmi2Status fmi2GetRealStatus(fmi2Component c, const fmi2StatusKind s, fmi2Real *value)
{
    w_instance *w = (w_instance *)c;
    if (!w) return fmi2Error;
    if (s == fmi2LastSuccessfulTime && value) {
        *value = w->time;
        return fmi2OK;
    }
    return w_discard(w, "fmi2GetRealStatus: only fmi2LastSuccessfulTime is available");
}

fmi2Status fmi2GetIntegerStatus(fmi2Component c, const fmi2StatusKind s, fmi2Integer *value)
{
    w_instance *w = (w_instance *)c;
    (void)s;
    (void)value;
    if (!w) return fmi2Error;
    return w_discard(w, "fmi2GetIntegerStatus: no Integer status is available");
}

fmi2Status fmi2GetBooleanStatus(fmi2Component c, const fmi2StatusKind s, fmi2Boolean *value)
{
    w_instance *w = (w_instance *)c;
    if (!w) return fmi2Error;
    if (s == fmi2Terminated && value) {
        *value = fmi2False; /* the estimator never asks to end the simulation */
        return fmi2OK;
    }
    return w_discard(w, "fmi2GetBooleanStatus: only fmi2Terminated is available");
}

fmi2Status fmi2GetStringStatus(fmi2Component c, const fmi2StatusKind s, fmi2String *value)
{
    w_instance *w = (w_instance *)c;
    (void)s;
    (void)value;
    if (!w) return fmi2Error;
    return w_discard(w, "fmi2GetStringStatus: no String status is available");
}
""")
