"""Detector model: dead time, threshold clicks, expected rates."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from aligner.physics.detection import (
    click_probability,
    click_probability_from_rate,
    expected_rates,
    mean_photons_from_clicks,
    measured_rate,
    pulsed_measured_rate,
    pulses_blocked,
    true_rate,
)


def test_dead_time_correction_textbook_value():
    # Knoll, Radiation Detection and Measurement (4th ed.), dead-time chapter, non-paralyzable
    # model n = m / (1 - m tau); check value m = 1e6/s, tau = 50 ns -> n = 1.0526316e6/s.
    assert true_rate(1e6, 50e-9) == pytest.approx(1.0526316e6, rel=1e-7)
    assert measured_rate(1.0526316e6, 50e-9) == pytest.approx(1e6, rel=1e-7)


@given(st.floats(0.0, 1e8), st.floats(0.0, 1e-6))
def test_dead_time_round_trip(n, tau):
    assert true_rate(measured_rate(n, tau), tau) == pytest.approx(n, rel=1e-9, abs=1e-6)


def test_dead_time_impossible_rate_is_inf_and_vectorized():
    out = true_rate(np.array([1e5, 2e7, 5e7]), 50e-9)
    assert out.shape == (3,)
    assert np.isfinite(out[0]) and np.isinf(out[1]) and np.isinf(out[2])


def test_click_probability_coherent_state():
    # Threshold detector on a coherent state, P(no click) = exp(-eta mu) (physics.md check value,
    # finite-efficiency model of Lee et al., J. Mod. Opt. 51, 1517 (2004)): mu = 3.7, eta = 0.63.
    assert 1 - click_probability(3.7, 0.63) == pytest.approx(0.0971985, abs=5e-8)


def test_click_probability_with_dark_gates_is_independent_or():
    # Independent dark click and photo-click: P = 1 - (1 - p_d)(1 - P_photon) (probability rule).
    p_photon = 1 - np.exp(-0.2 * 0.5)
    assert click_probability(0.5, 0.2, 0.01) == pytest.approx(1 - 0.99 * (1 - p_photon))


@given(st.floats(0.0, 20.0), st.floats(0.05, 1.0), st.floats(0.0, 0.2))
def test_mean_photons_inverts_click_probability(mu, eta, pd):
    p = click_probability(mu, eta, pd)
    if p < 1 - 1e-9:
        assert mean_photons_from_clicks(p, eta, pd) == pytest.approx(mu, rel=1e-6, abs=1e-9)


def test_mean_photons_below_dark_is_zero_and_certain_click_is_inf():
    out = mean_photons_from_clicks(np.array([0.001, 1.0]), 0.5, 0.01)
    assert out[0] == 0.0 and np.isinf(out[1])


def test_pulsed_dead_time_blocks_whole_pulses():
    assert pulses_blocked(50e-9, 1e6) == 0  # dead time shorter than the period
    assert pulses_blocked(2.5e-6, 1e6) == 2  # pulses at 1 us and 2 us are blocked
    assert pulses_blocked(2e-6, 1e6) == 1  # the dead time ends as the pulse at 2 us arrives


def test_pulsed_dead_time_matches_direct_simulation():
    # Independent check: simulate independent pulses and a detector that ignores k pulses after
    # each click (renewal argument gives R P / (1 + k P)).
    rng = np.random.default_rng(1)
    p, k, n = 0.3, 3, 200_000
    clicks = rng.random(n) < p
    counted, blocked = 0, 0
    for c in clicks:
        if blocked:
            blocked -= 1
        elif c:
            counted += 1
            blocked = k
    rate = float(pulsed_measured_rate(p, 1.0, (k + 0.5)))  # rep 1 Hz, dead time 3.5 periods
    assert counted / n == pytest.approx(rate, rel=0.01)
    assert click_probability_from_rate(rate, 1.0, k + 0.5) == pytest.approx(p)


def test_expected_rates_cw():
    r = expected_rates(4e6, 1e-3, 0.5, 100.0, 20e-9)
    assert r.true_rate == pytest.approx(2100.0)
    assert r.measured_rate == pytest.approx(2100.0 / (1 + 2100.0 * 20e-9))
    assert r.signal_fraction == pytest.approx(2000 / 2100)
    assert r.loss == pytest.approx(2100.0 * 20e-9 / (1 + 2100.0 * 20e-9))


def test_expected_rates_pulsed_and_broadcast():
    leak = np.array([1e-4, 1e-2, 1.0])
    r = expected_rates(1e6, leak, 0.6, 999.0, 0.0, rep_rate_hz=1e5, dark_probability=1e-3)
    mu = 1e6 * leak / 1e5
    np.testing.assert_allclose(r.true_rate, 1e5 * (1 - (1 - 1e-3) * np.exp(-0.6 * mu)))
    np.testing.assert_allclose(r.linear_rate, 1e5 * (0.6 * mu + 1e-3))
    assert r.true_rate.shape == (3,)
    # Bright pulses saturate a click detector: at mu = 10 most photons are lost.
    assert r.loss[2] > 0.8 and r.loss[0] < 1e-3


def test_bench_detector_methods_use_physics_units():
    # Knoll, Radiation Detection and Measurement (4th ed.), dead-time chapter: n = 1.0526316e6/s
    # behind m = 1e6/s at tau = 50 ns; the bench file gives the dead time in ns.
    from aligner.bench import Detector

    cw = Detector(efficiency=0.5, dark_rate=100.0, dead_time_ns=50.0)
    assert cw.dead_time_s == pytest.approx(50e-9)
    assert cw.pulse_rate_hz is None
    # 2.1050632e6 photons/s at efficiency 0.5 plus 100 dark counts/s: 1.0526316e6 true counts/s
    rates = cw.expected_rates(2.1050632e6, 1.0)
    assert float(rates.measured_rate) == pytest.approx(1e6, rel=1e-7)
    assert float(cw.expected_rates(0.0, 1.0, dark_rate=0.0).true_rate) == 0.0
    pulsed = Detector(efficiency=0.63, mode="pulsed", rep_rate_hz=1e6, dead_time_ns=50.0)
    assert pulsed.pulse_rate_hz == 1e6
    # mu = 3.7 photons per pulse at eta = 0.63: P(no click) = 0.0971985 (physics.md, from the
    # threshold-detector formula; Lee et al., J. Mod. Opt. 51, 1517 (2004))
    clicks = pulsed.expected_rates(3.7e6, 1.0)
    assert float(clicks.true_rate) == pytest.approx(1e6 * (1 - 0.0971985), rel=1e-6)
    assert float(clicks.true_rate) == pytest.approx(
        float(expected_rates(3.7e6, 1.0, 0.63, 0.0, 50e-9, rep_rate_hz=1e6).true_rate)
    )
