"""A two-state linear test plant whose process noise enters every state (as inputs w1, w2).

Built in the tests with the project's C framework (linobs/model/csupport):
der(x1) = -a1 x1 + w1, der(x2) = k x1 - a2 x2 + w2, y = x2, with a1 = 1, a2 = 0.5, k = 1.
Held white inputs w realize a discrete process noise Γ w exactly (Γ: the zero-order-hold input
matrix), so a Kalman filter designed with Q = σ_w² Γ Γᵀ is exactly tuned.
"""

from __future__ import annotations

from pathlib import Path

from linobs.model.build import build_fmu

__all__ = ["NOISY_PAIR_A", "build_noisy_pair"]

NOISY_PAIR_A = ((-1.0, 0.0), (1.0, -0.5))  # the equations above

NOISY_PAIR_XML = """<?xml version="1.0" encoding="UTF-8"?>
<fmiModelDescription fmiVersion="2.0" modelName="noisy_pair"
  guid="{5b0e2f3c-9a41-4c77-8d2e-1f6a3b9c0d24}"
  description="Test plant: der(x1) = -a1 x1 + w1, der(x2) = k x1 - a2 x2 + w2, y = x2 (w1, w2: noise inputs)."
  version="1.0" generationTool="linobs test" variableNamingConvention="flat"
  numberOfEventIndicators="0">
  <ModelExchange modelIdentifier="noisy_pair" needsExecutionTool="false"
    completedIntegratorStepNotNeeded="true" canBeInstantiatedOnlyOncePerProcess="false"
    canNotUseMemoryManagementFunctions="false" canGetAndSetFMUstate="true"
    canSerializeFMUstate="true" providesDirectionalDerivative="false">
    <SourceFiles><File name="model.c"/></SourceFiles>
  </ModelExchange>
  <LogCategories>
    <Category name="logStatusError"/><Category name="logStatusWarning"/><Category name="logEvents"/>
  </LogCategories>
  <DefaultExperiment startTime="0" stopTime="10"/>
  <ModelVariables>
    <ScalarVariable name="x1" valueReference="0" causality="local" variability="continuous" initial="exact"><Real start="0"/></ScalarVariable>
    <ScalarVariable name="der(x1)" valueReference="1" causality="local" variability="continuous" initial="calculated"><Real derivative="1"/></ScalarVariable>
    <ScalarVariable name="x2" valueReference="2" causality="local" variability="continuous" initial="exact"><Real start="0"/></ScalarVariable>
    <ScalarVariable name="der(x2)" valueReference="3" causality="local" variability="continuous" initial="calculated"><Real derivative="3"/></ScalarVariable>
    <ScalarVariable name="w1" valueReference="4" causality="input" variability="continuous"><Real start="0"/></ScalarVariable>
    <ScalarVariable name="w2" valueReference="5" causality="input" variability="continuous"><Real start="0"/></ScalarVariable>
    <ScalarVariable name="y" valueReference="6" causality="output" variability="continuous" initial="calculated"><Real/></ScalarVariable>
    <ScalarVariable name="a1" valueReference="7" causality="parameter" variability="tunable" initial="exact"><Real start="1"/></ScalarVariable>
    <ScalarVariable name="a2" valueReference="8" causality="parameter" variability="tunable" initial="exact"><Real start="0.5"/></ScalarVariable>
    <ScalarVariable name="k" valueReference="9" causality="parameter" variability="tunable" initial="exact"><Real start="1"/></ScalarVariable>
  </ModelVariables>
  <ModelStructure>
    <Outputs><Unknown index="7" dependencies="3" dependenciesKind="dependent"/></Outputs>
    <Derivatives>
      <Unknown index="2" dependencies="1 5" dependenciesKind="dependent dependent"/>
      <Unknown index="4" dependencies="1 3 6" dependenciesKind="dependent dependent dependent"/>
    </Derivatives>
    <InitialUnknowns><Unknown index="2"/><Unknown index="4"/><Unknown index="7"/></InitialUnknowns>
  </ModelStructure>
</fmiModelDescription>
"""

NOISY_PAIR_C = r"""/* Test plant for linobs: two linear states driven by two noise inputs (FMI 2.0 ME). */
#include "lo_model.h"

enum { VR_X1, VR_DER_X1, VR_X2, VR_DER_X2, VR_W1, VR_W2, VR_Y, VR_A1, VR_A2, VR_K, N_VARS };

static const lo_variable VARS[N_VARS] = {
    {"x1", LO_STATE, 0.0, 1.0}, {"der(x1)", LO_DERIVATIVE, 0, 1},
    {"x2", LO_STATE, 0.0, 1.0}, {"der(x2)", LO_DERIVATIVE, 0, 1},
    {"w1", LO_INPUT, 0.0, 1.0}, {"w2", LO_INPUT, 0.0, 1.0}, {"y", LO_OUTPUT, 0, 1.0},
    {"a1", LO_TUNABLE_PARAMETER, 1.0, 1}, {"a2", LO_TUNABLE_PARAMETER, 0.5, 1},
    {"k", LO_TUNABLE_PARAMETER, 1.0, 1},
};

static const unsigned STATES[2] = {VR_X1, VR_X2};
static const unsigned DERIVATIVES[2] = {VR_DER_X1, VR_DER_X2};

static lo_status evaluate(lo_instance *m) {
    double *v = m->v;
    v[VR_DER_X1] = -v[VR_A1] * v[VR_X1] + v[VR_W1];
    v[VR_DER_X2] = v[VR_K] * v[VR_X1] - v[VR_A2] * v[VR_X2] + v[VR_W2];
    v[VR_Y] = v[VR_X2];
    return LO_OK;
}

static const lo_model LO_PLANT = {
    "noisy_pair", "{5b0e2f3c-9a41-4c77-8d2e-1f6a3b9c0d24}",
    N_VARS, VARS, 2, STATES, DERIVATIVES, 0, NULL, 0, NULL, evaluate, NULL,
};

#include "lo_fmi2_me.h"
"""


def build_noisy_pair(folder: Path) -> Path:
    """Write the sources into ``folder`` and build ``folder/noisy_pair.fmu``."""
    src = Path(folder) / "noisy_pair"
    (src / "sources").mkdir(parents=True, exist_ok=True)
    (src / "modelDescription.xml").write_text(NOISY_PAIR_XML, encoding="utf-8")
    (src / "sources" / "model.c").write_text(NOISY_PAIR_C, encoding="utf-8")
    return build_fmu(src, Path(folder) / "noisy_pair.fmu")
