"""linobs: operating-envelope linearization, observability and scheduled estimators for FMUs.

Public API
----------
load_model
    Import an FMI 2.0 / 3.0 model-exchange FMU as a :class:`Model`.
linearize
    The local model (A, B, C, D) at an operating point, as a :class:`LinearModel`.
resolve_point
    Turn a name -> value mapping into a full :class:`OperatingPoint`.
build_fmu, bundled_fmu
    Compile C-source FMUs; the bundled demo plants.
load_study, run_study
    Read a study file; run its stages into a run folder.
GainSchedule, read_table, verify_table, write_report
    The scheduled estimator; read and verify an exported schedule table; the HTML report.
find_operating_point
    Partial trim at one operating point: the steady state (and free inputs) for
    the values held fixed.
"""

from __future__ import annotations

from linobs.errors import LinobsError
from linobs.linear.linear_model import LinearModel
from linobs.linear.linearize import linearize
from linobs.model.build import build_fmu
from linobs.model.bundled import BUNDLED_PLANTS, bundled_fmu
from linobs.model.catalogue import Capabilities, Catalogue, Variable
from linobs.model.instance import Model
from linobs.model.loader import load_model
from linobs.operating.point import OperatingPoint, resolve_point
from linobs.operating.trim import find_operating_point
from linobs.operating.trim_spec import TrimResult, TrimSpec

__version__ = "0.1.0"

__all__ = [
    "BUNDLED_PLANTS", "Capabilities", "Catalogue", "LinearModel", "LinobsError", "Model",
    "OperatingPoint", "Variable", "build_fmu", "bundled_fmu", "linearize", "load_model",
    "resolve_point", "find_operating_point", "TrimResult", "TrimSpec", "load_study", "run_study",
    "GainSchedule", "read_table", "verify_table", "write_report",
]


_RENAMED = {"trim": "find_operating_point"}
"""Public names renamed after linobs 0.1.0, with their new names (a clear error for one release)."""


def __getattr__(name: str) -> object:  # heavier entry points load on first use
    if name == "run_study":
        from linobs.pipeline import run_study
        return run_study
    if name == "load_study":
        from linobs.study import load_study
        return load_study
    lazy = {"GainSchedule": "linobs.estimator.schedule", "read_table": "linobs.export.table",
            "verify_table": "linobs.export.verify", "write_report": "linobs.report.html"}
    if name in lazy:
        import importlib

        return getattr(importlib.import_module(lazy[name]), name)
    if name in _RENAMED:
        raise AttributeError(f"linobs.{name} was renamed to linobs.{_RENAMED[name]} (same "
                             f"arguments and result); use linobs.{_RENAMED[name]}")
    raise AttributeError(f"module 'linobs' has no attribute {name!r}")
