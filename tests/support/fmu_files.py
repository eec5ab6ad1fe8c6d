"""Helpers that make FMU files for the tests: the minimal fixture and edited copies."""

from __future__ import annotations

import zipfile
from collections.abc import Callable
from pathlib import Path

from linobs.model.build import build_fmu

FIXTURES = Path(__file__).resolve().parents[1] / "fixtures"
MINIMAL_SOURCE = FIXTURES / "minimal_fmi2"


def build_minimal(out: Path, *, extra_cflags: tuple[str, ...] = ()) -> Path:
    """The hand-written minimal FMI 2.0 oscillator (see tests/fixtures/minimal_fmi2)."""
    return build_fmu(MINIMAL_SOURCE, out, extra_cflags=extra_cflags)


def edit_fmu(src: Path, dst: Path, *, drop: Callable[[str], bool] = lambda name: False,
             xml: Callable[[str], str] | None = None) -> Path:
    """Copy an FMU, dropping members and/or rewriting modelDescription.xml."""
    with zipfile.ZipFile(src) as zin, zipfile.ZipFile(dst, "w", zipfile.ZIP_DEFLATED) as zout:
        for item in zin.infolist():
            if drop(item.filename):
                continue
            data = zin.read(item.filename)
            if item.filename == "modelDescription.xml" and xml is not None:
                data = xml(data.decode("utf-8")).encode("utf-8")
            zout.writestr(item, data)
    return dst
