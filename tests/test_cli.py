"""The command line: describe, linearize, build-fmu, demo, and one-line errors."""

from __future__ import annotations

import json
import shutil
import subprocess
import sys
import zipfile
from pathlib import Path

import numpy as np
from typer.testing import CliRunner

from linobs.cli import app
from linobs.model.bundled import bundled_source_dir
from tests.linear.test_four_tank import H_MINUS, V_MINUS, published_linear_model

runner = CliRunner()


def test_describe_lists_roles(bundled_fmus: dict[str, Path]) -> None:
    result = runner.invoke(app, ["describe", str(bundled_fmus["lfp_cell"])])
    assert result.exit_code == 0, result.output
    for word in ("states", "inputs", "outputs", "parameters", "soc", "i_cell", "v_term",
                 "directional derivatives: no"):
        assert word in result.output
    data = json.loads(runner.invoke(app, ["describe", str(bundled_fmus["jacketed_reactor"]),
                                          "--json"]).output)
    assert [v["name"] for v in data["states"]] == ["c_a", "temp", "temp_jacket"]
    assert data["capabilities"]["fmi_version"].startswith("3.")


def test_linearize_json_contract(bundled_fmus: dict[str, Path]) -> None:
    args = ["linearize", str(bundled_fmus["four_tank"]), "--method", "exact", "--json"]
    for k, v in {**H_MINUS, **V_MINUS}.items():
        args += ["--at", f"{k}={v}"]
    result = runner.invoke(app, args)
    assert result.exit_code == 0, result.output
    data = json.loads(result.output)
    for key in ("states", "inputs", "outputs", "A", "B", "C", "D", "x0", "u0", "y0", "dx0",
                "method", "evaluations"):
        assert key in data, key
    assert data["states"] == ["h1", "h2", "h3", "h4"] and data["method"] == "exact"
    # Johansson (2000) eq. (2), recomputed from the paper's parameters (from memory)
    A_ref, B_ref, C_ref = published_linear_model(np.array(list(H_MINUS.values())))
    np.testing.assert_allclose(np.array(data["A"]), A_ref, rtol=1e-9)
    np.testing.assert_allclose(np.array(data["B"]), B_ref, rtol=1e-9)


def test_linearize_table_output(bundled_fmus: dict[str, Path]) -> None:
    result = runner.invoke(app, ["linearize", str(bundled_fmus["lfp_cell"]), "--at", "soc=0.5",
                                 "--at", "i_cell=10"])
    assert result.exit_code == 0, result.output
    assert "linearized by central" in result.output and "der(soc)" in result.output


def test_errors_are_one_line_with_exit_codes(bundled_fmus: dict[str, Path], tmp_path: Path) -> None:
    bogus = tmp_path / "x.fmu"
    bogus.write_text("nope")
    result = runner.invoke(app, ["describe", str(bogus)])
    assert result.exit_code == 1  # model/data error
    assert "not a zip archive" in result.output and "Traceback" not in result.output
    assert len(result.output.strip().splitlines()) == 1
    result = runner.invoke(app, ["linearize", str(bundled_fmus["lfp_cell"]), "--at", "soc=2"])
    assert result.exit_code == 2  # usage error: value outside the declared range
    assert "above its declared max" in result.output
    result = runner.invoke(app, ["linearize", str(bundled_fmus["lfp_cell"]), "--at", "sco=0.5"])
    assert result.exit_code == 2 and "did you mean 'soc'" in result.output
    result = runner.invoke(app, ["linearize", str(bundled_fmus["lfp_cell"]), "--at", "soc"])
    assert result.exit_code == 2 and "expected NAME=VALUE" in result.output


def test_build_fmu_command(tmp_path: Path) -> None:
    out = tmp_path / "tank.fmu"
    result = runner.invoke(app, ["build-fmu", str(bundled_source_dir("four_tank")), "-o", str(out)])
    assert result.exit_code == 0, result.output
    with zipfile.ZipFile(out) as zf:
        names = zf.namelist()
    assert "modelDescription.xml" in names and any(n.startswith("sources/") for n in names)
    # a source FMU (binary for another platform only) can be rebuilt for this one
    other = tmp_path / "other.fmu"
    with zipfile.ZipFile(out) as zin, zipfile.ZipFile(other, "w") as zout:
        for item in zin.infolist():
            if not item.filename.startswith("binaries/"):
                zout.writestr(item, zin.read(item.filename))
    rebuilt = tmp_path / "rebuilt.fmu"
    result = runner.invoke(app, ["build-fmu", str(other), "--out", str(rebuilt)])
    assert result.exit_code == 0, result.output
    assert runner.invoke(app, ["describe", str(rebuilt)]).exit_code == 0


def test_every_command_that_writes_takes_dash_o_or_dash_dash_out() -> None:
    import typer

    commands = typer.main.get_command(app).commands  # type: ignore[attr-defined]
    writers = {name: [p for p in cmd.params if "--out" in p.opts]
               for name, cmd in commands.items()}
    assert {n for n, found in writers.items() if found} == {"build-fmu", "run", "export-fmu",
                                                             "demo"}
    for name, found in writers.items():
        for param in found:
            assert sorted(param.opts) == ["--out", "-o"], name
        for param in commands[name].params:
            assert "--output" not in param.opts, name
    result = runner.invoke(app, ["build-fmu", "x", "--output", "y.fmu"])
    assert result.exit_code == 2 and "No such option" in result.output


def test_console_script_and_debug_flag(tmp_path: Path) -> None:
    exe = shutil.which("linobs")
    cmd = [exe] if exe else [sys.executable, "-m", "linobs.cli"]
    bogus = tmp_path / "y.fmu"
    bogus.write_text("nope")
    plain = subprocess.run([*cmd, "describe", str(bogus)], capture_output=True, text=True)
    assert plain.returncode == 1 and "Traceback" not in plain.stderr
    debug = subprocess.run([*cmd, "--debug", "describe", str(bogus)], capture_output=True, text=True)
    assert debug.returncode != 0 and "Traceback" in debug.stderr


def test_example_script_runs() -> None:
    script = Path(__file__).resolve().parents[1] / "examples" / "linearize_point.py"
    result = subprocess.run([sys.executable, str(script)], capture_output=True, text=True, timeout=120)
    assert result.returncode == 0, result.stderr
    assert "d v_term / d soc" in result.stdout
