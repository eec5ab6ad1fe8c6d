"""The study file: the examples load, malformed files are refused naming the field, hashes, schema."""

from __future__ import annotations

import hashlib
import itertools
import json
import shutil
import tomllib
from pathlib import Path

import numpy as np
import pytest

from linobs.errors import FMUFileError, StudyError, UsageError
from linobs.study import (
    StudyConfig,
    canonical_json,
    load_study,
    study_hash,
    study_schema,
)
from tests.support.fmu_files import edit_fmu

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"

CELL_HEAD = """
name = "cell"
[model]
fmu = "{fmu}"
"""


def _cache(bundled_fmus: dict[str, Path]) -> Path:
    return bundled_fmus["lfp_cell"].parent.parent  # <cache>/fmus/<name>-<digest>.fmu


def _write(tmp_path: Path, text: str, *, fmu: Path | None = None, csv: str | None = None,
           name: str = "study.toml") -> Path:
    if csv is not None:
        (tmp_path / "pts.csv").write_text(csv)
    path = tmp_path / name
    path.write_text(text.replace("{fmu}", str(fmu) if fmu else "").lstrip())
    return path


def _problems(path: Path, **kwargs: object) -> list[str]:
    with pytest.raises(StudyError) as info:
        load_study(path, **kwargs)  # type: ignore[arg-type]
    assert info.value.exit_code == 2
    return str(info.value).splitlines()


# ------------------------------------------------------------------------------ examples
def test_examples_load(bundled_fmus: dict[str, Path]) -> None:
    cache = _cache(bundled_fmus)
    cell = load_study(EXAMPLES / "lfp_cell.toml", bundled_cache=cache)
    assert cell.fmu_path == bundled_fmus["lfp_cell"]
    # common practice: a tensor grid has the product of the axis sizes as its number of points
    assert cell.grid.names == ("soc", "t_amb", "i_cell") and len(cell.grid) == 14 * 5 * 7
    assert len(cell.grid) <= 500                               # the demo stays small
    # Denser near the ends, where the open-circuit voltage curve bends.
    soc = cell.grid.axes[0].values
    assert (soc[0], soc[7], soc[13]) == (0.03, 0.5, 0.97)
    # soc is on an axis, so "all" frees the other three states: 3 unknowns, 3 equations
    assert cell.trim.free_states == ("v_rc1", "v_rc2", "temp_cell")
    assert cell.trim_equations == ("der(v_rc1)", "der(v_rc2)", "der(temp_cell)")
    assert cell.outputs == ("v_term", "t_surf") and cell.parameters == {"Q_Ah": 20.0, "hA": 0.8}
    assert cell.point_values(0) == {"soc": 0.03, "t_amb": -10.0, "i_cell": -20.0}

    tanks = load_study(EXAMPLES / "four_tank.toml", bundled_cache=cache)
    assert len(tanks.grid) == 25 and tanks.trim.unknowns == ("h1", "h2", "h3", "h4")
    assert tanks.config.linearize.method == "exact"

    reactor = load_study(EXAMPLES / "jacketed_reactor.toml", bundled_cache=cache)
    assert reactor.fmu_path == bundled_fmus["jacketed_reactor"]
    assert len(reactor.grid) == 5 * 4 * 3
    # analytic: logspace 5000..20000 with 3 values is 5000, 10000, 20000
    np.testing.assert_allclose(reactor.grid.axes[2].values, [5000.0, 10000.0, 20000.0])
    assert reactor.point_values(0)["temp_coolant_in"] == 285.0
    assert reactor.outputs == ("temp_meas", "temp_jacket_meas")
    order = reactor.continuation_order()
    assert sorted(order) == list(range(len(reactor.grid)))


def test_examples_match_the_schema() -> None:
    jsonschema = pytest.importorskip("jsonschema")
    schema = study_schema()
    jsonschema.Draft202012Validator.check_schema(schema)
    validator = jsonschema.Draft202012Validator(schema)
    for example in sorted(EXAMPLES.glob("*.toml")):
        validator.validate(tomllib.loads(example.read_text()))
    bad = tomllib.loads((EXAMPLES / "lfp_cell.toml").read_text()) | {"bogus": 1}
    assert not validator.is_valid(bad)
    assert not validator.is_valid({"name": "x", "model": {"bundled": "lfp_cell"},
                                   "grid": {"soc": {"linspace": {"start": 0, "stop": 1, "num": 0}}}})
    assert json.loads(json.dumps(schema)) == schema
    for section in ("name", "description", "model", "outputs", "grid", "trim", "linearize", "run"):
        assert section in schema["properties"]


# --------------------------------------------------------------------- malformed studies
MALFORMED = {
    "unknown top-level key": (
        "observabilty = 1\n" + CELL_HEAD, "observabilty: unknown top-level key"),
    "unknown key in a section": (
        CELL_HEAD + "paramters = {hA = 1.0}\n", ("model.paramters: unknown key; did you mean "
                                                "'parameters'? (allowed here: fmu, bundled, parameters)")),
    "misspelled key suggests": (
        CELL_HEAD + "[grid.soc]\nvalue = [0.5]\n", "grid.soc.value: unknown key; did you mean 'values'?"),
    "missing model": ('name = "x"\n', "model: the [model] table is missing"),
    "both fmu and bundled": (
        'name = "x"\n[model]\nfmu = "a.fmu"\nbundled = "lfp_cell"\n',
        "model: give exactly one of fmu"),
    "unknown bundled plant": (
        'name = "x"\n[model]\nbundled = "lfp"\n', "model.bundled: must be 'four_tank', 'lfp_cell'"),
    "fmu does not exist": (
        'name = "x"\n[model]\nfmu = "missing/plant.fmu"\n', "model.fmu: no such file"),
    "values and linspace": (
        CELL_HEAD + "[grid.soc]\nvalues = [0.5]\nlinspace = {start = 0.1, stop = 0.9, num = 3}\n",
        "grid.soc: give exactly one of values, linspace or logspace (found values and linspace)"),
    "no way given": (CELL_HEAD + "[grid.soc]\n", "grid.soc: give exactly one of values"),
    "non-increasing values": (
        CELL_HEAD + "[grid.soc]\nvalues = [0.1, 0.5, 0.5, 0.7]\n",
        "grid.soc.values[2]: values must be strictly increasing; got 0.5 after 0.5"),
    "outside declared range": (
        CELL_HEAD + "[grid.soc]\nvalues = [0.1, 0.5, 0.9, 1.2]\n",
        "grid.soc.values[3]: must be within [0, 1] (declared range of soc), got 1.2"),
    "linspace end outside range": (
        CELL_HEAD + "[grid.i_cell]\nlinspace = {start = -80, stop = 0, num = 5}\n",
        "grid.i_cell.linspace.start: must be within [-60, 60] (declared range of i_cell), got -80"),
    "one-sided bound": (
        CELL_HEAD + "parameters = {hA = -1.0}\n", ("model.parameters.hA: must be at least 0 "
                                                  "(declared min of hA), got -1")),
    "unknown axis variable": (
        CELL_HEAD + "[grid.socc]\nvalues = [0.5]\n",
        "grid.socc: the model has no variable named 'socc'; did you mean 'soc'?"),
    "axis over an output": (
        CELL_HEAD + "[grid.v_term]\nvalues = [3.3]\n", "grid.v_term: 'v_term' is an output"),
    "outputs naming a state": (
        'name = "x"\noutputs = ["v_term", "soc"]\n[model]\nfmu = "{fmu}"\n',
        ("outputs[1]: 'soc' is a state; list the measured outputs here (the model's outputs: "
        "v_term, t_surf)")),
    "logspace start not positive": (
        CELL_HEAD + "[grid.Q_Ah]\nlogspace = {start = 0, stop = 10, num = 5}\n",
        "grid.Q_Ah.logspace.start: must be greater than 0, got 0"),
    "num zero": (
        CELL_HEAD + "[grid.soc]\nlinspace = {start = 0.1, stop = 0.9, num = 0}\n",
        "grid.soc.linspace.num: must be greater than or equal to 1, got 0"),
    "num of the wrong type": (
        CELL_HEAD + '[grid.soc]\nlinspace = {start = 0.1, stop = 0.9, num = "ten"}\n',
        "grid.soc.linspace.num: must be a valid integer, got 'ten'"),
    "stop before start": (
        CELL_HEAD + "[grid.soc]\nlinspace = {start = 0.9, stop = 0.1, num = 3}\n",
        "grid.soc.linspace.stop: must be greater than start (0.9) when num > 1, got 0.1"),
    "not finite": (
        CELL_HEAD + "[grid.soc]\nvalues = [0.1, nan]\n", "grid.soc.values[1]: must be a finite number"),
    "trim not square": (
        CELL_HEAD + "[grid.soc]\nvalues = [0.5]\n[trim]\nfree_inputs = [\"i_cell\"]\n",
        ("trim: not square: 4 unknowns (free states: v_rc1, v_rc2, temp_cell; free inputs: i_cell) "
        "but 3 equations (zero derivatives: der(v_rc1), der(v_rc2), der(temp_cell); output "
        "targets: none)")),
    "free state on an axis": (
        CELL_HEAD + "[grid.soc]\nvalues = [0.5]\n[trim]\nfree_states = [\"soc\", \"v_rc1\"]\n",
        "trim.free_states[0]: 'soc' is held fixed by the grid axis"),
    "pinned state also free": (
        CELL_HEAD + '[trim]\nfree_states = ["v_rc1"]\npinned_states = ["v_rc1"]\n',
        "trim.free_states[0]: 'v_rc1' is also in trim.pinned_states"),
    "free states of the wrong type": (
        CELL_HEAD + "[trim]\nfree_states = 5\n", "trim.free_states: must be a valid list or 'all', got 5"),
    "free state not a string": (
        CELL_HEAD + '[trim]\nfree_states = ["v_rc1", 3]\n',
        "trim.free_states[1]: must be a valid string, got 3"),
    "output target on a state": (
        CELL_HEAD + "[trim]\noutput_targets = {soc = 0.5}\n", "trim.output_targets.soc: 'soc' is a state"),
    "axis and fixed": (
        CELL_HEAD + "[grid]\nfixed = {soc = 0.5}\n[grid.soc]\nvalues = [0.5]\n",
        "grid.fixed.soc: 'soc' is also a grid variable"),
    "parameter in two places": (
        CELL_HEAD + "parameters = {hA = 0.5}\n[grid.hA]\nvalues = [0.5, 1.0]\n",
        "model.parameters.hA: 'hA' is also set by the grid"),
    "unknown parameter": (
        CELL_HEAD + "parameters = {kc = 1.0}\n", "model.parameters.kc: the model has no variable named 'kc'"),
    "axes and points table": (
        CELL_HEAD + '[grid]\npoints_csv = "pts.csv"\n[grid.soc]\nvalues = [0.5]\n',
        "grid: give either axes or points_csv, not both"),
    "axis given as a number": (CELL_HEAD + "[grid]\nsoc = 0.5\n", "grid.soc: must be a table (an axis"),
    "odd names are quoted": (
        CELL_HEAD + 'parameters = {"der(soc)" = 1.0}\n',
        ("model.parameters.\"der(soc)\": 'der(soc)' is a derivative; model.parameters sets "
        "parameters only")),
    "too many points": (
        CELL_HEAD + "[grid.soc]\nlinspace = {start = 0, stop = 1, num = 1000}\n"
        "[grid.i_cell]\nlinspace = {start = -60, stop = 60, num = 1000000000}\n",
        "grid: the axes make 1000000000000 points, more than 1000000"),
    "bad method": (CELL_HEAD + '[linearize]\nmethod = "fast"\n', "linearize.method: must be 'auto'"),
}


@pytest.mark.parametrize("case", list(MALFORMED))
def test_malformed_study_names_the_field(case: str, tmp_path: Path,
                                         bundled_fmus: dict[str, Path]) -> None:
    text, expected = MALFORMED[case]
    path = _write(tmp_path, text, fmu=bundled_fmus["lfp_cell"])
    lines = _problems(path, bundled_cache=_cache(bundled_fmus))
    assert any(line.startswith(expected) for line in lines), lines


def test_out_of_range_message_exactly(tmp_path: Path, bundled_fmus: dict[str, Path]) -> None:
    path = _write(tmp_path, CELL_HEAD + "[grid.soc]\nvalues = [0.1, 0.5, 0.9, 1.2]\n",
                  fmu=bundled_fmus["lfp_cell"])
    with pytest.raises(StudyError) as info:
        load_study(path)
    assert str(info.value).startswith("grid.soc.values[3]: must be within [0, 1]")
    # ... and allowed when asked for
    allowed = _write(tmp_path, CELL_HEAD + "[grid.soc]\nvalues = [0.1, 0.5, 0.9, 1.2]\n"
                     "[linearize]\nallow_outside_bounds = true\n", fmu=bundled_fmus["lfp_cell"],
                     name="allowed.toml")
    assert len(load_study(allowed).grid) == 4


def test_every_problem_is_listed(tmp_path: Path, bundled_fmus: dict[str, Path]) -> None:
    text = (CELL_HEAD + "parameters = {kc = 1.0}\n[grid.soc]\nvalues = [0.5, 1.5]\n"
            "[grid.y1]\nvalues = [1.0]\n[trim]\nfree_inputs = [\"v1\"]\n")
    lines = _problems(_write(tmp_path, text, fmu=bundled_fmus["lfp_cell"]))
    for start in ("grid.soc.values[1]: must be within [0, 1]", "grid.y1: the model has no variable",
                  "model.parameters.kc:", "trim.free_inputs[0]: the model has no variable named 'v1'"):
        assert any(line.startswith(start) for line in lines), (start, lines)
    structural = _problems(_write(tmp_path, 'name = 3\nbogus = 1\n[model]\nbundled = "x"\n',
                                  name="s.toml"))
    assert any(line.startswith("name: must be a valid string, got 3") for line in structural)
    assert any(line.startswith("bogus: unknown top-level key") for line in structural)
    assert any(line.startswith("model.bundled: must be") for line in structural)


def test_long_lists_of_problems_are_capped(tmp_path: Path, bundled_fmus: dict[str, Path]) -> None:
    csv = "soc,i_cell\n" + "".join(f"{1.0 + k},0\n" for k in range(1, 81))   # 80 rows outside [0, 1]
    lines = _problems(_write(tmp_path, TABLE_STUDY, fmu=bundled_fmus["lfp_cell"], csv=csv))
    assert len(lines) == 51 and lines[-1] == "... and 30 more problems"
    assert lines[0].startswith("grid.points_csv[0].soc: must be within [0, 1]")


def test_toml_syntax_error_names_the_line(tmp_path: Path) -> None:
    path = _write(tmp_path, 'name = "x"\n[model\nbundled = "lfp_cell"\n')
    (line,) = _problems(path)
    assert line.startswith("study.toml: not valid TOML") and "line 2" in line


def test_missing_study_and_unreadable_fmu(tmp_path: Path) -> None:
    (line,) = _problems(tmp_path / "nope.toml")
    assert "no such study file" in line
    (tmp_path / "junk.fmu").write_text("not a zip")
    path = _write(tmp_path, 'name = "x"\n[model]\nfmu = "junk.fmu"\n')
    with pytest.raises(FMUFileError) as info:
        load_study(path)
    assert str(info.value).startswith("model.fmu: junk.fmu is not a zip archive")
    assert info.value.exit_code == 1 and "\n" not in str(info.value)


# ----------------------------------------------------------------------- points tables
TABLE_STUDY = CELL_HEAD + '[grid]\npoints_csv = "pts.csv"\nfixed = {t_amb = 25.0}\n'


def test_points_table_loads(tmp_path: Path, bundled_fmus: dict[str, Path]) -> None:
    csv = "soc,i_cell\n0.1,-10\n0.5,20\n0.9,5\n"
    study = load_study(_write(tmp_path, TABLE_STUDY, fmu=bundled_fmus["lfp_cell"], csv=csv))
    assert study.grid.kind == "scattered" and len(study.grid) == 3
    assert study.point_values(1) == {"soc": 0.5, "i_cell": 20.0, "t_amb": 25.0}
    assert study.trim.free_states == ("v_rc1", "v_rc2", "temp_cell")


@pytest.mark.parametrize("csv, expected", [
    ("soc,i_cell\n0.1,-10\n0.5\n", ("grid.points_csv[1]: has 1 values but the header names 2 "
                                    "columns (pts.csv line 3)")),
    ("soc,i_cell\n0.1,-10\n0.5,abc\n", "grid.points_csv[1].i_cell: not a number: 'abc' (pts.csv line 3)"),
    ("soc,i_cell\n0.1,-10\n0.5,0\n1.5,0\n", ("grid.points_csv[2].soc: must be within [0, 1] "
                                             "(declared range of soc), got 1.5 (pts.csv line 4)")),
    ("soc,i_curr\n0.1,-10\n", "grid.points_csv.i_curr: the model has no variable named 'i_curr'"),
    ("soc,t_amb\n0.1,0\n", "grid.fixed.t_amb: 't_amb' is also a grid variable"),
    ("soc,i_cell\n0.1,-10\n0.1,-10\n", "grid.points_csv[1]: repeats the point of row 0"),
    ("soc\n", "grid.points_csv: the table has a header but no points"),
])
def test_points_table_problems_name_row_and_column(csv: str, expected: str, tmp_path: Path,
                                                   bundled_fmus: dict[str, Path]) -> None:
    lines = _problems(_write(tmp_path, TABLE_STUDY, fmu=bundled_fmus["lfp_cell"], csv=csv))
    assert any(line.startswith(expected) for line in lines), lines


def test_missing_points_table(tmp_path: Path, bundled_fmus: dict[str, Path]) -> None:
    lines = _problems(_write(tmp_path, TABLE_STUDY, fmu=bundled_fmus["lfp_cell"]))
    assert lines[0].startswith("grid.points_csv: no such file")


# -------------------------------------------------------------- resolution and ordering
def test_trim_resolution_and_slow_axes(tmp_path: Path, bundled_fmus: dict[str, Path]) -> None:
    text = (CELL_HEAD + "[grid.mass]\nvalues = [0.5, 0.6]\n[grid.soc]\nvalues = [0.2, 0.5, 0.8]\n"
            "[grid]\nfixed = {temp_cell = 25.0}\n"
            '[trim]\npinned_states = ["v_rc2"]\nfree_inputs = ["t_amb"]\n'
            "output_targets = {t_surf = 25.0}\n")
    study = load_study(_write(tmp_path, text, fmu=bundled_fmus["lfp_cell"]))
    # "all" = every state not pinned and not set by the grid (axes or grid.fixed)
    assert study.trim.free_states == ("v_rc1",) and study.trim.pinned_states == ("v_rc2",)
    assert study.trim_unknowns == ("v_rc1", "t_amb")
    assert study.trim_equations == ("der(v_rc1)", "t_surf")
    assert study.slow_axes == ("mass",)             # a fixed parameter: changing it re-initializes
    order = study.continuation_order()
    masses = [study.point_values(i)["mass"] for i in order]
    # the slow axis changes once along the whole order
    assert sum(a != b for a, b in itertools.pairwise(masses)) == 1
    assert all(study.point_values(i)["temp_cell"] == 25.0 for i in order)


def test_trim_disabled_skips_the_square_check(tmp_path: Path, bundled_fmus: dict[str, Path]) -> None:
    text = CELL_HEAD + '[trim]\nenabled = false\nfree_inputs = ["i_cell"]\n'
    study = load_study(_write(tmp_path, text, fmu=bundled_fmus["lfp_cell"]))
    assert not study.trim.enabled and len(study.grid) == 1 and study.point_values(0) == {}


# ----------------------------------------------------------------------------- hashing
def test_study_hash_is_stable_and_sensitive(tmp_path: Path, bundled_fmus: dict[str, Path]) -> None:
    fmu = bundled_fmus["lfp_cell"]
    base = CELL_HEAD + "[grid.soc]\nvalues = [0.2, 0.5]\n[grid.i_cell]\nvalues = [0.0, 10.0]\n"
    first = study_hash(load_study(_write(tmp_path, base, fmu=fmu)))
    assert first == study_hash(load_study(tmp_path / "study.toml"))          # stable across loads
    other = tmp_path / "copy"
    other.mkdir()
    assert first == study_hash(load_study(_write(other, base, fmu=fmu)))     # identical file
    commented = "# a comment\n" + base.replace("[grid.soc]", "[grid.soc]   # state of charge")
    assert first == study_hash(load_study(_write(tmp_path, commented, fmu=fmu, name="c.toml")))
    explicit_default = base + "[linearize]\nmethod = \"auto\"\n"              # same settings
    assert first == study_hash(load_study(_write(tmp_path, explicit_default, fmu=fmu, name="d.toml")))

    edits = [
        base.replace("0.5]", "0.6]"),                                          # a value
        base.replace('name = "cell"', 'name = "cell2"'),                       # the name
        base + "[trim]\ntolerance = 1e-9\n",                                   # a setting
        base + "[run]\nchunk_size = 4\n",
        CELL_HEAD + "[grid.i_cell]\nvalues = [0.0, 10.0]\n[grid.soc]\nvalues = [0.2, 0.5]\n",  # axis order
    ]
    hashes = {first}
    for k, text in enumerate(edits):
        hashes.add(study_hash(load_study(_write(tmp_path, text, fmu=fmu, name=f"e{k}.toml"))))
    assert len(hashes) == len(edits) + 1

    changed = edit_fmu(fmu, tmp_path / "edited.fmu", xml=lambda x: x + "\n")  # same model, new bytes
    assert study_hash(load_study(_write(tmp_path, base, fmu=changed, name="f.toml"))) not in hashes


def test_renamed_setting_is_read_and_keeps_the_study_hash(tmp_path: Path,
                                                          bundled_fmus: dict[str, Path]) -> None:
    fmu = bundled_fmus["lfp_cell"]
    base = CELL_HEAD + "[grid.soc]\nvalues = [0.2, 0.5]\n[observability]\n"
    new = load_study(_write(tmp_path, base + 'margin_normalization = "sum"\n', fmu=fmu))
    old = load_study(_write(tmp_path, base + 'margin_normalisation = "sum"\n', fmu=fmu,
                            name="old.toml"))        # the spelling before the rename
    assert old.config.observability.margin_normalization == "sum"
    assert old.config == new.config and study_hash(old) == study_hash(new)
    # the hash is taken over the earlier name, so it is the hash the study had before the
    # rename: SHA-256 (hashlib, FIPS 180-4) of the canonical JSON as it was then
    text = canonical_json(new.config)
    assert '"margin_normalization":"sum"' in text and "margin_normalisation" not in text
    earlier = text.replace('"margin_normalization":', '"margin_normalisation":')
    assert canonical_json(new.config, earlier_names=True) == earlier
    h = hashlib.sha256(earlier.encode("utf-8"))
    h.update(b"\0fmu\0" + new.fmu_sha256.encode())
    h.update(b"\0grid\0" + new.grid.fingerprint().encode())
    assert study_hash(new) == h.hexdigest()
    other = load_study(_write(tmp_path, base + 'margin_normalization = "balanced"\n', fmu=fmu,
                              name="other.toml"))
    assert study_hash(other) != study_hash(new)         # the value still counts


def test_canonical_json_is_a_valid_config(bundled_fmus: dict[str, Path]) -> None:
    study = load_study(EXAMPLES / "jacketed_reactor.toml", bundled_cache=_cache(bundled_fmus))
    text = canonical_json(study.config)
    again = StudyConfig.model_validate(json.loads(text), strict=True)
    assert again == study.config and list(again.grid.axes) == ["valve", "temp_feed", "ua"]
    assert canonical_json(again) == text


def test_study_hash_covers_the_points_table(tmp_path: Path, bundled_fmus: dict[str, Path]) -> None:
    fmu = bundled_fmus["lfp_cell"]
    path = _write(tmp_path, TABLE_STUDY, fmu=fmu, csv="soc,i_cell\n0.1,-10\n0.5,20\n")
    before = study_hash(load_study(path))
    (tmp_path / "pts.csv").write_text("soc,i_cell\n0.1,-10\n0.5,21\n")
    assert study_hash(load_study(path)) != before


def test_relative_fmu_path_is_taken_from_the_study_folder(tmp_path: Path,
                                                          bundled_fmus: dict[str, Path]) -> None:
    (tmp_path / "plants").mkdir()
    shutil.copy(bundled_fmus["four_tank"], tmp_path / "plants" / "tanks.fmu")
    path = _write(tmp_path, 'name = "t"\n[model]\nfmu = "plants/tanks.fmu"\nparameters = {kc = 0.5}\n')
    study = load_study(path)
    assert study.fmu_path == tmp_path / "plants" / "tanks.fmu"
    assert study.catalogue.names("states") == ["h1", "h2", "h3", "h4"]
    assert isinstance(StudyError("x"), UsageError)


def test_reference_documents_every_field() -> None:
    text = (Path(__file__).resolve().parents[1] / "docs" / "study-file.md").read_text()
    schema = study_schema()
    sections = [schema, *schema["$defs"].values()]
    fields = {name for section in sections for name in section.get("properties", {})}
    assert {"free_states", "points_csv", "chunk_size", "logspace"} <= fields
    missing = sorted(f for f in fields if f"`{f}`" not in text and f"`[{f}]`" not in text)
    assert not missing, f"docs/study-file.md does not describe {missing}"
