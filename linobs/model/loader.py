"""Loading an FMU file: checks with one clear message each, then a :class:`Model`.

Every way a supplier's file can be unusable gets its own message that says
what is wrong and what to do: not a zip archive, no ``modelDescription.xml``,
invalid XML, co-simulation only, no binary for this platform, a GUID that the
binary rejects, a missing exported function.
"""

from __future__ import annotations

import ctypes
import hashlib
import os
import shutil
import sys
import tempfile
import zipfile
from pathlib import Path
from typing import Any
from xml.etree import ElementTree

from linobs.errors import (FMUFileError, InstantiationError, PlatformBinaryError,
                           UnsupportedFMUError)
from linobs.model.catalogue import Capabilities, Catalogue
from linobs.model.fmi import InstantiationRefused, missing_functions
from linobs.model.fmi2 import Fmi2Binding
from linobs.model.fmi3 import Fmi3Binding
from linobs.model.instance import Model

_DESCRIPTION = "modelDescription.xml"


def file_sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for block in iter(lambda: f.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def _platform_dirs(fmi_major: int) -> tuple[str, str]:
    """(binary folder name, shared-library extension) for this machine."""
    import fmpy

    if fmi_major >= 3:
        folder = fmpy.platform_tuple
    else:
        folder = fmpy.platform
    ext = {"win": ".dll", "dar": ".dylib"}.get(sys.platform[:3], ".so")
    return folder, ext


def _read_description_xml(path: Path, names: list[str]) -> bytes:
    if _DESCRIPTION not in names:
        top = sorted({n.split("/")[0] for n in names})[:8]
        raise FMUFileError(
            f"{path.name}: the archive holds no {_DESCRIPTION} at its top level "
            f"(found: {', '.join(top) or 'nothing'}); an FMU must be zipped with "
            f"{_DESCRIPTION} at the root, not inside a folder")
    with zipfile.ZipFile(path) as zf:
        return zf.read(_DESCRIPTION)


def read_description(path: Path) -> tuple[Any, bytes, list[str]]:
    """fmpy's ModelDescription, the raw XML and the archive's file names, with clear errors."""
    from fmpy import read_model_description

    if not path.exists():
        raise FMUFileError(f"{path}: no such file")
    if path.is_dir():
        raise FMUFileError(f"{path} is a folder; pass the .fmu file (to build a folder of C "
                           f"sources use `linobs build-fmu {path} -o MODEL.fmu`)")
    if not zipfile.is_zipfile(path):
        raise FMUFileError(f"{path.name} is not a zip archive, so it is not an FMU (an .fmu file "
                           f"is a zip of modelDescription.xml, binaries/ and sources/)")
    try:
        with zipfile.ZipFile(path) as zf:
            names = zf.namelist()
    except zipfile.BadZipFile as exc:
        raise FMUFileError(f"{path.name}: damaged zip archive ({exc})") from None
    xml = _read_description_xml(path, names)
    try:
        root = ElementTree.fromstring(xml)
    except ElementTree.ParseError as exc:
        raise FMUFileError(f"{path.name}: {_DESCRIPTION} is not well-formed XML ({exc}); the "
                           f"file is damaged or was edited by hand") from None
    version = root.get("fmiVersion", "")
    if root.tag != "fmiModelDescription" or not version:
        raise FMUFileError(f"{path.name}: {_DESCRIPTION} is not an FMI model description "
                           f"(root element <{root.tag}>, fmiVersion {version or 'missing'})")
    if not (version == "2.0" or version.startswith("3.")):
        raise UnsupportedFMUError(
            f"{path.name} is an FMI {version} unit; linobs supports FMI 2.0 and 3.0 model "
            f"exchange; ask the supplier for an FMI 2.0 or 3.0 model-exchange export")
    try:
        md = read_model_description(str(path), validate=False)
    except Exception as exc:
        raise FMUFileError(f"{path.name}: {_DESCRIPTION} could not be read: {exc}") from None
    return md, xml, names


def _capabilities(md: Any, root: ElementTree.Element) -> Capabilities:
    me = root.find("ModelExchange")
    attrs = me.attrib if me is not None else {}

    def flag(*keys: str) -> bool:
        return any(attrs.get(k) in ("true", "1") for k in keys)

    return Capabilities(
        fmi_version=md.fmiVersion,
        model_exchange=md.modelExchange is not None,
        co_simulation=md.coSimulation is not None,
        directional_derivatives=flag("providesDirectionalDerivative", "providesDirectionalDerivatives"),
        get_set_state=flag("canGetAndSetFMUstate", "canGetAndSetFMUState"),
        event_indicators=int(md.numberOfEventIndicators or len(md.eventIndicators or [])),
        continuous_states=len(md.derivatives or []),
        needs_execution_tool=flag("needsExecutionTool"),
    )


def _binary_problem(path: Path, names: list[str], folder: str, filename: str) -> PlatformBinaryError:
    present = sorted({n.split("/")[1] for n in names
                      if n.startswith("binaries/") and n.count("/") >= 2 and n.split("/")[1]})
    has_sources = any(n.startswith("sources/") and n.endswith(".c") for n in names)
    msg = (f"{path.name} has no binary for this platform (expected binaries/{folder}/{filename}; "
           f"platforms present: {', '.join(present) or 'none'})")
    if has_sources:
        msg += (f"; it carries C sources, so build one with "
                f"`linobs build-fmu {path.name} -o {path.stem}-{folder}.fmu`")
    else:
        msg += "; ask the supplier for a build for this platform or for a source FMU"
    return PlatformBinaryError(msg)


def load_model(path: str | os.PathLike[str], *, instance_name: str | None = None,
               logging_on: bool = False, start_time: float = 0.0) -> Model:
    """Load an FMI 2.0 or 3.0 model-exchange FMU and bring it to continuous-time mode.

    Parameters
    ----------
    path
        The ``.fmu`` file.
    instance_name
        Name passed to the FMU (defaults to the model identifier).
    logging_on
        Ask the FMU for debug logging (messages are kept in ``Model.log``).
    start_time
        Time passed to initialization.

    Returns
    -------
    Model
        The instance, owned by the returned object (call ``close()``).
    """
    path = Path(path)
    md, xml, names = read_description(path)
    root = ElementTree.fromstring(xml)
    caps = _capabilities(md, root)
    if md.modelExchange is None:
        offered = "co-simulation" if md.coSimulation is not None else "no interface linobs knows"
        raise UnsupportedFMUError(
            f"{path.name} offers {offered} only; linobs needs model exchange (FMI 2.0 or 3.0) to "
            f"evaluate derivatives at arbitrary points; ask the supplier for a model-exchange export")
    if caps.needs_execution_tool:
        raise UnsupportedFMUError(f"{path.name} needs its modeling tool at run time "
                                  f"(needsExecutionTool=true); linobs runs FMUs without any tool")
    identifier = md.modelExchange.modelIdentifier
    major = 3 if md.fmiVersion.startswith("3") else 2
    folder, ext = _platform_dirs(major)
    member = f"binaries/{folder}/{identifier}{ext}"
    if member not in names:
        raise _binary_problem(path, names, folder, identifier + ext)

    catalogue = Catalogue.from_model_description(md)
    sha = file_sha256(path)
    extract_dir = Path(tempfile.mkdtemp(prefix=f"linobs-{identifier}-"))
    try:
        with zipfile.ZipFile(path) as zf:
            zf.extractall(extract_dir)
        library_path = extract_dir / member
        try:
            library = ctypes.CDLL(str(library_path))
        except OSError as exc:
            raise PlatformBinaryError(
                f"{path.name}: the binary {member} cannot be loaded on this machine ({exc}); it may "
                f"be built for another architecture or need libraries that are not installed") from None
        binding_cls = Fmi3Binding if major == 3 else Fmi2Binding
        required = list(binding_cls.required)
        if caps.directional_derivatives:
            required += binding_cls.directional
        if caps.get_set_state:
            required += binding_cls.state_functions
        missing = missing_functions(library, required)
        if missing:
            raise PlatformBinaryError(
                f"{path.name}: the binary {member} does not export "
                f"{', '.join(missing)}, which FMI {md.fmiVersion} model exchange requires; the "
                f"binary is incomplete or from another FMI version; ask the supplier for a fresh export")
        resources = extract_dir / "resources"
        resource_uri = resources.as_uri() if major == 2 else str(resources) + os.sep

        def factory() -> Fmi2Binding | Fmi3Binding:
            return binding_cls(library, model_name=md.modelName or identifier)

        try:
            return Model(path=path, sha256=sha, description=md, catalogue=catalogue,
                         capabilities=caps, binding_factory=factory, extract_dir=extract_dir,
                         resource_uri=resource_uri, instance_name=instance_name or identifier,
                         logging_on=logging_on, start_time=start_time)
        except InstantiationRefused as exc:
            raise _instantiation_problem(path, md, library_path, str(exc)) from None
    except BaseException:
        shutil.rmtree(extract_dir, ignore_errors=True)
        raise


def _instantiation_problem(path: Path, md: Any, library_path: Path, log: str) -> InstantiationError:
    token = md.guid or ""
    word = "GUID" if md.fmiVersion == "2.0" else "instantiation token"
    lowered = log.lower()
    mentions = "guid" in lowered or "token" in lowered
    in_binary = True
    if token:
        try:
            in_binary = token.encode() in library_path.read_bytes()
        except OSError:
            pass
    if mentions or not in_binary:
        return InstantiationError(
            f"{path.name}: {word} mismatch: the binary does not accept the {word} {token} from "
            f"{_DESCRIPTION}, so the description and the binary come from different exports; "
            f"re-export the FMU" + (f" (FMU log: {log})" if log else ""))
    if log:
        return InstantiationError(f"{path.name}: the FMU refused to instantiate or initialize: {log}")
    return InstantiationError(f"{path.name}: the FMU refused to instantiate (it logged nothing); "
                              f"try `linobs describe {path.name}` and ask the supplier")
