"""Thin ctypes bindings to FMI model-exchange binaries: what FMI 2.0 and 3.0 share.

linobs loads the FMU's shared library itself (fmpy is used for reading the
model description, validation and simulation).  The bindings here are the
*cold* path: instantiation, initialization, event iteration, parameter
setting, directional derivatives and FMU state.  The hot path
(:mod:`linobs.model.hotpath`) takes the raw function addresses from here;
:mod:`linobs.model.fmi2` and :mod:`linobs.model.fmi3` hold the two versions.

Log messages from the FMU are captured per instance (a bounded list) so that
errors can quote the FMU's own words.
"""

from __future__ import annotations

import ctypes
import itertools
import sys
import threading
from collections import deque
from collections.abc import Sequence
from ctypes import POINTER, c_double, c_int, c_uint, c_void_p

import numpy as np

from linobs.errors import InstantiationError, ModelError

class InstantiationRefused(InstantiationError):
    """The FMU's instantiate function returned NULL; the message is its log."""


STATUS_NAMES = {0: "OK", 1: "Warning", 2: "Discard", 3: "Error", 4: "Fatal", 5: "Pending"}

# --------------------------------------------------------------------------- logging
_LOG_SINKS: dict[int, deque[str]] = {}
_LOG_LOCK = threading.Lock()
_LOG_KEYS = itertools.count(1)


def _sink_for(env: int | None) -> deque[str] | None:
    if env is None:
        return None
    return _LOG_SINKS.get(int(env))


def record_log(env: int | None, status: int, category: bytes | None, message: bytes | None) -> None:
    text = (message or b"").decode("utf-8", "replace").strip()
    cat = (category or b"").decode("utf-8", "replace")
    line = f"[{STATUS_NAMES.get(int(status), status)}] {text}" + (f" ({cat})" if cat else "")
    sink = _sink_for(env)
    if sink is not None:
        sink.append(line)
    elif int(status) >= 1:  # a message from an instance that is not ours (e.g. fmpy's own)
        print(line, file=sys.stderr)


def missing_functions(library: ctypes.CDLL, names: Sequence[str]) -> list[str]:
    """Names among ``names`` that the shared library does not export."""
    return [n for n in names if not hasattr(library, n)]


def _uint_array(values: Sequence[int]) -> ctypes.Array:
    return (c_uint * len(values))(*values)


class Binding:
    """An FMI model-exchange instance driven through ctypes (base for 2.0 / 3.0)."""

    major: int = 0
    required: tuple[str, ...] = ()
    directional: tuple[str, ...] = ()
    state_functions: tuple[str, ...] = ()

    def __init__(self, library: ctypes.CDLL, *, model_name: str, log_limit: int = 200) -> None:
        self.lib = library
        self.model_name = model_name
        self.instance: int | None = None
        self.log: deque[str] = deque(maxlen=log_limit)
        self._log_key = next(_LOG_KEYS)
        with _LOG_LOCK:
            _LOG_SINKS[self._log_key] = self.log
        self._keep: list[object] = []

    # ------------------------------------------------------------------ helpers
    def _fn(self, name: str, argtypes: list[object], restype: object = c_int) -> ctypes._CFuncPtr:
        fn = getattr(self.lib, name)
        fn.argtypes = argtypes
        fn.restype = restype
        return fn

    def address(self, name: str) -> int:
        """Raw address of an exported function (for the hot path)."""
        return ctypes.cast(getattr(self.lib, name), c_void_p).value or 0

    def recent_log(self, n: int = 3) -> str:
        lines = list(self.log)[-n:]
        return " | ".join(lines)

    def check(self, status: int, call: str) -> int:
        """Raise for Error/Fatal (and Discard); pass OK and Warning."""
        if status >= 2:
            log = self.recent_log()
            raise ModelError(
                f"{self.model_name}: {call} returned {STATUS_NAMES.get(status, status)}"
                + (f"; FMU log: {log}" if log else ""))
        return status

    def release_log(self) -> None:
        with _LOG_LOCK:
            _LOG_SINKS.pop(self._log_key, None)

    # calls with the same signature in both versions
    call_names: dict[str, str] = {}

    def _call(self, op: str, *args: object) -> int:
        name = self.call_names[op]
        return self.check(getattr(self.lib, name)(self.instance, *args), name)

    def enter_event_mode(self) -> None:
        self._call("enter_event_mode")

    def enter_continuous_time_mode(self) -> None:
        self._call("enter_continuous_time_mode")

    def reset(self) -> None:
        self._call("reset")

    def terminate(self) -> None:
        getattr(self.lib, self.call_names["terminate"])(self.instance)

    def free(self) -> None:
        if self.instance:
            getattr(self.lib, self.call_names["free"])(self.instance)
            self.instance = None
        self.release_log()

    def set_time(self, t: float) -> None:
        self._call("set_time", float(t))

    # vector calls shared by both versions (same signature: instance, double*, size_t)
    vector_names: dict[str, str] = {}

    def _vector(self, op: str, n: int) -> np.ndarray:
        name = self.vector_names[op]
        out = np.zeros(n)
        if n:
            self.check(getattr(self.lib, name)(self.instance, out.ctypes.data_as(POINTER(c_double)), n),
                       name)
        return out

    def get_continuous_states(self, n: int) -> np.ndarray:
        return self._vector("states", n)

    def get_nominals(self, n: int) -> np.ndarray:
        return self._vector("nominals", n)

    def get_event_indicators(self, n: int) -> np.ndarray:
        return self._vector("indicators", n)

    def set_continuous_states(self, x: np.ndarray) -> None:
        name = self.vector_names["set_states"]
        x = np.ascontiguousarray(x, dtype=float)
        self.check(getattr(self.lib, name)(self.instance, x.ctypes.data_as(POINTER(c_double)), len(x)),
                   name)

    # -------------------------------------------------------------- interface
    def instantiate(self, name: str, token: str, resource_uri: str, *, logging_on: bool) -> None:
        raise NotImplementedError

    def initialize(self, start_time: float, tolerance: float | None = None) -> None:
        raise NotImplementedError


def uint_refs(refs: Sequence[int]) -> ctypes.Array:
    """A C array of value references (FMI 2 ``fmi2ValueReference`` / FMI 3 ``fmi3ValueReference``)."""
    return _uint_array(list(refs))




__all__ = ["Binding", "InstantiationRefused", "STATUS_NAMES", "missing_functions", "record_log",
           "uint_refs"]
