"""Build a model-exchange FMU (or an FMI 2.0 co-simulation one) from a folder of C sources.

A source folder holds ``modelDescription.xml`` and ``sources/*.c`` (plus any
``.h`` files).  The plant sources are written against the small C framework in
``linobs/model/csupport`` (see its README.md).  :func:`build_fmu` compiles all
``sources/*.c`` into one shared library with the host C compiler and packs the
FMU archive: the model description, the binary under ``binaries/<platform>/``
and a self-contained ``sources/`` folder (the plant files plus copies of the
framework headers they include).
"""

from __future__ import annotations

import os
import re
import shlex
import shutil
import subprocess
import tempfile
import zipfile
from pathlib import Path
from typing import Iterable, Sequence

from linobs.atomic import DEFAULT_MODE
from linobs.errors import BuildError, CompilerNotFoundError, FMUFileError

__all__ = ["CSUPPORT_DIR", "build_fmu", "build_from_source_fmu", "find_c_compiler",
           "fmi_headers_dir"]

#: Folder of the linobs C framework headers (lo_model.h, lo_fmi2_me.h, ...).
CSUPPORT_DIR = Path(__file__).resolve().parent / "csupport"

_BASE_FLAGS = ("-shared", "-fPIC", "-O2", "-std=c99", "-Wall")
_INCLUDE_RE = re.compile(r'^\s*#\s*include\s+"([^"]+)"', re.MULTILINE)
_ZIP_DATE = (1980, 1, 1, 0, 0, 0)  # fixed time stamps: same sources, same archive bytes
_COMPILE_TIMEOUT_S = 300


def find_c_compiler() -> str:
    """Return the C compiler command to use.

    Looks at the environment variable ``CC`` first, then for ``cc``, ``gcc``
    and ``clang`` on ``PATH``.

    Returns
    -------
    str
        The compiler command; its first word is an absolute path.  When ``CC``
        holds several words (``"ccache gcc"``) the remaining words are kept.

    Raises
    ------
    CompilerNotFoundError
        When ``CC`` names no executable, or none of the usual compilers is on
        ``PATH``.
    """
    env = os.environ.get("CC", "").strip()
    if env:
        words = shlex.split(env)
        found = shutil.which(words[0])
        if found is None:
            raise CompilerNotFoundError(
                f"CC={env!r} does not name an executable C compiler; a C compiler is needed "
                "to build source FMUs: install one (e.g. gcc or clang) or set CC to its path")
        return shlex.join([found, *words[1:]])
    for name in ("cc", "gcc", "clang"):
        found = shutil.which(name)
        if found is not None:
            return found
    raise CompilerNotFoundError(
        "no C compiler found on PATH (tried cc, gcc, clang); a C compiler is needed to build "
        "source FMUs: install one (e.g. gcc or clang) or set the environment variable CC to "
        "its path")


def fmi_headers_dir() -> Path:
    """The FMI 2.0 / 3.0 standard headers shipped inside the installed fmpy package."""
    import fmpy

    path = Path(fmpy.__file__).resolve().parent / "c-code"
    if not (path / "fmi2Functions.h").is_file() or not (path / "fmi3Functions.h").is_file():
        raise BuildError(
            f"the FMI standard headers are missing from the fmpy installation ({path}); "
            "reinstall fmpy")
    return path


def _read_model_description(xml_path: Path) -> tuple[str, str]:
    """FMI version and modelIdentifier of a source folder's model description.

    The model-exchange identifier; for an FMI 2.0 description with only a
    CoSimulation interface, the co-simulation one.
    """
    import fmpy

    if not xml_path.is_file():
        raise FMUFileError(
            f"{xml_path.parent} has no modelDescription.xml; a source FMU folder needs "
            "modelDescription.xml and sources/*.c")
    try:
        md = fmpy.read_model_description(str(xml_path), validate=True)
    except Exception as exc:  # fmpy raises plain exceptions and lxml errors
        first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise FMUFileError(
            f"cannot read {xml_path}: {first}; fix the model description "
            "(check it with fmpy.validate_fmu)") from None
    if md.modelExchange is not None:
        return str(md.fmiVersion), str(md.modelExchange.modelIdentifier)
    if str(md.fmiVersion) == "2.0" and md.coSimulation is not None:  # e.g. the estimator FMU
        return str(md.fmiVersion), str(md.coSimulation.modelIdentifier)
    raise FMUFileError(
        f"{xml_path} declares no ModelExchange interface; linobs builds model-exchange "
        "FMUs (and FMI 2.0 co-simulation FMUs) only")


def _binary_path(fmi_version: str, identifier: str) -> str:
    import fmpy

    folder = fmpy.platform if fmi_version == "2.0" else fmpy.platform_tuple
    return f"binaries/{folder}/{identifier}{fmpy.sharedLibraryExtension}"


def _included_support_headers(files: Iterable[Path]) -> list[Path]:
    """csupport headers reached by ``#include "..."`` from ``files``, transitively."""
    found: dict[str, Path] = {}
    queue = list(files)
    while queue:
        text = queue.pop().read_text(encoding="utf-8", errors="replace")
        for name in _INCLUDE_RE.findall(text):
            candidate = CSUPPORT_DIR / name
            if name not in found and candidate.is_file():
                found[name] = candidate
                queue.append(candidate)
    return [found[name] for name in sorted(found)]


def _stderr_tail(text: str, lines: int = 6) -> str:
    kept = [line.strip() for line in text.splitlines() if line.strip()]
    return " | ".join(kept[-lines:]) if kept else "(no compiler output)"


def _compile(compiler: str, c_files: Sequence[Path], include_dirs: Sequence[Path],
             extra_cflags: Sequence[str], out: Path) -> None:
    words = shlex.split(compiler)
    cmd = [*words, *_BASE_FLAGS, *(f"-I{d}" for d in include_dirs), *extra_cflags,
           *(str(f) for f in c_files), "-o", str(out), "-lm"]
    try:
        proc = subprocess.run(cmd, capture_output=True, text=True, timeout=_COMPILE_TIMEOUT_S,
                              check=False)
    except FileNotFoundError:
        raise CompilerNotFoundError(
            f"the C compiler {words[0]!r} cannot be run; a C compiler is needed to build source "
            "FMUs: install one or set the environment variable CC to its path") from None
    except subprocess.TimeoutExpired:
        raise BuildError(
            f"compiling {', '.join(f.name for f in c_files)} took more than "
            f"{_COMPILE_TIMEOUT_S} s and was stopped") from None
    if proc.returncode != 0 or not out.is_file():
        raise BuildError(
            f"compiling {', '.join(f.name for f in c_files)} with {Path(words[0]).name} failed "
            f"(exit {proc.returncode}): {_stderr_tail(proc.stderr or proc.stdout)}")


def _write_archive(output: Path, members: list[tuple[str, Path]]) -> None:
    """Write the zip to a temporary file beside ``output`` and rename it into place."""
    output.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp_name = tempfile.mkstemp(prefix=f".{output.name}.", suffix=".tmp", dir=output.parent)
    tmp = Path(tmp_name)
    try:
        os.chmod(tmp, DEFAULT_MODE)  # an ordinary file, not mkstemp's 0600
        with os.fdopen(fd, "wb") as raw:
            with zipfile.ZipFile(raw, "w", zipfile.ZIP_DEFLATED) as zf:
                for arcname, path in members:
                    info = zipfile.ZipInfo(arcname, date_time=_ZIP_DATE)
                    info.compress_type = zipfile.ZIP_DEFLATED
                    info.external_attr = 0o644 << 16
                    zf.writestr(info, path.read_bytes())
            raw.flush()
            os.fsync(raw.fileno())
        os.replace(tmp, output)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise


def build_fmu(source_dir: str | os.PathLike[str], output: str | os.PathLike[str], *,
              compiler: str | None = None, extra_cflags: Sequence[str] = ()) -> Path:
    """Compile a C-source model-exchange FMU and write the ``.fmu`` archive.

    Parameters
    ----------
    source_dir
        Folder with ``modelDescription.xml`` and ``sources/*.c``.
    output
        Path of the ``.fmu`` file to write (its folder is created).  The file is
        written atomically: a temporary file in the same folder, then a rename.
    compiler
        C compiler command; default :func:`find_c_compiler`.
    extra_cflags
        Additional compiler arguments, e.g. ``("-DLO_FAULT=1",)``.

    Returns
    -------
    Path
        The written archive.

    Raises
    ------
    FMUFileError
        The model description is missing or unreadable.
    CompilerNotFoundError
        No C compiler can be found or run.
    BuildError
        There are no C sources, or compiling them failed (the message quotes
        the last lines the compiler printed).
    """
    return _build(Path(source_dir), Path(output), compiler, extra_cflags, ())


def _build(src: Path, out: Path, compiler: str | None, extra_cflags: Sequence[str],
           keep: Sequence[tuple[str, Path]]) -> Path:
    """Compile ``src`` and write the archive, adding the ``keep`` members unchanged."""
    xml = src / "modelDescription.xml"
    fmi_version, identifier = _read_model_description(xml)
    sources_dir = src / "sources"
    c_files = sorted(sources_dir.glob("*.c")) if sources_dir.is_dir() else []
    if not c_files:
        raise BuildError(f"{sources_dir} holds no .c files; put the plant's C sources there")
    plant_files = sorted(p for p in sources_dir.iterdir() if p.is_file())
    support = [h for h in _included_support_headers(
        p for p in plant_files if p.suffix in (".c", ".h"))
               if not (sources_dir / h.name).exists()]
    cc = compiler if compiler is not None else find_c_compiler()
    binary = _binary_path(fmi_version, identifier)
    with tempfile.TemporaryDirectory(prefix="linobs-build-") as work:
        lib = Path(work) / Path(binary).name
        _compile(cc, c_files, [fmi_headers_dir(), sources_dir, CSUPPORT_DIR],
                 list(extra_cflags), lib)
        members = [("modelDescription.xml", xml), (binary, lib)]
        members += [(f"sources/{p.name}", p) for p in plant_files]
        members += [(f"sources/{h.name}", h) for h in support]
        taken = {name for name, _ in members}
        members += [(name, path) for name, path in keep if name not in taken]
        _write_archive(out, members)
    return out


def build_from_source_fmu(fmu: str | os.PathLike[str], output: str | os.PathLike[str], *,
                          compiler: str | None = None, extra_cflags: Sequence[str] = ()) -> Path:
    """Compile the C sources inside a source FMU for this platform.

    The archive must hold ``modelDescription.xml`` and ``sources/*.c``.  The
    result keeps every other member (documentation, resources, binaries for
    other platforms) and replaces this platform's binary.  ``output`` may be
    the input file itself.

    Parameters
    ----------
    fmu
        The source ``.fmu`` (a zip archive).
    output
        The ``.fmu`` to write (atomically).
    compiler, extra_cflags
        As for :func:`build_fmu`.

    Returns
    -------
    Path
        The written archive.

    Raises
    ------
    FMUFileError
        The file is not a zip archive, or it lacks the model description or sources.
    CompilerNotFoundError, BuildError
        As for :func:`build_fmu`.
    """
    path = Path(fmu)
    if not zipfile.is_zipfile(path):
        raise FMUFileError(f"{path} is not an FMU (zip) archive; pass a .fmu file or a source folder")
    with tempfile.TemporaryDirectory(prefix="linobs-source-fmu-") as work:
        root = Path(work)
        keep: list[tuple[str, Path]] = []
        with zipfile.ZipFile(path) as zf:
            for info in zf.infolist():
                name = info.filename
                parts = Path(name).parts
                if info.is_dir() or not parts or ".." in parts or Path(name).is_absolute() \
                        or "\\" in name:
                    continue
                target = root / name
                target.parent.mkdir(parents=True, exist_ok=True)
                target.write_bytes(zf.read(info))
                if name != "modelDescription.xml" and (parts[0] != "sources" or len(parts) > 2):
                    keep.append((name, target))
        if not (root / "modelDescription.xml").is_file() or not list((root / "sources").glob("*.c")):
            raise FMUFileError(
                f"{path} holds no modelDescription.xml with sources/*.c; only source FMUs "
                "can be built")
        return _build(root, Path(output), compiler, extra_cflags, keep)
