"""Run folders and tables as linobs wrote them before the frozen-point "margin" was renamed.

The rename (the *decay reserve*: how much faster than required the estimation
error decays) changed keys of ``summary.json``, ``validation/frozen.json`` and
the exported table, and the name of one figure.  These helpers turn freshly
written files back into the earlier layout, so that the tests can show that
such files are still read.  Key names as listed in the README ("Renamed keys
and files").
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path
from typing import Any

__all__ = ["former_frozen", "former_run_folder", "former_summary", "former_table",
           "write_former_table"]


def _rename(data: dict[str, Any], names: dict[str, str]) -> dict[str, Any]:
    """A copy of ``data`` with its keys renamed by ``names`` (order kept)."""
    return {names.get(k, k): v for k, v in data.items()}


def former_summary(summary: dict[str, Any]) -> dict[str, Any]:
    """``summary.json`` with the earlier key names."""
    out = _rename(summary, {"validation_worst_decay_reserve": "validation_worst_margin"})
    stages = dict(out.get("stages") or {})
    if "validate-frozen" in stages:
        frozen = dict(stages["validate-frozen"])
        frozen["counts"] = _rename(frozen.get("counts") or {},
                                   {"worst_decay_reserve": "worst_margin"})
        stages["validate-frozen"] = frozen
        out["stages"] = stages
    out["files"] = _rename(out.get("files") or {}, {"decay_reserve_map": "worst_margin_map"})
    if "worst_margin_map" in out["files"]:
        out["files"]["worst_margin_map"] = out["files"]["worst_margin_map"].replace(
            "validation_decay_reserve", "validation_margin")
    return out


def former_frozen(frozen: dict[str, Any]) -> dict[str, Any]:
    """``validation/frozen.json`` (a frozen-point report) with the earlier key names."""
    out = _rename(frozen, {"worst_decay_reserve": "worst_margin"})
    out["points"] = [_rename(p, {"decay_reserve": "margin"}) for p in frozen["points"]]
    return out


def former_table(table: dict[str, Any]) -> dict[str, Any]:
    """A schedule table as schema version 1 wrote it, with the checksum of that content.

    The checksum is recomputed as the table format documents it: SHA-256
    (FIPS 180-4, ``hashlib``) of the canonical JSON of every other field (keys
    sorted, no spaces, UTF-8).
    """
    out = dict(table, schema_version=1)
    validation = _rename(table["validation"], {"worst_decay_reserve": "worst_margin"})
    validation["nodes"] = [_rename(n, {"node_decay_reserve": "node_margin",
                                       "worst_frozen_decay_reserve": "worst_frozen_margin"})
                           for n in table["validation"]["nodes"]]
    out["validation"] = validation
    content = {k: v for k, v in out.items() if k != "checksum"}
    canonical = json.dumps(content, sort_keys=True, separators=(",", ":"), ensure_ascii=False,
                           allow_nan=False).encode("utf-8")
    out["checksum"] = hashlib.sha256(canonical).hexdigest()
    return out


def write_former_table(source: Path, target: Path) -> dict[str, Any]:
    """Write the schema-version-1 form of the table ``source`` to ``target``; returns it."""
    old = former_table(json.loads(source.read_text(encoding="utf-8")))
    target.parent.mkdir(parents=True, exist_ok=True)
    target.write_text(json.dumps(old, indent=1, ensure_ascii=False) + "\n", encoding="utf-8")
    return old


def former_run_folder(run: Path) -> None:
    """Turn a finished run folder (in place) into the layout written before the rename."""
    summary = run / "summary.json"
    summary.write_text(json.dumps(former_summary(json.loads(summary.read_text()))))
    frozen = run / "validation" / "frozen.json"
    if frozen.is_file():
        frozen.write_text(json.dumps(former_frozen(json.loads(frozen.read_text())), indent=1))
    for suffix in (".png", ".svg"):
        figure = run / "figures" / f"validation_decay_reserve{suffix}"
        if figure.is_file():
            figure.rename(run / "figures" / f"validation_margin{suffix}")
    table = run / "export" / "schedule_table.json"
    if table.is_file():
        write_former_table(table, table)
