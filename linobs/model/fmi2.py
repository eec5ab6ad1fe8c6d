"""FMI 2.0 model exchange through ctypes."""

from __future__ import annotations

import ctypes
from collections.abc import Sequence
from ctypes import CFUNCTYPE, POINTER, Structure, byref, c_char_p, c_double, c_int, c_size_t, c_uint, c_void_p

import numpy as np

from linobs.errors import ModelError
from linobs.model.fmi import Binding, InstantiationRefused, record_log, uint_refs

# FMI 2.0 ------------------------------------------------------------------------
_fmi2Logger = CFUNCTYPE(None, c_void_p, c_char_p, c_int, c_char_p, c_char_p)
_fmi2Allocate = CFUNCTYPE(c_void_p, c_size_t, c_size_t)
_fmi2Free = CFUNCTYPE(None, c_void_p)
_fmi2StepFinished = CFUNCTYPE(None, c_void_p, c_int)


class _Fmi2Callbacks(Structure):
    _fields_ = [("logger", _fmi2Logger), ("allocateMemory", _fmi2Allocate),
                ("freeMemory", _fmi2Free), ("stepFinished", _fmi2StepFinished),
                ("componentEnvironment", c_void_p)]


class _Fmi2EventInfo(Structure):
    _fields_ = [("newDiscreteStatesNeeded", c_int), ("terminateSimulation", c_int),
                ("nominalsOfContinuousStatesChanged", c_int),
                ("valuesOfContinuousStatesChanged", c_int),
                ("nextEventTimeDefined", c_int), ("nextEventTime", c_double)]


def _fmi2_log(env: int | None, instance: bytes | None, status: int, category: bytes | None,
              message: bytes | None) -> None:
    record_log(env, status, category, message)


_FMI2_LOGGER = _fmi2Logger(_fmi2_log)


def _libc() -> ctypes.CDLL:
    import ctypes.util
    return ctypes.CDLL(ctypes.util.find_library("c"))


_LIBC = _libc()
_LIBC.calloc.argtypes = [c_size_t, c_size_t]
_LIBC.calloc.restype = c_void_p
_LIBC.free.argtypes = [c_void_p]
_LIBC.free.restype = None
_FMI2_CALLOC = _fmi2Allocate(lambda n, size: _LIBC.calloc(n, size))
_FMI2_FREE = _fmi2Free(lambda p: _LIBC.free(p))


def _install_fmi2_proxy(callbacks: _Fmi2Callbacks) -> None:
    """Route FMI 2.0 printf-style messages through fmpy's native formatting proxy.

    The proxy keeps one Python target for the whole process, so every linobs
    instance shares one dispatcher keyed by the component environment.
    """
    try:
        from fmpy.logging import addLoggerProxy  # native helper shipped with fmpy
        addLoggerProxy(byref(callbacks))
    except Exception:  # pragma: no cover - platform without the helper: raw format strings
        pass



FMI2_REQUIRED = (
    "fmi2Instantiate", "fmi2FreeInstance", "fmi2SetupExperiment", "fmi2EnterInitializationMode",
    "fmi2ExitInitializationMode", "fmi2Terminate", "fmi2Reset", "fmi2GetReal", "fmi2SetReal",
    "fmi2SetInteger", "fmi2SetBoolean", "fmi2EnterEventMode", "fmi2NewDiscreteStates",
    "fmi2EnterContinuousTimeMode", "fmi2SetTime", "fmi2SetContinuousStates", "fmi2GetDerivatives",
    "fmi2GetEventIndicators", "fmi2GetContinuousStates", "fmi2GetNominalsOfContinuousStates",
)
FMI2_DIRECTIONAL = ("fmi2GetDirectionalDerivative",)
FMI2_STATE = ("fmi2GetFMUstate", "fmi2SetFMUstate", "fmi2FreeFMUstate")



class Fmi2Binding(Binding):
    """FMI 2.0 model exchange."""

    major = 2
    required = FMI2_REQUIRED
    directional = FMI2_DIRECTIONAL
    state_functions = FMI2_STATE
    call_names = {"enter_event_mode": "fmi2EnterEventMode",
                  "enter_continuous_time_mode": "fmi2EnterContinuousTimeMode",
                  "reset": "fmi2Reset", "terminate": "fmi2Terminate",
                  "free": "fmi2FreeInstance", "set_time": "fmi2SetTime"}
    vector_names = {"states": "fmi2GetContinuousStates",
                    "nominals": "fmi2GetNominalsOfContinuousStates",
                    "indicators": "fmi2GetEventIndicators",
                    "set_states": "fmi2SetContinuousStates"}

    def instantiate(self, name: str, token: str, resource_uri: str, *, logging_on: bool) -> None:
        cb = _Fmi2Callbacks()
        cb.logger = _FMI2_LOGGER
        cb.allocateMemory = _FMI2_CALLOC
        cb.freeMemory = _FMI2_FREE
        cb.stepFinished = _fmi2StepFinished()
        cb.componentEnvironment = c_void_p(self._log_key)
        _install_fmi2_proxy(cb)
        self._callbacks = cb  # must outlive the instance
        L = self.lib
        self._fn("fmi2Instantiate", [c_char_p, c_int, c_char_p, c_char_p, c_void_p, c_int, c_int],
                 c_void_p)
        self._fn("fmi2FreeInstance", [c_void_p], None)
        self._fn("fmi2SetupExperiment", [c_void_p, c_int, c_double, c_double, c_int, c_double])
        for n in ("fmi2EnterInitializationMode", "fmi2ExitInitializationMode", "fmi2Terminate",
                  "fmi2Reset", "fmi2EnterEventMode", "fmi2EnterContinuousTimeMode"):
            self._fn(n, [c_void_p])
        self._fn("fmi2NewDiscreteStates", [c_void_p, POINTER(_Fmi2EventInfo)])
        self._fn("fmi2SetTime", [c_void_p, c_double])
        self._fn("fmi2GetReal", [c_void_p, POINTER(c_uint), c_size_t, POINTER(c_double)])
        self._fn("fmi2SetReal", [c_void_p, POINTER(c_uint), c_size_t, POINTER(c_double)])
        self._fn("fmi2SetInteger", [c_void_p, POINTER(c_uint), c_size_t, POINTER(c_int)])
        self._fn("fmi2SetBoolean", [c_void_p, POINTER(c_uint), c_size_t, POINTER(c_int)])
        for n in ("fmi2GetContinuousStates", "fmi2GetNominalsOfContinuousStates",
                  "fmi2GetDerivatives", "fmi2GetEventIndicators", "fmi2SetContinuousStates"):
            self._fn(n, [c_void_p, POINTER(c_double), c_size_t])
        if hasattr(L, "fmi2GetDirectionalDerivative"):
            self._fn("fmi2GetDirectionalDerivative",
                     [c_void_p, POINTER(c_uint), c_size_t, POINTER(c_uint), c_size_t,
                      POINTER(c_double), POINTER(c_double)])
        if all(hasattr(L, n) for n in FMI2_STATE):
            self._fn("fmi2GetFMUstate", [c_void_p, POINTER(c_void_p)])
            self._fn("fmi2SetFMUstate", [c_void_p, c_void_p])
            self._fn("fmi2FreeFMUstate", [c_void_p, POINTER(c_void_p)])
        inst = L.fmi2Instantiate(name.encode(), 0, token.encode(), resource_uri.encode(),
                                 byref(cb), 0, 1 if logging_on else 0)
        if not inst:
            raise InstantiationRefused(self.recent_log(5))
        self.instance = inst

    def initialize(self, start_time: float, tolerance: float | None = None) -> None:
        L, c = self.lib, self.instance
        self.check(L.fmi2SetupExperiment(c, tolerance is not None, tolerance or 0.0,
                                         start_time, 0, 0.0), "fmi2SetupExperiment")
        self.check(L.fmi2EnterInitializationMode(c), "fmi2EnterInitializationMode")

    def exit_initialization(self) -> None:
        self.check(self.lib.fmi2ExitInitializationMode(self.instance), "fmi2ExitInitializationMode")
        self.event_iteration()
        self.enter_continuous_time_mode()

    def event_iteration(self, max_iterations: int = 100) -> bool:
        """Iterate discrete states to a fixed point; True when continuous states were changed."""
        info = _Fmi2EventInfo()
        changed = False
        for _ in range(max_iterations):
            info.newDiscreteStatesNeeded = 1
            self.check(self.lib.fmi2NewDiscreteStates(self.instance, byref(info)),
                       "fmi2NewDiscreteStates")
            changed = changed or bool(info.valuesOfContinuousStatesChanged)
            if info.terminateSimulation:
                raise ModelError(f"{self.model_name}: the FMU asked to terminate during event "
                                 f"iteration; FMU log: {self.recent_log()}")
            if not info.newDiscreteStatesNeeded:
                return changed
        raise ModelError(f"{self.model_name}: event iteration did not settle in {max_iterations} steps")

    def set_real(self, refs: Sequence[int], values: Sequence[float]) -> None:
        n = len(refs)
        self.check(self.lib.fmi2SetReal(self.instance, uint_refs(refs), n,
                                        (c_double * n)(*values)), "fmi2SetReal")

    def get_real(self, refs: Sequence[int]) -> np.ndarray:
        n = len(refs)
        out = np.zeros(n)
        self.check(self.lib.fmi2GetReal(self.instance, uint_refs(refs), n,
                                        out.ctypes.data_as(POINTER(c_double))), "fmi2GetReal")
        return out

    def set_integer(self, refs: Sequence[int], values: Sequence[int]) -> None:
        n = len(refs)
        self.check(self.lib.fmi2SetInteger(self.instance, uint_refs(refs), n,
                                           (c_int * n)(*values)), "fmi2SetInteger")

    def set_boolean(self, refs: Sequence[int], values: Sequence[bool]) -> None:
        n = len(refs)
        self.check(self.lib.fmi2SetBoolean(self.instance, uint_refs(refs), n,
                                           (c_int * n)(*[1 if v else 0 for v in values])),
                   "fmi2SetBoolean")

    def directional_derivative(self, unknowns: ctypes.Array, knowns: ctypes.Array,
                               seed: np.ndarray, out: np.ndarray) -> int:
        return self.lib.fmi2GetDirectionalDerivative(
            self.instance, unknowns, len(unknowns), knowns, len(knowns),
            seed.ctypes.data_as(POINTER(c_double)), out.ctypes.data_as(POINTER(c_double)))

    def get_fmu_state(self) -> c_void_p:
        state = c_void_p()
        self.check(self.lib.fmi2GetFMUstate(self.instance, byref(state)), "fmi2GetFMUstate")
        return state

    def set_fmu_state(self, state: c_void_p) -> None:
        self.check(self.lib.fmi2SetFMUstate(self.instance, state), "fmi2SetFMUstate")

    def free_fmu_state(self, state: c_void_p) -> None:
        self.lib.fmi2FreeFMUstate(self.instance, byref(state))

    # hot-path function names
    hot_names = ("fmi2SetContinuousStates", "fmi2SetReal", "fmi2GetDerivatives", "fmi2GetReal",
                 "fmi2GetEventIndicators")
