"""A model-exchange instance of one FMU, owned by one :class:`Model` object.

The :class:`Model` brings the instance to continuous-time mode, evaluates
``(x, u) -> (dx, y)`` through the hot path, sets parameters (re-initializing
only when a ``fixed`` parameter really changes) and frees everything on
:meth:`Model.close` (or at garbage collection).
"""

from __future__ import annotations

import ctypes
import math
import shutil
import weakref
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from linobs.errors import EvaluationError, InstantiationError, ModelError, UsageError
from linobs.model.catalogue import Capabilities, Catalogue, Variable
from linobs.model.fmi import STATUS_NAMES, Binding, uint_refs
from linobs.model.hotpath import Evaluator

if TYPE_CHECKING:  # pragma: no cover
    from linobs.linear.linear_model import LinearModel


def _cleanup(binding: Binding, extract_dir: Path | None) -> None:
    try:
        binding.free()
    finally:
        if extract_dir is not None:
            shutil.rmtree(extract_dir, ignore_errors=True)


class Model:
    """One FMU instance in continuous-time mode, ready to evaluate and linearize.

    Create it with :func:`linobs.load_model`.  The instance belongs to this
    object only; call :meth:`close` (or use ``with``) to free it.

    Attributes
    ----------
    catalogue : Catalogue
        Variables by role (states, derivatives, inputs, outputs, parameters).
    capabilities : Capabilities
        FMI version, directional derivatives, FMU state, event indicators.
    evaluations : int
        Number of model evaluations (one per point, batches count each point).
    initializations : int
        How many times the instance was (re-)initialized.
    """

    def __init__(self, *, path: Path, sha256: str, description: Any, catalogue: Catalogue,
                 capabilities: Capabilities, binding_factory: Any, extract_dir: Path,
                 resource_uri: str, instance_name: str, logging_on: bool = False,
                 start_time: float = 0.0) -> None:
        self.path = path
        self.sha256 = sha256
        self.description = description
        self.catalogue = catalogue
        self.capabilities = capabilities
        self.model_name: str = description.modelName or path.stem
        self.guid: str = description.guid or ""
        self.fmi_version: str = description.fmiVersion
        self._binding_factory = binding_factory
        self._extract_dir = extract_dir
        self._resource_uri = resource_uri
        self._instance_name = instance_name
        self._logging_on = logging_on
        self.start_time = start_time
        self.evaluations = 0
        self.initializations = 0
        self.directional_evaluations = 0
        cat = catalogue
        self.state_names = [v.name for v in cat.states]
        self.input_names = [v.name for v in cat.inputs]
        self.output_names = [v.name for v in cat.outputs]
        self.parameter_names = [v.name for v in cat.parameters]
        self.nx, self.nu, self.ny = len(cat.states), len(cat.inputs), len(cat.outputs)
        self.nz = capabilities.event_indicators
        self.x_start = np.array([_start(v) for v in cat.states])
        self.u_start = np.array([_start(v) for v in cat.inputs])
        self.x_nominal = np.array([v.nominal for v in cat.states])
        self.u_nominal = np.array([v.nominal for v in cat.inputs])
        self.y_nominal = np.array([v.nominal for v in cat.outputs])
        # parameter values currently in the instance (start values until set)
        self._parameters: dict[str, float] = {v.name: _start(v) for v in cat.parameters
                                              if v.start is not None}
        self._user_parameters: dict[str, float] = {}
        self._closed = False
        self._binding: Binding
        self._evaluator: Evaluator
        self._instantiate()
        self._finalizer = weakref.finalize(self, _cleanup, self._binding, self._extract_dir)

    # ------------------------------------------------------------------ life cycle
    def _instantiate(self) -> None:
        binding: Binding = self._binding_factory()
        binding.instantiate(self._instance_name, self.guid, self._resource_uri,
                            logging_on=self._logging_on)
        self._binding = binding
        try:
            self._initialize(self._user_parameters)
        except Exception:
            binding.free()
            raise

    def _initialize(self, parameters: Mapping[str, float]) -> None:
        """From the instantiated state to continuous-time mode, with the given parameters."""
        b = self._binding
        self._apply_parameters(parameters)
        try:
            b.initialize(self.start_time)
            b.exit_initialization()
        except ModelError as exc:
            raise InstantiationError(f"{self.model_name}: initialization failed: {exc}") from None
        cat = self.catalogue
        self._evaluator = Evaluator(b, self.nx, [v.value_reference for v in cat.inputs],
                                    [v.value_reference for v in cat.outputs], self.nz)
        self._one = self._evaluator.one
        self._ref = self._evaluator.ref
        self._xb, self._ub = self._evaluator.x, self._evaluator.u
        self._dxb, self._yb = self._evaluator.dx, self._evaluator.y
        self._dd: dict[tuple[int, int], tuple[Any, Any, np.ndarray, np.ndarray]] = {}
        self.initializations += 1

    def _apply_parameters(self, values: Mapping[str, float]) -> None:
        by_type: dict[str, tuple[list[int], list[float]]] = {}
        for name, value in values.items():
            var = self.catalogue.get(name)
            kind = "real" if var.is_real else ("boolean" if var.type == "Boolean" else "integer")
            refs, vals = by_type.setdefault(kind, ([], []))
            refs.append(var.value_reference)
            vals.append(value)
        b = self._binding
        for kind, (refs, vals) in by_type.items():
            if kind == "real":
                b.set_real(refs, vals)
            elif kind == "boolean":
                b.set_boolean(refs, [bool(v) for v in vals])
            else:
                b.set_integer(refs, [int(round(v)) for v in vals])

    def reinitialize(self) -> None:
        """Reset the instance and initialize it again with the current parameter values."""
        try:
            self._binding.reset()
            self._initialize(self._user_parameters)
        except ModelError:
            self._binding.free()
            self._instantiate()
            self._finalizer.detach()
            self._finalizer = weakref.finalize(self, _cleanup, self._binding, self._extract_dir)

    def close(self) -> None:
        """Free the instance and remove the extracted files."""
        if not self._closed:
            self._closed = True
            self._finalizer()

    def __enter__(self) -> "Model":
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def __repr__(self) -> str:
        return (f"Model({self.model_name!r}, FMI {self.fmi_version}, {self.nx} states, "
                f"{self.nu} inputs, {self.ny} outputs)")

    # ------------------------------------------------------------------ parameters
    @property
    def parameters(self) -> dict[str, float]:
        """Current parameter values (start values unless set)."""
        return dict(self._parameters)

    def set_parameters(self, values: Mapping[str, float]) -> bool:
        """Set parameters; returns True when the instance had to be re-initialized.

        Tunable parameters are set in event mode.  ``fixed`` parameters can
        only change before initialization, so a change to any of them resets
        and re-initializes the instance; unchanged values cost nothing.
        """
        changed: dict[str, float] = {}
        needs_reinit = False
        for name, value in values.items():
            var = self.catalogue.get(name)
            if var.role != "parameter":
                raise UsageError(f"{name!r} is a {var.role}, not a parameter; set it as part of the "
                                 f"operating point instead")
            value = float(value)
            if not math.isfinite(value):
                raise UsageError(f"parameter {name}={value} is not finite")
            if self._parameters.get(name) == value:
                continue
            changed[name] = value
            if not var.tunable:
                needs_reinit = True
        if not changed:
            return False
        self._user_parameters.update(changed)
        self._parameters.update(changed)
        if needs_reinit:
            self.reinitialize()
            return True
        b = self._binding
        b.enter_event_mode()
        self._apply_parameters(changed)
        b.event_iteration()
        b.enter_continuous_time_mode()
        return False

    def set_time(self, t: float) -> None:
        self._binding.set_time(float(t))

    # ------------------------------------------------------------------ evaluation
    def evaluate(self, x: np.ndarray | Sequence[float], u: np.ndarray | Sequence[float]
                 ) -> tuple[np.ndarray, np.ndarray]:
        """Derivatives and outputs at states ``x`` and inputs ``u`` (current parameters).

        Raises
        ------
        EvaluationError
            When the FMU returns a status other than OK or a non-finite value.
        """
        self._xb[:] = x
        self._ub[:] = u
        self.evaluations += 1
        if self._one(self._ref):
            self._raise_failure(self._xb, self._ub)
        return self._dxb.copy(), self._yb.copy()

    def evaluate_batch(self, X: np.ndarray, U: np.ndarray, *, indicators: bool = False
                       ) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
        """Evaluate many points (rows of X and U) in one call into the FMU helper."""
        X = np.atleast_2d(np.asarray(X, dtype=float))
        U = np.atleast_2d(np.asarray(U, dtype=float))
        if U.shape[0] == 1 and X.shape[0] > 1:
            U = np.repeat(U, X.shape[0], axis=0)
        if X.shape[1] != self.nx or U.shape[1] != self.nu or X.shape[0] != U.shape[0]:
            raise UsageError(f"evaluate_batch: expected X (k, {self.nx}) and U (k, {self.nu}), "
                             f"got {X.shape} and {U.shape}")
        DX, Y, Z, done = self._evaluator.evaluate_batch(X, U, indicators=indicators)
        self.evaluations += done + (1 if done < X.shape[0] else 0)
        if done < X.shape[0]:
            self._raise_failure(X[done], U[done])
        if len(X):  # the instance now sits at the last point
            self._xb[:] = X[-1]
            self._ub[:] = U[-1]
        return DX, Y, Z

    def event_indicators(self, x: np.ndarray, u: np.ndarray) -> np.ndarray:
        """Event-indicator values at (x, u) (empty when the FMU declares none)."""
        if not self.nz:
            return np.zeros(0)
        _, _, Z = self.evaluate_batch(np.asarray(x, float)[None, :], np.asarray(u, float)[None, :],
                                      indicators=True)
        assert Z is not None
        return Z[0]

    def point_text(self, x: np.ndarray, u: np.ndarray) -> str:
        parts = [f"{n}={v:.6g}" for n, v in zip(self.state_names, x)]
        parts += [f"{n}={v:.6g}" for n, v in zip(self.input_names, u)]
        return ", ".join(parts)

    def _raise_failure(self, x: np.ndarray, u: np.ndarray) -> None:
        call, status = self._evaluator.failure()
        point = dict(zip(self.state_names, map(float, x)))
        point.update(zip(self.input_names, map(float, u)))
        log = list(self._binding.log)[-5:]
        where = self.point_text(x, u)
        if status:
            message = (f"{self.model_name}: {call} returned {STATUS_NAMES.get(status, status)} "
                       f"at {where}")
        else:
            bad = [n for n, v in zip([v.name for v in self.catalogue.derivatives], self._dxb)
                   if not math.isfinite(v)]
            bad += [n for n, v in zip(self.output_names, self._yb) if not math.isfinite(v)]
            message = (f"{self.model_name}: non-finite value of {', '.join(bad) or 'a result'} "
                       f"at {where}")
        if log:
            message += f"; FMU log: {' | '.join(log[-3:])}"
        if status >= 3:  # Error or Fatal: the instance must be reset before further use
            try:
                self.reinitialize()
            except ModelError:
                pass
        raise EvaluationError(message, point=point, status=status, log=log)

    # --------------------------------------------------------- directional derivatives
    def directional_derivatives(self, seeds_x: np.ndarray, seeds_u: np.ndarray,
                                x: np.ndarray | None = None, u: np.ndarray | None = None
                                ) -> np.ndarray:
        """Exact Jacobian-vector products of (dx, y) along each seed (rows), at (x, u).

        Uses the FMU's ``GetDirectionalDerivative``; each row costs one FMU call
        with all states and inputs as knowns and all derivatives and outputs as
        unknowns.  Without ``x`` and ``u`` the point of the last evaluation is
        used (no extra evaluation).  Returns an array of shape (k, nx + ny).
        """
        if not self.capabilities.directional_derivatives:
            raise UsageError(f"{self.model_name} does not provide directional derivatives; use "
                             f"method 'central' or 'forward'")
        if x is not None and u is not None:
            self.evaluate(x, u)  # sets the point
        else:
            x, u = self._xb.copy(), self._ub.copy()
        cat = self.catalogue
        key = (self.nx, self.ny)
        if key not in self._dd:
            unknowns = uint_refs([v.value_reference for v in cat.derivatives]
                                 + [v.value_reference for v in cat.outputs])
            knowns = uint_refs([v.value_reference for v in cat.states]
                               + [v.value_reference for v in cat.inputs])
            self._dd[key] = (unknowns, knowns, np.zeros(self.nx + self.nu), np.zeros(self.nx + self.ny))
        unknowns, knowns, seed, out = self._dd[key]
        seeds = np.hstack([np.atleast_2d(seeds_x), np.atleast_2d(seeds_u)])
        result = np.empty((seeds.shape[0], self.nx + self.ny))
        for k, row in enumerate(seeds):
            seed[:] = row
            status = self._binding.directional_derivative(unknowns, knowns, seed, out)
            self.directional_evaluations += 1
            if status:
                self._evaluator.struct.failed_status = status
                raise EvaluationError(
                    f"{self.model_name}: GetDirectionalDerivative returned "
                    f"{STATUS_NAMES.get(status, status)} at {self.point_text(x, u)}; FMU log: "
                    f"{self._binding.recent_log()}", status=status, log=list(self._binding.log))
            if not np.isfinite(out).all():
                raise EvaluationError(f"{self.model_name}: non-finite directional derivative at "
                                      f"{self.point_text(x, u)}")
            result[k] = out
        return result

    # ------------------------------------------------------------------ FMU state
    def get_fmu_state(self) -> ctypes.c_void_p:
        if not self.capabilities.get_set_state:
            raise UsageError(f"{self.model_name} cannot get and set its FMU state")
        return self._binding.get_fmu_state()

    def set_fmu_state(self, state: ctypes.c_void_p) -> None:
        self._binding.set_fmu_state(state)

    def free_fmu_state(self, state: ctypes.c_void_p) -> None:
        self._binding.free_fmu_state(state)

    # ------------------------------------------------------------------ binding access
    @property
    def binding(self) -> Binding:
        """The low-level FMI binding (for simulation drivers inside linobs)."""
        return self._binding

    @property
    def log(self) -> list[str]:
        """Recent messages the FMU logged."""
        return list(self._binding.log)

    def clear_log(self) -> None:
        """Forget the messages logged so far (errors then quote only what follows)."""
        self._binding.log.clear()

    def variable(self, name: str) -> Variable:
        return self.catalogue.get(name)

    # ------------------------------------------------------------------ linearization
    def linearize(self, point: Mapping[str, float] | None = None, method: str = "auto",
                  **options: Any) -> "LinearModel":
        """Linearize at an operating point; see :func:`linobs.linear.linearize`."""
        from linobs.linear.linearize import linearize

        return linearize(self, point or {}, method=method, **options)


def _start(var: Variable) -> float:
    if var.start is not None:
        return float(var.start)
    if var.min is not None and var.max is not None:
        return 0.5 * (var.min + var.max)
    if var.min is not None and var.min > 0:
        return float(var.min)
    return 0.0
