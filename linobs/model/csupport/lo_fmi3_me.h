/*
 * lo_fmi3_me.h -- every exported FMI 3.0 function for a model-exchange plant.
 *
 * Include this file LAST in the plant source, after the plant has defined
 *     static const lo_model LO_PLANT = { ... };
 * Real variables are Float64.  The plant declares the independent variable
 * `time` as an LO_INDEPENDENT variable.  Co-simulation, scheduled execution,
 * clocks, configuration mode and the other variable types are refused with an
 * error status and a logged message.
 */
#ifndef LO_FMI3_ME_H
#define LO_FMI3_ME_H

#include <stdlib.h>
#include "fmi3Functions.h"
#include "lo_model.h"

typedef struct {
    lo_instance base; /* must stay first */
    fmi3InstanceEnvironment env;
    fmi3LogMessageCallback log;
} lo_fmi3_instance;

static void lo_fmi3_emit(lo_instance *m, lo_status s, const char *category, const char *text) {
    lo_fmi3_instance *f = (lo_fmi3_instance *)m;
    if (f->log) f->log(f->env, (fmi3Status)s, category, text);
}

static void *lo_fmi3_alloc(lo_instance *m, size_t n, size_t size) {
    (void)m;
    return calloc(n, size);
}

static void lo_fmi3_release(lo_instance *m, void *p) {
    (void)m;
    free(p);
}

#define LO_FMI3_ENTER(inst)                                          \
    lo_instance *m = (lo_instance *)(inst);                          \
    if (!m) return fmi3Error

#define LO_FMI3_INIT_EXIT "fmi3ExitInitializationMode"

static int lo_fmi3_counts(lo_instance *m, const char *fname, size_t nvr, size_t nvalues) {
    if (nvr == nvalues) return 1;
    lo_log(m, LO_ERROR, "%s: %lu value references but %lu values (all variables are scalars)",
           fname, (unsigned long)nvr, (unsigned long)nvalues);
    return 0;
}

/* ------------------------------------------------------------- common API */

const char *fmi3GetVersion(void) { return fmi3Version; }

fmi3Status fmi3SetDebugLogging(fmi3Instance instance, fmi3Boolean loggingOn, size_t nCategories,
                               const fmi3String categories[]) {
    LO_FMI3_ENTER(instance);
    return (fmi3Status)lo_set_debug_logging(m, loggingOn ? 1 : 0, nCategories, categories);
}

fmi3Instance fmi3InstantiateModelExchange(fmi3String instanceName, fmi3String instantiationToken,
                                          fmi3String resourcePath, fmi3Boolean visible,
                                          fmi3Boolean loggingOn,
                                          fmi3InstanceEnvironment instanceEnvironment,
                                          fmi3LogMessageCallback logMessage) {
    lo_fmi3_instance *f;
    (void)resourcePath;
    (void)visible;
    if (!instantiationToken || strcmp(instantiationToken, LO_PLANT.token) != 0) {
        if (logMessage) {
            char text[400];
            snprintf(text, sizeof text, "fmi3InstantiateModelExchange: wrong instantiation token "
                     "'%s'; this binary of %s expects '%s' (the model description and the binary "
                     "do not belong together)", instantiationToken ? instantiationToken : "(null)",
                     LO_PLANT.identifier, LO_PLANT.token);
            logMessage(instanceEnvironment, fmi3Error, "logStatusError", text);
        }
        return NULL;
    }
    f = (lo_fmi3_instance *)calloc(1, sizeof(lo_fmi3_instance));
    if (!f) {
        if (logMessage)
            logMessage(instanceEnvironment, fmi3Error, "logStatusError",
                       "fmi3InstantiateModelExchange: out of memory");
        return NULL;
    }
    f->env = instanceEnvironment;
    f->log = logMessage;
    f->base.model = &LO_PLANT;
    f->base.emit = lo_fmi3_emit;
    f->base.alloc = lo_fmi3_alloc;
    f->base.release = lo_fmi3_release;
    f->base.logging_on = loggingOn ? 1 : 0;
    if (!lo_construct(&f->base, instanceName)) {
        lo_destruct(&f->base);
        free(f);
        return NULL;
    }
    return (fmi3Instance)f;
}

fmi3Instance fmi3InstantiateCoSimulation(
    fmi3String instanceName, fmi3String instantiationToken, fmi3String resourcePath,
    fmi3Boolean visible, fmi3Boolean loggingOn, fmi3Boolean eventModeUsed,
    fmi3Boolean earlyReturnAllowed, const fmi3ValueReference requiredIntermediateVariables[],
    size_t nRequiredIntermediateVariables, fmi3InstanceEnvironment instanceEnvironment,
    fmi3LogMessageCallback logMessage, fmi3IntermediateUpdateCallback intermediateUpdate) {
    (void)instanceName; (void)instantiationToken; (void)resourcePath; (void)visible;
    (void)loggingOn; (void)eventModeUsed; (void)earlyReturnAllowed;
    (void)requiredIntermediateVariables; (void)nRequiredIntermediateVariables;
    (void)intermediateUpdate;
    if (logMessage)
        logMessage(instanceEnvironment, fmi3Error, "logStatusError",
                   "fmi3InstantiateCoSimulation: co-simulation is not supported; this FMU "
                   "provides model exchange only");
    return NULL;
}

fmi3Instance fmi3InstantiateScheduledExecution(
    fmi3String instanceName, fmi3String instantiationToken, fmi3String resourcePath,
    fmi3Boolean visible, fmi3Boolean loggingOn, fmi3InstanceEnvironment instanceEnvironment,
    fmi3LogMessageCallback logMessage, fmi3ClockUpdateCallback clockUpdate,
    fmi3LockPreemptionCallback lockPreemption, fmi3UnlockPreemptionCallback unlockPreemption) {
    (void)instanceName; (void)instantiationToken; (void)resourcePath; (void)visible;
    (void)loggingOn; (void)clockUpdate; (void)lockPreemption; (void)unlockPreemption;
    if (logMessage)
        logMessage(instanceEnvironment, fmi3Error, "logStatusError",
                   "fmi3InstantiateScheduledExecution: scheduled execution is not supported; "
                   "this FMU provides model exchange only");
    return NULL;
}

void fmi3FreeInstance(fmi3Instance instance) {
    lo_fmi3_instance *f = (lo_fmi3_instance *)instance;
    if (!f) return;
    lo_destruct(&f->base);
    free(f);
}

fmi3Status fmi3EnterInitializationMode(fmi3Instance instance, fmi3Boolean toleranceDefined,
                                       fmi3Float64 tolerance, fmi3Float64 startTime,
                                       fmi3Boolean stopTimeDefined, fmi3Float64 stopTime) {
    LO_FMI3_ENTER(instance);
    (void)toleranceDefined; (void)tolerance; (void)stopTimeDefined; (void)stopTime;
    if (!lo_allowed(m, "fmi3EnterInitializationMode", LO_IN(LO_MODE_INSTANTIATED))) return fmi3Error;
    m->time = startTime;
    lo_mark_changed(m);
    lo_set_mode(m, LO_MODE_INITIALIZATION);
    return fmi3OK;
}

fmi3Status fmi3ExitInitializationMode(fmi3Instance instance) {
    lo_status st;
    LO_FMI3_ENTER(instance);
    if (!lo_allowed(m, "fmi3ExitInitializationMode", LO_IN(LO_MODE_INITIALIZATION))) return fmi3Error;
    st = lo_refresh(m);
    if (st >= LO_ERROR) return (fmi3Status)st;
    lo_set_mode(m, LO_MODE_EVENT);
    return (fmi3Status)st;
}

fmi3Status fmi3EnterEventMode(fmi3Instance instance) {
    LO_FMI3_ENTER(instance);
    if (!lo_allowed(m, "fmi3EnterEventMode", LO_IN(LO_MODE_EVENT) | LO_IN(LO_MODE_CONTINUOUS)))
        return fmi3Error;
    lo_set_mode(m, LO_MODE_EVENT);
    return fmi3OK;
}

fmi3Status fmi3Terminate(fmi3Instance instance) {
    LO_FMI3_ENTER(instance);
    if (!lo_allowed(m, "fmi3Terminate", LO_IN(LO_MODE_EVENT) | LO_IN(LO_MODE_CONTINUOUS)))
        return fmi3Error;
    lo_set_mode(m, LO_MODE_TERMINATED);
    return fmi3OK;
}

fmi3Status fmi3Reset(fmi3Instance instance) {
    LO_FMI3_ENTER(instance);
    lo_load_start_values(m);
    lo_set_mode(m, LO_MODE_INSTANTIATED);
    return fmi3OK;
}

/* ------------------------------------------------------------ get / set */

fmi3Status fmi3GetFloat64(fmi3Instance instance, const fmi3ValueReference valueReferences[],
                          size_t nValueReferences, fmi3Float64 values[], size_t nValues) {
    LO_FMI3_ENTER(instance);
    if (!lo_fmi3_counts(m, "fmi3GetFloat64", nValueReferences, nValues)) return fmi3Error;
    return (fmi3Status)lo_get_reals(m, "fmi3GetFloat64", valueReferences, nValueReferences, values);
}

fmi3Status fmi3SetFloat64(fmi3Instance instance, const fmi3ValueReference valueReferences[],
                          size_t nValueReferences, const fmi3Float64 values[], size_t nValues) {
    LO_FMI3_ENTER(instance);
    if (!lo_fmi3_counts(m, "fmi3SetFloat64", nValueReferences, nValues)) return fmi3Error;
    return (fmi3Status)lo_set_reals(m, "fmi3SetFloat64", valueReferences, nValueReferences, values,
                                    LO_FMI3_INIT_EXIT);
}

static fmi3Status lo_fmi3_no_such(fmi3Instance instance, const char *fname, const char *type,
                                  const fmi3ValueReference vr[], size_t nvr) {
    lo_instance *m = (lo_instance *)instance;
    if (!m) return fmi3Error;
    if (nvr == 0) return fmi3OK;
    lo_log(m, LO_ERROR, "%s: this model has no %s variables (value reference %u)", fname, type,
           vr ? vr[0] : 0u);
    return fmi3Error;
}

#define LO_FMI3_NO_GETSET(TYPE, CTYPE)                                                          \
    fmi3Status fmi3Get##TYPE(fmi3Instance instance, const fmi3ValueReference valueReferences[], \
                             size_t nValueReferences, CTYPE values[], size_t nValues) {         \
        (void)values; (void)nValues;                                                            \
        return lo_fmi3_no_such(instance, "fmi3Get" #TYPE, #TYPE, valueReferences,               \
                               nValueReferences);                                               \
    }                                                                                           \
    fmi3Status fmi3Set##TYPE(fmi3Instance instance, const fmi3ValueReference valueReferences[], \
                             size_t nValueReferences, const CTYPE values[], size_t nValues) {   \
        (void)values; (void)nValues;                                                            \
        return lo_fmi3_no_such(instance, "fmi3Set" #TYPE, #TYPE, valueReferences,               \
                               nValueReferences);                                               \
    }

LO_FMI3_NO_GETSET(Float32, fmi3Float32)
LO_FMI3_NO_GETSET(Int8, fmi3Int8)
LO_FMI3_NO_GETSET(UInt8, fmi3UInt8)
LO_FMI3_NO_GETSET(Int16, fmi3Int16)
LO_FMI3_NO_GETSET(UInt16, fmi3UInt16)
LO_FMI3_NO_GETSET(Int32, fmi3Int32)
LO_FMI3_NO_GETSET(UInt32, fmi3UInt32)
LO_FMI3_NO_GETSET(Int64, fmi3Int64)
LO_FMI3_NO_GETSET(UInt64, fmi3UInt64)
LO_FMI3_NO_GETSET(Boolean, fmi3Boolean)
LO_FMI3_NO_GETSET(String, fmi3String)

fmi3Status fmi3GetBinary(fmi3Instance instance, const fmi3ValueReference valueReferences[],
                         size_t nValueReferences, size_t valueSizes[], fmi3Binary values[],
                         size_t nValues) {
    (void)valueSizes; (void)values; (void)nValues;
    return lo_fmi3_no_such(instance, "fmi3GetBinary", "Binary", valueReferences, nValueReferences);
}

fmi3Status fmi3SetBinary(fmi3Instance instance, const fmi3ValueReference valueReferences[],
                         size_t nValueReferences, const size_t valueSizes[],
                         const fmi3Binary values[], size_t nValues) {
    (void)valueSizes; (void)values; (void)nValues;
    return lo_fmi3_no_such(instance, "fmi3SetBinary", "Binary", valueReferences, nValueReferences);
}

fmi3Status fmi3GetClock(fmi3Instance instance, const fmi3ValueReference valueReferences[],
                        size_t nValueReferences, fmi3Clock values[]) {
    (void)values;
    return lo_fmi3_no_such(instance, "fmi3GetClock", "Clock", valueReferences, nValueReferences);
}

fmi3Status fmi3SetClock(fmi3Instance instance, const fmi3ValueReference valueReferences[],
                        size_t nValueReferences, const fmi3Clock values[]) {
    (void)values;
    return lo_fmi3_no_such(instance, "fmi3SetClock", "Clock", valueReferences, nValueReferences);
}

/* ------------------------------------------------ variable dependencies */

fmi3Status fmi3GetNumberOfVariableDependencies(fmi3Instance instance,
                                               fmi3ValueReference valueReference,
                                               size_t *nDependencies) {
    LO_FMI3_ENTER(instance);
    (void)valueReference; (void)nDependencies;
    lo_log(m, LO_ERROR, "fmi3GetNumberOfVariableDependencies: not provided; the dependencies "
           "are in the ModelStructure of modelDescription.xml");
    return fmi3Error;
}

fmi3Status fmi3GetVariableDependencies(fmi3Instance instance, fmi3ValueReference dependent,
                                       size_t elementIndicesOfDependent[],
                                       fmi3ValueReference independents[],
                                       size_t elementIndicesOfIndependents[],
                                       fmi3DependencyKind dependencyKinds[], size_t nDependencies) {
    LO_FMI3_ENTER(instance);
    (void)dependent; (void)elementIndicesOfDependent; (void)independents;
    (void)elementIndicesOfIndependents; (void)dependencyKinds; (void)nDependencies;
    lo_log(m, LO_ERROR, "fmi3GetVariableDependencies: not provided; the dependencies are in the "
           "ModelStructure of modelDescription.xml");
    return fmi3Error;
}

/* ------------------------------------------------------------- FMU state */

fmi3Status fmi3GetFMUState(fmi3Instance instance, fmi3FMUState *FMUState) {
    LO_FMI3_ENTER(instance);
    return (fmi3Status)lo_get_state(m, "fmi3GetFMUState", (void **)FMUState);
}

fmi3Status fmi3SetFMUState(fmi3Instance instance, fmi3FMUState FMUState) {
    LO_FMI3_ENTER(instance);
    return (fmi3Status)lo_set_state(m, "fmi3SetFMUState", FMUState);
}

fmi3Status fmi3FreeFMUState(fmi3Instance instance, fmi3FMUState *FMUState) {
    LO_FMI3_ENTER(instance);
    return (fmi3Status)lo_free_state(m, (void **)FMUState);
}

fmi3Status fmi3SerializedFMUStateSize(fmi3Instance instance, fmi3FMUState FMUState, size_t *size) {
    LO_FMI3_ENTER(instance);
    if (!lo_snapshot_check(m, "fmi3SerializedFMUStateSize", FMUState, lo_snapshot_size(m)) || !size)
        return fmi3Error;
    *size = lo_snapshot_size(m);
    return fmi3OK;
}

fmi3Status fmi3SerializeFMUState(fmi3Instance instance, fmi3FMUState FMUState,
                                 fmi3Byte serializedState[], size_t size) {
    LO_FMI3_ENTER(instance);
    return (fmi3Status)lo_serialize(m, "fmi3SerializeFMUState", FMUState, serializedState, size);
}

fmi3Status fmi3DeserializeFMUState(fmi3Instance instance, const fmi3Byte serializedState[],
                                   size_t size, fmi3FMUState *FMUState) {
    LO_FMI3_ENTER(instance);
    return (fmi3Status)lo_deserialize(m, "fmi3DeserializeFMUState", serializedState, size,
                                      (void **)FMUState);
}

/* ---------------------------------------------------- partial derivatives */

fmi3Status fmi3GetDirectionalDerivative(fmi3Instance instance, const fmi3ValueReference unknowns[],
                                        size_t nUnknowns, const fmi3ValueReference knowns[],
                                        size_t nKnowns, const fmi3Float64 seed[], size_t nSeed,
                                        fmi3Float64 sensitivity[], size_t nSensitivity) {
    LO_FMI3_ENTER(instance);
    if (!lo_fmi3_counts(m, "fmi3GetDirectionalDerivative", nKnowns, nSeed) ||
        !lo_fmi3_counts(m, "fmi3GetDirectionalDerivative", nUnknowns, nSensitivity))
        return fmi3Error;
    if (nUnknowns > 0 && !sensitivity) {
        lo_log(m, LO_ERROR, "fmi3GetDirectionalDerivative: null array argument");
        return fmi3Error;
    }
    return (fmi3Status)lo_derivatives(m, "fmi3GetDirectionalDerivative", unknowns, nUnknowns,
                                      knowns, nKnowns, seed, sensitivity, 0);
}

fmi3Status fmi3GetAdjointDerivative(fmi3Instance instance, const fmi3ValueReference unknowns[],
                                    size_t nUnknowns, const fmi3ValueReference knowns[],
                                    size_t nKnowns, const fmi3Float64 seed[], size_t nSeed,
                                    fmi3Float64 sensitivity[], size_t nSensitivity) {
    LO_FMI3_ENTER(instance);
    if (!lo_fmi3_counts(m, "fmi3GetAdjointDerivative", nUnknowns, nSeed) ||
        !lo_fmi3_counts(m, "fmi3GetAdjointDerivative", nKnowns, nSensitivity))
        return fmi3Error;
    if (nKnowns > 0 && !sensitivity) {
        lo_log(m, LO_ERROR, "fmi3GetAdjointDerivative: null array argument");
        return fmi3Error;
    }
    return (fmi3Status)lo_derivatives(m, "fmi3GetAdjointDerivative", unknowns, nUnknowns, knowns,
                                      nKnowns, seed, sensitivity, 1);
}

/* ------------------------------------- configuration mode, clocks (none) */

fmi3Status fmi3EnterConfigurationMode(fmi3Instance instance) {
    LO_FMI3_ENTER(instance);
    lo_log(m, LO_ERROR, "fmi3EnterConfigurationMode: this model has no structural parameters");
    return fmi3Error;
}

fmi3Status fmi3ExitConfigurationMode(fmi3Instance instance) {
    LO_FMI3_ENTER(instance);
    lo_log(m, LO_ERROR, "fmi3ExitConfigurationMode: this model has no structural parameters");
    return fmi3Error;
}

fmi3Status fmi3GetIntervalDecimal(fmi3Instance instance, const fmi3ValueReference valueReferences[],
                                  size_t nValueReferences, fmi3Float64 intervals[],
                                  fmi3IntervalQualifier qualifiers[]) {
    (void)intervals; (void)qualifiers;
    return lo_fmi3_no_such(instance, "fmi3GetIntervalDecimal", "Clock", valueReferences,
                           nValueReferences);
}

fmi3Status fmi3GetIntervalFraction(fmi3Instance instance, const fmi3ValueReference valueReferences[],
                                   size_t nValueReferences, fmi3UInt64 counters[],
                                   fmi3UInt64 resolutions[], fmi3IntervalQualifier qualifiers[]) {
    (void)counters; (void)resolutions; (void)qualifiers;
    return lo_fmi3_no_such(instance, "fmi3GetIntervalFraction", "Clock", valueReferences,
                           nValueReferences);
}

fmi3Status fmi3GetShiftDecimal(fmi3Instance instance, const fmi3ValueReference valueReferences[],
                               size_t nValueReferences, fmi3Float64 shifts[]) {
    (void)shifts;
    return lo_fmi3_no_such(instance, "fmi3GetShiftDecimal", "Clock", valueReferences,
                           nValueReferences);
}

fmi3Status fmi3GetShiftFraction(fmi3Instance instance, const fmi3ValueReference valueReferences[],
                                size_t nValueReferences, fmi3UInt64 counters[],
                                fmi3UInt64 resolutions[]) {
    (void)counters; (void)resolutions;
    return lo_fmi3_no_such(instance, "fmi3GetShiftFraction", "Clock", valueReferences,
                           nValueReferences);
}

fmi3Status fmi3SetIntervalDecimal(fmi3Instance instance, const fmi3ValueReference valueReferences[],
                                  size_t nValueReferences, const fmi3Float64 intervals[]) {
    (void)intervals;
    return lo_fmi3_no_such(instance, "fmi3SetIntervalDecimal", "Clock", valueReferences,
                           nValueReferences);
}

fmi3Status fmi3SetIntervalFraction(fmi3Instance instance, const fmi3ValueReference valueReferences[],
                                   size_t nValueReferences, const fmi3UInt64 counters[],
                                   const fmi3UInt64 resolutions[]) {
    (void)counters; (void)resolutions;
    return lo_fmi3_no_such(instance, "fmi3SetIntervalFraction", "Clock", valueReferences,
                           nValueReferences);
}

fmi3Status fmi3SetShiftDecimal(fmi3Instance instance, const fmi3ValueReference valueReferences[],
                               size_t nValueReferences, const fmi3Float64 shifts[]) {
    (void)shifts;
    return lo_fmi3_no_such(instance, "fmi3SetShiftDecimal", "Clock", valueReferences,
                           nValueReferences);
}

fmi3Status fmi3SetShiftFraction(fmi3Instance instance, const fmi3ValueReference valueReferences[],
                                size_t nValueReferences, const fmi3UInt64 counters[],
                                const fmi3UInt64 resolutions[]) {
    (void)counters; (void)resolutions;
    return lo_fmi3_no_such(instance, "fmi3SetShiftFraction", "Clock", valueReferences,
                           nValueReferences);
}

fmi3Status fmi3EvaluateDiscreteStates(fmi3Instance instance) {
    LO_FMI3_ENTER(instance);
    if (!lo_allowed(m, "fmi3EvaluateDiscreteStates", LO_IN(LO_MODE_EVENT))) return fmi3Error;
    return (fmi3Status)lo_refresh(m);
}

fmi3Status fmi3UpdateDiscreteStates(fmi3Instance instance, fmi3Boolean *discreteStatesNeedUpdate,
                                    fmi3Boolean *terminateSimulation,
                                    fmi3Boolean *nominalsOfContinuousStatesChanged,
                                    fmi3Boolean *valuesOfContinuousStatesChanged,
                                    fmi3Boolean *nextEventTimeDefined,
                                    fmi3Float64 *nextEventTime) {
    lo_status st;
    LO_FMI3_ENTER(instance);
    if (!lo_allowed(m, "fmi3UpdateDiscreteStates", LO_IN(LO_MODE_EVENT))) return fmi3Error;
    st = lo_refresh(m);
    if (discreteStatesNeedUpdate) *discreteStatesNeedUpdate = fmi3False;
    if (terminateSimulation) *terminateSimulation = fmi3False;
    if (nominalsOfContinuousStatesChanged) *nominalsOfContinuousStatesChanged = fmi3False;
    if (valuesOfContinuousStatesChanged) *valuesOfContinuousStatesChanged = fmi3False;
    if (nextEventTimeDefined) *nextEventTimeDefined = fmi3False;
    if (nextEventTime) *nextEventTime = 0.0;
    return (fmi3Status)st;
}

/* ------------------------------------------------------ model exchange */

fmi3Status fmi3EnterContinuousTimeMode(fmi3Instance instance) {
    LO_FMI3_ENTER(instance);
    if (!lo_allowed(m, "fmi3EnterContinuousTimeMode", LO_IN(LO_MODE_EVENT))) return fmi3Error;
    lo_set_mode(m, LO_MODE_CONTINUOUS);
    return fmi3OK;
}

fmi3Status fmi3CompletedIntegratorStep(fmi3Instance instance,
                                       fmi3Boolean noSetFMUStatePriorToCurrentPoint,
                                       fmi3Boolean *enterEventMode,
                                       fmi3Boolean *terminateSimulation) {
    LO_FMI3_ENTER(instance);
    (void)noSetFMUStatePriorToCurrentPoint;
    if (!lo_allowed(m, "fmi3CompletedIntegratorStep", LO_IN(LO_MODE_CONTINUOUS))) return fmi3Error;
    if (enterEventMode) *enterEventMode = fmi3False;
    if (terminateSimulation) *terminateSimulation = fmi3False;
    return fmi3OK;
}

fmi3Status fmi3SetTime(fmi3Instance instance, fmi3Float64 time) {
    LO_FMI3_ENTER(instance);
    if (!lo_allowed(m, "fmi3SetTime", LO_IN(LO_MODE_EVENT) | LO_IN(LO_MODE_CONTINUOUS)))
        return fmi3Error;
    if (m->time != time) {
        m->time = time;
        lo_mark_changed(m);
    }
    return fmi3OK;
}

fmi3Status fmi3SetContinuousStates(fmi3Instance instance, const fmi3Float64 continuousStates[],
                                   size_t nContinuousStates) {
    LO_FMI3_ENTER(instance);
    return (fmi3Status)lo_set_states(m, "fmi3SetContinuousStates", continuousStates,
                                     nContinuousStates);
}

fmi3Status fmi3GetContinuousStateDerivatives(fmi3Instance instance, fmi3Float64 derivatives[],
                                             size_t nContinuousStates) {
    LO_FMI3_ENTER(instance);
    return (fmi3Status)lo_get_vector(m, "fmi3GetContinuousStateDerivatives", derivatives,
                                     nContinuousStates, 1);
}

fmi3Status fmi3GetEventIndicators(fmi3Instance instance, fmi3Float64 eventIndicators[],
                                  size_t nEventIndicators) {
    LO_FMI3_ENTER(instance);
    return (fmi3Status)lo_get_vector(m, "fmi3GetEventIndicators", eventIndicators,
                                     nEventIndicators, 2);
}

fmi3Status fmi3GetContinuousStates(fmi3Instance instance, fmi3Float64 continuousStates[],
                                   size_t nContinuousStates) {
    LO_FMI3_ENTER(instance);
    return (fmi3Status)lo_get_vector(m, "fmi3GetContinuousStates", continuousStates,
                                     nContinuousStates, 0);
}

fmi3Status fmi3GetNominalsOfContinuousStates(fmi3Instance instance, fmi3Float64 nominals[],
                                             size_t nContinuousStates) {
    LO_FMI3_ENTER(instance);
    return (fmi3Status)lo_get_vector(m, "fmi3GetNominalsOfContinuousStates", nominals,
                                     nContinuousStates, 3);
}

fmi3Status fmi3GetNumberOfEventIndicators(fmi3Instance instance, size_t *nEventIndicators) {
    LO_FMI3_ENTER(instance);
    if (!nEventIndicators) return fmi3Error;
    *nEventIndicators = m->model->n_event_indicators;
    return fmi3OK;
}

fmi3Status fmi3GetNumberOfContinuousStates(fmi3Instance instance, size_t *nContinuousStates) {
    LO_FMI3_ENTER(instance);
    if (!nContinuousStates) return fmi3Error;
    *nContinuousStates = m->model->n_states;
    return fmi3OK;
}

/* ------------------------------- co-simulation, scheduled execution (none) */

static fmi3Status lo_fmi3_no_cs(fmi3Instance instance, const char *fname) {
    lo_instance *m = (lo_instance *)instance;
    if (m) lo_log(m, LO_ERROR, "%s: co-simulation and scheduled execution are not supported by "
                  "this model-exchange FMU", fname);
    return fmi3Error;
}

fmi3Status fmi3EnterStepMode(fmi3Instance instance) {
    return lo_fmi3_no_cs(instance, "fmi3EnterStepMode");
}

fmi3Status fmi3GetOutputDerivatives(fmi3Instance instance, const fmi3ValueReference valueReferences[],
                                    size_t nValueReferences, const fmi3Int32 orders[],
                                    fmi3Float64 values[], size_t nValues) {
    (void)valueReferences; (void)nValueReferences; (void)orders; (void)values; (void)nValues;
    return lo_fmi3_no_cs(instance, "fmi3GetOutputDerivatives");
}

fmi3Status fmi3DoStep(fmi3Instance instance, fmi3Float64 currentCommunicationPoint,
                      fmi3Float64 communicationStepSize, fmi3Boolean noSetFMUStatePriorToCurrentPoint,
                      fmi3Boolean *eventHandlingNeeded, fmi3Boolean *terminateSimulation,
                      fmi3Boolean *earlyReturn, fmi3Float64 *lastSuccessfulTime) {
    (void)currentCommunicationPoint; (void)communicationStepSize;
    (void)noSetFMUStatePriorToCurrentPoint; (void)eventHandlingNeeded; (void)terminateSimulation;
    (void)earlyReturn; (void)lastSuccessfulTime;
    return lo_fmi3_no_cs(instance, "fmi3DoStep");
}

fmi3Status fmi3ActivateModelPartition(fmi3Instance instance, fmi3ValueReference clockReference,
                                      fmi3Float64 activationTime) {
    (void)clockReference; (void)activationTime;
    return lo_fmi3_no_cs(instance, "fmi3ActivateModelPartition");
}

#endif /* LO_FMI3_ME_H */
