"""Luenberger designs: placed error poles in every form, Ackermann's formula, refusals."""

from __future__ import annotations

import control
import numpy as np
import pytest
import scipy.linalg
import scipy.signal

from linobs.errors import UsageError
from linobs.estimator.assignment import assign_eigenvalues
from linobs.estimator.design import design_node, design_nodes
from linobs.estimator.settings import EstimatorSettings, PolePolicy
from tests.estimator import as_complex, pole_mismatch, random_system
from tests.observability.models import linear_model

TS = 0.2
S_POLES = [(-2.0, 1.0), (-2.0, -1.0), (-3.0, 0.0), (-4.5, 0.0)]


def settings(domain: str, form: str, poles: list[tuple[float, float]] = S_POLES,
             **extra: object) -> EstimatorSettings:
    return EstimatorSettings(kind="luenberger", domain=domain, form=form, sample_time=TS,
                             poles=PolePolicy(kind="explicit", poles=poles), **extra)


def ackermann(F: np.ndarray, h: np.ndarray, poles: np.ndarray) -> np.ndarray:
    """Observer gain l with eig(F − l h) = poles for one output row h (Ackermann 1972).

    l = φ(F) O⁻¹ e_n, O = [h; hF; …; hF^{n−1}], φ the desired characteristic
    polynomial (Ackermann's formula, dual form — textbook, from memory).
    """
    n = F.shape[0]
    coeffs = np.real(np.poly(poles))
    phi = sum(c * np.linalg.matrix_power(F, n - i) for i, c in enumerate(coeffs))
    O = np.vstack([h @ np.linalg.matrix_power(F, i) for i in range(n)])
    e = np.zeros((n, 1))
    e[-1, 0] = 1.0
    return phi @ np.linalg.solve(O, e)


@pytest.fixture
def plant() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    return random_system(np.random.default_rng(21), 4, 2, 2, shift=1.2)   # some unstable modes


@pytest.mark.parametrize("form", ["predictor", "filter"])
def test_discrete_error_poles_are_the_requested_ones(plant: tuple[np.ndarray, ...],
                                                     form: str) -> None:
    A, B, C = plant
    node = design_node(linear_model(A, B, C), settings("discrete", form))
    assert node.status == "ok", node.message
    Phi = scipy.linalg.expm(A * TS)                 # Φ = e^{ATs} (definition; scipy)
    L = node.L
    E = Phi - L @ C if form == "predictor" else (np.eye(4) - L @ C) @ Phi   # node.py's update
    want = np.exp(as_complex(S_POLES) * TS)         # z = e^{sTs}
    # eigenvalues by numpy (LAPACK geev), matched one to one
    assert pole_mismatch(np.linalg.eigvals(E), want) < 1e-8
    assert pole_mismatch(as_complex(node.error_poles), want) < 1e-8
    assert pole_mismatch(as_complex(node.requested_poles), want) < 1e-14


def test_continuous_error_poles_and_sampled_gain(plant: tuple[np.ndarray, ...]) -> None:
    A, B, C = plant
    node = design_node(linear_model(A, B, C), settings("continuous", "predictor"))
    assert node.status == "ok", node.message
    Lc = node.L_continuous
    assert pole_mismatch(np.linalg.eigvals(A - Lc @ C), as_complex(S_POLES)) < 1e-8
    # the update's gain is the observer (A − L_c C, L_c) sampled by zero-order hold
    # (scipy.signal.cont2discrete "zoh", reference library)
    _, Bd, *_ = scipy.signal.cont2discrete((A - Lc @ C, Lc, C, np.zeros((2, 2))), TS, method="zoh")
    np.testing.assert_allclose(node.L, Bd, rtol=1e-10, atol=1e-12)
    # filter form: Φ⁻¹ Γ_L, same error poles as the predictor (similar matrices)
    filt = design_node(linear_model(A, B, C), settings("continuous", "filter"))
    Phi = scipy.linalg.expm(A * TS)
    np.testing.assert_allclose(filt.L, np.linalg.solve(Phi, Bd), rtol=1e-9, atol=1e-11)
    E_f = (np.eye(4) - filt.L @ C) @ Phi
    assert pole_mismatch(np.linalg.eigvals(E_f), np.linalg.eigvals(Phi - Bd @ C)) < 1e-9


@pytest.mark.parametrize("form", ["predictor", "filter"])
def test_single_output_gain_is_ackermanns(form: str) -> None:
    A, B, C = random_system(np.random.default_rng(4), 4, 1, 1, shift=0.5)
    node = design_node(linear_model(A, B, C), settings("discrete", form))
    assert node.status == "ok", node.message
    Phi = scipy.linalg.expm(A * TS)
    H = C if form == "predictor" else C @ Phi       # (I − LC)Φ = Φ − L(CΦ)
    z = np.exp(as_complex(S_POLES) * TS)
    # Ackermann's formula (analytic, implemented above)
    np.testing.assert_allclose(node.L, ackermann(Phi, H, z), rtol=1e-7, atol=1e-10)
    # python-control's placement on the dual pair (reference library)
    np.testing.assert_allclose(node.L, control.place(Phi.T, H.T, z).T, rtol=1e-7, atol=1e-10)


def test_single_output_continuous_gain_is_ackermanns() -> None:
    A, B, C = random_system(np.random.default_rng(8), 3, 1, 1)
    poles = [(-1.0, 0.0), (-2.0, 3.0), (-2.0, -3.0)]
    node = design_node(linear_model(A, B, C), settings("continuous", "filter", poles))
    want = as_complex(poles)
    np.testing.assert_allclose(node.L_continuous, ackermann(A, C, want), rtol=1e-8, atol=1e-12)
    np.testing.assert_allclose(node.L_continuous, control.place(A.T, C.T, want).T, rtol=1e-8,
                               atol=1e-12)


def test_batched_assignment_places_random_systems() -> None:
    rng = np.random.default_rng(0)
    k, n, m = 50, 5, 2
    F = rng.standard_normal((k, n, n))
    G = rng.standard_normal((k, n, m))
    poles = np.array([-1.0, -1.0, -2.0, -1.0 + 2.0j, -1.0 - 2.0j])      # a double pole, m = 2
    got = assign_eigenvalues(F, G, np.tile(poles, (k, 1)))
    assert got.ok.all()
    for i in range(k):
        # numpy eigenvalues of the closed loop (LAPACK), the double pole to √ε·κ
        assert pole_mismatch(np.linalg.eigvals(F[i] - G[i] @ got.K[i]), poles) < 1e-6


def test_batched_designs_equal_single_node_designs(plant: tuple[np.ndarray, ...]) -> None:
    A, B, C = plant
    models = [linear_model(A * f, B, C) for f in (0.5, 1.0, 1.5)]
    st = settings("discrete", "filter")
    batch = design_nodes(models, st)
    for lm, node in zip(models, batch):
        np.testing.assert_allclose(node.L, design_node(lm, st).L, rtol=1e-12, atol=1e-14)


def test_speedup_poles_are_consistent_over_the_grid() -> None:
    A, B, C = random_system(np.random.default_rng(2), 3, 1, 2)
    models = [linear_model(A * f, B, C) for f in (0.5, 1.0, 2.0)]
    st = EstimatorSettings(kind="luenberger", domain="continuous", sample_time=0.01,
                           poles=PolePolicy(kind="speedup", factor=3.0))
    nodes = design_nodes(models, st)
    assert all(n.status == "ok" for n in nodes)
    first = as_complex(nodes[0].requested_poles)
    for node in nodes:
        np.testing.assert_array_equal(as_complex(node.requested_poles), first)
    # the set is 3× the slowest node's (node 0: A/2) eigenvalues, by the documented rule
    lam = np.linalg.eigvals(A * 0.5)
    want = -3 * np.abs(lam.real) + 3j * lam.imag
    assert pole_mismatch(first, want) < 1e-9 * np.max(np.abs(want))


def unobservable_plant() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    # x3 does not reach y and does not drive x1, x2: its mode −3 is unobservable (PBH, analytic)
    A = np.array([[-1.0, 1.0, 0.0], [0.0, -2.0, 0.0], [0.0, 0.0, -3.0]])
    return A, np.ones((3, 1)), np.array([[1.0, 0.0, 0.0]])


def test_unobservable_mode_refuses_and_is_named() -> None:
    A, B, C = unobservable_plant()
    lm = linear_model(A, B, C, states=["x1", "x2", "x3"])
    st = EstimatorSettings(kind="luenberger", domain="continuous", sample_time=0.1,
                           poles=PolePolicy(kind="speedup", factor=2.0))
    node = design_node(lm, st)
    assert node.status == "refused"
    assert "-3" in node.message and "x3" in node.message        # the eigenvalue (analytic)
    assert pole_mismatch(as_complex(node.unmovable_modes), np.array([-3.0])) < 1e-12
    # the local model is carried although refused
    np.testing.assert_array_equal(node.A, A)
    np.testing.assert_allclose(node.Phi, scipy.linalg.expm(A * 0.1), rtol=1e-13)
    assert node.L.size == 0
    # discrete design: the same mode as z = e^{−3·Ts} (definition)
    disc = design_node(lm, st.model_copy(update={"domain": "discrete"}))
    assert disc.status == "refused"
    assert pole_mismatch(as_complex(disc.unmovable_modes), np.exp([-0.3])) < 1e-12
    assert f"{np.exp(-0.3):.6g}" in disc.message


def test_unobservable_mode_among_explicit_poles_is_kept() -> None:
    A, B, C = unobservable_plant()
    poles = [(-3.0, 0.0), (-5.0, 0.0), (-6.0, 0.0)]
    node = design_node(linear_model(A, B, C), settings("continuous", "predictor", poles))
    assert node.status == "ok", node.message
    # eig(A − L_c C) is the requested set, −3 being the unmovable mode (PBH, analytic)
    assert pole_mismatch(np.linalg.eigvals(A - node.L_continuous @ C), as_complex(poles)) < 1e-8


def test_integrator_needs_a_floor() -> None:
    A = np.array([[0.0, 1.0], [0.0, -1.0]])                # eigenvalues 0 and −1 (triangular)
    lm = linear_model(A, np.ones((2, 1)), np.array([[1.0, 0.0]]))
    st = EstimatorSettings(kind="luenberger", poles=PolePolicy(kind="speedup"))
    with pytest.raises(UsageError, match="min_rate"):
        design_node(lm, st)
    st.poles.min_rate = 0.5
    node = design_node(lm, st)
    assert node.status == "ok"
    # speedup ×3 (default factor): 0 → floored to −0.5, −1 → −3; then z = e^{sTs}
    s = np.array([-0.5, -3.0])
    assert pole_mismatch(as_complex(node.error_poles), np.exp(s * st.sample_time)) < 1e-8


def test_symmetric_ladder_hides_its_antisymmetric_modes() -> None:
    # thermal ladder of 5 nodes measured at the middle one: the antisymmetric modes (k = 2, 4)
    # are unobservable, eigenvalues −(2 − 2 cos(kπ/6)) = −1, −3 (tests/observability/models.py;
    # Strang, second-difference matrix — from memory)
    from tests.observability.models import node_output, thermal_ladder

    A = thermal_ladder(5)
    lm = linear_model(A, np.ones((5, 1)), node_output(5, 2))
    node = design_node(lm, EstimatorSettings(kind="luenberger", domain="continuous",
                                             poles=PolePolicy(kind="speedup")))
    assert node.status == "refused"
    assert pole_mismatch(as_complex(node.unmovable_modes), np.array([-1.0, -3.0])) < 1e-9
    assert "-1 1/s" in node.message and "-3 1/s" in node.message
    # both are stable, so the pair is detectable and a Kalman design exists
    kal = design_node(lm, EstimatorSettings(kind="kalman", process_noise={"x0": 1.0},
                                            measurement_noise={"y0": 0.1}))
    assert kal.status == "ok", kal.message
    assert np.min(np.abs(as_complex(kal.error_poles) - np.exp(-1.0))) < 1e-9   # z = e^{λTs}
