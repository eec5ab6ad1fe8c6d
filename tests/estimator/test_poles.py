"""Observer pole policies: explicit, speedup, bandwidth, separation and the consistent set."""

from __future__ import annotations

import numpy as np
import pytest

from linobs.errors import UsageError
from linobs.estimator.poles import (
    bandwidth_poles,
    consistent_poles,
    continuous_to_discrete,
    explicit_poles,
    node_poles,
    separate_repeated,
    speedup_poles,
)
from linobs.estimator.settings import PolePolicy


def test_speedup_scales_real_and_imaginary_parts() -> None:
    lam = np.array([[-0.5 + 2j, -0.5 - 2j, -3.0, 0.2]])
    got = speedup_poles(lam, PolePolicy(kind="speedup", factor=4.0), sample_time=0.1)[0]
    # the documented rule, by hand: −factor·|Re λ| + j·factor·Im λ (unstable 0.2 reflected)
    np.testing.assert_allclose(got, [-2.0 + 8j, -2.0 - 8j, -12.0, -0.8], rtol=1e-15)
    # damping ratio −Re/|s| of the pair is kept (definition of ζ, common practice)
    zeta = lambda s: -s.real / abs(s)
    assert zeta(got[0]) == pytest.approx(zeta(lam[0, 0]), rel=1e-14)


def test_speedup_floor_and_integrator() -> None:
    lam = np.array([[0.0, -0.01, -5.0]])
    got = speedup_poles(lam, PolePolicy(kind="speedup", factor=2.0, min_rate=0.5), 1.0)[0]
    # every |Re s| ≥ min_rate (the documented floor): 0 → 0.5, 0.02 → 0.5, 10 stays
    np.testing.assert_allclose(got, [-0.5, -0.5, -10.0])
    with pytest.raises(UsageError, match="min_rate"):
        speedup_poles(lam, PolePolicy(kind="speedup", factor=2.0), 1.0)


def test_bandwidth_pattern_radius_and_damping() -> None:
    for n in (2, 3, 4, 5):
        s = bandwidth_poles(PolePolicy(kind="bandwidth", bandwidth=3.0, damping=0.6), n)
        # all on |s| = ω_n, closed under conjugation, least damped pair has ζ (documented rule)
        np.testing.assert_allclose(np.abs(s), 3.0, rtol=1e-14)
        np.testing.assert_allclose(np.sort_complex(s), np.sort_complex(s.conj()), atol=1e-14)
        assert np.min(-s.real / np.abs(s)) == pytest.approx(0.6, rel=1e-12)
        assert np.all(s.real < 0)
    # n = 2 with ζ = 1/√2 is the 2nd-order Butterworth pair −ω(1 ± j)/√2 (textbook, from memory)
    s = bandwidth_poles(PolePolicy(kind="bandwidth", bandwidth=1.0, damping=np.sqrt(0.5)), 2)
    np.testing.assert_allclose(np.sort_complex(s), [(-1 - 1j) / np.sqrt(2), (-1 + 1j) / np.sqrt(2)],
                               atol=1e-15)
    # n = 3 Butterworth: −ω and −ω(1 ± j√3)/2 (textbook, from memory), ζ = cos 60° = 0.5
    s = bandwidth_poles(PolePolicy(kind="bandwidth", bandwidth=2.0, damping=0.5), 3)
    np.testing.assert_allclose(np.sort_complex(s),
                               np.sort_complex([-1 - 1j * np.sqrt(3), -2.0, -1 + 1j * np.sqrt(3)]),
                               atol=1e-14)


def test_bandwidth_overdamped_is_real_and_distinct() -> None:
    s = bandwidth_poles(PolePolicy(kind="bandwidth", bandwidth=2.0, damping=1.5), 4)
    assert np.all(s.imag == 0)
    # documented spread: −ω·[0.75, 1.25], evenly
    want = -2.0 * np.array([1.25, 1 + 1 / 12, 1 - 1 / 12, 0.75])
    np.testing.assert_allclose(np.sort(s.real), want)


def test_explicit_poles_are_checked() -> None:
    ok = PolePolicy(kind="explicit", poles=[(-1, 2), (-1, -2), (-3, 0)])
    np.testing.assert_allclose(np.sort_complex(explicit_poles(ok, 3)), [-3, -1 - 2j, -1 + 2j])
    with pytest.raises(UsageError, match="has 4 states"):
        explicit_poles(ok, 3 + 1)
    with pytest.raises(UsageError, match="conjugate"):
        explicit_poles(PolePolicy(kind="explicit", poles=[(-1, 2), (-3, 0)]), 2)
    with pytest.raises(UsageError, match="left half plane"):
        explicit_poles(PolePolicy(kind="explicit", poles=[(0.5, 0), (-3, 0)]), 2)


def test_repeated_poles_are_separated_by_the_documented_step() -> None:
    poles, changed = separate_repeated(np.array([-2.0, -2.0, -2.0, -1 + 1j, -1 - 1j]))
    assert changed
    # copies s·(1 + 0.01·(i − (m−1)/2)): −1.98, −2, −2.02 (the documented rule, by hand)
    np.testing.assert_allclose(np.sort(poles[poles.imag == 0].real), [-2.02, -2.0, -1.98])
    # only beyond the allowed multiplicity when a limit is given
    same, changed = separate_repeated(np.array([-2.0, -2.0, -1.0]), limit=2)
    assert not changed and np.allclose(np.sort(same.real), [-2, -2, -1])


def test_consistent_poles_come_from_the_slowest_node() -> None:
    nodes = np.array([[-1.0, -4.0], [-0.2, -9.0], [-0.5, -0.6]])
    policy = PolePolicy(kind="speedup", factor=3.0)
    got = consistent_poles(nodes, policy, 1.0)
    # node 1 has the slowest mode (0.2): its sped-up set, by hand
    np.testing.assert_allclose(np.sort(got.real), [-27.0, -0.6])
    per_node = node_poles(nodes, policy, 1.0)
    np.testing.assert_allclose(np.sort(per_node.real, axis=1), 3 * np.sort(nodes, axis=1))


def test_continuous_poles_map_to_the_z_plane() -> None:
    s = np.array([-1.0 + 2.0j, -1.0 - 2.0j, -0.3])
    z = continuous_to_discrete(s, 0.25)
    # z = e^{sTs}: |z| = e^{Re s·Ts}, arg z = Im s·Ts (definition)
    np.testing.assert_allclose(np.abs(z), np.exp(s.real * 0.25), rtol=1e-15)
    np.testing.assert_allclose(np.angle(z), s.imag * 0.25, rtol=1e-15, atol=1e-16)
