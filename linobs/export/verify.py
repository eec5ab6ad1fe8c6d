"""``linobs verify``: re-check an exported schedule table against the FMU it was designed from.

Checks, in order (the first failure of the identity checks stops there):

1. the table reads, has this schema version and its checksum matches its
   content (:func:`linobs.export.table.read_table`);
2. the FMU is the one named in the table: GUID (instantiation token) and the
   SHA-256 of the file;
3. a seeded sample of usable nodes is linearized again at the node's stored
   operating point (x0, u0, the table's parameters) and compared with the
   stored local model (A, B, C, D and dx0), relative to the matrices' norms;
4. the frozen-point validation is re-run at those nodes with the fresh local
   models and the table's own schedule: every one must meet the table's
   target.

References
----------
Shamma, J. S. & Athans, M. (1990). Analysis of gain scheduled control for
nonlinear plants. IEEE Transactions on Automatic Control 35(8), 898-907
(frozen-point checks).
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
from pydantic import BaseModel, Field

from linobs.errors import LinobsError
from linobs.export.table import TableError, fmu_identity, read_table

__all__ = ["VerifyReport", "NodeCheck", "verify_table"]


class NodeCheck(BaseModel):
    """One re-linearized node."""

    node: int
    point: dict[str, float]
    model_difference: float | None = Field(None, description="max relative difference of "
                                                               "A, B, C, D, dx0")
    frozen_decay_reserve: float | None = Field(
        None, description="decay reserve of the frozen-point check with the fresh local model")
    passed: bool
    message: str = ""


class VerifyReport(BaseModel):
    """What ``linobs verify`` found."""

    table: str
    fmu: str
    ok: bool
    reasons: list[str] = Field(default_factory=list, description="why it failed (empty when ok)")
    checks: list[str] = Field(default_factory=list, description="what was checked and passed")
    nodes: list[NodeCheck] = Field(default_factory=list)
    tolerance: float


def _rel(a: np.ndarray, b: np.ndarray) -> float:
    a, b = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
    if a.size == 0 and b.size == 0:
        return 0.0
    if a.shape != b.shape:
        return float("inf")
    scale = max(float(np.max(np.abs(b))), 1e-300)
    return float(np.max(np.abs(a - b)) / scale)


def verify_table(table_path: str | os.PathLike[str], fmu_path: str | os.PathLike[str], *,
                 sample: int = 8, seed: int = 0, tolerance: float = 1e-6) -> VerifyReport:
    """Verify a schedule table against an FMU (module notes).

    Parameters
    ----------
    table_path : the ``schedule_table.json``
    fmu_path : the FMU to check against
    sample : number of usable nodes re-linearized (all when there are fewer)
    seed : seed of the node sample
    tolerance : largest accepted relative difference of the re-linearized model

    Returns
    -------
    VerifyReport
        ``ok`` False with the reasons on any mismatch.  A table that cannot be
        read or whose checksum does not match is a failure too (not an
        exception).
    """
    report = VerifyReport(table=str(table_path), fmu=str(fmu_path), ok=False, tolerance=tolerance)
    try:
        table = read_table(table_path)
    except TableError as exc:
        report.reasons.append(str(exc))
        return report
    report.checks.append("the table reads and its checksum matches its content")
    try:
        ident = fmu_identity(fmu_path)
    except TableError as exc:
        report.reasons.append(str(exc))
        return report
    if ident.guid != table.fmu.guid:
        report.reasons.append(f"the FMU's GUID {ident.guid} is not the table's {table.fmu.guid} "
                              f"({table.fmu.model_name}): this is another model")
    if ident.sha256 != table.fmu.sha256:
        report.reasons.append(f"the FMU file's SHA-256 {ident.sha256[:12]}… differs from the "
                              f"table's {table.fmu.sha256[:12]}…: the FMU was changed or rebuilt")
    if report.reasons:
        return report
    report.checks.append(f"the FMU is the table's ({table.fmu.model_name}, GUID {ident.guid}, "
                         "SHA-256 equal)")
    _recheck_nodes(table, Path(fmu_path), report, sample=sample, seed=seed)
    report.ok = not report.reasons
    return report


def _recheck_nodes(table, fmu: Path, report: VerifyReport, *, sample: int, seed: int) -> None:
    from linobs.estimator.frozen import frozen_point_check
    from linobs.estimator.schedule import GainSchedule
    from linobs.estimator.settings import ValidationSettings
    from linobs.linear.linearize import linearize
    from linobs.model.loader import load_model

    schedule = GainSchedule(table.schedule_data())
    data = schedule.data
    usable = [i for i, n in enumerate(data.nodes) if n.status == "ok"]
    rng = np.random.default_rng(seed)
    picked = sorted(rng.choice(usable, size=min(sample, len(usable)), replace=False).tolist()) \
        if usable else []
    fresh = {}
    with load_model(fmu) as model:
        for i in picked:
            node = data.nodes[i]
            point = {**table.parameters, **{s: v for s, v in zip(node.states, node.x0)},
                     **{u: v for u, v in zip(node.inputs, node.u0)}}
            point.update({a: v for a, v in schedule.node_point(i).items()
                          if data.axis_roles[a] == "parameter"})
            try:
                lm = linearize(model, point, method=table.linearize_method,
                               allow_outside_bounds=True)
            except LinobsError as exc:
                report.nodes.append(NodeCheck(node=i, point=schedule.node_point(i), passed=False,
                                              message=f"cannot linearize: {exc}"))
                continue
            rows = [lm.outputs.index(y) for y in node.outputs]
            cols = [lm.states.index(s) for s in node.states]
            ins = [lm.inputs.index(u) for u in node.inputs]
            A = np.asarray(lm.A)[np.ix_(cols, cols)]
            B = np.asarray(lm.B)[np.ix_(cols, ins)]
            C = np.asarray(lm.C)[np.ix_(rows, cols)]
            D = np.asarray(lm.D)[np.ix_(rows, ins)]
            dx = np.asarray(lm.dx0)[cols]
            diff = max(_rel(A, node.A), _rel(B, node.B), _rel(C, node.C), _rel(D, node.D),
                       float(np.max(np.abs(dx - np.asarray(node.dx0))) /
                             max(1.0, float(np.max(np.abs(np.asarray(node.dx0)))))))
            fresh[i] = lm
            ok = diff <= report.tolerance
            report.nodes.append(NodeCheck(
                node=i, point=schedule.node_point(i), model_difference=diff, passed=ok,
                message="" if ok else f"local model differs by {diff:.3g} (relative) from the "
                                      f"table's"))
    settings = ValidationSettings(**table.validation_settings)
    points = [schedule.node_point(i) for i in fresh]
    by_point = {tuple(sorted(schedule.node_point(i).items())): fresh[i] for i in fresh}
    frozen = frozen_point_check(schedule, points, lambda p: by_point[tuple(sorted(p.items()))],
                                settings) if points else None
    if frozen is not None:
        by_values = {tuple(sorted(p.values.items())): p for p in frozen.points}
        for check in report.nodes:
            p = by_values.get(tuple(sorted(check.point.items())))
            if p is None:
                continue
            check.frozen_decay_reserve = p.decay_reserve
            if not p.passed:
                check.passed = False
                check.message = (check.message + "; " if check.message else "") + \
                    f"frozen-point check fails again: {p.message}"
    bad = [c for c in report.nodes if not c.passed]
    for c in bad:
        report.reasons.append(f"node {c.node} ({', '.join(f'{k} = {v:g}' for k, v in c.point.items())}): "
                              f"{c.message}")
    if report.nodes and not bad:
        report.checks.append(f"{len(report.nodes)} node(s) re-linearized: local models agree within "
                             f"{report.tolerance:g} (relative) and meet the frozen-point target "
                             f"again ({table.validation.criterion})")
    if not usable:
        report.reasons.append("the table has no usable node to re-check")
