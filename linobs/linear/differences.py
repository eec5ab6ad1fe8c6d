"""The differencing work of one linearization: column groups, switching surfaces,
structure checks, error estimates and step refinement.

References
----------
Curtis, A. R., Powell, M. J. D. & Reid, J. K. (1974). On the estimation of
sparse Jacobian matrices. IMA Journal of Applied Mathematics 13(1), 117-119.

Gill, P. E., Murray, W., Saunders, M. A. & Wright, M. H. (1983). Computing
forward-difference intervals for numerical optimization. SIAM Journal on
Scientific and Statistical Computing 4(2), 310-321 (error-balancing steps).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from linobs.linear.schemes import (AVOID, EPS, SCHEME_TEXT, SCHEMES, Scheme, fits, step_sizes,
                                   truncation)
from linobs.linear.sparsity import color_columns

if TYPE_CHECKING:  # pragma: no cover
    from linobs.model.instance import Model


def leak_message(leaked: list[tuple[int, tuple[int, ...]]], model: "Model", columns: list) -> str:
    rows = [v.name for v in model.catalogue.derivatives] + model.output_names
    pairs = ", ".join(f"{rows[i]} on {'/'.join(columns[j].name for j in group)}"
                      for i, group in leaked[:4])
    more = f" and {len(leaked) - 4} more" if len(leaked) > 4 else ""
    return (f"the FMU's ModelStructure omits dependencies ({pairs}{more}); the Jacobian was "
            f"recomputed densely; tell the supplier their dependency information is wrong")


@dataclass
class _Group:
    """One perturbed column group and its stencil values (rows: stencil points)."""

    members: list[int]
    scheme: Scheme
    F: np.ndarray


class Differencing:
    """The work of one linearization (kept together so that retries share state)."""

    def __init__(self, model: "Model", x0: np.ndarray, u0: np.ndarray, f0: np.ndarray,
                 z0: np.ndarray | None, values: np.ndarray, nominal: np.ndarray, columns: list,
                 relative_step: float | None, warnings: list[str], refine: bool = True,
                 active: np.ndarray | None = None) -> None:
        self.model, self.x0, self.u0, self.f0, self.z0 = model, x0, u0, f0, z0
        self.values, self.nominal, self.columns = values, nominal, columns
        self.relative_step = relative_step
        self.warnings = warnings
        self.leaked: list[tuple[int, tuple[int, ...]]] = []
        self.refined: list[int] = []
        self.refine = refine
        self.empty_checked = False
        self.active = np.ones(len(columns), dtype=bool) if active is None else active
        self.nx = model.nx

    # ------------------------------------------------------------ evaluation
    def _evaluate(self, deltas: np.ndarray) -> tuple[np.ndarray, np.ndarray | None]:
        """Evaluate at (x0, u0) + each row of deltas; returns stacked (dx, y) and indicators."""
        P = self.values[None, :] + deltas
        DX, Y, Z = self.model.evaluate_batch(P[:, :self.nx], P[:, self.nx:],
                                             indicators=self.z0 is not None)
        return np.hstack([DX, Y]), Z

    def _crossed(self, z: np.ndarray | None) -> list[int]:
        if z is None or self.z0 is None:
            return []
        z0 = self.z0
        return [k for k in range(len(z0)) if z0[k] != 0.0 and np.sign(z[k]) != np.sign(z0[k])]

    def _indicator_name(self, k: int) -> str:
        inds = self.model.catalogue.event_indicators
        return inds[k].name if k < len(inds) else f"event indicator {k + 1}"

    # ------------------------------------------------------------ differences
    def differences(self, pattern: np.ndarray, method: str
                    ) -> tuple[np.ndarray, np.ndarray, list[str], int, np.ndarray]:
        order = 1 if method == "forward" else 2
        ncols = len(self.columns)
        h = step_sizes(self.values, self.nominal, order, self.relative_step)
        default = "forward" if order == 1 else "central"
        scheme_of = [self._scheme_within_bounds(j, default, h[j]) if self.active[j] else "skipped"
                     for j in range(ncols)]
        groups: list[_Group] = []
        for name in dict.fromkeys(scheme_of):
            if name == "skipped":
                continue
            cols = [j for j in range(ncols) if scheme_of[j] == name]
            for sub in color_columns(pattern[:, cols]):
                members = [cols[g] for g in sub]
                groups.extend(self._evaluate_group(members, SCHEMES[name], h, pattern))
        self._check_empty_columns(pattern, h)
        D, D2, mag, width = self._assemble(groups, h, pattern)
        if order == 2 and self.refine:
            scale = self._term_scale(D)
            for g in groups:
                better = self._refined_steps(g, D, D2, mag, width, scale, h, pattern)
                if better is not None:
                    h[g.members] = better
                    g.F = self._stencil(g.members, g.scheme, h)[0]
                    self.refined.extend(g.members)
            if self.refined:
                D, D2, mag, width = self._assemble(groups, h, pattern)
        scale = self._term_scale(D)
        noise = 2.0 * EPS * np.maximum(mag, width * scale[:, None]) / h[None, :]
        trunc = np.zeros_like(D)
        for g in groups:
            for j in g.members:
                rows = pattern[:, j]
                trunc[rows, j] = truncation(g.scheme, D[rows, j], D2[rows, j], h[j])
        J = np.where(np.abs(D) <= noise, 0.0, D)
        err = np.where(pattern, noise + trunc, 0.0)
        for g in groups:
            for j in g.members:
                scheme_of[j] = g.scheme.name
        for j in range(ncols):
            if self.active[j] and not pattern[:, j].any():
                scheme_of[j] = "structural-zero"
        return J, err, scheme_of, len(groups) + (1 if self.empty_checked else 0), h

    def _check_empty_columns(self, pattern: np.ndarray, h: np.ndarray) -> None:
        """Perturb all structurally empty columns together once: nothing may change.

        An input or state that the model structure says affects nothing costs one
        evaluation to confirm; a change means the dependency information is wrong.
        """
        empty = [j for j in range(pattern.shape[1]) if self.active[j] and not pattern[:, j].any()]
        self.empty_checked = bool(empty)
        if not empty:
            return
        scheme = SCHEMES["forward"]
        members = [j for j in empty if fits(self.values[j], h[j], self.columns[j].min,
                                             self.columns[j].max, scheme)]
        if members:
            F, _ = self._stencil(members, scheme, h)
            self._check_leaks(members, F, pattern)

    def _scheme_within_bounds(self, j: int, default: str, h: float) -> str:
        var = self.columns[j]
        if fits(self.values[j], h, var.min, var.max, SCHEMES[default]):
            return default
        for side in (1, -1):
            alt = AVOID.get((default, side))
            if alt and fits(self.values[j], h, var.min, var.max, SCHEMES[alt]):
                self.warnings.append(f"{var.name}={self.values[j]:.6g} is within one step of its "
                                     f"declared bound; differenced {SCHEME_TEXT[alt]}")
                return alt
        self.warnings.append(f"{var.name}: the declared range is narrower than the difference "
                             f"stencil; differenced {default} across it")
        return default

    def _stencil(self, members: list[int], scheme: Scheme, h: np.ndarray
                 ) -> tuple[np.ndarray, np.ndarray | None]:
        deltas = np.zeros((len(scheme.offsets), len(self.columns)))
        for r, (m, _) in enumerate(scheme.offsets):
            deltas[r, members] = m * h[members]
        return self._evaluate(deltas)

    def _evaluate_group(self, members: list[int], scheme: Scheme, h: np.ndarray,
                        pattern: np.ndarray) -> list["_Group"]:
        """Stencil values of one column group, moved away from a switching surface if needed.

        When a perturbation changes an event indicator's sign, the columns that
        cause it are found one by one; only they are differenced again on the
        other side.  The rest of the group keeps its values, which the crossing
        cannot touch (the group's columns share no rows).
        """
        F, Z = self._stencil(members, scheme, h)
        self._check_leaks(members, F, pattern)
        if Z is None:
            return [_Group(members, scheme, F)]
        bad_offsets = [m for r, (m, _) in enumerate(scheme.offsets) if self._crossed(Z[r])]
        if not bad_offsets:
            return [_Group(members, scheme, F)]
        culprits: dict[int, set[int]] = {}  # column -> indicators it flips
        for j in members:
            for m in bad_offsets:
                delta = np.zeros((1, len(self.columns)))
                delta[0, j] = m * h[j]
                _, Zj = self._evaluate(delta)
                flipped = self._crossed(Zj[0] if Zj is not None else None)
                if flipped:
                    culprits.setdefault(j, set()).update(flipped)
        if not culprits:  # only the combination crosses: difference the columns one by one
            culprits = {j: set() for j in members}
        groups = []
        rest = [j for j in members if j not in culprits]
        if rest:
            groups.append(_Group(rest, scheme, F))
        for j, flipped in culprits.items():
            g = self._away_from_surface(j, scheme, h, flipped)
            self._check_leaks(g.members, g.F, pattern)
            groups.append(g)
        return groups

    def _away_from_surface(self, j: int, scheme: Scheme, h: np.ndarray, flipped: set[int]) -> "_Group":
        name = self.columns[j].name
        surfaces = ", ".join(self._indicator_name(k) for k in sorted(flipped)) or "event indicators"
        F, Z = self._stencil([j], scheme, h)
        sides = {1 if m > 0 else -1 for r, (m, _) in enumerate(scheme.offsets)
                 if Z is not None and self._crossed(Z[r])}
        alt = AVOID.get((scheme.name, next(iter(sides)))) if len(sides) == 1 else None
        if alt is not None and fits(self.values[j], h[j], self.columns[j].min, self.columns[j].max,
                                     SCHEMES[alt]):
            F2, Z2 = self._stencil([j], SCHEMES[alt], h)
            if Z2 is None or not any(self._crossed(z) for z in Z2):
                self.warnings.append(
                    f"{name}={self.values[j]:.6g} is within one step of a switching surface "
                    f"({surfaces}): the model is not smooth there; differenced "
                    f"{SCHEME_TEXT[alt]}, away from it")
                return _Group([j], SCHEMES[alt], F2)
        self.warnings.append(
            f"{name}={self.values[j]:.6g}: a switching surface ({surfaces}) lies within one step on "
            f"both sides; the model is not smooth here and this column is of doubtful accuracy")
        return _Group([j], scheme, F)

    def _check_leaks(self, members: list[int], F: np.ndarray, pattern: np.ndarray) -> None:
        """Rows that the model structure says cannot depend on the group must not change."""
        outside = ~pattern[:, members].any(axis=1)
        changed = outside & (F != self.f0[None, :]).any(axis=0)
        self.leaked.extend((int(i), tuple(members)) for i in np.flatnonzero(changed))

    def _assemble(self, groups: list["_Group"], h: np.ndarray, pattern: np.ndarray
                  ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Raw differences D, second differences D2 (nan where the stencil has none),
        Σ|w|·|F| per entry, and Σ|w| per column."""
        shape = (len(self.f0), len(self.columns))
        D, D2, mag = np.zeros(shape), np.full(shape, np.nan), np.zeros(shape)
        width = np.ones(shape[1])
        for g in groups:
            s = g.scheme
            for j in g.members:
                rows = pattern[:, j]
                f0, F = self.f0[rows], g.F[:, rows]
                num = s.base_weight * f0 + sum(w * F[r] for r, (_, w) in enumerate(s.offsets))
                D[rows, j] = num / h[j]
                mag[rows, j] = abs(s.base_weight) * np.abs(f0) + sum(
                    abs(w) * np.abs(F[r]) for r, (_, w) in enumerate(s.offsets))
                width[j] = abs(s.base_weight) + sum(abs(w) for _, w in s.offsets)
                if s.curvature is not None:
                    c0, ck = s.curvature
                    D2[rows, j] = (c0 * f0 + sum(c * F[r] for r, c in enumerate(ck))) / (h[j] * h[j])
        return D, D2, mag, width

    def _term_scale(self, D: np.ndarray) -> np.ndarray:
        """Size of the terms that make up each row: |F0| + Σ_j |∂F/∂v_j|·max(|v_j|, nominal_j).

        Rounding in the FMU is relative to its intermediate terms, not to the (possibly
        canceled) result, so this is the row's rounding scale.
        """
        return np.abs(self.f0) + np.abs(D) @ np.maximum(np.abs(self.values), self.nominal)

    def _refined_steps(self, g: "_Group", D: np.ndarray, D2: np.ndarray, mag: np.ndarray,
                       width: np.ndarray, scale: np.ndarray, h: np.ndarray, pattern: np.ndarray
                       ) -> np.ndarray | None:
        """Smaller steps where the estimated truncation error dominates rounding, or None.

        For a second-order formula, rounding ≈ R/h and truncation ≈ T·h², so the
        error is smallest at h* = (R / 2T)^(1/3) (Gill, Murray, Saunders & Wright 1983).
        """
        new = h[g.members].copy()
        changed = False
        for k, j in enumerate(g.members):
            rows = pattern[:, j] & (D[:, j] != 0) & np.isfinite(D2[:, j])
            if not rows.any():
                continue
            R = 2.0 * EPS * np.maximum(mag[rows, j], width[j] * scale[rows])
            T = g.scheme.truncation * D2[rows, j] ** 2 / np.abs(D[rows, j])
            significant = T * h[j] ** 2 > R / h[j]
            if not significant.any():
                continue
            h_opt = float(np.min((R[significant] / (2.0 * T[significant])) ** (1.0 / 3.0)))
            if h_opt < 0.5 * h[j]:
                v = self.values[j]
                new[k] = (v + max(h_opt, 0.01 * h[j])) - v
                changed = True
        return new if changed else None

    # ------------------------------------------------------------ exact
    def exact(self, pattern: np.ndarray
              ) -> tuple[np.ndarray, np.ndarray, list[str], int, np.ndarray]:
        ncols = len(self.columns)
        groups = color_columns(pattern & self.active[None, :])
        empty = [j for j in range(ncols) if self.active[j] and not pattern[:, j].any()]
        seeds = np.zeros((len(groups) + (1 if empty else 0), ncols))
        for g, members in enumerate(groups):
            seeds[g, members] = 1.0
        if empty:  # one extra call confirms that the structurally empty columns are empty
            seeds[-1, empty] = 1.0
        R = self.model.directional_derivatives(seeds[:, :self.nx], seeds[:, self.nx:]) \
            if len(seeds) else np.zeros((0, len(self.f0)))
        J = np.zeros((len(self.f0), ncols))
        self.leaked = []
        for g, members in enumerate(groups):
            covered = np.zeros(len(self.f0), dtype=bool)
            for j in members:
                J[pattern[:, j], j] = R[g, pattern[:, j]]
                covered |= pattern[:, j]
            leak = np.flatnonzero(~covered & (R[g] != 0.0))
            self.leaked.extend((int(i), tuple(members)) for i in leak)
        if empty:
            self.leaked.extend((int(i), tuple(empty)) for i in np.flatnonzero(R[-1] != 0.0))
        err = EPS * np.abs(J)
        schemes = ["skipped" if not self.active[j] else "exact" if pattern[:, j].any()
                   else "structural-zero" for j in range(ncols)]
        if self.z0 is not None and len(self.z0):
            self._check_surfaces_exact(groups)
        return J, err, schemes, len(seeds), np.zeros(ncols)

    def _check_surfaces_exact(self, groups: list[list[int]]) -> None:
        """Warn when a central-difference step along a group would cross a switching surface."""
        h = step_sizes(self.values, self.nominal, 2, self.relative_step)
        for members in groups:
            deltas = np.zeros((2, len(self.columns)))
            deltas[0, members] = h[members]
            deltas[1, members] = -h[members]
            _, Z = self._evaluate(deltas)
            crossed = sorted({k for r in range(2) for k in self._crossed(Z[r] if Z is not None else None)})
            if crossed:
                names = ", ".join(self.columns[j].name for j in members)
                surfaces = ", ".join(self._indicator_name(k) for k in crossed)
                self.warnings.append(
                    f"the point is within one step of a switching surface ({surfaces}) along {names}: "
                    f"the model is not smooth there; the exact derivative is that of the current side")
