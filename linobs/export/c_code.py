"""Generated C99 code of a scheduled estimator: const tables and an allocation-free update.

:func:`c_sources` writes a gain schedule as one header and one source file.
The code needs only ``<math.h>``, ``<string.h>`` and ``<stddef.h>``, allocates
nothing, and holds no writable globals: every table is ``const``, every
function works on caller-provided memory (the interpolated quantities live in
a ``<prefix>_local`` struct on the caller's stack).

What the files hold
-------------------
* size macros: ``<P>_STATES``, ``_INPUTS``, ``_OUTPUTS``, ``_AXES``,
  ``_PARAMETERS`` (axes read from the ``params`` argument), ``_NODES``,
  ``_CORNERS`` (nodes per cell), ``_KALMAN``, ``_FILTER_FORM``,
  ``_SAMPLE_TIME`` and ``_WEIGHT_FLOOR``;
* the axis values, lengths and strides, where each axis reads its value
  (state, input or parameter, and the index there), the names of states,
  inputs, outputs and axes;
* per node, in the C order of the axes: the usable flag (the node has a
  design) and L, Φ, Γ, Γ₀, C, D, x0, u0, y0, dx0 (row-major); for Kalman
  schedules also the diagonal of the steady-state covariance of the form used
  (the posterior P for the filter form, the prior for the predictor) and
  whether the node has one;
* ``<prefix>_scheduling_value``, ``<prefix>_interpolate``, ``<prefix>_update``,
  ``<prefix>_standard_deviation`` and ``<prefix>_step``.

The arithmetic is that of :class:`linobs.estimator.schedule.GainSchedule`
(``evaluate`` and ``step``): multilinear weights on the cell holding the
scheduling value after clamping it to the grid's box, weights at or below
:data:`linobs.estimator.interpolation.WEIGHT_FLOOR` set to zero and the rest
renormalized, a value usable only when every node with a non-zero weight has
a design, and the correction skipped where it is not.  Doubles are printed
with ``%.17g`` and read back exactly.  The continuous gain of a continuous
design is not exported: every node runs the discrete update.

Limits
------
Tensor grids only.  A scattered schedule (Delaunay interpolation) is refused
with a :class:`~linobs.errors.UsageError`: redesign it on a tensor grid, or
use the JSON/CSV table.

References
----------
Weiser, A. & Zarantonello, S. E. (1988). A note on piecewise linear and
multilinear table interpolation in many dimensions. Mathematics of
Computation 50(181), 189-196.

Franklin, G. F., Powell, J. D. & Workman, M. L. (1998). Digital Control of
Dynamic Systems, 3rd ed. Addison-Wesley (prediction and current-estimate
observer forms).
"""

from __future__ import annotations

import math
import re
import textwrap
from collections.abc import Iterable, Sequence
from pathlib import Path

import numpy as np

from linobs.atomic import atomic_write_text
from linobs.errors import UsageError
from linobs.estimator.interpolation import WEIGHT_FLOOR
from linobs.estimator.schedule import FIELDS, GainSchedule
from linobs.estimator.schedule_checks import field_array
from linobs.export.c_templates import HEADER_API, SOURCE_FUNCTIONS

__all__ = ["ROLE_CODES", "c_double", "c_sources", "c_string", "check_identifier",
           "comment_block", "parameter_axes", "require_tensor", "write_c_sources"]

ROLE_CODES = {"state": 0, "input": 1, "parameter": 2}
_IDENTIFIER = re.compile(r"[A-Za-z_][A-Za-z0-9_]*\Z")
_WIDTH = 96


# ------------------------------------------------------------------------------ C text helpers
def c_double(value: float) -> str:
    """A C double literal that reads back to exactly ``value`` (``%.17g``)."""
    v = float(value)
    if math.isnan(v):
        return "NAN"
    if math.isinf(v):
        return "INFINITY" if v > 0 else "(-INFINITY)"
    text = "%.17g" % v
    return text if any(ch in text for ch in ".e") else text + ".0"


def c_string(text: str) -> str:
    """A C string literal: printable ASCII kept, everything else as octal escapes."""
    out = []
    for byte in str(text).encode("utf-8"):
        ch = chr(byte)
        if ch in '"\\?':  # '?' too: no trigraphs
            out.append("\\" + ch)
        elif 32 <= byte < 127:
            out.append(ch)
        else:
            out.append(f"\\{byte:03o}")
    return '"' + "".join(out) + '"'


def comment_block(*paragraphs: str) -> str:
    """A C block comment holding the paragraphs (wrapped; ``*/`` cannot end it early)."""
    lines = ["/*"]
    for i, para in enumerate(p for p in paragraphs if p and p.strip()):
        if i:
            lines.append(" *")
        for raw in para.replace("*/", "* /").splitlines():
            wrapped = textwrap.wrap(raw, _WIDTH - 3) or [""]
            lines += [(" * " + w).rstrip() for w in wrapped]
    lines.append(" */")
    return "\n".join(lines) + "\n"


def check_identifier(name: str, what: str) -> str:
    """``name`` if it is a C identifier, else a :class:`UsageError`."""
    if not _IDENTIFIER.match(name or ""):
        raise UsageError(f"the {what} {name!r} is not a C identifier; use letters, digits and "
                         f"underscores, not starting with a digit")
    return name


def require_tensor(schedule: GainSchedule) -> None:
    """Refuse scattered schedules (the generated code interpolates on tensor grids only)."""
    if schedule.data.grid_kind != "tensor":
        raise UsageError("C export needs a tensor grid, and this schedule's grid is scattered; "
                         "design it on a tensor grid (axes of values) or use the JSON/CSV table")


def parameter_axes(schedule: GainSchedule) -> list[str]:
    """The axes read from the ``params`` argument, in its order."""
    return [a for a in schedule.axes if schedule.data.axis_roles[a] == "parameter"]


def _wrap_values(values: Sequence[str], indent: str) -> list[str]:
    lines, line = [], indent
    for v in values:
        piece = v + ", "
        if len(line) + len(piece) > _WIDTH and line.strip():
            lines.append(line.rstrip())
            line = indent
        line += piece
    if line.strip():
        lines.append(line.rstrip().rstrip(","))
    return lines


def _array(decl: str, values: Sequence[str]) -> str:
    body = _wrap_values(list(values) or ["0"], "    ")
    return decl + " = {\n" + "\n".join(body) + "\n};\n"


def _node_table(decl: str, rows: Iterable[tuple[str, Sequence[str]]]) -> str:
    out = [decl + " = {"]
    for label, values in rows:
        out.append(f"    /* {label} */")
        body = _wrap_values(list(values) or ["0.0"], "        ")
        out.append("    {\n" + "\n".join(body) + "\n    },")
    out[-1] = out[-1].rstrip(",")
    return "\n".join(out) + "\n};\n"


# ------------------------------------------------------------------------------ the sources
def _sizes(schedule: GainSchedule, P: str) -> str:
    moving = sum(len(v) >= 2 for v in schedule.data.axis_values)
    rows = [("STATES", len(schedule.states), "estimated states n"),
            ("INPUTS", len(schedule.inputs), "measured plant inputs m"),
            ("OUTPUTS", len(schedule.outputs), "measured outputs p"),
            ("AXES", len(schedule.axes), "scheduling variables"),
            ("PARAMETERS", len(parameter_axes(schedule)), "axes read from params"),
            ("NODES", len(schedule.data.nodes), "grid nodes, C order of the axes"),
            ("CORNERS", 1 << moving, "nodes per cell: 2^(axes of two or more values)"),
            ("KALMAN", int(schedule.kind == "kalman"), "1: node variances are present"),
            ("FILTER_FORM", int(schedule.form == "filter"), "1: current estimate, 0: predictor")]
    lines = [f"#define {P}_{k} {v} /* {note} */" for k, v, note in rows]
    lines.append(f"#define {P}_SAMPLE_TIME {c_double(schedule.sample_time)} /* Ts [s] */")
    lines.append(f"#define {P}_WEIGHT_FLOOR {c_double(WEIGHT_FLOOR)} /* smaller weights are 0 */")
    return "\n".join(lines) + "\n"


def _node_label(schedule: GainSchedule, i: int) -> str:
    point = ", ".join(f"{k}={v:.6g}" for k, v in schedule.node_point(i).items())
    status = schedule.data.nodes[i].status
    return f"node {i}: {point or 'no axes'} ({status})".replace("*/", "* /")


def _tables(schedule: GainSchedule, p: str, P: str) -> str:
    data = schedule.data
    nodes = data.nodes
    first = next(n for n in nodes if n.status == "ok")
    params = parameter_axes(schedule)
    shape = tuple(len(v) for v in data.axis_values)
    strides = [int(np.prod(shape[d + 1:], dtype=np.int64)) for d in range(len(shape))]
    source, index = [], []
    for a in data.axes:
        role = data.axis_roles[a]
        source.append(str(ROLE_CODES[role]))
        if role == "state":
            index.append(str(schedule.states.index(a)))
        elif role == "input":
            index.append(str(schedule.inputs.index(a)))
        else:
            index.append(str(params.index(a)))
    names = lambda xs: [c_string(x) for x in xs] or ['""']  # noqa: E731
    out = [f"const char *const {p}_state_names[{P}_DIM({P}_STATES)] = "
           f"{{{', '.join(names(schedule.states))}}};\n",
           f"const char *const {p}_input_names[{P}_DIM({P}_INPUTS)] = "
           f"{{{', '.join(names(schedule.inputs))}}};\n",
           f"const char *const {p}_output_names[{P}_DIM({P}_OUTPUTS)] = "
           f"{{{', '.join(names(schedule.outputs))}}};\n",
           f"const char *const {p}_axis_names[{P}_DIM({P}_AXES)] = "
           f"{{{', '.join(names(data.axes))}}};\n\n"]
    for d, values in enumerate(data.axis_values):
        out.append(_array(f"static const double {p}_axis_{d}[{len(values)}]",
                          [c_double(v) for v in values]))
    ptrs = [f"{p}_axis_{d}" for d in range(len(data.axes))] or ["NULL"]
    out.append(f"const double *const {p}_axis_values[{P}_DIM({P}_AXES)] = "
               f"{{{', '.join(ptrs)}}};\n")
    out.append(_array(f"const int {p}_axis_length[{P}_DIM({P}_AXES)]", [str(n) for n in shape]))
    out.append(_array(f"static const long {p}_axis_stride[{P}_DIM({P}_AXES)]",
                      [f"{s}L" for s in strides]))
    out.append(_array(f"const int {p}_axis_source[{P}_DIM({P}_AXES)]", source))
    out.append(_array(f"const int {p}_axis_index[{P}_DIM({P}_AXES)]", index))
    out.append(_array(f"const unsigned char {p}_node_usable[{P}_NODES]",
                      [str(int(n.status == "ok")) for n in nodes]) + "\n")
    labels = [_node_label(schedule, i) for i in range(len(nodes))]
    size = {"L": "STATES * {P}_OUTPUTS", "Phi": "STATES * {P}_STATES",
            "Gamma": "STATES * {P}_INPUTS", "Gamma0": "STATES * {P}_STATES",
            "C": "OUTPUTS * {P}_STATES", "D": "OUTPUTS * {P}_INPUTS", "x0": "STATES",
            "u0": "INPUTS", "y0": "OUTPUTS", "dx0": "STATES"}
    for f in FIELDS:
        rows = [(label, [c_double(v) for v in field_array(n, f, first).ravel()])
                for label, n in zip(labels, nodes)]
        width = f"{P}_DIM({P}_{size[f].format(P=P)})"
        out.append(_node_table(f"static const double {p}_node_{f}[{P}_NODES][{width}]", rows))
    if schedule.kind == "kalman":
        which = "P_post" if schedule.form == "filter" else "P_prior"
        n = len(schedule.states)
        covs = [None if getattr(nd, which) is None or nd.status != "ok"
                else np.asarray(getattr(nd, which), dtype=float) for nd in nodes]
        out.append(f"/* diagonal of {which} (the covariance of the {schedule.form} form) */\n")
        out.append(_array(f"static const unsigned char {p}_node_has_variance[{P}_NODES]",
                          [str(int(c is not None)) for c in covs]))
        rows = [(label, [c_double(v) for v in (np.diag(c) if c is not None else np.zeros(n))])
                for label, c in zip(labels, covs)]
        out.append(_node_table(f"static const double {p}_node_variance[{P}_NODES]"
                               f"[{P}_DIM({P}_STATES)]", rows))
    return "\n".join(out)


def _describe(schedule: GainSchedule) -> str:
    roles = ", ".join(f"{a} ({schedule.data.axis_roles[a]}, {len(v)} values)"
                      for a, v in zip(schedule.axes, schedule.data.axis_values)) or "none"
    if schedule.form == "filter":
        update = ("filter form (current estimate): x_prior = x0 + Phi (x - x0) + Gamma (u - u0) + "
                  "Gamma0 dx0 with x = x_hat[k-1|k-1], u = u[k-1]; x_hat[k|k] = x_prior + "
                  "L (y[k] - y0 - C (x_prior - x0) - D (u_now - u0)), u_now = u[k].")
    else:
        update = ("predictor form: x_hat[k+1|k] = x0 + Phi (x - x0) + Gamma (u - u0) + "
                  "Gamma0 dx0 + L (y[k] - y0 - C (x - x0) - D (u - u0)) with x = x_hat[k|k-1], "
                  "u = u[k].")
    kind = {"kalman": "Kalman", "luenberger": "Luenberger"}.get(schedule.kind, schedule.kind)
    return (f"Scheduled {kind} estimator generated by linobs, sample time "
            f"{schedule.sample_time:.17g} s; states {', '.join(schedule.states)}; inputs "
            f"{', '.join(schedule.inputs) or 'none'}; measured outputs "
            f"{', '.join(schedule.outputs)}; scheduling axes {roles}.\n"
            f"Update, {update} The node quantities are interpolated multilinearly at the "
            f"scheduling value of the incoming estimate and input (clamped to the grid's box: "
            f"outside = 1); where a node with a non-zero weight has no design the value is not "
            f"usable (usable = 0): the gain is NaN and the correction is skipped.")


def c_sources(schedule: GainSchedule, *, prefix: str = "linobs_schedule", caution: str,
              header_note: str = "") -> dict[str, str]:
    """The C99 header and source of a scheduled estimator.

    Parameters
    ----------
    schedule : GainSchedule
        A schedule on a tensor grid.
    prefix : str
        Prefix of every C identifier (upper case for the macros) and the file
        names ``<prefix>.h`` / ``<prefix>.c``.
    caution : str
        The safety caution; every file starts with it.
    header_note : str
        Where the schedule comes from (source FMU, table checksum, ...),
        written under the caution.

    Returns
    -------
    dict
        File name -> text.

    Raises
    ------
    UsageError
        A scattered schedule, a prefix that is not a C identifier, or an empty caution.

    References
    ----------
    Weiser, A. & Zarantonello, S. E. (1988). A note on piecewise linear and
    multilinear table interpolation in many dimensions. Mathematics of
    Computation 50(181), 189-196.

    Franklin, G. F., Powell, J. D. & Workman, M. L. (1998). Digital Control of
    Dynamic Systems, 3rd ed. Addison-Wesley.
    """
    require_tensor(schedule)
    p = check_identifier(prefix, "C prefix")
    P = p.upper()
    if not caution or not caution.strip():
        raise UsageError("give the caution text that every exported file must carry")
    top = comment_block(caution, header_note, _describe(schedule))
    header = (top + f"#ifndef {P}_H\n#define {P}_H\n\n#include <stddef.h>\n\n"
              f"#ifdef __cplusplus\nextern \"C\" {{\n#endif\n\n" + _sizes(schedule, P)
              + HEADER_API.substitute(p=p, P=P)
              + f"\n#ifdef __cplusplus\n}}\n#endif\n\n#endif /* {P}_H */\n")
    source = (top + f"#include <math.h>\n#include <string.h>\n\n#include \"{p}.h\"\n\n"
              + _tables(schedule, p, P) + SOURCE_FUNCTIONS.substitute(p=p, P=P))
    return {f"{p}.h": header, f"{p}.c": source}


def write_c_sources(schedule: GainSchedule, folder: str | Path, **kw: str) -> list[Path]:
    """Write :func:`c_sources` into ``folder`` (atomically, one file at a time).

    Keyword arguments are those of :func:`c_sources`.  Returns the written
    paths, header first.
    """
    files = c_sources(schedule, **kw)  # type: ignore[arg-type]
    folder = Path(folder)
    return [atomic_write_text(folder / name, text) for name, text in files.items()]
