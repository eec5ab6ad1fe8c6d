"""The observability stage of `linobs run`: verdicts, refined boundary, regions, figures."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
import scipy.linalg
import scipy.optimize

from linobs.pipeline import run_study
from tests.reference import plants

# demo choice of scales (as in examples/lfp_cell.toml): 1 % of soc, 10 mV, 1 K
STATE_SCALES = np.array([0.01, 0.01, 0.01, 1.0])
OUTPUT_SCALES = np.array([0.01, 1.0])
WEAK = 5e-3


def cell_rest_study(folder: Path, *, empirical: str = "off") -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "study.toml"
    path.write_text(f"""
name = "cell_at_rest"
[model]
bundled = "lfp_cell"
[grid.soc]
linspace = {{ start = 0.05, stop = 0.95, num = 10 }}
[grid.t_amb]
values = [25.0, 35.0]
[grid]
fixed = {{ i_cell = 0.0 }}
[trim]
pinned_states = ["soc"]
[observability]
state_scales = {{ soc = 0.01, v_rc1 = 0.01, v_rc2 = 0.01, temp_cell = 1.0 }}
output_scales = {{ v_term = 0.01, t_surf = 1.0 }}
weak_threshold = {WEAK}
boundary_tolerance = 1e-3
empirical = "{empirical}"
empirical_points = 3
""")
    return path


def reference_margin(soc: float, t_amb: float) -> float:
    """Smallest balanced PBH margin of the cell at rest, from the analytic reference Jacobian.

    # analytic: at rest (i = 0) the trimmed state is v_rc1 = v_rc2 = 0, temp_cell = t_amb; the
    # Jacobians come from the model's OCV and resistance tables (tests/reference/plants.py);
    # margin(λ) = σ_min([(λI − Ã)/‖Ã‖; C̃/‖C̃‖]) / 2 on the scaled system (scipy svdvals)
    """
    x = [soc, 0.0, 0.0, t_amb]
    A, _, C, _ = plants.lfp_cell_jacobians(x, [0.0, t_amb])
    As = A * STATE_SCALES[None, :] / STATE_SCALES[:, None]
    Cs = C * STATE_SCALES[None, :] / OUTPUT_SCALES[:, None]
    na, nc = np.linalg.norm(As, 2), np.linalg.norm(Cs, 2)
    margins = []
    for lam in np.linalg.eigvals(As):
        M = np.vstack([(lam * np.eye(4) - As) / na, Cs / nc])
        margins.append(scipy.linalg.svdvals(M)[-1] / 2)
    return float(min(margins))


@pytest.fixture(scope="module")
def cell_run(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, dict]:
    out = tmp_path_factory.mktemp("obs") / "run"
    study = cell_rest_study(out.parent / "study", empirical="sample")
    summary = run_study(study, out, workers=2)
    return out, summary.model_dump()


def test_summary_counts_and_files(cell_run: tuple[Path, dict]) -> None:
    out, _ = cell_run
    data = json.loads((out / "summary.json").read_text())
    for key in ("observable", "weak", "unobservable_detectable", "unobservable"):
        assert key in data, key
    assert data["observable"] + data["weak"] + data["unobservable_detectable"] + \
        data["unobservable"] == data["ok"] == 20
    # the plateau (15 % ... 85 %) is weak, the steep ends observable (OCV slope; demo data)
    assert data["weak"] > 0 and data["observable"] > 0 and data["unobservable"] == 0
    for stem in ("observability_margin", "observability_verdicts"):
        for ext in ("png", "svg"):
            assert (out / "figures" / f"{stem}.{ext}").stat().st_size > 1000
    regions = (out / "observability" / "regions.txt").read_text()
    assert "soc" in regions and "weakly observable" in regions
    assert data["empirical_checked"] >= 1 and data["empirical_disagreements"] == 0


def test_boundary_sits_where_the_ocv_slope_crosses_the_threshold(cell_run: tuple[Path, dict]) -> None:
    out, _ = cell_run
    boundary = json.loads((out / "observability" / "boundary.json").read_text())
    along_soc = [b for b in boundary if b["moved"] == ["soc"]]
    assert along_soc, "no boundary bisected along soc"
    for t_amb in (25.0, 35.0):
        found = sorted(b["point"]["soc"] for b in along_soc if b["point"]["t_amb"] == t_amb)
        assert len(found) == 2, found   # one transition at each steep end of the plateau
        # analytic: the roots of margin(soc) = threshold from the reference tables (scipy brentq)
        low = scipy.optimize.brentq(lambda s: reference_margin(s, t_amb) - WEAK, 0.08, 0.3)
        high = scipy.optimize.brentq(lambda s: reference_margin(s, t_amb) - WEAK, 0.7, 0.95)
        assert found[0] == pytest.approx(low, abs=1e-3)
        assert found[1] == pytest.approx(high, abs=1e-3)


def test_resume_and_until(tmp_path: Path, cell_run: tuple[Path, dict]) -> None:
    out, first = cell_run
    again = run_study(cell_rest_study(out.parent / "study", empirical="sample"), out,
                      workers=1, resume=True)
    assert all(s.computed_now == 0 for s in again.stages.values())
    assert again.weak == first["weak"]
    only_sweep = run_study(cell_rest_study(tmp_path / "s"), tmp_path / "r", workers=1,
                           until="sweep")
    assert only_sweep.observable is None and set(only_sweep.stages) == {"sweep"}
    assert "observable" not in json.loads((tmp_path / "r" / "summary.json").read_text())
