"""Heralded sources against time-tagged Monte Carlo streams and coincidence counting (fixed
seeds): accidentals, heralding efficiency, heralded g2 and the coverage of the leak interval."""

from __future__ import annotations

import numpy as np
import pytest

from aligner.physics.heralded import (
    accidental_probability,
    accidental_rate,
    heralded_g2,
    heralded_leak,
    heralding_efficiency,
    pair_rates,
    pulsed_pair_clicks,
    weak_value_from_leak,
)


def poisson_times(rate, duration, rng):
    return np.sort(rng.uniform(0.0, duration, rng.poisson(rate * duration)))


def coincident(heralds, others, window):
    """Brute force, this test: does each herald have a count of ``others`` within +/- window/2?"""
    i = np.searchsorted(others, heralds - window / 2)
    j = np.searchsorted(others, heralds + window / 2)
    return j > i


def test_accidentals_of_independent_streams():
    # Common practice (physics.md): R_acc = R_a R_b T_c.
    rng = np.random.default_rng(1)
    ra, rb, window, duration = 2e5, 3e5, 20e-9, 2.0
    a, b = poisson_times(ra, duration, rng), poisson_times(rb, duration, rng)
    count = np.count_nonzero(coincident(a, b, window))
    expected = accidental_rate(ra, rb, window) * duration
    assert count == pytest.approx(expected, rel=4 / np.sqrt(expected))
    assert accidental_probability(rb, window) == pytest.approx(rb * window, rel=rb * window)


def test_heralding_efficiency_of_a_pair_source():
    # Klyshko (1980, from memory): coincidences minus accidentals per herald -> signal-arm
    # efficiency. Brute force, this test: time-tagged pairs with losses and dark counts.
    rng = np.random.default_rng(2)
    rate, eta_h, eta_s, window, dark, duration = 1e5, 0.3, 0.2, 4e-9, 2e4, 5.0
    pairs = poisson_times(rate, duration, rng)
    herald = np.sort(
        np.concatenate([pairs[rng.random(pairs.size) < eta_h], poisson_times(dark, duration, rng)])
    )
    signal = np.sort(
        np.concatenate([pairs[rng.random(pairs.size) < eta_s], poisson_times(dark, duration, rng)])
    )
    expected = pair_rates(rate, eta_h, eta_s, window, dark, dark)
    assert herald.size / duration == pytest.approx(expected.herald, rel=0.01)
    n_c = np.count_nonzero(coincident(herald, signal, window))
    accidentals = expected.accidental * duration
    assert n_c == pytest.approx((expected.true + expected.accidental) * duration, rel=0.02)
    measured = heralding_efficiency(n_c, herald.size, accidentals)
    assert measured == pytest.approx(expected.heralding_efficiency, rel=0.03)
    assert expected.heralding_efficiency == pytest.approx(
        eta_s * eta_h * rate / (eta_h * rate + dark)
    )


def test_heralded_g2_of_poisson_pairs():
    # Grangier, Roger, Aspect, Europhys. Lett. 1, 173 (1986): g2 = N_abc N_a / (N_ab N_ac).
    # Brute force, this test: pulses with Poisson pair numbers, each photon routed at random.
    rng = np.random.default_rng(3)
    mu, ea, eb, ec, dark = 0.08, 0.5, 0.3, 0.25, 1e-3
    pulses = 3_000_000
    n = rng.poisson(mu, pulses)
    total = int(n.sum())
    owner = np.repeat(np.arange(pulses), n)
    herald_hit = rng.random(total) < ea
    route = rng.random(total)
    a = np.zeros(pulses, bool)
    b = np.zeros(pulses, bool)
    c = np.zeros(pulses, bool)
    a[owner[herald_hit]] = True
    b[owner[route < eb]] = True
    c[owner[(route >= eb) & (route < eb + ec)]] = True
    a |= rng.random(pulses) < dark
    b |= rng.random(pulses) < dark
    c |= rng.random(pulses) < dark
    counts = [np.count_nonzero(x) for x in (a & b & c, a, a & b, a & c)]
    p = pulsed_pair_clicks(mu, ea, eb, ec, dark, dark, dark)
    assert counts[1] / pulses == pytest.approx(p.a, rel=0.01)
    assert counts[2] / pulses == pytest.approx(p.ab, rel=0.02)
    assert counts[0] / pulses == pytest.approx(p.abc, rel=0.1)
    g2 = heralded_g2(*counts)
    assert g2 == pytest.approx(p.g2, rel=0.1)
    # Small mu, no dark counts: g2 -> (2 - eta_a) mu (derived in this test from the two-pair
    # term; single pairs never give a triple).
    small = pulsed_pair_clicks(1e-4, ea, eb, ec)
    assert small.g2 == pytest.approx((2 - ea) * 1e-4, rel=1e-3)


def test_leak_interval_on_a_known_case():
    # Clopper & Pearson, Biometrika 26, 404 (1934) (physics.md): k = 5, n = 10 at 95 %
    # -> [0.187086, 0.812914]; no accidentals, perfect heralding.
    r = heralded_leak(5, 10, 0.0, 1.0, level=0.95)
    assert (r.low, r.high) == pytest.approx((0.187086, 0.812914), abs=1e-6)
    # Accidentals subtracted, heralding efficiency divided out.
    r = heralded_leak(120, 10_000, 0.004, 0.5)
    assert r.leak == pytest.approx((0.012 - 0.004) / (1 - 0.004) / 0.5)
    assert r.low < r.leak < r.high
    assert heralded_leak(0, 1000, 0.01, 0.5).low == 0.0  # clipped, never negative
    with pytest.raises(ValueError, match="accidental"):
        heralded_leak(1, 10, 1.0, 0.5)


@pytest.mark.parametrize("level", [0.683, 0.95])
def test_leak_interval_coverage_by_simulation(level):
    # Brute force, this test: 2500 time-tagged runs (heralds and an uncorrelated background in
    # the post-selected detector, ~10 accidentals against ~22 true coincidences per run); the
    # interval must cover the true leak at least `level` of the time (Clopper-Pearson is
    # conservative), allowing 3 Monte Carlo standard deviations. Without the accidentals
    # subtracted the coverage here falls to about 0.2 (0.683) and 0.5 (0.95).
    rng = np.random.default_rng(11)
    trials, duration, herald_rate = 2500, 0.5, 1e4
    leak, eta, background, window = 0.01, 0.45, 2e3, 1e-6
    k, n = np.zeros(trials), np.zeros(trials)
    for t in range(trials):
        heralds = poisson_times(herald_rate, duration, rng)
        noise = poisson_times(background, duration, rng)
        partner = rng.random(heralds.size) < eta * leak
        k[t] = np.count_nonzero(partner | coincident(heralds, noise, window))
        n[t] = heralds.size
    r = heralded_leak(k, n, accidental_probability(background, window), eta, level)
    coverage = np.mean((r.low <= leak) & (leak <= r.high))
    spread = np.sqrt(level * (1 - level) / trials)
    assert coverage >= level - 3 * spread
    assert coverage <= level + 0.1  # not uselessly wide


def test_weak_value_from_the_leak():
    # physics.md worked case: leak sin^2(eps), A_w = cot(eps).
    eps = np.array([0.01, 0.1, 0.5])
    assert weak_value_from_leak(np.sin(eps) ** 2) == pytest.approx(1 / np.tan(eps))
    r = heralded_leak(50, 20_000, 0.0, 1.0)
    assert r.weak_value_low < r.weak_value < r.weak_value_high
