"""Assembling a schedule table from a designed and validated schedule.

Per node (module notes of :mod:`linobs.export.table`): *designed* — the node
has a design; *passed* — designed, the node's own frozen-point check (its own
local model with its own gain) meets the target, and no frozen-point check
between the nodes that gives it a non-zero interpolation weight failed
(status ``fail`` or ``error``; ``unusable`` points touch refused nodes, which
are unusable anyway).  Usable in the table = passed.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING, Any

import numpy as np

import linobs
from linobs.errors import UsageError
from linobs.export.table import (
    FmuIdentity,
    NodeValidation,
    ScheduleTable,
    TableAxis,
    TableValidation,
    now_utc,
)

if TYPE_CHECKING:  # pragma: no cover
    from linobs.estimator.frozen import FrozenReport
    from linobs.estimator.schedule import GainSchedule

__all__ = ["ExportRefused", "build_table", "node_validations", "failed_caution"]


class ExportRefused(UsageError):
    """Designed nodes failed validation and ``allow_failed`` was not given."""


def node_validations(schedule: GainSchedule, own: FrozenReport, between: FrozenReport
                     ) -> list[NodeValidation]:
    """The validation of every node (module notes).

    Parameters
    ----------
    schedule : the designed schedule
    own : frozen-point report at the nodes themselves (points = the node points)
    between : the frozen-point report of the validate stage (cell centers, random points)
    """
    data = schedule.data
    k = len(data.nodes)
    own_by_point = {_key(p.values, schedule.axes): p for p in own.points}
    checked = np.zeros(k, dtype=int)
    failed = np.zeros(k, dtype=int)
    worst = np.full(k, np.inf)
    if between.points:
        S = np.array([schedule.point_value(p.values) for p in between.points])
        nodes, weights, _ = schedule.weights(S)
        for p, ns, ws in zip(between.points, nodes, weights):
            used = np.unique(ns[ws > 0.0])
            checked[used] += 1
            if p.status in ("fail", "error"):
                failed[used] += 1
            if p.decay_reserve is not None:
                worst[used] = np.minimum(worst[used], p.decay_reserve)
    out = []
    for i, node in enumerate(data.nodes):
        point = schedule.node_point(i)
        mine = own_by_point.get(_key(point, schedule.axes))
        designed = node.status == "ok"
        own_ok = designed and mine is not None and mine.passed
        passed = bool(own_ok and failed[i] == 0)
        if not designed:
            message = f"no design: {node.message}" if node.message else "no design"
        elif mine is None or not mine.passed:
            message = ("its own error dynamics miss the target: "
                       + (mine.message if mine is not None else "not checked"))
        elif failed[i]:
            message = f"{failed[i]} of {checked[i]} frozen points between the nodes that use it failed"
        else:
            message = ""
        out.append(NodeValidation(
            node=i, point=point, designed=designed, passed=passed, usable=passed,
            node_decay_reserve=None if mine is None else mine.decay_reserve,
            frozen_checked=int(checked[i]), frozen_failed=int(failed[i]),
            worst_frozen_decay_reserve=None if not np.isfinite(worst[i]) else float(worst[i]),
            message=message))
    return out


def _key(values: Mapping[str, float], axes: Sequence[str]) -> tuple[float, ...]:
    return tuple(round(float(values[a]), 12) for a in axes)


def failed_caution(nodes: Sequence[NodeValidation]) -> str:
    bad = [n.node for n in nodes if n.designed and not n.passed]
    shown = ", ".join(str(i) for i in bad[:10]) + (" ..." if len(bad) > 10 else "")
    return (f"WRITTEN WITH FAILED VALIDATION (allow_failed): {len(bad)} designed node(s) failed "
            f"validation ({shown}) and are marked unusable; the estimator runs without "
            "correction wherever they carry weight. Resolve this before any use.")


def build_table(schedule: GainSchedule, *, caution: str, study: str, study_hash: str,
                fmu: FmuIdentity, units: Mapping[str, str], design_settings: Mapping[str, Any],
                validation_settings: Mapping[str, Any], parameters: Mapping[str, float],
                linearize_method: str,
                own: FrozenReport, between: FrozenReport,
                nonlinear_rms: Mapping[str, float] | None = None,
                fixed_gain_rms: Mapping[str, float] | None = None,
                allow_failed: bool = False) -> ScheduleTable:
    """The schedule table (not yet sealed with its checksum: :func:`seal_table` does that).

    Raises
    ------
    ExportRefused
        A designed node failed validation and ``allow_failed`` is False.
    """
    nodes = node_validations(schedule, own, between)
    bad = [n for n in nodes if n.designed and not n.passed]
    if bad and not allow_failed:
        first = bad[0]
        raise ExportRefused(
            f"{len(bad)} designed node(s) failed validation (first: node {first.node} at "
            f"{_point_text(first.point)}: {first.message}); fix the design (finer grid, other "
            "poles or noise) or export anyway with --allow-failed (the nodes are then marked "
            "unusable and the file says so)")
    if bad:
        caution = f"{caution} {failed_caution(nodes)}"
    data = schedule.data
    exported = []
    for node, check in zip(data.nodes, nodes):
        if node.status == "ok" and not check.passed:
            node = node.model_copy(update={"status": "refused",
                                           "message": f"failed validation: {check.message}"})
        exported.append(node)
    sched = data.model_copy(update={"nodes": exported})
    axes = [TableAxis(name=a, role=data.axis_roles[a], unit=str(units.get(a, "") or ""),
                      values=list(data.axis_values[d]) if data.grid_kind == "tensor" else [])
            for d, a in enumerate(data.axes)]
    names = list(schedule.states) + list(schedule.inputs) + list(schedule.outputs) + list(data.axes)
    return ScheduleTable(
        caution=caution, created=now_utc(), linobs_version=linobs.__version__, study=study,
        study_hash=study_hash, fmu=fmu, kind=schedule.kind, domain=schedule.domain,
        form=schedule.form, sample_time=schedule.sample_time, states=list(schedule.states),
        inputs=list(schedule.inputs), outputs=list(schedule.outputs),
        units={n: str(units.get(n, "") or "") for n in dict.fromkeys(names)}, axes=axes,
        design_settings=dict(design_settings), validation_settings=dict(validation_settings),
        parameters={k: float(v) for k, v in parameters.items() if k not in data.axes},
        linearize_method=linearize_method,
        validation=TableValidation(
            criterion=between.criterion, target=between.target, frozen_passed=between.passed,
            frozen_failed=between.failed + between.errors,
            worst_decay_reserve=between.worst_decay_reserve,
            nonlinear_rms=dict(nonlinear_rms or {}), fixed_gain_rms=dict(fixed_gain_rms or {}),
            nodes=nodes),
        allow_failed=bool(bad), schedule=sched.model_dump(mode="json"))


def _point_text(point: Mapping[str, float]) -> str:
    return ", ".join(f"{k} = {v:g}" for k, v in point.items())
