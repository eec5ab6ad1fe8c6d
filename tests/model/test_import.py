"""Importing FMUs: the catalogue, capabilities, and one clear message per bad input."""

from __future__ import annotations

import zipfile
from pathlib import Path

import pytest

from linobs.errors import (FMUFileError, InstantiationError, PlatformBinaryError,
                           UnknownVariableError, UnsupportedFMUError)
from linobs.model.loader import load_model
from tests.support.fmu_files import build_minimal, edit_fmu


@pytest.fixture(scope="module")
def minimal(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return build_minimal(tmp_path_factory.mktemp("minimal") / "minimal.fmu")


def test_catalogue_by_role(minimal: Path) -> None:
    with load_model(minimal) as m:
        cat = m.catalogue
        assert cat.names("states") == ["pos", "vel"]
        assert [v.derivative for v in cat.states] == ["der(pos)", "der(vel)"]
        assert [v.derivative_of for v in cat.derivatives] == ["pos", "vel"]
        assert cat.names("inputs") == ["force"]
        assert cat.names("outputs") == ["pos_meas"]
        stiffness, damping = cat.parameters
        assert (stiffness.name, stiffness.variability) == ("stiffness", "fixed")
        assert (damping.name, damping.variability) == ("damping", "tunable")
        pos = cat.get("pos")
        assert (pos.unit, pos.nominal, pos.min, pos.max, pos.start) == ("m", 2.0, -50.0, 50.0, 1.0)
        caps = m.capabilities
        assert caps.fmi_version == "2.0" and caps.model_exchange and not caps.co_simulation
        assert not caps.directional_derivatives and caps.event_indicators == 0


def test_bundled_capabilities(bundled_fmus: dict[str, Path]) -> None:
    with load_model(bundled_fmus["four_tank"]) as m:
        assert m.capabilities.fmi_version == "2.0" and m.capabilities.directional_derivatives
    with load_model(bundled_fmus["lfp_cell"]) as m:
        assert not m.capabilities.directional_derivatives
    with load_model(bundled_fmus["jacketed_reactor"]) as m:
        assert m.capabilities.fmi_version.startswith("3.")
        assert m.capabilities.event_indicators >= 1


def test_not_a_zip(tmp_path: Path) -> None:
    bad = tmp_path / "plant.fmu"
    bad.write_text("this is not an archive")
    with pytest.raises(FMUFileError, match="not a zip archive"):
        load_model(bad)


def test_missing_file(tmp_path: Path) -> None:
    with pytest.raises(FMUFileError, match="no such file"):
        load_model(tmp_path / "absent.fmu")


def test_no_model_description(minimal: Path, tmp_path: Path) -> None:
    out = edit_fmu(minimal, tmp_path / "nomd.fmu", drop=lambda n: n == "modelDescription.xml")
    with pytest.raises(FMUFileError, match="no modelDescription.xml"):
        load_model(out)


def test_model_description_inside_a_folder(minimal: Path, tmp_path: Path) -> None:
    out = tmp_path / "nested.fmu"
    with zipfile.ZipFile(minimal) as zin, zipfile.ZipFile(out, "w") as zout:
        for item in zin.infolist():
            zout.writestr("plant/" + item.filename, zin.read(item.filename))
    with pytest.raises(FMUFileError, match="at the root, not inside a folder"):
        load_model(out)


def test_invalid_xml(minimal: Path, tmp_path: Path) -> None:
    out = edit_fmu(minimal, tmp_path / "badxml.fmu", xml=lambda s: s.replace("</ModelVariables>", ""))
    with pytest.raises(FMUFileError, match="not well-formed XML"):
        load_model(out)


def test_co_simulation_only(minimal: Path, tmp_path: Path) -> None:
    out = edit_fmu(minimal, tmp_path / "cs.fmu", xml=lambda s: s.replace(
        "<ModelExchange", "<CoSimulation"))
    with pytest.raises(UnsupportedFMUError, match="co-simulation only.*needs model exchange"):
        load_model(out)


def test_fmi1_is_unsupported(minimal: Path, tmp_path: Path) -> None:
    out = edit_fmu(minimal, tmp_path / "fmi1.fmu", xml=lambda s: s.replace(
        'fmiVersion="2.0"', 'fmiVersion="1.0"'))
    with pytest.raises(UnsupportedFMUError, match="FMI 1.0 unit; linobs supports FMI 2.0 and 3.0"):
        load_model(out)


def test_no_binary_for_platform_with_sources(minimal: Path, tmp_path: Path) -> None:
    out = tmp_path / "other.fmu"
    with zipfile.ZipFile(minimal) as zin, zipfile.ZipFile(out, "w") as zout:
        for item in zin.infolist():
            name = item.filename
            if name.startswith("binaries/"):
                name = "binaries/win64/" + name.rsplit("/", 1)[-1].replace(".so", ".dll")
            zout.writestr(name, zin.read(item.filename))
    with pytest.raises(PlatformBinaryError) as info:
        load_model(out)
    msg = str(info.value)
    assert "no binary for this platform" in msg and "platforms present: win64" in msg
    assert "linobs build-fmu" in msg


def test_no_binary_no_sources(minimal: Path, tmp_path: Path) -> None:
    out = edit_fmu(minimal, tmp_path / "empty.fmu",
                   drop=lambda n: n.startswith("binaries/") or n.startswith("sources/"))
    with pytest.raises(PlatformBinaryError, match="platforms present: none.*ask the supplier"):
        load_model(out)


def test_guid_mismatch(minimal: Path, tmp_path: Path) -> None:
    out = edit_fmu(minimal, tmp_path / "guid.fmu", xml=lambda s: s.replace(
        "{7d5c1a2e-4b3f-4e8a-9c61-0a1b2c3d4e5f}", "{00000000-0000-0000-0000-000000000000}"))
    with pytest.raises(InstantiationError, match="GUID mismatch.*re-export"):
        load_model(out)


def test_guid_mismatch_fmi3(bundled_fmus: dict[str, Path], tmp_path: Path) -> None:
    import re

    def change_token(s: str) -> str:
        return re.sub(r'instantiationToken="[^"]*"', 'instantiationToken="{not-the-token}"', s)

    out = edit_fmu(bundled_fmus["jacketed_reactor"], tmp_path / "token.fmu", xml=change_token)
    with pytest.raises(InstantiationError, match="instantiation token mismatch"):
        load_model(out)


def test_missing_exported_function(tmp_path: Path) -> None:
    out = build_minimal(tmp_path / "nogetder.fmu", extra_cflags=("-DLINOBS_OMIT_GET_DERIVATIVES",))
    with pytest.raises(PlatformBinaryError, match="does not export fmi2GetDerivatives"):
        load_model(out)


def test_unknown_name_suggests_closest(minimal: Path) -> None:
    with load_model(minimal) as m:
        with pytest.raises(UnknownVariableError, match="no variable named 'dampng'.*'damping'"):
            m.catalogue.get("dampng")
        with pytest.raises(UnknownVariableError, match="'force'"):
            m.linearize({"forse": 1.0})


def test_close_frees_and_removes_extracted_files(minimal: Path) -> None:
    m = load_model(minimal)
    folder = m._extract_dir
    assert folder.exists()
    m.close()
    assert not folder.exists()
    m.close()  # idempotent
