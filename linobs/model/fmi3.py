"""FMI 3.0 model exchange through ctypes."""

from __future__ import annotations

import ctypes
from collections.abc import Sequence
from ctypes import CFUNCTYPE, POINTER, byref, c_bool, c_char_p, c_double, c_int, c_int32, c_size_t, c_uint32, c_void_p

import numpy as np

from linobs.errors import ModelError
from linobs.model.fmi import Binding, InstantiationRefused, record_log

# FMI 3.0 ------------------------------------------------------------------------
_fmi3LogMessage = CFUNCTYPE(None, c_void_p, c_int, c_char_p, c_char_p)


def _fmi3_log(env: int | None, status: int, category: bytes | None, message: bytes | None) -> None:
    record_log(env, status, category, message)


_FMI3_LOGGER = _fmi3LogMessage(_fmi3_log)


FMI3_REQUIRED = (
    "fmi3InstantiateModelExchange", "fmi3FreeInstance", "fmi3EnterInitializationMode",
    "fmi3ExitInitializationMode", "fmi3Terminate", "fmi3Reset", "fmi3GetFloat64", "fmi3SetFloat64",
    "fmi3SetInt32", "fmi3SetBoolean", "fmi3EnterEventMode", "fmi3UpdateDiscreteStates",
    "fmi3EnterContinuousTimeMode", "fmi3SetTime", "fmi3SetContinuousStates",
    "fmi3GetContinuousStateDerivatives", "fmi3GetEventIndicators", "fmi3GetContinuousStates",
    "fmi3GetNominalsOfContinuousStates",
)
FMI3_DIRECTIONAL = ("fmi3GetDirectionalDerivative",)
FMI3_STATE = ("fmi3GetFMUState", "fmi3SetFMUState", "fmi3FreeFMUState")




class Fmi3Binding(Binding):
    """FMI 3.0 model exchange."""

    major = 3
    required = FMI3_REQUIRED
    directional = FMI3_DIRECTIONAL
    state_functions = FMI3_STATE
    call_names = {"enter_event_mode": "fmi3EnterEventMode",
                  "enter_continuous_time_mode": "fmi3EnterContinuousTimeMode",
                  "reset": "fmi3Reset", "terminate": "fmi3Terminate",
                  "free": "fmi3FreeInstance", "set_time": "fmi3SetTime"}
    vector_names = {"states": "fmi3GetContinuousStates",
                    "nominals": "fmi3GetNominalsOfContinuousStates",
                    "indicators": "fmi3GetEventIndicators",
                    "set_states": "fmi3SetContinuousStates"}

    def instantiate(self, name: str, token: str, resource_uri: str, *, logging_on: bool) -> None:
        L = self.lib
        self._fn("fmi3InstantiateModelExchange",
                 [c_char_p, c_char_p, c_char_p, c_bool, c_bool, c_void_p, _fmi3LogMessage], c_void_p)
        self._fn("fmi3FreeInstance", [c_void_p], None)
        self._fn("fmi3EnterInitializationMode", [c_void_p, c_bool, c_double, c_double, c_bool, c_double])
        for n in ("fmi3ExitInitializationMode", "fmi3Terminate", "fmi3Reset", "fmi3EnterEventMode",
                  "fmi3EnterContinuousTimeMode"):
            self._fn(n, [c_void_p])
        self._fn("fmi3UpdateDiscreteStates", [c_void_p, POINTER(c_bool), POINTER(c_bool),
                                              POINTER(c_bool), POINTER(c_bool), POINTER(c_bool),
                                              POINTER(c_double)])
        self._fn("fmi3SetTime", [c_void_p, c_double])
        self._fn("fmi3GetFloat64", [c_void_p, POINTER(c_uint32), c_size_t, POINTER(c_double), c_size_t])
        self._fn("fmi3SetFloat64", [c_void_p, POINTER(c_uint32), c_size_t, POINTER(c_double), c_size_t])
        self._fn("fmi3SetInt32", [c_void_p, POINTER(c_uint32), c_size_t, POINTER(c_int32), c_size_t])
        self._fn("fmi3SetBoolean", [c_void_p, POINTER(c_uint32), c_size_t, POINTER(c_bool), c_size_t])
        for n in ("fmi3GetContinuousStates", "fmi3GetNominalsOfContinuousStates",
                  "fmi3GetContinuousStateDerivatives", "fmi3GetEventIndicators",
                  "fmi3SetContinuousStates"):
            self._fn(n, [c_void_p, POINTER(c_double), c_size_t])
        if hasattr(L, "fmi3GetDirectionalDerivative"):
            self._fn("fmi3GetDirectionalDerivative",
                     [c_void_p, POINTER(c_uint32), c_size_t, POINTER(c_uint32), c_size_t,
                      POINTER(c_double), c_size_t, POINTER(c_double), c_size_t])
        if all(hasattr(L, n) for n in FMI3_STATE):
            self._fn("fmi3GetFMUState", [c_void_p, POINTER(c_void_p)])
            self._fn("fmi3SetFMUState", [c_void_p, c_void_p])
            self._fn("fmi3FreeFMUState", [c_void_p, POINTER(c_void_p)])
        inst = L.fmi3InstantiateModelExchange(name.encode(), token.encode(), resource_uri.encode(),
                                              False, bool(logging_on), c_void_p(self._log_key),
                                              _FMI3_LOGGER)
        if not inst:
            raise InstantiationRefused(self.recent_log(5))
        self.instance = inst
        self._start_time = 0.0

    def initialize(self, start_time: float, tolerance: float | None = None) -> None:
        self.check(self.lib.fmi3EnterInitializationMode(
            self.instance, tolerance is not None, tolerance or 0.0, start_time, False, 0.0),
            "fmi3EnterInitializationMode")

    def exit_initialization(self) -> None:
        self.check(self.lib.fmi3ExitInitializationMode(self.instance), "fmi3ExitInitializationMode")
        self.event_iteration()
        self.enter_continuous_time_mode()

    def event_iteration(self, max_iterations: int = 100) -> bool:
        need, term, nom, vals, tdef = (c_bool() for _ in range(5))
        tnext = c_double()
        changed = False
        for _ in range(max_iterations):
            self.check(self.lib.fmi3UpdateDiscreteStates(
                self.instance, byref(need), byref(term), byref(nom), byref(vals), byref(tdef),
                byref(tnext)), "fmi3UpdateDiscreteStates")
            changed = changed or bool(vals.value)
            if term.value:
                raise ModelError(f"{self.model_name}: the FMU asked to terminate during event "
                                 f"iteration; FMU log: {self.recent_log()}")
            if not need.value:
                return changed
        raise ModelError(f"{self.model_name}: event iteration did not settle in {max_iterations} steps")

    def set_real(self, refs: Sequence[int], values: Sequence[float]) -> None:
        n = len(refs)
        self.check(self.lib.fmi3SetFloat64(self.instance, (c_uint32 * n)(*refs), n,
                                           (c_double * n)(*values), n), "fmi3SetFloat64")

    def get_real(self, refs: Sequence[int]) -> np.ndarray:
        n = len(refs)
        out = np.zeros(n)
        self.check(self.lib.fmi3GetFloat64(self.instance, (c_uint32 * n)(*refs), n,
                                           out.ctypes.data_as(POINTER(c_double)), n), "fmi3GetFloat64")
        return out

    def set_integer(self, refs: Sequence[int], values: Sequence[int]) -> None:
        n = len(refs)
        self.check(self.lib.fmi3SetInt32(self.instance, (c_uint32 * n)(*refs), n,
                                         (c_int32 * n)(*values), n), "fmi3SetInt32")

    def set_boolean(self, refs: Sequence[int], values: Sequence[bool]) -> None:
        n = len(refs)
        self.check(self.lib.fmi3SetBoolean(self.instance, (c_uint32 * n)(*refs), n,
                                           (c_bool * n)(*[bool(v) for v in values]), n),
                   "fmi3SetBoolean")

    def directional_derivative(self, unknowns: ctypes.Array, knowns: ctypes.Array,
                               seed: np.ndarray, out: np.ndarray) -> int:
        return self.lib.fmi3GetDirectionalDerivative(
            self.instance, unknowns, len(unknowns), knowns, len(knowns),
            seed.ctypes.data_as(POINTER(c_double)), len(seed),
            out.ctypes.data_as(POINTER(c_double)), len(out))

    def get_fmu_state(self) -> c_void_p:
        state = c_void_p()
        self.check(self.lib.fmi3GetFMUState(self.instance, byref(state)), "fmi3GetFMUState")
        return state

    def set_fmu_state(self, state: c_void_p) -> None:
        self.check(self.lib.fmi3SetFMUState(self.instance, state), "fmi3SetFMUState")

    def free_fmu_state(self, state: c_void_p) -> None:
        self.lib.fmi3FreeFMUState(self.instance, byref(state))

    hot_names = ("fmi3SetContinuousStates", "fmi3SetFloat64", "fmi3GetContinuousStateDerivatives",
                 "fmi3GetFloat64", "fmi3GetEventIndicators")
