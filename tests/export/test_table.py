"""Schedule tables: JSON round trip, CSV readers, the checksum, verify, refusal, bad inputs."""

from __future__ import annotations

import csv
import json
import re
import shutil
from pathlib import Path

import jsonschema
import numpy as np
import pytest
from typer.testing import CliRunner

from linobs.cli import app
from linobs.estimator.schedule import GainSchedule
from linobs.export.table import (
    SCHEMA_VERSION,
    TableError,
    content_checksum,
    read_table,
    seal_table,
    table_json,
    table_schema,
)
from linobs.export.verify import verify_table
from linobs.model.build import build_fmu
from linobs.pipeline import CAUTION, run_study
from tests.export.stage_study import write_study
from tests.support.former_names import write_former_table

FMUS = Path(__file__).resolve().parents[2] / "fmus"


@pytest.fixture(scope="module")
def exported(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, dict]:
    folder = tmp_path_factory.mktemp("export")
    summary = run_study(write_study(folder, c_code=True, fmu=True), folder / "run", workers=1,
                        figures=False)
    return folder / "run", summary.model_dump()


def test_export_stage_writes_the_tables_with_the_caution(exported: tuple[Path, dict]) -> None:
    run, summary = exported
    assert summary["export_usable"] == 9 and summary["export_failed"] == 0
    folder = run / "export"
    table = read_table(folder / "schedule_table.json")
    assert table.caution == CAUTION and table.schema_version == SCHEMA_VERSION
    assert all(n.usable and n.passed for n in table.validation.nodes)
    # the FMU identity is the study's FMU (hashlib over the file: FIPS 180-4 SHA-256)
    import hashlib

    fmu = Path(summary["fmu"])
    assert table.fmu.sha256 == hashlib.sha256(fmu.read_bytes()).hexdigest()
    for name in ("schedule_table.csv", "schedule_table_units.csv"):
        text = (folder / name).read_text()
        assert f"# CAUTION: {CAUTION}" in text and table.checksum in text


def test_json_round_trip_through_the_gain_schedule_is_identical(
        exported: tuple[Path, dict]) -> None:
    path = exported[0] / "export" / "schedule_table.json"
    text = path.read_text()
    table = read_table(path)
    schedule = GainSchedule(table.schedule_data())
    again = table.model_copy(update={"schedule": schedule.data.model_dump(mode="json")})
    assert table_json(again) == text
    assert content_checksum(again) == table.checksum


def test_table_validates_against_its_printed_schema(exported: tuple[Path, dict]) -> None:
    # reference library: jsonschema (Draft 2020-12 validator) against `linobs table-schema`
    result = CliRunner().invoke(app, ["table-schema"])
    assert result.exit_code == 0
    schema = json.loads(result.output)
    assert schema == json.loads(json.dumps(table_schema()))
    data = json.loads((exported[0] / "export" / "schedule_table.json").read_text())
    jsonschema.Draft202012Validator(schema).validate(data)
    bad = dict(data, surprise=1)
    assert not jsonschema.Draft202012Validator(schema).is_valid(bad)


def test_csv_reads_with_the_csv_module_and_numpy(exported: tuple[Path, dict]) -> None:
    folder = exported[0] / "export"
    table = read_table(folder / "schedule_table.json")
    data = table.schedule_data()
    # Python's csv module, skipping the documented '#' comment lines
    with open(folder / "schedule_table.csv", newline="") as f:
        rows = list(csv.DictReader(line for line in f if not line.startswith("#")))
    assert len(rows) == len(data.nodes) == 9
    header = list(rows[0])
    assert header[:4] == ["node", "v1", "v2", "usable"]
    assert "L[h1,y1]" in header and "Phi[h3,h3]" in header and "dx0[h4]" in header
    for i, row in enumerate(rows):
        node = data.nodes[i]
        L = np.array([[float(row[f"L[{s},{y}]"]) for y in table.outputs] for s in table.states])
        np.testing.assert_array_equal(L, np.asarray(node.L))      # 17 digits: exact
        point = GainSchedule(data).node_point(i)
        assert (float(row["v1"]), float(row["v2"])) == (point["v1"], point["v2"])
    # numpy.loadtxt past the four comment lines and the header (the documented layout)
    arr = np.loadtxt(folder / "schedule_table.csv", delimiter=",", skiprows=5)
    assert arr.shape == (9, len(header))
    np.testing.assert_array_equal(arr[:, header.index("usable")], 1.0)
    np.testing.assert_array_equal(arr[:, header.index("L[h1,y1]")],
                                  [float(r["L[h1,y1]"]) for r in rows])
    with open(folder / "schedule_table_units.csv", newline="") as f:
        units = dict(csv.reader(line for line in f if not line.startswith("#")))
    assert units["v1"] == "V" and units["L[h1,y1]"] == "cm/V" and units["dx0[h1]"] == "cm/s"
    assert set(units) - {"column"} == set(header)


def test_verify_passes_fresh_and_fails_on_one_digit(exported: tuple[Path, dict],
                                                    tmp_path: Path) -> None:
    run, summary = exported
    path = run / "export" / "schedule_table.json"
    fmu = Path(summary["fmu"])
    result = CliRunner().invoke(app, ["verify", str(path), str(fmu)])
    assert result.exit_code == 0, result.output
    assert "verified" in result.output
    text = path.read_text()
    # change one digit of one gain entry
    m = re.search(r'"L": \[\s*\[\s*0\.(\d)', text)
    assert m is not None
    d = m.group(1)
    edited = text[:m.start(1)] + str((int(d) + 1) % 10) + text[m.end(1):]
    bad = tmp_path / "edited.json"
    bad.write_text(edited)
    report = verify_table(bad, fmu)
    assert not report.ok and "checksum does not match" in report.reasons[0]
    result = CliRunner().invoke(app, ["verify", str(bad), str(fmu)])
    assert result.exit_code == 1 and "checksum" in result.output


def test_a_table_written_before_the_decay_reserve_rename_reads_and_verifies(
        exported: tuple[Path, dict], tmp_path: Path) -> None:
    run, summary = exported
    source = run / "export" / "schedule_table.json"
    fresh = read_table(source)
    path = tmp_path / "schedule_table.json"
    old = write_former_table(source, path)           # schema version 1, its own checksum
    assert old["schema_version"] == 1 and "worst_margin" in old["validation"]
    assert "node_margin" in old["validation"]["nodes"][0]
    assert "decay_reserve" not in path.read_text()
    table = read_table(path)
    assert table.schema_version == 1 and table.checksum == old["checksum"] != fresh.checksum
    assert table.validation.worst_decay_reserve == fresh.validation.worst_decay_reserve
    assert table.validation.worst_decay_reserve is not None
    for a, b in zip(table.validation.nodes, fresh.validation.nodes, strict=True):
        assert a.node_decay_reserve == b.node_decay_reserve and a.node_decay_reserve is not None
        assert a.worst_frozen_decay_reserve == b.worst_frozen_decay_reserve
    result = CliRunner().invoke(app, ["verify", str(path), summary["fmu"]])
    assert result.exit_code == 0, result.output
    assert "verified" in result.output
    # the stored content is still what the checksum guards: one changed value fails
    edited = tmp_path / "edited.json"
    edited.write_text(json.dumps(dict(old, sample_time=2 * old["sample_time"]), indent=1))
    with pytest.raises(TableError, match="checksum does not match"):
        read_table(edited)
    # sealed again, a table read from version 1 is written with this version's names
    again = seal_table(table)
    assert again.schema_version == SCHEMA_VERSION and content_checksum(again) == again.checksum
    assert '"node_decay_reserve"' in table_json(again) and '"node_margin"' not in table_json(again)


def test_verify_fails_against_another_fmu(exported: tuple[Path, dict],
                                          bundled_fmus: dict[str, Path], tmp_path: Path) -> None:
    run, summary = exported
    path = run / "export" / "schedule_table.json"
    report = verify_table(path, bundled_fmus["lfp_cell"])
    assert not report.ok and any("GUID" in r for r in report.reasons)
    # same model, rebuilt with other flags: same GUID, other bytes
    rebuilt = build_fmu(FMUS / "four_tank", tmp_path / "four_tank.fmu", extra_cflags=("-O0",))
    report = verify_table(path, rebuilt)
    assert not report.ok and any("SHA-256" in r for r in report.reasons)
    assert not any("GUID" in r for r in report.reasons)


def test_bad_tables_give_one_clear_message(exported: tuple[Path, dict], tmp_path: Path) -> None:
    text = (exported[0] / "export" / "schedule_table.json").read_text()
    cases = {
        "truncated": (text[: len(text) // 2], "not valid JSON"),
        "version": (text.replace(f'"schema_version": {SCHEMA_VERSION}', '"schema_version": 99', 1),
                    "schema_version 99"),
        "unknown": (text.replace('"format":', '"color": "red",\n "format":', 1),
                    "color: unknown field"),
        "other": (json.dumps({"format": "something-else"}), "not a linobs schedule table"),
    }
    for name, (content, message) in cases.items():
        p = tmp_path / f"{name}.json"
        p.write_text(content)
        with pytest.raises(TableError, match=re.escape(message)) as info:
            read_table(p)
        assert "\n" not in str(info.value)
        result = CliRunner().invoke(app, ["verify", str(p), str(p)])
        assert result.exit_code == 1 and message.split()[0] in result.output


def test_failed_nodes_refuse_the_export_unless_allowed(tmp_path: Path) -> None:
    # a target no Kalman gain on this plant meets (ρ ≤ 0.5 with Ts = 1 s and tank time
    # constants of tens of seconds, Johansson 2000): every node fails its own check
    study = write_study(tmp_path / "a", target=0.5)
    summary = run_study(study, tmp_path / "a" / "run", workers=1, figures=False)
    assert summary.export_refused and "failed validation" in summary.export_refused
    assert "--allow-failed" in summary.export_refused
    assert not (tmp_path / "a" / "run" / "export" / "schedule_table.json").exists()
    assert json.loads((tmp_path / "a" / "run" / "summary.json").read_text())["export_refused"]
    # CLI: the summary is printed, then one error line and exit code 1
    shutil.rmtree(tmp_path / "a" / "run")
    result = CliRunner().invoke(app, ["run", str(study), "--out", str(tmp_path / "a" / "run"),
                                      "--workers", "1"])
    assert result.exit_code == 1 and "export refused" in result.output
    # with --allow-failed: written, nodes marked, the caution says so
    result = CliRunner().invoke(app, ["run", str(study), "--out", str(tmp_path / "a" / "run"),
                                      "--workers", "1", "--resume", "--allow-failed"])
    assert result.exit_code == 0, result.output
    table = read_table(tmp_path / "a" / "run" / "export" / "schedule_table.json")
    assert table.allow_failed and "WRITTEN WITH FAILED VALIDATION" in table.caution
    assert not any(n.usable for n in table.validation.nodes)
    assert all(n.status == "refused" and n.message.startswith("failed validation")
               for n in table.schedule_data().nodes)
    csv_text = (tmp_path / "a" / "run" / "export" / "schedule_table.csv").read_text()
    assert "WRITTEN WITH FAILED VALIDATION" in csv_text


def test_export_stage_writes_c_code_and_a_valid_estimator_fmu(exported: tuple[Path, dict],
                                                              tmp_path: Path) -> None:
    from fmpy import read_model_description
    from fmpy.validation import validate_fmu

    run, summary = exported
    folder = run / "export"
    table = read_table(folder / "schedule_table.json")
    for name in ("linobs_schedule.h", "linobs_schedule.c"):
        head = (folder / name).read_text()[:2000]
        assert "engineering aids" in head and table.checksum in head
    fmu = folder / "four_tank_export_estimator.fmu"
    assert validate_fmu(str(fmu)) == []          # fmpy's own validation (FMI 2.0 standard)
    md = read_model_description(str(fmu))
    assert md.coSimulation is not None and "engineering aids" in md.description
    # the CLI builds the same estimator from the table alone (same content -> same GUID)
    again = tmp_path / "again.fmu"
    result = CliRunner().invoke(app, ["export-fmu", str(folder / "schedule_table.json"),
                                      "--out", str(again)])
    assert result.exit_code == 0, result.output
    assert read_model_description(str(again)).guid == md.guid
