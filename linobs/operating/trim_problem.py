"""One partial trim resolved against a model: unknowns, equations, scales, bounds.

:class:`TrimProblem` turns a :class:`~linobs.operating.trim_spec.TrimSpec`
and the fixed values of one operating point into index arrays, nominal
scales and a box, and evaluates the scaled residual (one FMU call) and the
scaled Jacobian (one linearization, which returns the residual as well).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import TYPE_CHECKING, Any

import numpy as np

from linobs.errors import UsageError
from linobs.linear.linearize import linearize
from linobs.operating.newton import NewtonOutcome
from linobs.operating.point import resolve_point
from linobs.operating.trim_spec import TrimResult, TrimSpec

if TYPE_CHECKING:  # pragma: no cover
    from linobs.model.instance import Model

__all__ = ["TrimProblem"]


class TrimProblem:
    """One partial trim resolved against a model: indices, scales, bounds, residual, Jacobian.

    Unknowns z are the free states then the free inputs, each divided by its
    nominal value; residuals are the zero-derivative rows (divided by the
    state's nominal, per second) then the output-target rows (divided by the
    output's nominal).
    """

    __slots__ = ("model", "spec", "x_base", "u_base", "fx", "fu", "zd", "ot", "pinned", "targets",
                 "z_scale", "r_scale", "lo", "hi", "z_given", "_nfx", "_nzd", "_x", "_u",
                 "_names", "_names_free", "_evaluate", "_ix")

    def __init__(self, model: "Model", fixed: Mapping[str, float], spec: TrimSpec) -> None:
        self.model, self.spec = model, spec
        cat = model.catalogue
        op = resolve_point(model, fixed)  # names, roles, finiteness and bounds of the fixed values
        fixed_names = set(fixed)
        parameters = {n: float(v) for n, v in fixed.items() if cat.get(n).role == "parameter"}
        if parameters:
            model.set_parameters(parameters)
        self.x_base = op.x()
        self.u_base = op.u()
        states = model.state_names

        pinned = _indices(cat, "states", spec.pinned_states, "pinned_states")
        if spec.free_states == "all":
            pinned_set = {states[i] for i in pinned}
            fx = [i for i, n in enumerate(states) if n not in pinned_set and n not in fixed_names]
        else:
            fx = _indices(cat, "states", spec.free_states, "free_states")
            for i in fx:
                if i in pinned:
                    raise UsageError(f"state {states[i]!r} is both free and pinned; list it in "
                                     f"free_states or in pinned_states, not both")
                if states[i] in fixed_names:
                    raise UsageError(f"state {states[i]!r} is free in the trim but also fixed at "
                                     f"this point (grid axis or fixed value); free it or fix it")
        fu = _indices(cat, "inputs", spec.free_inputs, "free_inputs")
        for j in fu:
            if model.input_names[j] in fixed_names:
                raise UsageError(f"input {model.input_names[j]!r} is free in the trim but also fixed "
                                 f"at this point (grid axis or fixed value); free it or fix it")
        if spec.zero_derivatives is None:
            zd = list(fx)
        else:
            zd = _indices(cat, "states", [_state_of(cat, n) for n in spec.zero_derivatives],
                          "zero_derivatives")
        ot = _indices(cat, "outputs", list(spec.output_targets), "output_targets")
        targets = np.array([float(v) for v in spec.output_targets.values()])
        if not np.all(np.isfinite(targets)):
            raise UsageError("output targets must be finite numbers")

        self.fx, self.fu = np.array(fx, dtype=int), np.array(fu, dtype=int)
        self.zd, self.ot = np.array(zd, dtype=int), np.array(ot, dtype=int)
        self.pinned, self.targets = np.array(pinned, dtype=int), targets
        unknowns = [cat.states[i] for i in fx] + [cat.inputs[j] for j in fu]
        self.z_scale = np.array([v.nominal for v in unknowns])
        self.r_scale = np.concatenate([model.x_nominal[self.zd], model.y_nominal[self.ot]])
        self.lo = np.array([-np.inf if v.min is None else v.min for v in unknowns]) / self.z_scale
        self.hi = np.array([np.inf if v.max is None else v.max for v in unknowns]) / self.z_scale
        self._nfx, self._nzd = len(fx), len(zd)
        self.z_given = np.concatenate([self.x_base[self.fx], self.u_base[self.fu]]) / self.z_scale
        self._x, self._u = self.x_base.copy(), self.u_base.copy()
        self._names = model.state_names + model.input_names
        self._names_free = [model.state_names[i] for i in self.fx] + [model.input_names[j] for j in self.fu]
        self._evaluate = model.evaluate
        self._ix: tuple[Any, ...] | None = None  # index grids into A, B, C, D (first Jacobian)

    # ------------------------------------------------------------------ set-up
    def check_square(self) -> None:
        """Raise :class:`UsageError` unless #unknowns == #equations, naming both lists."""
        n_unknowns = len(self.fx) + len(self.fu)
        n_equations = len(self.zd) + len(self.ot)
        if n_unknowns == n_equations:
            return
        m = self.model
        free_x = ", ".join(m.state_names[i] for i in self.fx) or "none"
        free_u = ", ".join(m.input_names[j] for j in self.fu) or "none"
        zero = ", ".join(self.equation_names()[:len(self.zd)]) or "none"
        outs = ", ".join(m.output_names[k] for k in self.ot) or "none"
        raise UsageError(
            f"the trim is not square: {n_unknowns} unknowns (free states: {free_x}; free inputs: "
            f"{free_u}) but {n_equations} equations (zero derivatives: {zero}; output targets: "
            f"{outs}); free or fix variables, or add or drop equations, until the counts match")

    def initial(self, guess: Mapping[str, float] | None) -> np.ndarray:
        """Scaled starting point: the guess where it names a free variable, else start values."""
        z = self.z_given.copy()
        if guess:
            m = self.model
            names = [m.state_names[i] for i in self.fx] + [m.input_names[j] for j in self.fu]
            for k, name in enumerate(names):
                if name in guess:
                    value = float(guess[name])
                    if not math.isfinite(value):
                        raise UsageError(f"guess {name}={value} is not finite")
                    z[k] = value / self.z_scale[k]
        return np.clip(z, self.lo, self.hi)

    def key(self, method: str) -> tuple[Any, ...]:
        """What a carried Newton matrix must match: model, unknowns, equations, scaling."""
        m = self.model
        return (m.sha256, method, tuple(self.fx), tuple(self.fu), tuple(self.zd), tuple(self.ot))

    def free_values(self, z: np.ndarray) -> dict[str, float]:
        """Name -> value of the free states and inputs at scaled unknowns z."""
        m = self.model
        names = [m.state_names[i] for i in self.fx] + [m.input_names[j] for j in self.fu]
        return dict(zip(names, (z * self.z_scale).tolist()))

    # ------------------------------------------------------------------ evaluation
    def unpack(self, z: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Full state and input vectors (copies) for scaled unknowns z."""
        x, u = self.x_base.copy(), self.u_base.copy()
        n = self._nfx
        x[self.fx] = z[:n] * self.z_scale[:n]
        u[self.fu] = z[n:] * self.z_scale[n:]
        return x, u

    def residual(self, z: np.ndarray) -> tuple[np.ndarray, tuple[np.ndarray, np.ndarray]]:
        """Scaled residual at z and the full (dx, y) there (one FMU evaluation)."""
        n = self._nfx
        x, u = self._x, self._u
        x[self.fx] = z[:n] * self.z_scale[:n]
        u[self.fu] = z[n:] * self.z_scale[n:]
        dx, y = self._evaluate(x, u)
        return self._scaled(dx, y), (dx, y)

    def _scaled(self, dx: np.ndarray, y: np.ndarray) -> np.ndarray:
        r = np.empty(len(self.r_scale))
        r[:self._nzd] = dx[self.zd]
        r[self._nzd:] = y[self.ot] - self.targets
        r /= self.r_scale
        return r

    def jacobian(self, z: np.ndarray, method: str
                 ) -> tuple[np.ndarray, np.ndarray, tuple[np.ndarray, np.ndarray]]:
        """Scaled Jacobian and residual at z, from one linearization."""
        x, u = self.unpack(z)
        point = dict(zip(self._names, [*x.tolist(), *u.tolist()]))
        lm = linearize(self.model, point, method=method, allow_outside_bounds=True, refine=False,
                       columns=self._names_free)
        n, k = self._nfx, self._nzd
        J = np.empty((len(self.r_scale), len(self.z_scale)))
        if self._ix is None:
            self._ix = (np.ix_(self.zd, self.fx), np.ix_(self.zd, self.fu),
                        np.ix_(self.ot, self.fx), np.ix_(self.ot, self.fu))
        ax, au, cx, cu = self._ix
        J[:k, :n], J[:k, n:] = lm.A[ax], lm.B[au]
        J[k:, :n], J[k:, n:] = lm.C[cx], lm.D[cu]
        J *= self.z_scale[None, :] / self.r_scale[:, None]
        dx, y = np.asarray(lm.dx0, dtype=float), np.asarray(lm.y0, dtype=float)
        return J, self._scaled(dx, y), (dx, y)

    # ------------------------------------------------------------------ reporting
    def equation_names(self) -> list[str]:
        m = self.model
        states = m.catalogue.states
        derivatives = [states[i].derivative or f"der({states[i].name})" for i in self.zd]
        return derivatives + [m.output_names[k] for k in self.ot]

    def failure_text(self, out: NewtonOutcome) -> str:
        """Why Newton stopped, with the largest scaled residual and where it is."""
        r = np.abs(out.r)
        worst = self.equation_names()[int(np.argmax(r))] if r.size else "none"
        where = f"largest scaled residual {float(np.max(r, initial=0.0)):.3g} in {worst} " \
                f"(tolerance {self.spec.tolerance:g})"
        m = self.model
        names = [m.state_names[i] for i in self.fx] + [m.input_names[j] for j in self.fu]
        held = [names[k] for k in range(len(names)) if out.z[k] <= self.lo[k] or out.z[k] >= self.hi[k]]
        if out.reason == "max_iterations":
            why = f"no convergence in {out.iterations} iterations"
        elif held:
            why = (f"stopped against the declared bounds of {', '.join(held)} after "
                   f"{out.iterations} iterations: the solution lies outside them, or the guess "
                   f"is too far from it")
        elif out.reason == "singular":
            why = "the Jacobian is zero: the free variables do not affect the equations here"
        else:
            why = (f"the line search found no decrease after {out.iterations} iterations: the "
                   f"residual norm has a minimum here that is not a solution")
        return f"{why}; {where}"

    def result(self, status: str, method: str, z: np.ndarray, aux: tuple[np.ndarray, np.ndarray],
               spent0: int, iterations: int, jacobians: int, message: str) -> TrimResult:
        m = self.model
        x, u = self.unpack(z)
        dx, y = aux
        raw = np.concatenate([dx[self.zd], y[self.ot] - self.targets])
        return TrimResult(
            status=status, method=method,  # type: ignore[arg-type]
            states=dict(zip(m.state_names, x.tolist())),
            inputs=dict(zip(m.input_names, u.tolist())),
            parameters=m.parameters,
            residual=float(np.max(np.abs(raw / self.r_scale), initial=0.0)),
            residuals=dict(zip(self.equation_names(), raw.tolist())),
            iterations=iterations,
            evaluations=m.evaluations + m.directional_evaluations - spent0,
            jacobians=jacobians,
            pinned_derivatives={m.state_names[i]: float(dx[i]) for i in self.pinned},
            message=message,
        )


def _indices(cat: Any, role: str, names: list[str], field: str) -> list[int]:
    """Positions of ``names`` among the catalogue's ``role``; duplicates are an error."""
    if len(set(names)) != len(names):
        dup = sorted({n for n in names if names.count(n) > 1})
        raise UsageError(f"trim {field} lists {', '.join(dup)} more than once; list each once")
    return [cat.index(role, n) for n in names]


def _state_of(cat: Any, name: str) -> str:
    """A state name, also accepted as the name of its derivative variable."""
    var = cat.get(name)
    if var.role == "derivative" and var.derivative_of:
        return var.derivative_of
    return name
