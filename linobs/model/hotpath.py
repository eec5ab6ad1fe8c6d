"""The evaluation hot path: (x, u) -> (dx, y) with as little Python as possible.

A tiny C helper (``hotpath.c``, compiled once with the system C compiler and
cached) calls the FMU's own functions through their addresses: set states,
set inputs, get derivatives, get outputs, check finiteness.  Python keeps the
buffers (preallocated numpy arrays) and makes one ctypes call per point, or
one per batch of points.  Without a C compiler a pure-ctypes loop with the
same contract is used (slower, same results).
"""

from __future__ import annotations

import ctypes
import hashlib
import logging
import os
import subprocess
import tempfile
from ctypes import Structure, c_longlong, c_size_t, c_uint, c_void_p
from pathlib import Path

import numpy as np

from linobs.model.fmi import Binding

log = logging.getLogger(__name__)

_SOURCE = Path(__file__).with_name("hotpath.c")
_LIB: ctypes.CDLL | None = None
_LIB_TRIED = False

# which call failed, as reported by the helper
FAILED_CALL = {1: "set continuous states", 2: "set inputs", 3: "get derivatives",
               4: "get outputs", 5: "get event indicators", 6: "non-finite result"}


class EvaluatorStruct(Structure):
    """Mirror of ``lo_evaluator`` in hotpath.c."""

    _fields_ = ([(n, c_void_p) for n in ("instance", "set_states", "set_real", "get_derivatives",
                                        "get_real", "get_indicators", "input_refs", "output_refs")]
                + [(n, c_longlong) for n in ("fmi_major", "nx", "nu", "ny", "nz", "failed_call",
                                             "failed_status", "failed_point")]
                + [(n, c_void_p) for n in ("x", "u", "dx", "y", "z")])


def _compile(target: Path) -> None:
    from linobs.model.build import find_c_compiler

    cc = find_c_compiler()
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=".hotpath-", suffix=".so", dir=target.parent)
    os.close(fd)
    try:
        subprocess.run([cc, "-shared", "-fPIC", "-O2", "-std=c99", "-o", tmp, str(_SOURCE), "-lm"],
                       check=True, capture_output=True, text=True, timeout=120)
        os.replace(tmp, target)
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)


def hotpath_library() -> ctypes.CDLL | None:
    """The compiled helper, building it on first use; None when it cannot be built."""
    global _LIB, _LIB_TRIED
    if _LIB is not None or _LIB_TRIED:
        return _LIB
    _LIB_TRIED = True
    if os.environ.get("LINOBS_PURE_PYTHON_HOTPATH"):
        return None
    from linobs.model.bundled import cache_dir

    digest = hashlib.sha256(_SOURCE.read_bytes()).hexdigest()[:12]
    import sysconfig
    tag = (sysconfig.get_platform() or "unknown").replace("-", "_")
    target = cache_dir() / "hotpath" / f"lo_hotpath-{digest}-{tag}.so"
    try:
        if not target.exists():
            _compile(target)
        lib = ctypes.CDLL(str(target))
    except Exception as exc:  # no compiler, compile failure: fall back, say so once
        log.warning("linobs: evaluation helper not built (%s); using the slower pure-ctypes path", exc)
        return None
    lib.lo_evaluate_buffers.argtypes = [c_void_p]
    lib.lo_evaluate_buffers.restype = c_longlong
    lib.lo_evaluate.argtypes = [c_void_p, c_longlong, c_void_p, c_void_p, c_void_p, c_void_p, c_void_p]
    lib.lo_evaluate.restype = c_longlong
    _LIB = lib
    return lib


class Evaluator:
    """Preallocated buffers and the fastest available call sequence for one instance."""

    def __init__(self, binding: Binding, nx: int, input_refs: list[int], output_refs: list[int],
                 nz: int) -> None:
        self.binding = binding
        self.nx, self.nu, self.ny, self.nz = nx, len(input_refs), len(output_refs), nz
        self.x = np.zeros(nx)
        self.u = np.zeros(self.nu)
        self.dx = np.zeros(nx)
        self.y = np.zeros(self.ny)
        self.z = np.zeros(nz)
        self._in_refs = (c_uint * max(self.nu, 1))(*input_refs)
        self._out_refs = (c_uint * max(self.ny, 1))(*output_refs)
        names = binding.hot_names
        s = EvaluatorStruct()
        s.instance = binding.instance
        s.set_states, s.set_real, s.get_derivatives, s.get_real, s.get_indicators = (
            binding.address(n) for n in names)
        s.input_refs = ctypes.addressof(self._in_refs)
        s.output_refs = ctypes.addressof(self._out_refs)
        s.fmi_major = binding.major
        s.nx, s.nu, s.ny, s.nz = nx, self.nu, self.ny, nz
        s.x, s.u, s.dx, s.y, s.z = (a.ctypes.data for a in (self.x, self.u, self.dx, self.y, self.z))
        self.struct = s
        self.ref = ctypes.byref(s)
        lib = hotpath_library()
        self.compiled = lib is not None
        if lib is not None:
            self.one = lib.lo_evaluate_buffers
            self._batch = lib.lo_evaluate
        else:
            self.one = self._python_one
            self._batch = None
            self._prepare_python()

    # ------------------------------------------------------------ pure ctypes
    def _prepare_python(self) -> None:
        lib = self.binding.lib
        raw = [ctypes.CFUNCTYPE(ctypes.c_int)(
            ctypes.cast(getattr(lib, n), c_void_p).value) for n in self.binding.hot_names]
        set_x, set_r, get_dx, get_r, get_z = raw
        c = c_void_p(self.binding.instance)
        px, pu, pdx, py, pz = (c_void_p(a.ctypes.data) for a in (self.x, self.u, self.dx, self.y, self.z))
        nx, nu, ny, nz = (c_size_t(n) for n in (self.nx, self.nu, self.ny, self.nz))
        three = self.binding.major == 3
        ins, outs = self._in_refs, self._out_refs
        steps: list[tuple[int, object]] = []
        if self.nx:
            steps.append((1, lambda: set_x(c, px, nx)))
        if self.nu:
            steps.append((2, (lambda: set_r(c, ins, nu, pu, nu)) if three
                          else (lambda: set_r(c, ins, nu, pu))))
        if self.nx:
            steps.append((3, lambda: get_dx(c, pdx, nx)))
        if self.ny:
            steps.append((4, (lambda: get_r(c, outs, ny, py, ny)) if three
                          else (lambda: get_r(c, outs, ny, py))))
        self._steps = steps
        self._steps_z = steps + ([(5, lambda: get_z(c, pz, nz))] if self.nz else [])

    def _python_one(self, _ref: object = None, *, indicators: bool = False) -> int:
        """Same contract as ``lo_evaluate_buffers``: 0, or the code of the failing call."""
        s = self.struct
        s.failed_call = s.failed_status = 0
        for code, call in (self._steps_z if indicators else self._steps):
            status = call()  # type: ignore[operator]
            if status:
                s.failed_call, s.failed_status = code, status
                return code
        if not (np.isfinite(self.dx).all() and np.isfinite(self.y).all()):
            s.failed_call = 6
            return 6
        return 0

    # ---------------------------------------------------------------- batches
    def evaluate_batch(self, X: np.ndarray, U: np.ndarray, *, indicators: bool = False
                       ) -> tuple[np.ndarray, np.ndarray, np.ndarray | None, int]:
        """Evaluate rows of X, U; returns (DX, Y, Z or None, number evaluated before a failure)."""
        X = np.ascontiguousarray(X, dtype=float)
        U = np.ascontiguousarray(U, dtype=float)
        k = X.shape[0]
        DX = np.empty((k, self.nx))
        Y = np.empty((k, self.ny))
        Z = np.empty((k, self.nz)) if indicators else None
        if self._batch is not None:
            done = int(self._batch(self.ref, k, X.ctypes.data, U.ctypes.data, DX.ctypes.data,
                                   Y.ctypes.data, None if Z is None else Z.ctypes.data))
            return DX, Y, Z, done
        for i in range(k):
            self.x[:] = X[i]
            self.u[:] = U[i]
            if self._python_one(indicators=indicators):
                self.struct.failed_point = i
                return DX, Y, Z, i
            DX[i] = self.dx
            Y[i] = self.y
            if Z is not None:
                Z[i] = self.z
        return DX, Y, Z, k

    def failure(self) -> tuple[str, int]:
        """(which call failed, FMI status) of the last failed evaluation."""
        s = self.struct
        return FAILED_CALL.get(int(s.failed_call), "unknown call"), int(s.failed_status)


__all__ = ["Evaluator", "hotpath_library", "FAILED_CALL"]
