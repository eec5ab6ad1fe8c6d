"""The scheduled estimator as an FMI 2.0 co-simulation FMU (C sources kept in the archive).

:func:`build_estimator_fmu` writes the model description, the estimator's C
code (:mod:`linobs.export.c_code`) and the co-simulation interface
(:mod:`linobs.export.fmi2_cosimulation`) into a temporary folder and builds
the archive with :func:`linobs.model.build.build_fmu`.

Variables (all Real, value references in this order)
----------------------------------------------------
* inputs: the plant inputs (the schedule's input names) and the measured
  outputs (the schedule's output names); start values: the operating point
  of the node nearest the grid's center;
* outputs: ``<state>_hat`` (the estimate), for Kalman schedules
  ``<state>_sigma`` (√ of the diagonal of the steady-state covariance
  interpolated with the schedule's weights; NaN where a node with a weight
  has none), ``usable`` and ``outside`` (0/1, as in
  :class:`~linobs.estimator.schedule.Evaluation`);
* fixed parameters: ``<state>_hat_start`` (the initial estimate) and one per
  scheduling axis with the role "parameter" (the axis name).

Timing (the same numbers as :func:`linobs.estimator.nonlinear.run_estimator`)
-----------------------------------------------------------------------------
The FMU holds x̂ and, for the filter form, the input of the previous
communication point.  A communication step h must be m·Ts with a whole
m ≥ 1 (relative tolerance 1e-9); the inputs are held over it.

* **predictor**: the outputs at t_k are x̂[k|k−1] (no direct feedthrough);
  ``fmi2DoStep(t_k, h)`` applies m updates x̂ ← step(x̂, u[k], y[k]).
* **filter**: the outputs at t_k are x̂[k|k] = step(x̂[k−1|k−1], u[k−1],
  y[k], u_now=u[k]), computed from the current inputs (direct feedthrough,
  declared in ModelStructure); at the first communication point they are the
  initial estimate, uncorrected.  ``fmi2DoStep(t_k, h)`` commits x̂[k|k] and
  u[k], then applies m − 1 updates with the inputs held.
* ``usable``, ``outside`` and σ belong to the evaluation of the update that
  produced the estimate shown; at the first point, to the evaluation at the
  initial estimate and the current inputs.

The GUID is a UUID 5 of a SHA-256 digest of the schedule and of every
option, so the same schedule and options give the same GUID.

References
----------
Modelica Association (2014). Functional Mock-up Interface for Model Exchange
and Co-Simulation, version 2.0 (model description, co-simulation API).

Franklin, G. F., Powell, J. D. & Workman, M. L. (1998). Digital Control of
Dynamic Systems, 3rd ed. Addison-Wesley (prediction and current-estimate
observer forms).
"""

from __future__ import annotations

import hashlib
import json
import math
import re
import tempfile
import uuid
import xml.etree.ElementTree as ET
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from linobs.errors import UsageError
from linobs.estimator.schedule import GainSchedule
from linobs.export.c_code import c_sources, parameter_axes, require_tensor
from linobs.export.fmi2_cosimulation import wrapper_source

__all__ = ["FmuVariable", "build_estimator_fmu", "estimator_guid", "estimator_variables"]

_FORMAT = "linobs-estimator-fmu-1"
_NAMESPACE = uuid.uuid5(uuid.NAMESPACE_URL, "urn:linobs:estimator-fmu")


@dataclass(frozen=True)
class FmuVariable:
    """One Real variable of the estimator FMU."""

    name: str
    value_reference: int
    causality: str          # input, output, parameter
    variability: str        # continuous, discrete, fixed
    description: str
    start: float | None     # None for outputs
    group: str              # U, Y, XHAT, SIGMA, USABLE, OUTSIDE, START, PAR


def _center(schedule: GainSchedule) -> int:
    from linobs.estimator.nonlinear import center_node_index

    return center_node_index(schedule.data)


def estimator_variables(schedule: GainSchedule,
                        initial_estimate: Mapping[str, float] | None = None) -> list[FmuVariable]:
    """The FMU's variables in value-reference order (see the module notes).

    Raises
    ------
    UsageError
        ``initial_estimate`` names a non-state or holds a non-finite value, or
        two variables would share a name.
    """
    center = schedule.data.nodes[_center(schedule)]
    given = dict(initial_estimate or {})
    unknown = [k for k in given if k not in schedule.states]
    if unknown:
        raise UsageError(f"the initial estimate names {', '.join(unknown)}, which the estimator "
                         f"does not estimate ({', '.join(schedule.states)})")
    start = {s: float(given.get(s, x)) for s, x in zip(schedule.states, center.x0)}
    bad = [k for k, v in start.items() if not math.isfinite(v)]
    if bad:
        raise UsageError(f"the initial estimate of {', '.join(bad)} is not finite; give numbers")
    point = schedule.node_point(_center(schedule))
    rows: list[tuple[str, str, str, str, float | None, str]] = []
    rows += [(u, "input", "continuous", "plant input (as measured), held over a communication "
              "step", float(v), "U") for u, v in zip(schedule.inputs, center.u0)]
    rows += [(y, "input", "continuous", "measured plant output", float(v), "Y")
             for y, v in zip(schedule.outputs, center.y0)]
    rows += [(f"{s}_hat", "output", "continuous", f"estimate of {s}", None, "XHAT")
             for s in schedule.states]
    if schedule.kind == "kalman":
        rows += [(f"{s}_sigma", "output", "continuous", f"standard deviation of the error of "
                  f"{s} from the interpolated steady-state covariance", None, "SIGMA")
                 for s in schedule.states]
    rows.append(("usable", "output", "discrete", "1: every node used by the interpolation has "
                 "a design (else the correction is skipped)", None, "USABLE"))
    rows.append(("outside", "output", "discrete", "1: the scheduling value lay outside the "
                 "grid's box and was clamped", None, "OUTSIDE"))
    rows += [(f"{s}_hat_start", "parameter", "fixed", f"initial estimate of {s}", start[s],
              "START") for s in schedule.states]
    rows += [(a, "parameter", "fixed", "scheduling parameter (read by the schedule)",
              float(point[a]), "PAR") for a in parameter_axes(schedule)]
    names = [r[0] for r in rows]
    twice = sorted({n for n in names if names.count(n) > 1})
    if twice:
        raise UsageError(f"the estimator FMU would have two variables named {', '.join(twice)}; "
                         f"rename the plant variables so that inputs, outputs, parameters and "
                         f"'<state>_hat' names differ")
    return [FmuVariable(n, i, c, v, d, s, g) for i, (n, c, v, d, s, g) in enumerate(rows)]


def estimator_guid(schedule: GainSchedule, model_name: str, variables: list[FmuVariable],
                   caution: str, header_note: str) -> str:
    """A GUID derived from the schedule and the options (same inputs, same GUID)."""
    content = json.dumps({"format": _FORMAT, "schedule": schedule.data.model_dump(mode="json"),
                          "model_name": model_name, "caution": caution, "note": header_note,
                          "starts": [[v.name, v.start] for v in variables]},
                         sort_keys=True, separators=(",", ":"))
    digest = hashlib.sha256(content.encode("utf-8")).hexdigest()
    return "{" + str(uuid.uuid5(_NAMESPACE, digest)) + "}"


def _number(v: float) -> str:
    return repr(float(v))


def _model_description(schedule: GainSchedule, model_name: str, identifier: str, guid: str,
                       description: str, variables: list[FmuVariable],
                       source_files: list[str]) -> str:
    root = ET.Element("fmiModelDescription", {
        "fmiVersion": "2.0", "modelName": model_name, "guid": guid,
        "description": description, "generationTool": "linobs",
        "variableNamingConvention": "flat", "numberOfEventIndicators": "0"})
    cs = ET.SubElement(root, "CoSimulation", {
        "modelIdentifier": identifier, "needsExecutionTool": "false",
        "canHandleVariableCommunicationStepSize": "true", "canInterpolateInputs": "false",
        "maxOutputDerivativeOrder": "0", "canRunAsynchronuously": "false",
        "canBeInstantiatedOnlyOncePerProcess": "false",
        "canNotUseMemoryManagementFunctions": "false", "canGetAndSetFMUstate": "false",
        "canSerializeFMUstate": "false", "providesDirectionalDerivative": "false"})
    files = ET.SubElement(cs, "SourceFiles")
    for name in source_files:
        ET.SubElement(files, "File", {"name": name})
    cats = ET.SubElement(root, "LogCategories")
    for name, text in (("logStatusError", "errors: calls in the wrong state, bad arguments, "
                        "diverged estimates (always reported)"),
                       ("logStatusWarning", "warnings (always reported)"),
                       ("logStatusDiscard", "status requests that cannot be answered"),
                       ("logAll", "debug messages: instantiation, initialization, steps")):
        ET.SubElement(cats, "Category", {"name": name, "description": text})
    ET.SubElement(root, "DefaultExperiment", {"startTime": "0",
                                              "stepSize": _number(schedule.sample_time)})
    mv = ET.SubElement(root, "ModelVariables")
    for v in variables:
        attrs = {"name": v.name, "valueReference": str(v.value_reference),
                 "description": v.description, "causality": v.causality,
                 "variability": v.variability}
        if v.causality == "parameter":
            attrs["initial"] = "exact"
        elif v.causality == "output":
            attrs["initial"] = "calculated"
        sv = ET.SubElement(mv, "ScalarVariable", attrs)
        ET.SubElement(sv, "Real", {} if v.start is None else {"start": _number(v.start)})
    index = {v.name: v.value_reference + 1 for v in variables}  # 1-based ModelVariables order
    inputs = [v for v in variables if v.group in ("U", "Y")]
    scheduled_inputs = [index[a] for a in schedule.axes if schedule.data.axis_roles[a] == "input"]
    d_nonzero = any(np.any(np.asarray(n.D, dtype=float) != 0) for n in schedule.data.nodes)
    structure = ET.SubElement(root, "ModelStructure")
    outputs = ET.SubElement(structure, "Outputs")
    for v in variables:
        if v.causality != "output":
            continue
        if v.group == "XHAT" and schedule.form == "filter":
            deps = [index[x.name] for x in inputs if x.group == "Y" or d_nonzero]
        elif v.group == "XHAT":
            deps = []
        else:  # the evaluation at the first point reads the input axes
            deps = scheduled_inputs
        ET.SubElement(outputs, "Unknown", {"index": str(index[v.name]),
                                           "dependencies": " ".join(map(str, sorted(deps)))})
    initial = ET.SubElement(structure, "InitialUnknowns")
    for v in variables:
        if v.causality == "output":
            ET.SubElement(initial, "Unknown", {"index": str(index[v.name])})
    ET.indent(root, space="  ")
    return '<?xml version="1.0" encoding="UTF-8"?>\n' + ET.tostring(root, encoding="unicode") \
        + "\n"


def _fmu_description(schedule: GainSchedule, caution: str, header_note: str) -> str:
    if schedule.form == "filter":
        timing = ("filter form: the outputs at t_k are x_hat[k|k] from the held x_hat[k-1|k-1], "
                  "the held u[k-1] and the current inputs y[k], u[k] (direct feedthrough); at the "
                  "first communication point the initial estimate; doStep commits x_hat[k|k] "
                  "and u[k]")
    else:
        timing = ("predictor form: the outputs at t_k are x_hat[k|k-1] (no direct feedthrough); "
                  "doStep applies the update with the current inputs u[k], y[k]")
    kind = {"kalman": "Kalman", "luenberger": "Luenberger"}.get(schedule.kind, schedule.kind)
    return (f"{caution.strip()} | Scheduled {kind} estimator, sample time "
            f"{schedule.sample_time:.17g} s; {timing}; a communication step must be a whole "
            f"multiple of the sample time (inputs held). {header_note}".strip())


def build_estimator_fmu(schedule: GainSchedule, output: str | Path, *, model_name: str,
                        caution: str, initial_estimate: Mapping[str, float] | None = None,
                        header_note: str = "", compiler: str | None = None) -> Path:
    """Build the scheduled estimator as an FMI 2.0 co-simulation FMU.

    Parameters
    ----------
    schedule : GainSchedule
        A schedule on a tensor grid.
    output : path
        The ``.fmu`` to write (atomically).
    model_name : str
        The FMU's model name; its model identifier (and the file names of the
        sources) is this name with every character other than letters,
        digits and ``_`` replaced by ``_``.
    caution : str
        The safety caution, put in the description and at the top of every source file.
    initial_estimate : mapping, optional
        State -> initial estimate (the start of ``<state>_hat_start``); missing
        states take the x0 of the usable node nearest the grid's center.
    header_note : str
        Where the schedule comes from (source FMU identity, table checksum).
    compiler : str, optional
        C compiler command (default: :func:`linobs.model.build.find_c_compiler`).

    Returns
    -------
    Path
        The written archive; ``sources/`` holds the C files it was built from.

    Raises
    ------
    UsageError
        A scattered schedule, an empty model name or caution, a bad initial
        estimate, clashing variable names.
    CompilerNotFoundError, BuildError
        From :func:`linobs.model.build.build_fmu`.

    References
    ----------
    Modelica Association (2014). Functional Mock-up Interface for Model
    Exchange and Co-Simulation, version 2.0.
    """
    from linobs.model.build import build_fmu

    require_tensor(schedule)
    if not model_name or not model_name.strip():
        raise UsageError("give the estimator FMU a model name (model_name='...')")
    if not caution or not caution.strip():
        raise UsageError("give the caution text that the estimator FMU must carry")
    identifier = re.sub(r"[^A-Za-z0-9_]", "_", model_name.strip())
    if identifier[0].isdigit():
        identifier = "fmu_" + identifier
    variables = estimator_variables(schedule, initial_estimate)
    guid = estimator_guid(schedule, model_name, variables, caution, header_note)
    prefix = f"{identifier}_schedule"
    files = c_sources(schedule, prefix=prefix, caution=caution, header_note=header_note)
    offsets = {group: _next_offset(variables, group) for group in _ORDER}
    offsets["COUNT"] = len(variables)
    wrapper = f"{identifier}_fmi2.c"
    files[wrapper] = wrapper_source(
        prefix=prefix, guid=guid, model_name=model_name, caution=caution,
        header_note=header_note, offsets=offsets, names=[v.name for v in variables],
        starts=[math.nan if v.start is None else v.start for v in variables])
    xml = _model_description(schedule, model_name, identifier, guid,
                             _fmu_description(schedule, caution, header_note), variables,
                             sorted(n for n in files if n.endswith(".c")))
    with tempfile.TemporaryDirectory(prefix="linobs-estimator-fmu-") as work:
        root = Path(work)
        (root / "sources").mkdir()
        (root / "modelDescription.xml").write_text(xml, encoding="utf-8")
        for name, text in files.items():
            (root / "sources" / name).write_text(text, encoding="utf-8")
        return build_fmu(root, output, compiler=compiler)


_ORDER = ("U", "Y", "XHAT", "SIGMA", "USABLE", "OUTSIDE", "START", "PAR")


def _next_offset(variables: list[FmuVariable], group: str) -> int:
    """First value reference of ``group``, or where it would start when it is empty."""
    after = _ORDER[_ORDER.index(group):]
    refs = [v.value_reference for v in variables if v.group in after]
    return min(refs) if refs else len(variables)
