"""Bounds, switching surfaces, noise zeros, structure checks and serialization."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from linobs.errors import OutOfBoundsError, UsageError
from linobs.linear.linear_model import LinearModel
from linobs.linear.schemes import step_sizes
from linobs.model.loader import load_model
from tests.reference import plants
from tests.support.fmu_files import build_minimal, edit_fmu

EPS = np.finfo(float).eps


def test_step_rule() -> None:
    # Dennis & Schnabel (1983) section 5.4: h = sqrt(eps) max(|x|, typ x) forward,
    # cbrt(eps) max(|x|, typ x) central, rounded so that (x + h) - x == h
    x = np.array([0.0, 3.3, -250.0, 1e-9])
    nominal = np.array([2.0, 1.0, 100.0, 1.0])
    hf = step_sizes(x, nominal, 1)
    hc = step_sizes(x, nominal, 2)
    np.testing.assert_allclose(hf, np.sqrt(EPS) * np.maximum(np.abs(x), nominal), rtol=1e-6)
    np.testing.assert_allclose(hc, EPS ** (1 / 3) * np.maximum(np.abs(x), nominal), rtol=1e-6)
    np.testing.assert_array_equal((x + hc) - x, hc)


def test_state_at_its_bound_is_differenced_inwards(bundled_fmus: dict[str, Path]) -> None:
    # soc is declared in [0, 1]; at soc = 1 a central step would leave the range
    with load_model(bundled_fmus["lfp_cell"]) as model:
        lm = model.linearize({"soc": 1.0, "i_cell": 5.0}, method="central")
        assert lm.column_schemes[0] == "one-sided-"
        assert any("within one step of its declared bound" in w for w in lm.warnings)
        A, B, C, D = plants.lfp_cell_jacobians(lm.x0, lm.u0)  # analytic reference
        # second-order one-sided formula (Fornberg 1988): O(h^2) = O(eps^(2/3)) relative error;
        # 1e-7 leaves room for the steep end of the OCV table (analytic order argument)
        np.testing.assert_allclose(lm.C[0, 0], C[0, 0], rtol=1e-7)


def test_switching_surface_is_differenced_away(bundled_fmus: dict[str, Path]) -> None:
    # the coolant valve saturates at 1 (event indicator z = 1 - valve); just below the
    # surface the unsaturated branch applies (analytic slope from tests/reference/plants.py)
    point = {"c_a": 808.4, "temp": 333.85, "temp_jacket": 305.41, "temp_feed": 340.0}
    with load_model(bundled_fmus["jacketed_reactor"]) as model:
        j_valve = model.nx + model.input_names.index("valve")
        h = step_sizes(np.array([1.0]), np.array([model.catalogue.get("valve").nominal]), 2)[0]
        below = 1.0 - 0.3 * h
        lm = model.linearize({**point, "valve": below}, method="central", refine=False)
        assert lm.column_schemes[j_valve] == "one-sided-"
        assert any("switching surface" in w and "valve" in w for w in lm.warnings)
        # only the column that crosses the surface is moved; the others stay central and
        # the crossing is not mistaken for an undeclared dependency
        assert lm.column_schemes[:model.nx] == ["central"] * model.nx
        assert not any("omits dependencies" in w for w in lm.warnings)
        A, B, C, D = plants.jacketed_reactor_jacobians(lm.x0, lm.u0)
        i = model.state_names.index("temp_jacket")
        np.testing.assert_allclose(lm.B[i, 0], B[i, 0], rtol=1e-7)
        # far from the surface: no warning, central differences
        far = model.linearize({**point, "valve": 0.5}, method="central")
        assert far.column_schemes[j_valve] == "central" and not far.warnings
        # exact derivatives near the surface: the current side's derivative, with a warning
        ex = model.linearize({**point, "valve": below}, method="exact")
        assert any("switching surface" in w for w in ex.warnings)
        np.testing.assert_allclose(ex.B[i, 0], B[i, 0], rtol=1e-12)


def test_entries_below_noise_are_exact_zeros(bundled_fmus: dict[str, Path]) -> None:
    # analytic: d(dT/dt)/d(i_cell) = (v_rc1 + v_rc2 + 2 R0 i) / (m cp) = 0 at rest with
    # relaxed RC branches; the central difference leaves only rounding noise there
    with load_model(bundled_fmus["lfp_cell"]) as model:
        lm = model.linearize({"soc": 0.5, "i_cell": 0.0, "v_rc1": 0.0, "v_rc2": 0.0}, method="central")
        i_temp = model.state_names.index("temp_cell")
        assert lm.B[i_temp, 0] == 0.0
        assert lm.errors.B[i_temp, 0] > 0.0  # a zero from noise still carries its error bound


def test_wrong_model_structure_is_detected(tmp_path: Path) -> None:
    # the fixture's der(vel) depends on force; a ModelStructure that hides it must not
    # produce a wrong Jacobian (analytic: d der(vel) / d force = 1)
    good = build_minimal(tmp_path / "good.fmu")
    bad = edit_fmu(good, tmp_path / "bad.fmu", xml=lambda s: s.replace(
        '<Unknown index="4" dependencies="1 3 5" dependenciesKind="fixed fixed fixed"/>',
        '<Unknown index="4" dependencies="1 3" dependenciesKind="fixed fixed"/>'))
    for method in ("forward", "central"):
        with load_model(bad) as model:
            lm = model.linearize({"pos": 0.3, "vel": -0.2, "force": 1.0}, method=method)
        assert lm.B[1, 0] == pytest.approx(1.0, rel=1e-6)
        assert any("ModelStructure omits dependencies" in w and "der(vel)" in w for w in lm.warnings)
        assert not lm.used_structure


def test_point_errors(bundled_fmus: dict[str, Path]) -> None:
    with load_model(bundled_fmus["lfp_cell"]) as model:
        with pytest.raises(OutOfBoundsError, match="soc=1.2 is above its declared max 1"):
            model.linearize({"soc": 1.2})
        lm = model.linearize({"soc": 1.0005}, allow_outside_bounds=True, method="forward")
        assert lm.x0[0] == 1.0005
        with pytest.raises(UsageError, match="is an output"):
            model.linearize({"v_term": 3.3})
        with pytest.raises(UsageError, match="unknown linearization method"):
            model.linearize({}, method="complex-step")
        with pytest.raises(UsageError, match="does not provide directional derivatives"):
            model.linearize({}, method="exact")


def test_parameters_in_the_point(bundled_fmus: dict[str, Path]) -> None:
    # Johansson (2000) eq. (2): B[0, 0] = gamma1 k1 / A1 (analytic)
    with load_model(bundled_fmus["four_tank"]) as model:
        lm = model.linearize({"gamma1": 0.43, "k1": 3.14}, method="exact")
        assert lm.parameters["gamma1"] == 0.43
        assert lm.B[0, 0] == pytest.approx(0.43 * 3.14 / 28.0, rel=1e-12)
        before = model.initializations
        model.linearize({"A1": 30.0}, method="exact")  # a fixed parameter: re-initialized once
        assert model.initializations == before + 1


def test_json_round_trip(bundled_fmus: dict[str, Path]) -> None:
    with load_model(bundled_fmus["four_tank"]) as model:
        lm = model.linearize({}, method="central")
    data = json.loads(lm.model_dump_json())
    for key in ("states", "inputs", "outputs", "A", "B", "C", "D", "x0", "u0", "y0", "dx0",
                "method", "evaluations"):
        assert key in data
    again = LinearModel.model_validate(data)
    np.testing.assert_array_equal(again.A, lm.A)
    np.testing.assert_array_equal(again.errors.D, lm.errors.D)


def test_to_statespace_matches_arrays(bundled_fmus: dict[str, Path]) -> None:
    control = pytest.importorskip("control")
    with load_model(bundled_fmus["four_tank"]) as model:
        lm = model.linearize({}, method="exact")
    ss = lm.to_statespace()
    assert isinstance(ss, control.StateSpace)
    np.testing.assert_array_equal(ss.A, lm.A)
    np.testing.assert_array_equal(ss.D, lm.D)
