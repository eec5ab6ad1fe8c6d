"""Structural sparsity of the Jacobian [A B; C D] and column grouping.

The FMU's ModelStructure lists, for every state derivative and output, the
states and inputs it depends on.  Columns (states and inputs) that never share
a row can be perturbed together: one model evaluation then yields all of
their Jacobian columns (Curtis, Powell & Reid 1974).

References
----------
Curtis, A. R., Powell, M. J. D. & Reid, J. K. (1974). On the estimation of
sparse Jacobian matrices. IMA Journal of Applied Mathematics 13(1), 117-119.

Coleman, T. F. & Moré, J. J. (1983). Estimation of sparse Jacobian matrices
and graph coloring problems. SIAM Journal on Numerical Analysis 20(1), 187-209.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:  # pragma: no cover
    from linobs.model.instance import Model


def structural_pattern(model: "Model") -> np.ndarray | None:
    """Boolean pattern of shape (nx+ny, nx+nu), or None without dependency information.

    A row whose ``dependencies`` attribute is absent depends on every state
    and input (FMI 2.0 §3.3, FMI 3.0 §2.4.8 semantics).  When the model
    structure lists no derivative or output at all, None is returned and the
    caller falls back to dense differencing.
    """
    md = model.description
    cat = model.catalogue
    nx, nu, ny = model.nx, model.nu, model.ny
    rows = list(getattr(md, "derivatives", []) or [])
    outs = list(getattr(md, "outputs", []) or [])
    if len(rows) != nx or len(outs) != ny:
        return None
    if all(r.dependencies is None for r in rows + outs):
        return None
    column: dict[tuple[int, str], int] = {}
    for j, v in enumerate(cat.states):
        column[(v.value_reference, v.type)] = j
    for j, v in enumerate(cat.inputs):
        column[(v.value_reference, v.type)] = nx + j
    pattern = np.zeros((nx + ny, nx + nu), dtype=bool)
    for i, unknown in enumerate(rows + outs):
        deps = unknown.dependencies
        if deps is None:
            pattern[i, :] = True
            continue
        for dep in deps:
            j = column.get((dep.valueReference, dep.type))
            if j is not None:
                pattern[i, j] = True
    return pattern


def color_columns(pattern: np.ndarray) -> list[list[int]]:
    """Group columns so that no two columns in a group share a structurally non-zero row.

    Greedy sequential coloring of the column-intersection graph in
    largest-degree-first order (Coleman & Moré 1983); every group is then one
    perturbation.  Empty columns form no group (their Jacobian column is zero).

    Returns
    -------
    list of list of int
        Column indices per group, each group sorted.
    """
    pattern = np.asarray(pattern, dtype=bool)
    ncols = pattern.shape[1]
    overlap = (pattern.T.astype(np.int64) @ pattern.astype(np.int64)) > 0
    np.fill_diagonal(overlap, False)
    nonempty = [j for j in range(ncols) if pattern[:, j].any()]
    order = sorted(nonempty, key=lambda j: (-int(overlap[j].sum()), j))
    color = {}
    for j in order:
        taken = {color[k] for k in np.flatnonzero(overlap[j]) if k in color}
        c = 0
        while c in taken:
            c += 1
        color[j] = c
    groups: dict[int, list[int]] = {}
    for j, c in color.items():
        groups.setdefault(c, []).append(j)
    return [sorted(groups[c]) for c in sorted(groups)]
