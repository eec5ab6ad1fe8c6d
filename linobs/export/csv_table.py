"""The schedule table as CSV: one row per grid node.

``schedule_table.csv``
    Exactly four leading comment lines start with ``#`` (the source table's
    checksum, the FMU identity, the estimator, the caution); then one header
    row and one row per node
    in the table's node order.  Columns: ``node``, one per scheduling
    variable (its name), ``usable`` (1 or 0), then one per matrix entry named
    ``FIELD[row,column]`` after the variables, e.g. ``L[soc,v_term]``,
    ``Phi[soc,v_rc1]``, ``Gamma[soc,i_cell]``, ``Gamma0[soc,v_rc1]``,
    ``C[v_term,soc]``, ``D[v_term,i_cell]``, and one per vector entry,
    ``x0[soc]``, ``u0[i_cell]``, ``y0[v_term]``, ``dx0[soc]``.  Numbers are
    written with 17 significant digits (exact round trip); an unusable node's
    gain is written as it is stored (zeros for refused designs).
``schedule_table_units.csv``
    The sidecar: ``column,unit`` for every column (same comment lines).

Reading: ``csv.DictReader`` over the lines that do not start with ``#`` (the
column names hold commas, so the header row quotes them); numpy reads the
numbers with ``numpy.loadtxt(path, delimiter=",", skiprows=5)`` (the four
comment lines and the header), column k being the k-th header name (the
order of the units sidecar).
"""

from __future__ import annotations

import csv
import io
import os
from pathlib import Path

import numpy as np

from linobs.atomic import atomic_write_text
from linobs.export.table import ScheduleTable

__all__ = ["COMMENT_LINES", "csv_columns", "write_csv"]

COMMENT_LINES = 4

MATRICES = (("L", "states", "outputs"), ("Phi", "states", "states"),
            ("Gamma", "states", "inputs"), ("Gamma0", "states", "states"),
            ("C", "outputs", "states"), ("D", "outputs", "inputs"))
VECTORS = (("x0", "states"), ("u0", "inputs"), ("y0", "outputs"), ("dx0", "states"))


def _ratio(top: str, bottom: str) -> str:
    top, bottom = top or "1", bottom or "1"
    if bottom == "1":
        return top
    if top == bottom:
        return "1"
    return f"{top}/{bottom}"


def csv_columns(table: ScheduleTable) -> list[tuple[str, str]]:
    """(column name, unit) of every column, in order."""
    names = {"states": table.states, "inputs": table.inputs, "outputs": table.outputs}
    unit = table.units.get
    cols: list[tuple[str, str]] = [("node", "")]
    cols += [(a.name, a.unit) for a in table.axes]
    cols.append(("usable", ""))
    for field, rows, columns in MATRICES:
        for r in names[rows]:
            for c in names[columns]:
                u = _ratio(unit(r, ""), unit(c, ""))
                if field == "Gamma0":  # multiplies dx0 [unit/s]
                    u = "s" if u == "1" else f"s*{u}"
                cols.append((f"{field}[{r},{c}]", u))
    for field, which in VECTORS:
        for r in names[which]:
            u = unit(r, "")
            cols.append((f"{field}[{r}]", f"{u}/s" if field == "dx0" and u else
                         ("1/s" if field == "dx0" else u)))
    return cols


def _comments(table: ScheduleTable) -> str:
    lines = [f"# linobs schedule table (CSV view of the JSON table, checksum {table.checksum})",
             f"# FMU {table.fmu.model_name}, GUID {table.fmu.guid}, SHA-256 {table.fmu.sha256}",
             f"# {table.kind} {table.form} estimator, {table.domain} design, sample time "
             f"{table.sample_time:g} s; created {table.created} by linobs {table.linobs_version}",
             f"# CAUTION: {table.caution}"]
    return "\n".join(line.replace("\n", " ") for line in lines) + "\n"


def write_csv(table: ScheduleTable, folder: str | os.PathLike[str],
              stem: str = "schedule_table") -> list[Path]:
    """Write ``<stem>.csv`` and ``<stem>_units.csv`` atomically; returns both paths."""
    data = table.schedule_data()
    names = {"states": table.states, "inputs": table.inputs, "outputs": table.outputs}
    cols = csv_columns(table)
    buf = io.StringIO()
    buf.write(_comments(table))
    w = csv.writer(buf, lineterminator="\n")
    w.writerow([c for c, _ in cols])
    shape = tuple(len(a.values) for a in table.axes)
    for i, node in enumerate(data.nodes):
        if data.grid_kind == "tensor":
            idx = np.unravel_index(i, shape)
            coords = [table.axes[d].values[k] for d, k in enumerate(idx)]
        else:
            coords = list(data.points[i])
        row: list[str] = [str(i)] + [f"{float(v):.17g}" for v in coords]
        row.append("1" if node.status == "ok" else "0")
        for field, rows, columns in MATRICES:
            M = np.asarray(getattr(node, field), dtype=float)
            if M.size == 0:
                M = np.zeros((len(names[rows]), len(names[columns])))
            row += [f"{v:.17g}" for v in M.reshape(-1)]
        for field, _ in VECTORS:
            row += [f"{v:.17g}" for v in np.asarray(getattr(node, field), dtype=float)]
        w.writerow(row)
    folder = Path(folder)
    main = atomic_write_text(folder / f"{stem}.csv", buf.getvalue())
    ubuf = io.StringIO()
    ubuf.write(_comments(table))
    uw = csv.writer(ubuf, lineterminator="\n")
    uw.writerow(["column", "unit"])
    uw.writerows(cols)
    units = atomic_write_text(folder / f"{stem}_units.csv", ubuf.getvalue())
    return [main, units]
