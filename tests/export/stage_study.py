"""A small four-tank study through every stage, for the export tests."""

from __future__ import annotations

from pathlib import Path

STUDY = """
name = "four_tank_export"
outputs = ["y1", "y2"]
[model]
bundled = "four_tank"
parameters = {{ gamma1 = 0.70, gamma2 = 0.60 }}
[grid.v1]
linspace = {{ start = 2.0, stop = 4.0, num = 3 }}
[grid.v2]
linspace = {{ start = 2.0, stop = 4.0, num = 3 }}
[linearize]
method = "exact"
[observability]
empirical = "off"
refine_boundary = false
[estimator]
kind = "kalman"
sample_time = 1.0
process_noise = {{ h1 = 1e-4, h2 = 1e-4, h3 = 1e-4, h4 = 1e-4 }}
measurement_noise = {{ y1 = 0.05, y2 = 0.05 }}
[validation]
random_points = 6
seed = 3
spectral_radius_max = {target}
initial_error = {{ h3 = 2.0, h4 = -2.0 }}
[[validation.scenario]]
duration = 120
inputs = {{ v1 = 2.5, v2 = 3.5 }}
[export]
c_code = {c_code}
estimator_fmu = {fmu}
"""


def write_study(folder: Path, *, target: float = 0.999, c_code: bool = False,
                fmu: bool = False) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "study.toml"
    path.write_text(STUDY.format(target=target, c_code=str(c_code).lower(),
                                 fmu=str(fmu).lower()))
    return path
