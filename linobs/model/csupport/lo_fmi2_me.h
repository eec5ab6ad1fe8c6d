/*
 * lo_fmi2_me.h -- every exported FMI 2.0 function for a model-exchange plant.
 *
 * Include this file LAST in the plant source, after the plant has defined
 *     static const lo_model LO_PLANT = { ... };
 * It defines the FMI 2.0 common and model-exchange functions on top of the
 * core in lo_model.h, and co-simulation functions that refuse politely.
 */
#ifndef LO_FMI2_ME_H
#define LO_FMI2_ME_H

#include <stdlib.h>
#include "fmi2Functions.h"
#include "lo_model.h"

typedef struct {
    lo_instance base; /* must stay first */
    fmi2CallbackFunctions cb;
} lo_fmi2_instance;

/* The FMI 2.0 logger takes a printf format: double every '%'. */
static void lo_fmi2_emit_raw(const fmi2CallbackFunctions *cb, const char *name, lo_status s,
                             const char *category, const char *text) {
    char escaped[1300];
    size_t i = 0;
    if (!cb || !cb->logger) return;
    while (*text && i + 2 < sizeof escaped) {
        if (*text == '%') escaped[i++] = '%';
        escaped[i++] = *text++;
    }
    escaped[i] = '\0';
    cb->logger(cb->componentEnvironment, name, (fmi2Status)s, category, escaped);
}

static void lo_fmi2_emit(lo_instance *m, lo_status s, const char *category, const char *text) {
    lo_fmi2_instance *f = (lo_fmi2_instance *)m;
    lo_fmi2_emit_raw(&f->cb, m->name, s, category, text);
}

static void *lo_fmi2_alloc(lo_instance *m, size_t n, size_t size) {
    return ((lo_fmi2_instance *)m)->cb.allocateMemory(n, size);
}

static void lo_fmi2_release(lo_instance *m, void *p) {
    ((lo_fmi2_instance *)m)->cb.freeMemory(p);
}

#define LO_FMI2_ENTER(c, fname)                                      \
    lo_instance *m = (lo_instance *)(c);                             \
    if (!m) return fmi2Error;                                        \
    (void)(fname)

#define LO_FMI2_INIT_EXIT "fmi2ExitInitializationMode"

/* ------------------------------------------------------------- common API */

const char *fmi2GetTypesPlatform(void) { return fmi2TypesPlatform; }

const char *fmi2GetVersion(void) { return fmi2Version; }

fmi2Status fmi2SetDebugLogging(fmi2Component c, fmi2Boolean loggingOn, size_t nCategories,
                               const fmi2String categories[]) {
    LO_FMI2_ENTER(c, "fmi2SetDebugLogging");
    return (fmi2Status)lo_set_debug_logging(m, loggingOn ? 1 : 0, nCategories, categories);
}

fmi2Component fmi2Instantiate(fmi2String instanceName, fmi2Type fmuType, fmi2String fmuGUID,
                              fmi2String fmuResourceLocation,
                              const fmi2CallbackFunctions *functions, fmi2Boolean visible,
                              fmi2Boolean loggingOn) {
    lo_fmi2_instance *f;
    const char *name = instanceName ? instanceName : "";
    (void)fmuResourceLocation;
    (void)visible;
    if (!functions || !functions->allocateMemory || !functions->freeMemory) {
        lo_fmi2_emit_raw(functions, name, LO_ERROR, "logStatusError",
                         "fmi2Instantiate: allocateMemory and freeMemory callbacks are required");
        return NULL;
    }
    if (!instanceName) {
        lo_fmi2_emit_raw(functions, name, LO_ERROR, "logStatusError",
                         "fmi2Instantiate: instanceName must not be NULL");
        return NULL;
    }
    if (fmuType != fmi2ModelExchange) {
        lo_fmi2_emit_raw(functions, name, LO_ERROR, "logStatusError",
                         "fmi2Instantiate: co-simulation is not supported; this FMU "
                         "provides model exchange only");
        return NULL;
    }
    if (!fmuGUID || strcmp(fmuGUID, LO_PLANT.token) != 0) {
        char text[400];
        snprintf(text, sizeof text, "fmi2Instantiate: wrong GUID '%s'; this binary of %s expects "
                 "GUID '%s' (the model description and the binary do not belong together)",
                 fmuGUID ? fmuGUID : "(null)", LO_PLANT.identifier, LO_PLANT.token);
        lo_fmi2_emit_raw(functions, name, LO_ERROR, "logStatusError", text);
        return NULL;
    }
    f = (lo_fmi2_instance *)functions->allocateMemory(1, sizeof(lo_fmi2_instance));
    if (!f) {
        lo_fmi2_emit_raw(functions, name, LO_ERROR, "logStatusError",
                         "fmi2Instantiate: out of memory");
        return NULL;
    }
    memset(f, 0, sizeof *f);
    f->cb = *functions;
    f->base.model = &LO_PLANT;
    f->base.emit = lo_fmi2_emit;
    f->base.alloc = lo_fmi2_alloc;
    f->base.release = lo_fmi2_release;
    f->base.logging_on = loggingOn ? 1 : 0;
    if (!lo_construct(&f->base, name)) {
        lo_destruct(&f->base);
        functions->freeMemory(f);
        return NULL;
    }
    return (fmi2Component)f;
}

void fmi2FreeInstance(fmi2Component c) {
    lo_fmi2_instance *f = (lo_fmi2_instance *)c;
    fmi2CallbackFreeMemory release;
    if (!f) return;
    release = f->cb.freeMemory;
    lo_destruct(&f->base);
    release(f);
}

fmi2Status fmi2SetupExperiment(fmi2Component c, fmi2Boolean toleranceDefined, fmi2Real tolerance,
                               fmi2Real startTime, fmi2Boolean stopTimeDefined,
                               fmi2Real stopTime) {
    LO_FMI2_ENTER(c, "fmi2SetupExperiment");
    (void)toleranceDefined; (void)tolerance; (void)stopTimeDefined; (void)stopTime;
    if (!lo_allowed(m, "fmi2SetupExperiment", LO_IN(LO_MODE_INSTANTIATED))) return fmi2Error;
    m->time = startTime;
    lo_mark_changed(m);
    return fmi2OK;
}

fmi2Status fmi2EnterInitializationMode(fmi2Component c) {
    LO_FMI2_ENTER(c, "fmi2EnterInitializationMode");
    if (!lo_allowed(m, "fmi2EnterInitializationMode", LO_IN(LO_MODE_INSTANTIATED))) return fmi2Error;
    lo_set_mode(m, LO_MODE_INITIALIZATION);
    return fmi2OK;
}

fmi2Status fmi2ExitInitializationMode(fmi2Component c) {
    lo_status st;
    LO_FMI2_ENTER(c, "fmi2ExitInitializationMode");
    if (!lo_allowed(m, "fmi2ExitInitializationMode", LO_IN(LO_MODE_INITIALIZATION))) return fmi2Error;
    st = lo_refresh(m);
    if (st >= LO_ERROR) return (fmi2Status)st;
    lo_set_mode(m, LO_MODE_EVENT);
    return (fmi2Status)st;
}

fmi2Status fmi2Terminate(fmi2Component c) {
    LO_FMI2_ENTER(c, "fmi2Terminate");
    if (!lo_allowed(m, "fmi2Terminate", LO_IN(LO_MODE_EVENT) | LO_IN(LO_MODE_CONTINUOUS)))
        return fmi2Error;
    lo_set_mode(m, LO_MODE_TERMINATED);
    return fmi2OK;
}

fmi2Status fmi2Reset(fmi2Component c) {
    LO_FMI2_ENTER(c, "fmi2Reset");
    lo_load_start_values(m);
    lo_set_mode(m, LO_MODE_INSTANTIATED);
    return fmi2OK;
}

/* ------------------------------------------------------------- get / set */

fmi2Status fmi2GetReal(fmi2Component c, const fmi2ValueReference vr[], size_t nvr,
                       fmi2Real value[]) {
    LO_FMI2_ENTER(c, "fmi2GetReal");
    return (fmi2Status)lo_get_reals(m, "fmi2GetReal", vr, nvr, value);
}

fmi2Status fmi2SetReal(fmi2Component c, const fmi2ValueReference vr[], size_t nvr,
                       const fmi2Real value[]) {
    LO_FMI2_ENTER(c, "fmi2SetReal");
    return (fmi2Status)lo_set_reals(m, "fmi2SetReal", vr, nvr, value, LO_FMI2_INIT_EXIT);
}

static fmi2Status lo_fmi2_no_such(lo_instance *m, const char *fname, const char *type,
                                  const fmi2ValueReference vr[], size_t nvr) {
    if (nvr == 0) return fmi2OK;
    lo_log(m, LO_ERROR, "%s: this model has no %s variables (value reference %u)", fname, type,
           vr ? vr[0] : 0u);
    return fmi2Error;
}

fmi2Status fmi2GetInteger(fmi2Component c, const fmi2ValueReference vr[], size_t nvr,
                          fmi2Integer value[]) {
    LO_FMI2_ENTER(c, "fmi2GetInteger");
    (void)value;
    return lo_fmi2_no_such(m, "fmi2GetInteger", "Integer", vr, nvr);
}

fmi2Status fmi2GetBoolean(fmi2Component c, const fmi2ValueReference vr[], size_t nvr,
                          fmi2Boolean value[]) {
    LO_FMI2_ENTER(c, "fmi2GetBoolean");
    (void)value;
    return lo_fmi2_no_such(m, "fmi2GetBoolean", "Boolean", vr, nvr);
}

fmi2Status fmi2GetString(fmi2Component c, const fmi2ValueReference vr[], size_t nvr,
                         fmi2String value[]) {
    LO_FMI2_ENTER(c, "fmi2GetString");
    (void)value;
    return lo_fmi2_no_such(m, "fmi2GetString", "String", vr, nvr);
}

fmi2Status fmi2SetInteger(fmi2Component c, const fmi2ValueReference vr[], size_t nvr,
                          const fmi2Integer value[]) {
    LO_FMI2_ENTER(c, "fmi2SetInteger");
    (void)value;
    return lo_fmi2_no_such(m, "fmi2SetInteger", "Integer", vr, nvr);
}

fmi2Status fmi2SetBoolean(fmi2Component c, const fmi2ValueReference vr[], size_t nvr,
                          const fmi2Boolean value[]) {
    LO_FMI2_ENTER(c, "fmi2SetBoolean");
    (void)value;
    return lo_fmi2_no_such(m, "fmi2SetBoolean", "Boolean", vr, nvr);
}

fmi2Status fmi2SetString(fmi2Component c, const fmi2ValueReference vr[], size_t nvr,
                         const fmi2String value[]) {
    LO_FMI2_ENTER(c, "fmi2SetString");
    (void)value;
    return lo_fmi2_no_such(m, "fmi2SetString", "String", vr, nvr);
}

/* ------------------------------------------------------------- FMU state */

fmi2Status fmi2GetFMUstate(fmi2Component c, fmi2FMUstate *FMUstate) {
    LO_FMI2_ENTER(c, "fmi2GetFMUstate");
    return (fmi2Status)lo_get_state(m, "fmi2GetFMUstate", (void **)FMUstate);
}

fmi2Status fmi2SetFMUstate(fmi2Component c, fmi2FMUstate FMUstate) {
    LO_FMI2_ENTER(c, "fmi2SetFMUstate");
    return (fmi2Status)lo_set_state(m, "fmi2SetFMUstate", FMUstate);
}

fmi2Status fmi2FreeFMUstate(fmi2Component c, fmi2FMUstate *FMUstate) {
    LO_FMI2_ENTER(c, "fmi2FreeFMUstate");
    return (fmi2Status)lo_free_state(m, (void **)FMUstate);
}

fmi2Status fmi2SerializedFMUstateSize(fmi2Component c, fmi2FMUstate FMUstate, size_t *size) {
    LO_FMI2_ENTER(c, "fmi2SerializedFMUstateSize");
    if (!lo_snapshot_check(m, "fmi2SerializedFMUstateSize", FMUstate, lo_snapshot_size(m)) || !size)
        return fmi2Error;
    *size = lo_snapshot_size(m);
    return fmi2OK;
}

fmi2Status fmi2SerializeFMUstate(fmi2Component c, fmi2FMUstate FMUstate, fmi2Byte serializedState[],
                                 size_t size) {
    LO_FMI2_ENTER(c, "fmi2SerializeFMUstate");
    return (fmi2Status)lo_serialize(m, "fmi2SerializeFMUstate", FMUstate,
                                    (unsigned char *)serializedState, size);
}

fmi2Status fmi2DeSerializeFMUstate(fmi2Component c, const fmi2Byte serializedState[], size_t size,
                                   fmi2FMUstate *FMUstate) {
    LO_FMI2_ENTER(c, "fmi2DeSerializeFMUstate");
    return (fmi2Status)lo_deserialize(m, "fmi2DeSerializeFMUstate",
                                      (const unsigned char *)serializedState, size,
                                      (void **)FMUstate);
}

/* ---------------------------------------------------- partial derivatives */

fmi2Status fmi2GetDirectionalDerivative(fmi2Component c, const fmi2ValueReference vUnknown_ref[],
                                        size_t nUnknown, const fmi2ValueReference vKnown_ref[],
                                        size_t nKnown, const fmi2Real dvKnown[],
                                        fmi2Real dvUnknown[]) {
    LO_FMI2_ENTER(c, "fmi2GetDirectionalDerivative");
    if (nUnknown > 0 && !dvUnknown) {
        lo_log(m, LO_ERROR, "fmi2GetDirectionalDerivative: null array argument");
        return fmi2Error;
    }
    return (fmi2Status)lo_derivatives(m, "fmi2GetDirectionalDerivative", vUnknown_ref, nUnknown,
                                      vKnown_ref, nKnown, dvKnown, dvUnknown, 0);
}

/* ------------------------------------------------------ model exchange */

fmi2Status fmi2EnterEventMode(fmi2Component c) {
    LO_FMI2_ENTER(c, "fmi2EnterEventMode");
    if (!lo_allowed(m, "fmi2EnterEventMode", LO_IN(LO_MODE_EVENT) | LO_IN(LO_MODE_CONTINUOUS)))
        return fmi2Error;
    lo_set_mode(m, LO_MODE_EVENT);
    return fmi2OK;
}

fmi2Status fmi2NewDiscreteStates(fmi2Component c, fmi2EventInfo *eventInfo) {
    lo_status st;
    LO_FMI2_ENTER(c, "fmi2NewDiscreteStates");
    if (!lo_allowed(m, "fmi2NewDiscreteStates", LO_IN(LO_MODE_EVENT))) return fmi2Error;
    if (!eventInfo) {
        lo_log(m, LO_ERROR, "fmi2NewDiscreteStates: null eventInfo");
        return fmi2Error;
    }
    st = lo_refresh(m);
    eventInfo->newDiscreteStatesNeeded = fmi2False;
    eventInfo->terminateSimulation = fmi2False;
    eventInfo->nominalsOfContinuousStatesChanged = fmi2False;
    eventInfo->valuesOfContinuousStatesChanged = fmi2False;
    eventInfo->nextEventTimeDefined = fmi2False;
    eventInfo->nextEventTime = 0.0;
    return (fmi2Status)st;
}

fmi2Status fmi2EnterContinuousTimeMode(fmi2Component c) {
    LO_FMI2_ENTER(c, "fmi2EnterContinuousTimeMode");
    if (!lo_allowed(m, "fmi2EnterContinuousTimeMode", LO_IN(LO_MODE_EVENT))) return fmi2Error;
    lo_set_mode(m, LO_MODE_CONTINUOUS);
    return fmi2OK;
}

fmi2Status fmi2CompletedIntegratorStep(fmi2Component c, fmi2Boolean noSetFMUStatePriorToCurrentPoint,
                                       fmi2Boolean *enterEventMode,
                                       fmi2Boolean *terminateSimulation) {
    LO_FMI2_ENTER(c, "fmi2CompletedIntegratorStep");
    (void)noSetFMUStatePriorToCurrentPoint;
    if (!lo_allowed(m, "fmi2CompletedIntegratorStep", LO_IN(LO_MODE_CONTINUOUS))) return fmi2Error;
    if (enterEventMode) *enterEventMode = fmi2False;
    if (terminateSimulation) *terminateSimulation = fmi2False;
    return fmi2OK;
}

fmi2Status fmi2SetTime(fmi2Component c, fmi2Real time) {
    LO_FMI2_ENTER(c, "fmi2SetTime");
    if (!lo_allowed(m, "fmi2SetTime", LO_IN(LO_MODE_EVENT) | LO_IN(LO_MODE_CONTINUOUS)))
        return fmi2Error;
    if (m->time != time) {
        m->time = time;
        lo_mark_changed(m);
    }
    return fmi2OK;
}

fmi2Status fmi2SetContinuousStates(fmi2Component c, const fmi2Real x[], size_t nx) {
    LO_FMI2_ENTER(c, "fmi2SetContinuousStates");
    return (fmi2Status)lo_set_states(m, "fmi2SetContinuousStates", x, nx);
}

fmi2Status fmi2GetDerivatives(fmi2Component c, fmi2Real derivatives[], size_t nx) {
    LO_FMI2_ENTER(c, "fmi2GetDerivatives");
    return (fmi2Status)lo_get_vector(m, "fmi2GetDerivatives", derivatives, nx, 1);
}

fmi2Status fmi2GetEventIndicators(fmi2Component c, fmi2Real eventIndicators[], size_t ni) {
    LO_FMI2_ENTER(c, "fmi2GetEventIndicators");
    return (fmi2Status)lo_get_vector(m, "fmi2GetEventIndicators", eventIndicators, ni, 2);
}

fmi2Status fmi2GetContinuousStates(fmi2Component c, fmi2Real x[], size_t nx) {
    LO_FMI2_ENTER(c, "fmi2GetContinuousStates");
    return (fmi2Status)lo_get_vector(m, "fmi2GetContinuousStates", x, nx, 0);
}

fmi2Status fmi2GetNominalsOfContinuousStates(fmi2Component c, fmi2Real x_nominal[], size_t nx) {
    LO_FMI2_ENTER(c, "fmi2GetNominalsOfContinuousStates");
    return (fmi2Status)lo_get_vector(m, "fmi2GetNominalsOfContinuousStates", x_nominal, nx, 3);
}

/* ------------------------------------------- co-simulation (not provided) */

static fmi2Status lo_fmi2_no_cs(fmi2Component c, const char *fname) {
    lo_instance *m = (lo_instance *)c;
    if (m) lo_log(m, LO_ERROR, "%s: co-simulation is not supported by this model-exchange FMU", fname);
    return fmi2Error;
}

fmi2Status fmi2SetRealInputDerivatives(fmi2Component c, const fmi2ValueReference vr[], size_t nvr,
                                       const fmi2Integer order[], const fmi2Real value[]) {
    (void)vr; (void)nvr; (void)order; (void)value;
    return lo_fmi2_no_cs(c, "fmi2SetRealInputDerivatives");
}

fmi2Status fmi2GetRealOutputDerivatives(fmi2Component c, const fmi2ValueReference vr[], size_t nvr,
                                        const fmi2Integer order[], fmi2Real value[]) {
    (void)vr; (void)nvr; (void)order; (void)value;
    return lo_fmi2_no_cs(c, "fmi2GetRealOutputDerivatives");
}

fmi2Status fmi2DoStep(fmi2Component c, fmi2Real currentCommunicationPoint,
                      fmi2Real communicationStepSize, fmi2Boolean noSetFMUStatePriorToCurrentPoint) {
    (void)currentCommunicationPoint; (void)communicationStepSize;
    (void)noSetFMUStatePriorToCurrentPoint;
    return lo_fmi2_no_cs(c, "fmi2DoStep");
}

fmi2Status fmi2CancelStep(fmi2Component c) { return lo_fmi2_no_cs(c, "fmi2CancelStep"); }

fmi2Status fmi2GetStatus(fmi2Component c, const fmi2StatusKind s, fmi2Status *value) {
    (void)s; (void)value;
    return lo_fmi2_no_cs(c, "fmi2GetStatus");
}

fmi2Status fmi2GetRealStatus(fmi2Component c, const fmi2StatusKind s, fmi2Real *value) {
    (void)s; (void)value;
    return lo_fmi2_no_cs(c, "fmi2GetRealStatus");
}

fmi2Status fmi2GetIntegerStatus(fmi2Component c, const fmi2StatusKind s, fmi2Integer *value) {
    (void)s; (void)value;
    return lo_fmi2_no_cs(c, "fmi2GetIntegerStatus");
}

fmi2Status fmi2GetBooleanStatus(fmi2Component c, const fmi2StatusKind s, fmi2Boolean *value) {
    (void)s; (void)value;
    return lo_fmi2_no_cs(c, "fmi2GetBooleanStatus");
}

fmi2Status fmi2GetStringStatus(fmi2Component c, const fmi2StatusKind s, fmi2String *value) {
    (void)s; (void)value;
    return lo_fmi2_no_cs(c, "fmi2GetStringStatus");
}

#endif /* LO_FMI2_ME_H */
