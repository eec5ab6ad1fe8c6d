"""Building source FMUs: compiler discovery, errors, archive layout, the bundled cache."""

from __future__ import annotations

import multiprocessing
import shlex
import shutil
import subprocess
import zipfile
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import fmpy
import pytest
from fmpy.validation import validate_fmu

from linobs.errors import BuildError, CompilerNotFoundError, FMUFileError, UsageError
from linobs.model import bundled
from linobs.model.build import (
    CSUPPORT_DIR,
    build_fmu,
    build_from_source_fmu,
    find_c_compiler,
    fmi_headers_dir,
)
from linobs.model.bundled import (
    BUNDLED_PLANTS,
    bundled_fmu,
    bundled_source_dir,
    cache_dir,
    source_digest,
)


def _copy_plant(name: str, dest: Path) -> Path:
    target = dest / name
    shutil.copytree(bundled_source_dir(name), target)
    return target


# ------------------------------------------------------------- the archive
@pytest.mark.parametrize("name, fmi, headers", [
    ("four_tank", "2.0", {"lo_model.h", "lo_fmi2_me.h"}),
    ("lfp_cell", "2.0", {"lo_model.h", "lo_fmi2_me.h", "lo_spline.h"}),
    ("jacketed_reactor", "3.0", {"lo_model.h", "lo_fmi3_me.h"}),
])
def test_archive_holds_description_binary_and_sources(
        bundled_fmus: dict[str, Path], name: str, fmi: str, headers: set[str]) -> None:
    # FMI standard layout: binaries/<platform>/<modelIdentifier><ext>, sources/
    with zipfile.ZipFile(bundled_fmus[name]) as zf:
        names = set(zf.namelist())
    folder = fmpy.platform if fmi == "2.0" else fmpy.platform_tuple
    assert f"binaries/{folder}/{name}{fmpy.sharedLibraryExtension}" in names
    assert "modelDescription.xml" in names
    sources = {n.split("/", 1)[1] for n in names if n.startswith("sources/")}
    assert sources == {"model.c"} | headers
    assert not any("\\" in n for n in names)


@pytest.mark.parametrize("name", BUNDLED_PLANTS)
def test_archive_sources_compile_on_their_own(bundled_fmus: dict[str, Path], tmp_path: Path,
                                              name: str) -> None:
    # the sources/ folder is self-contained: only the FMI standard headers are needed
    with zipfile.ZipFile(bundled_fmus[name]) as zf:
        zf.extractall(tmp_path)
    cc = shlex.split(find_c_compiler())
    src = tmp_path / "sources"
    proc = subprocess.run([*cc, "-shared", "-fPIC", "-std=c99", "-Wall", "-Werror",
                           f"-I{fmi_headers_dir()}", f"-I{src}", str(src / "model.c"),
                           "-o", str(tmp_path / "lib.so"), "-lm"],
                          capture_output=True, text=True, check=False)
    assert proc.returncode == 0, proc.stderr


def test_source_fmu_is_rebuilt_keeping_other_members(bundled_fmus: dict[str, Path],
                                                     tmp_path: Path) -> None:
    # a source FMU without a binary for this platform, with documentation and a foreign binary
    stripped = tmp_path / "source.fmu"
    with zipfile.ZipFile(bundled_fmus["lfp_cell"]) as zin, \
            zipfile.ZipFile(stripped, "w") as zout:
        for item in zin.infolist():
            if not item.filename.startswith("binaries/"):
                zout.writestr(item, zin.read(item.filename))
        zout.writestr("documentation/index.html", "<p>cell</p>")
        zout.writestr("binaries/other-platform/lfp_cell.bin", b"foreign")
    out = build_from_source_fmu(stripped, tmp_path / "built.fmu")
    with zipfile.ZipFile(out) as zf:
        names = set(zf.namelist())
        assert zf.read("documentation/index.html") == b"<p>cell</p>"
    assert f"binaries/{fmpy.platform}/lfp_cell{fmpy.sharedLibraryExtension}" in names
    assert "binaries/other-platform/lfp_cell.bin" in names
    assert validate_fmu(str(out)) == []
    assert build_from_source_fmu(out, out) == out   # in place
    assert zipfile.is_zipfile(out)


def test_source_fmu_errors(bundled_fmus: dict[str, Path], tmp_path: Path) -> None:
    not_zip = tmp_path / "plain.fmu"
    not_zip.write_text("not a zip")
    with pytest.raises(FMUFileError, match="not an FMU"):
        build_from_source_fmu(not_zip, tmp_path / "a.fmu")
    binary_only = tmp_path / "binary_only.fmu"
    with zipfile.ZipFile(bundled_fmus["four_tank"]) as zin, \
            zipfile.ZipFile(binary_only, "w") as zout:
        for item in zin.infolist():
            if not item.filename.startswith("sources/"):
                zout.writestr(item, zin.read(item.filename))
    with pytest.raises(FMUFileError, match="source FMUs"):
        build_from_source_fmu(binary_only, tmp_path / "a.fmu")


# -------------------------------------------------------- compiler discovery
def test_cc_naming_nothing_gives_compiler_not_found(monkeypatch: pytest.MonkeyPatch,
                                                    tmp_path: Path) -> None:
    monkeypatch.setenv("CC", "/nonexistent/cc")
    with pytest.raises(CompilerNotFoundError) as info:
        find_c_compiler()
    message = str(info.value)
    assert "C compiler" in message and "CC" in message and "\n" not in message
    with pytest.raises(CompilerNotFoundError):
        build_fmu(bundled_source_dir("four_tank"), tmp_path / "x.fmu")
    assert not (tmp_path / "x.fmu").exists()


def test_empty_path_gives_compiler_not_found(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.delenv("CC", raising=False)
    monkeypatch.setenv("PATH", "")
    with pytest.raises(CompilerNotFoundError, match="C compiler.*CC"):
        find_c_compiler()


def test_cc_with_extra_words_is_kept(monkeypatch: pytest.MonkeyPatch) -> None:
    real = shlex.split(find_c_compiler())[0]
    monkeypatch.setenv("CC", f"{Path(real).name} -DLO_FROM_CC=1")
    words = shlex.split(find_c_compiler())
    assert Path(words[0]).is_absolute() and words[1:] == ["-DLO_FROM_CC=1"]


def test_explicit_compiler_that_cannot_run(tmp_path: Path) -> None:
    with pytest.raises(CompilerNotFoundError, match="cannot be run"):
        build_fmu(bundled_source_dir("four_tank"), tmp_path / "x.fmu",
                  compiler="/nonexistent/compiler")


# ----------------------------------------------------------- build errors
def test_syntax_error_gives_build_error_quoting_the_compiler(tmp_path: Path) -> None:
    src = _copy_plant("four_tank", tmp_path)
    model = src / "sources" / "model.c"
    model.write_text(model.read_text() + "\nthis is not C;\n")
    out_dir = tmp_path / "out"
    with pytest.raises(BuildError) as info:
        build_fmu(src, out_dir / "four_tank.fmu")
    message = str(info.value)
    assert "model.c" in message and "error" in message and "\n" not in message
    assert not isinstance(info.value, CompilerNotFoundError)
    assert list(out_dir.glob("*")) == []   # nothing half-written


def test_extra_cflags_reach_the_compiler(tmp_path: Path) -> None:
    src = _copy_plant("four_tank", tmp_path)
    model = src / "sources" / "model.c"
    model.write_text("#ifndef LO_TEST_FLAG\n#error LO_TEST_FLAG was not passed\n#endif\n"
                     + model.read_text())
    with pytest.raises(BuildError, match="LO_TEST_FLAG was not passed"):
        build_fmu(src, tmp_path / "a.fmu")
    out = build_fmu(src, tmp_path / "a.fmu", extra_cflags=("-DLO_TEST_FLAG=1",))
    assert validate_fmu(str(out)) == []


def test_missing_or_broken_model_description(tmp_path: Path) -> None:
    src = _copy_plant("lfp_cell", tmp_path)
    xml = src / "modelDescription.xml"
    text = xml.read_text()
    xml.unlink()
    with pytest.raises(FMUFileError, match="modelDescription.xml"):
        build_fmu(src, tmp_path / "a.fmu")
    xml.write_text(text.replace("</ModelVariables>", ""))
    with pytest.raises(FMUFileError) as info:
        build_fmu(src, tmp_path / "a.fmu")
    assert "\n" not in str(info.value)


def test_no_c_sources_gives_build_error(tmp_path: Path) -> None:
    src = _copy_plant("four_tank", tmp_path)
    (src / "sources" / "model.c").unlink()
    with pytest.raises(BuildError, match="no .c files"):
        build_fmu(src, tmp_path / "a.fmu")


def test_build_replaces_an_existing_file_atomically(tmp_path: Path) -> None:
    out = tmp_path / "deep" / "four_tank.fmu"
    out.parent.mkdir()
    out.write_bytes(b"old")
    result = build_fmu(bundled_source_dir("four_tank"), out)
    assert result == out and zipfile.is_zipfile(out)
    assert sorted(p.name for p in out.parent.iterdir()) == ["four_tank.fmu"]


def _build_into(args: tuple[str, str]) -> str:
    return str(build_fmu(args[0], args[1]))


def test_two_processes_building_the_same_target(tmp_path: Path) -> None:
    target = tmp_path / "same.fmu"
    src = str(bundled_source_dir("jacketed_reactor"))
    ctx = multiprocessing.get_context("fork" if "fork" in multiprocessing.get_all_start_methods()
                                      else "spawn")
    with ProcessPoolExecutor(max_workers=2, mp_context=ctx) as pool:
        results = list(pool.map(_build_into, [(src, str(target))] * 2))
    assert results == [str(target)] * 2
    assert validate_fmu(str(target)) == []
    assert [p.name for p in tmp_path.iterdir()] == ["same.fmu"]


# ------------------------------------------------------------ bundled cache
def test_unknown_bundled_plant_lists_the_names() -> None:
    with pytest.raises(UsageError) as info:
        bundled_source_dir("three_tank")
    for name in BUNDLED_PLANTS:
        assert name in str(info.value)


@pytest.mark.parametrize("name", BUNDLED_PLANTS)
def test_bundled_source_dirs_have_a_description_and_c_sources(name: str) -> None:
    folder = bundled_source_dir(name)
    assert folder.name == name
    assert (folder / "modelDescription.xml").is_file()
    assert list((folder / "sources").glob("*.c"))


def test_cache_dir_follows_linobs_cache(monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    monkeypatch.setenv("LINOBS_CACHE", str(tmp_path / "c"))
    assert cache_dir() == tmp_path / "c"
    monkeypatch.delenv("LINOBS_CACHE")
    monkeypatch.setenv("HOME", str(tmp_path / "home"))
    assert cache_dir() == tmp_path / "home" / ".cache" / "linobs"


def test_bundled_fmu_is_built_once(monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    first = bundled_fmu("four_tank", cache=tmp_path)
    assert first.parent == tmp_path / "fmus"
    assert first.name == f"four_tank-{source_digest(bundled_source_dir('four_tank'))}.fmu"

    def no_build(*args: object, **kwargs: object) -> Path:
        raise AssertionError("rebuilt although cached")

    monkeypatch.setattr(bundled, "build_fmu", no_build)
    assert bundled_fmu("four_tank", cache=tmp_path) == first
    monkeypatch.setenv("LINOBS_CACHE", str(tmp_path))
    assert bundled_fmu("four_tank") == first


def test_source_digest_covers_sources_description_and_framework(
        monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    src = _copy_plant("four_tank", tmp_path)
    base = source_digest(src)
    assert len(base) == 12 and int(base, 16) >= 0
    assert source_digest(src) == base
    model = src / "sources" / "model.c"
    model.write_text(model.read_text() + "\n")
    changed_source = source_digest(src)
    assert changed_source != base
    xml = src / "modelDescription.xml"
    xml.write_text(xml.read_text() + "\n")
    changed_xml = source_digest(src)
    assert changed_xml != changed_source
    support = tmp_path / "csupport"
    shutil.copytree(CSUPPORT_DIR, support)
    monkeypatch.setattr(bundled, "CSUPPORT_DIR", support)
    assert source_digest(src) == changed_xml
    (support / "lo_model.h").write_text((support / "lo_model.h").read_text() + "\n")
    assert source_digest(src) != changed_xml
