"""Linearization of an FMU at an operating point by finite differences or exact derivatives.

Steps are chosen per variable from its magnitude and nominal value,
h = √ε·max(|x|, nominal) for first-order and h = ∛ε·max(|x|, nominal) for
second-order schemes (Dennis & Schnabel 1983, §5.4 and §5.6), and rounded so
that x + h − x is exactly h.  Columns that never share a row are perturbed
together (Curtis, Powell & Reid 1974).  Near a declared bound, or where a
perturbation would cross an event-indicator sign change (a switching
surface), the column is differenced one-sided, away from the bound or the
surface, and the result says so.

References
----------
Dennis, J. E. & Schnabel, R. B. (1983). Numerical Methods for Unconstrained
Optimization and Nonlinear Equations. Prentice-Hall (SIAM reprint 1996).

Curtis, A. R., Powell, M. J. D. & Reid, J. K. (1974). On the estimation of
sparse Jacobian matrices. IMA Journal of Applied Mathematics 13(1), 117-119.

Gill, P. E., Murray, W., Saunders, M. A. & Wright, M. H. (1983). Computing
forward-difference intervals for numerical optimization. SIAM Journal on
Scientific and Statistical Computing 4(2), 310-321 (error-balancing steps).

Fornberg, B. (1988). Generation of finite difference formulas on arbitrarily
spaced grids. Mathematics of Computation 51(184), 699-706 (the one-sided
second-order weights).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING

import numpy as np

from linobs.errors import UsageError
from linobs.linear.linear_model import JacobianErrors, LinearModel, ModelIdentity
from linobs.linear.differences import Differencing, leak_message
from linobs.linear.sparsity import structural_pattern
from linobs.operating.point import resolve_point

if TYPE_CHECKING:  # pragma: no cover
    from linobs.model.instance import Model

METHODS = ("auto", "forward", "central", "exact")


def linearize(model: "Model", point: Mapping[str, float] | None = None, method: str = "auto", *,
              allow_outside_bounds: bool = False, use_structure: bool = True,
              relative_step: float | None = None, refine: bool = True,
              columns: Sequence[str] | None = None) -> LinearModel:
    """Linearize ``model`` at an operating point.

    Parameters
    ----------
    model
        A loaded :class:`~linobs.model.instance.Model`.
    point
        Variable name -> value (states, inputs, parameters); states and inputs
        not named take their start values, parameters keep their current values.
    method
        ``forward``, ``central``, ``exact`` (the FMU's directional
        derivatives) or ``auto`` (exact when the FMU provides it, else central).
    allow_outside_bounds
        Accept point values outside the declared min/max.
    use_structure
        Use the ModelStructure dependencies for sparsity and column grouping.
    relative_step
        Override the relative step (√ε or ∛ε by default).
    refine
        Second-order schemes only: where the stencil's own second difference
        shows truncation dominating rounding, repeat that column group once with
        the error-balancing step (two more evaluations per refined group).
    columns
        Only these states/inputs are differenced (e.g. a trim's unknowns); the
        other columns are left zero and marked ``skipped``.

    Returns
    -------
    LinearModel
        A, B, C, D with per-entry error estimates, the operating point and the cost.
    """
    if method not in METHODS:
        raise UsageError(f"unknown linearization method {method!r}; choose one of {', '.join(METHODS)}")
    op = resolve_point(model, point, allow_outside_bounds=allow_outside_bounds)
    model.set_parameters(op.parameters)
    x0, u0 = op.x(), op.u()
    nx, nu, ny = model.nx, model.nu, model.ny
    requested = method
    if method == "auto":
        method = "exact" if model.capabilities.directional_derivatives else "central"
    if method == "exact" and not model.capabilities.directional_derivatives:
        raise UsageError(f"{model.model_name} does not provide directional derivatives; use "
                         f"--method central (or auto)")

    start_evals = model.evaluations
    start_dd = model.directional_evaluations
    DX0, Y0, Z0 = model.evaluate_batch(x0[None, :], u0[None, :], indicators=model.nz > 0)
    dx0, y0 = DX0[0], Y0[0]
    z0 = None if Z0 is None else Z0[0]
    f0 = np.concatenate([dx0, y0])
    values = np.concatenate([x0, u0])
    cat = model.catalogue
    columns_wanted = None if columns is None else list(columns)
    columns = list(cat.states) + list(cat.inputs)
    active = None
    if columns_wanted is not None:
        names = [v.name for v in columns]
        for name in columns_wanted:
            if name not in names:
                var = cat.get(name)  # unknown names: suggestion; others: not a state/input
                raise UsageError(f"{name!r} is a {var.role}; only states and inputs are Jacobian columns")
        active = np.array([n in columns_wanted for n in names])
    nominal = np.concatenate([model.x_nominal, model.u_nominal])

    pattern = structural_pattern(model) if use_structure else None
    used_structure = pattern is not None
    if pattern is None:
        pattern = np.ones((nx + ny, nx + nu), dtype=bool)
    warnings: list[str] = []

    job = Differencing(model, x0, u0, f0, z0, values, nominal, columns, relative_step, warnings,
                       refine, active)
    if method == "exact":
        J, err, schemes, groups, steps = job.exact(pattern)
        if job.leaked:
            warnings.append(leak_message(job.leaked, model, columns))
            J, err, schemes, groups, steps = job.exact(np.ones_like(pattern))
            used_structure = False
    else:
        J, err, schemes, groups, steps = job.differences(pattern, method)
        if job.leaked:
            warnings.append(leak_message(job.leaked, model, columns))
            job.leaked = []
            J, err, schemes, groups, steps = job.differences(np.ones_like(pattern), method)
            used_structure = False

    ident = ModelIdentity(model_name=model.model_name, guid=model.guid, sha256=model.sha256,
                          fmi_version=model.fmi_version)
    return LinearModel(
        states=model.state_names, inputs=model.input_names, outputs=model.output_names,
        state_units=[v.unit for v in cat.states], input_units=[v.unit for v in cat.inputs],
        output_units=[v.unit for v in cat.outputs],
        state_nominal=model.x_nominal, input_nominal=model.u_nominal, output_nominal=model.y_nominal,
        A=J[:nx, :nx], B=J[:nx, nx:], C=J[nx:, :nx], D=J[nx:, nx:],
        x0=x0, u0=u0, y0=y0, dx0=dx0, parameters=op.parameters,
        method=method, requested_method=requested,
        column_schemes=schemes, steps=steps,
        errors=JacobianErrors(A=err[:nx, :nx], B=err[:nx, nx:], C=err[nx:, :nx], D=err[nx:, nx:]),
        evaluations=model.evaluations - start_evals,
        directional_evaluations=model.directional_evaluations - start_dd,
        column_groups=groups, used_structure=used_structure, warnings=warnings, model=ident,
        refined_columns=[columns[j].name for j in dict.fromkeys(job.refined)],
    )
