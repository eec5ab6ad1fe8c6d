"""The plants that ship with linobs as C sources, built on demand into a cache.

``four_tank``
    Quadruple-tank process (FMI 2.0, analytic directional derivatives).
``lfp_cell``
    Lithium iron phosphate cell, two RC branches and a thermal state (FMI 2.0,
    no directional derivatives); demo data, invented.
``jacketed_reactor``
    Jacketed CSTR with an exothermic reaction and a saturating coolant valve
    (FMI 3.0, analytic directional derivatives, event indicators); demo data,
    invented.

The sources live in the repository's top-level ``fmus/`` folder; a wheel
installs them as ``linobs/bundled_fmus``.  :func:`bundled_fmu` compiles a
plant with the host C compiler the first time it is asked for and keeps the
result in the cache, named by a digest of everything that goes into it.
"""

from __future__ import annotations

import hashlib
import os
from importlib import resources
from pathlib import Path
from typing import Any

from linobs.errors import FMUFileError, UsageError
from linobs.model.build import CSUPPORT_DIR, build_fmu

__all__ = ["BUNDLED_PLANTS", "bundled_fmu", "bundled_source_dir", "cache_dir", "source_digest"]

BUNDLED_PLANTS: tuple[str, ...] = ("four_tank", "lfp_cell", "jacketed_reactor")

#: Changes whenever the way an archive is built changes, so old cache entries are not reused.
_BUILD_FORMAT = b"linobs-build-1"


def bundled_source_dir(name: str) -> Path:
    """The source folder (modelDescription.xml + sources/) of a bundled plant.

    Looks in the installed package data (``linobs/bundled_fmus/<name>``) first,
    then in the ``fmus/`` folder of a source checkout beside the package.

    Raises
    ------
    UsageError
        ``name`` is not one of :data:`BUNDLED_PLANTS`.
    FMUFileError
        The plant's sources are missing from this installation.
    """
    if name not in BUNDLED_PLANTS:
        raise UsageError(
            f"unknown bundled plant {name!r}; choose one of: {', '.join(BUNDLED_PLANTS)}")
    candidates: list[Path] = []
    try:
        packaged = resources.files("linobs") / "bundled_fmus" / name
        candidates.append(Path(str(packaged)))
    except (ModuleNotFoundError, TypeError):  # pragma: no cover - exotic loaders
        pass
    candidates.append(Path(__file__).resolve().parents[2] / "fmus" / name)
    for folder in candidates:
        if (folder / "modelDescription.xml").is_file() and (folder / "sources").is_dir():
            return folder
    raise FMUFileError(
        f"the sources of the bundled plant {name!r} are missing (looked in "
        f"{', '.join(str(c) for c in candidates)}); reinstall linobs")


def cache_dir() -> Path:
    """The linobs cache folder: ``$LINOBS_CACHE`` if set, else ``~/.cache/linobs``."""
    env = os.environ.get("LINOBS_CACHE", "").strip()
    return Path(env).expanduser() if env else Path.home() / ".cache" / "linobs"


def _digest_files(folder: Path, label: str, h: Any) -> None:
    for path in sorted(p for p in folder.rglob("*") if p.is_file()):
        if "__pycache__" in path.parts:
            continue
        rel = path.relative_to(folder).as_posix()
        data = path.read_bytes()
        h.update(f"{label}/{rel}\0{len(data)}\0".encode())
        h.update(data)


def source_digest(source_dir: str | os.PathLike[str]) -> str:
    """First 12 hex digits of the SHA-256 of a source folder and the C framework.

    Covers ``modelDescription.xml``, every file under ``sources/`` and every
    file of ``linobs/model/csupport``, so any change to them gives a new name.
    """
    src = Path(source_dir)
    h = hashlib.sha256(_BUILD_FORMAT)
    xml = (src / "modelDescription.xml").read_bytes()
    h.update(b"modelDescription.xml\0" + str(len(xml)).encode() + b"\0" + xml)
    _digest_files(src / "sources", "sources", h)
    _digest_files(CSUPPORT_DIR, "csupport", h)
    return h.hexdigest()[:12]


def bundled_fmu(name: str, cache: str | os.PathLike[str] | None = None) -> Path:
    """Path of the built FMU of a bundled plant, building it on first use.

    Parameters
    ----------
    name
        One of :data:`BUNDLED_PLANTS`.
    cache
        Cache folder; default :func:`cache_dir`.  The FMU is stored as
        ``<cache>/fmus/<name>-<digest>.fmu``.

    Returns
    -------
    Path
        The ``.fmu`` file.  Two processes building the same plant at once are
        safe: each writes its own temporary file and renames it into place.

    Raises
    ------
    UsageError
        Unknown plant name.
    CompilerNotFoundError
        The FMU is not cached yet and no C compiler is available.
    BuildError
        Compiling failed.
    """
    src = bundled_source_dir(name)
    root = Path(cache) if cache is not None else cache_dir()
    target = root / "fmus" / f"{name}-{source_digest(src)}.fmu"
    if target.is_file():
        return target
    return build_fmu(src, target)
