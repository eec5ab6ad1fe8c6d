"""The estimator FMU (FMI 2.0 co-simulation) against run_estimator on the same samples.

Reference: :func:`linobs.estimator.nonlinear.run_estimator` (the project's offline run of a
schedule over samples, itself a loop over ``GainSchedule.step``); the plant samples come from
fmpy's model-exchange simulation of the bundled four-tank FMU (CVode).  The FMU is driven by
fmpy's ``FMU2Slave`` (an independent FMI 2.0 master) and checked by ``fmpy.validate_fmu``.
"""

from __future__ import annotations

import shutil
import zipfile
from pathlib import Path

import numpy as np
import pytest
from fmpy import extract, read_model_description
from fmpy.fmi1 import FMICallException
from fmpy.simulation import instantiate_fmu
from fmpy.validation import validate_fmu

from linobs.errors import UsageError
from linobs.estimator.nonlinear import EstimatorRun, PlantRun, run_estimator, simulate_plant
from linobs.estimator.scenario import Scenario
from linobs.estimator.schedule import GainSchedule
from linobs.export.estimator_fmu import build_estimator_fmu
from tests.estimator.reference_nodes import four_tank_schedule

from .estimator_helpers import CAUTION, refuse, synthetic_schedule

SEED = 20240612
# form -> (schedule, estimator FMU, initial estimate); the plant run
Tank = tuple[dict[str, tuple[GainSchedule, Path, dict[str, float]]], PlantRun]


class Driver:
    """An estimator FMU instance driven through fmpy's FMU2Slave, with its log kept."""

    def __init__(self, path: Path) -> None:
        self.md = read_model_description(str(path))
        self.unzip = extract(str(path))
        self.vr = {v.name: v.valueReference for v in self.md.modelVariables}
        self.log: list[tuple[int, str]] = []

        def logger(env: object, name: bytes, status: int, category: bytes, message: bytes
                   ) -> None:
            self.log.append((int(status), message.decode("utf-8", "replace")))

        self.fmu = instantiate_fmu(self.unzip, self.md, fmi_type="CoSimulation", logger=logger)

    def set(self, values: dict[str, float]) -> None:
        self.fmu.setReal([self.vr[k] for k in values], [float(v) for v in values.values()])

    def get(self, names: list[str]) -> np.ndarray:
        return np.array(self.fmu.getReal([self.vr[n] for n in names]))

    def start(self, values: dict[str, float] | None = None, t0: float = 0.0) -> None:
        self.fmu.setupExperiment(startTime=t0)
        self.fmu.enterInitializationMode()
        if values:
            self.set(values)
        self.fmu.exitInitializationMode()

    def close(self) -> None:
        self.fmu.freeInstance()
        shutil.rmtree(self.unzip, ignore_errors=True)


def drive(path: Path, schedule: GainSchedule, times: np.ndarray, U: np.ndarray, Y: np.ndarray,
          start: dict[str, float] | None = None) -> dict[str, np.ndarray]:
    """Set u, y at each communication point t_j, read the outputs, doStep to t_{j+1}."""
    d = Driver(path)
    try:
        d.start(start)
        hats = [f"{s}_hat" for s in schedule.states]
        sigmas = [f"{s}_sigma" for s in schedule.states] if schedule.kind == "kalman" else []
        rows = []
        for j, t in enumerate(times):
            d.set({**dict(zip(schedule.inputs, U[j])), **dict(zip(schedule.outputs, Y[j]))})
            rows.append(d.get([*hats, *sigmas, "usable", "outside"]))
            if j + 1 < len(times):
                d.fmu.doStep(currentCommunicationPoint=t, communicationStepSize=times[j + 1] - t)
        d.fmu.terminate()
    finally:
        d.close()
    out = np.array(rows)
    n = len(schedule.states)
    return {"estimates": out[:, :n], "sigma": out[:, n:n + len(sigmas)] if sigmas else None,
            "usable": out[:, -2] == 1.0, "outside": out[:, -1] == 1.0}


def compare(got: dict[str, np.ndarray], ref: EstimatorRun, rows: np.ndarray | None = None
            ) -> None:
    """Estimates within 1e-10 × each state's magnitude, σ likewise, flags equal."""
    rows = np.arange(len(ref.estimates)) if rows is None else rows
    for i, name in enumerate(ref.state_names):
        scale = max(1.0, float(np.max(np.abs(ref.estimates[:, i]))))
        np.testing.assert_allclose(got["estimates"][:, i], ref.estimates[rows, i], rtol=0,
                                   atol=1e-10 * scale, err_msg=name)
        if ref.sigma is not None:
            scale = max(1e-3, float(np.nanmax(np.abs(ref.sigma[:, i]))))
            np.testing.assert_allclose(got["sigma"][:, i], ref.sigma[rows, i], rtol=0,
                                       atol=1e-10 * scale, err_msg=f"sigma of {name}")
    np.testing.assert_array_equal(got["usable"], ref.usable[rows])
    np.testing.assert_array_equal(got["outside"], ref.outside[rows])


@pytest.fixture(scope="module")
def tank(bundled_fmus: dict[str, Path], tmp_path_factory: pytest.TempPathFactory) -> Tank:
    """Four-tank schedules (node 8, v1 = v2 = 4 V, refused), their FMUs and a plant run."""
    folder = tmp_path_factory.mktemp("estimator-fmu")
    out = {}
    for form in ("filter", "predictor"):
        schedule = refuse(four_tank_schedule(bundled_fmus["four_tank"], Ts=1.0, form=form)[0], 8)
        center = schedule.data.nodes[4]
        start = {s: float(x) + dx for s, x, dx in zip(schedule.states, center.x0,
                                                     (1.0, -1.0, 0.5, -0.5))}
        path = build_estimator_fmu(schedule, folder / f"tank_{form}.fmu",
                                   model_name=f"tank {form} estimator", caution=CAUTION,
                                   initial_estimate=start, header_note="four-tank test plant")
        out[form] = (schedule, path, start)
    schedule = out["filter"][0]
    # hold, into the refused cell (v1, v2 in 3..4 V: unusable), back out
    scenario = Scenario(inputs=("v1", "v2"),
                        times=np.array([0.0, 15.0, 15.0, 45.0, 45.0, 80.0]),
                        values=np.array([[3.0, 3.0], [3.0, 3.0], [3.7, 3.6], [3.7, 3.6],
                                         [2.3, 3.4], [2.3, 3.4]]))
    center = schedule.data.nodes[4]
    run = simulate_plant(bundled_fmus["four_tank"], scenario,
                         dict(zip(schedule.states, map(float, center.x0))), {}, 1.0,
                         ["y1", "y2"])
    return out, run


def test_fmu_validates_keeps_its_sources_and_has_a_stable_guid(tank: Tank, tmp_path: Path
                                                                ) -> None:
    out, _ = tank
    schedule, path, start = out["filter"]
    assert validate_fmu(str(path)) == []                      # fmpy's checks (schema, structure)
    names = zipfile.ZipFile(path).namelist()
    sources = [n for n in names if n.startswith("sources/")]
    assert {"sources/tank_filter_estimator_fmi2.c", "sources/tank_filter_estimator_schedule.c",
            "sources/tank_filter_estimator_schedule.h"} == set(sources)
    with zipfile.ZipFile(path) as zf:
        for name in sources:
            assert zf.read(name).decode().startswith("/*\n * CAUTION (test)")
    md = read_model_description(str(path))
    assert md.modelExchange is None and md.coSimulation is not None
    assert md.coSimulation.canHandleVariableCommunicationStepSize
    assert CAUTION in md.description and "four-tank test plant" in md.description
    v = {x.name: x for x in md.modelVariables}
    assert [x.name for x in md.modelVariables if x.causality == "input"] == \
        ["v1", "v2", "y1", "y2"]
    assert [x.name for x in md.modelVariables if x.causality == "output"] == \
        [*(f"{s}_hat" for s in schedule.states), *(f"{s}_sigma" for s in schedule.states),
         "usable", "outside"]
    for s in schedule.states:
        assert v[f"{s}_hat_start"].causality == "parameter"
        assert v[f"{s}_hat_start"].variability == "fixed"
        assert float(v[f"{s}_hat_start"].start) == start[s]
    # filter form: the estimates feed through from the measurements (D = 0: not from v1, v2)
    deps = {u.variable.name: sorted(d.name for d in u.dependencies) for u in md.outputs}
    assert deps["h1_hat"] == ["y1", "y2"] and deps["usable"] == ["v1", "v2"]
    again = build_estimator_fmu(schedule, tmp_path / "again.fmu", model_name="tank filter "
                                "estimator", caution=CAUTION, initial_estimate=start,
                                header_note="four-tank test plant")
    assert read_model_description(str(again)).guid == md.guid
    other = build_estimator_fmu(schedule, tmp_path / "other.fmu", model_name="tank filter "
                                "estimator", caution=CAUTION, header_note="four-tank test plant")
    assert read_model_description(str(other)).guid != md.guid
    predictor = read_model_description(str(out["predictor"][1]))
    assert validate_fmu(str(out["predictor"][1])) == []
    assert all(u.dependencies == [] for u in predictor.outputs if u.variable.name.endswith("_hat"))


@pytest.mark.parametrize("form", ["filter", "predictor"])
def test_fmu_matches_run_estimator_on_plant_samples(tank: Tank, form: str) -> None:
    out, run = tank
    schedule, path, start = out[form]
    ref = run_estimator(schedule, run, initial_estimate=start, noise_std={}, seed=0)
    got = drive(path, schedule, run.times, run.inputs, run.outputs)
    compare(got, ref)
    assert ref.usable.any() and (~ref.usable).any()   # the run crosses the refused cell
    assert np.max(np.abs(ref.estimates[0] - run.states[0])) == pytest.approx(1.0)


@pytest.mark.parametrize("kind,form", [("luenberger", "predictor"), ("kalman", "filter")])
def test_longer_steps_and_parameters(kind: str, form: str, tmp_path: Path) -> None:
    schedule = synthetic_schedule(kind=kind, form=form)
    path = build_estimator_fmu(schedule, tmp_path / "synth.fmu", model_name="synthetic",
                               caution=CAUTION)
    assert validate_fmu(str(path)) == []
    rng = np.random.default_rng(SEED)
    Ts = schedule.sample_time
    m = rng.integers(1, 4, 60)                               # samples per communication step
    points = np.concatenate([[0], np.cumsum(m)])             # sample index of each point
    U = rng.uniform([-0.3, 0.5], [2.4, 1.5], (len(points), 2))
    Y = rng.uniform([18.0, -0.5], [50.0, 3.0], (len(points), 2))
    # the samples the FMU sees: inputs held from one communication point to the next
    held = np.repeat(np.arange(len(points) - 1), m).tolist() + [len(points) - 1]
    samples = PlantRun(times=np.arange(points[-1] + 1) * Ts, sample_time=Ts,
                       state_names=list(schedule.states), input_names=list(schedule.inputs),
                       output_names=list(schedule.outputs),
                       states=np.zeros((points[-1] + 1, len(schedule.states))),
                       inputs=U[held], outputs=Y[held], parameters={}, hold="zoh")
    params = {"theta": 1.3, "z": 1.0}
    start = {"T": 26.0, "x2": 0.4, "x3": 1.1}
    ref = run_estimator(schedule, samples, initial_estimate=start, noise_std={}, seed=0,
                        parameters=params)
    got = drive(path, schedule, points * Ts, U, Y,
                start={**params, **{f"{k}_hat_start": v for k, v in start.items()}})
    compare(got, ref, rows=points)
    assert (m > 1).sum() > 20 and ref.usable.any() and (~ref.usable).any()


def test_bad_calls_give_error_statuses_with_a_message(tank: Tank) -> None:
    out, _ = tank
    schedule, path, _ = out["filter"]
    d = Driver(path)
    try:
        d.start()
        d.fmu.doStep(0.0, 1.0)
        with pytest.raises(FMICallException) as info:        # 1.5 Ts: not a whole multiple
            d.fmu.doStep(1.0, 1.5)
        assert info.value.status == 3                        # fmi2Error
        assert "not a whole multiple" in d.log[-1][1] and d.log[-1][0] == 3
        d.get(["h1_hat"])                                    # still readable in the error state
        with pytest.raises(FMICallException):                # only reset or free from here
            d.fmu.doStep(1.0, 1.0)
        assert "error state" in d.log[-1][1]
        d.fmu.reset()
        d.start()
        d.fmu.doStep(0.0, 2.0)                               # two samples in one step
        with pytest.raises(FMICallException):
            d.fmu.doStep(5.0, 1.0)
        assert "cannot go back or skip time" in d.log[-1][1]
        for bad, expected in ((lambda: d.set({"h1_hat": 1.0}), "is an output"),
                              (lambda: d.set({"h1_hat_start": 1.0}), "fixed parameter"),
                              (lambda: d.set({"y1": float("nan")}), "not finite"),
                              (lambda: d.fmu.getReal([999]), "unknown value reference"),
                              (lambda: d.fmu.getFMUstate(), "canGetAndSetFMUstate")):
            d.fmu.reset()
            d.start()
            with pytest.raises(FMICallException):
                bad()
            assert expected in d.log[-1][1]
    finally:
        d.close()


def test_initial_estimate_must_name_states(tank: Tank, tmp_path: Path) -> None:
    schedule = tank[0]["filter"][0]
    with pytest.raises(UsageError, match="does not estimate"):
        build_estimator_fmu(schedule, tmp_path / "x.fmu", model_name="x", caution=CAUTION,
                            initial_estimate={"h9": 1.0})
    with pytest.raises(UsageError, match="not finite"):
        build_estimator_fmu(schedule, tmp_path / "x.fmu", model_name="x", caution=CAUTION,
                            initial_estimate={"h1": float("inf")})
