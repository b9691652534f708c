"""Counter models against Knoll's dead-time formulas and a Monte Carlo of counters (fixed seeds)."""

from __future__ import annotations

import numpy as np
import pytest

from aligner.physics.detectors import (
    count_budget,
    counted_rate,
    paralyzable_peak,
    rate_from_counts,
)


def paralyzable_counts(rate, tau, duration, rng):
    """Brute force, this test: Poisson arrivals; an arrival counts when the previous arrival,
    counted or not, is more than tau before it."""
    arrivals = np.cumsum(rng.exponential(1 / rate, size=int(rate * duration * 1.2) + 100))
    arrivals = arrivals[arrivals < duration]
    return 1 + np.count_nonzero(np.diff(arrivals) > tau)


def counter_with_afterpulses(rate, tau, p, duration, rng, paralyzable):
    """Brute force, this test: event-by-event counter. Each counted avalanche spawns an
    afterpulse with probability p, 1.5 to 3 tau later (after its own dead time)."""
    primaries = np.cumsum(rng.exponential(1 / rate, size=int(rate * duration * 1.2) + 100))
    pending = list(primaries[primaries < duration][::-1])  # a stack, earliest last
    counted = blind_until = 0.0
    while pending:
        t = pending.pop()
        if t >= blind_until:
            counted += 1
            blind_until = t + tau
            if rng.random() < p:
                delay = tau * rng.uniform(1.5, 3.0)
                # insert in time order (rare: p small)
                i = len(pending)
                while i > 0 and pending[i - 1] < t + delay:
                    i -= 1
                pending.insert(i, t + delay)
        elif paralyzable:
            blind_until = t + tau
    return counted


def test_paralyzable_counter_by_monte_carlo():
    # Knoll, Radiation Detection and Measurement (4th ed.), dead time: m = n exp(-n tau).
    rng = np.random.default_rng(42)
    tau, duration = 50e-9, 0.02
    for n in (2e6, 2e7, 6e7):  # below, at and past the peak at 1/tau
        m = paralyzable_counts(n, tau, duration, rng) / duration
        expected = counted_rate(n, tau, "paralyzable")
        assert m == pytest.approx(expected, rel=4 / np.sqrt(expected * duration))


def test_paralyzable_inversion_both_branches():
    # Knoll (from memory): the paralyzable reading peaks at 1/(e tau) for n = 1/tau.
    tau = 50e-9
    n_peak, m_peak = paralyzable_peak(tau)
    assert counted_rate(n_peak, tau, "paralyzable") == pytest.approx(m_peak)
    n = np.array([1e3, 1e6, 1.5e7, 1.9e7])
    m = counted_rate(n, tau, "paralyzable")
    assert rate_from_counts(m, tau, "paralyzable", "low") == pytest.approx(n, rel=1e-12)
    high = rate_from_counts(m, tau, "paralyzable", "high")
    assert np.all(high * tau >= 1)
    assert counted_rate(high, tau, "paralyzable") == pytest.approx(m, rel=1e-10)
    assert np.isnan(rate_from_counts(1.01 * m_peak, tau, "paralyzable"))
    # physics.md check value (non-paralyzable, Knoll): m = 1e6/s, tau = 50 ns -> 1.0526316e6/s;
    # the paralyzable model reads the same m from a slightly higher rate, both ~ m (1 + m tau).
    assert rate_from_counts(1e6, tau) == pytest.approx(1.0526316e6, rel=1e-7)
    para = rate_from_counts(1e6, tau, "paralyzable")
    assert 1.0526316e6 < para < 1e6 * (1 + 2 * 1e6 * tau)
    with pytest.raises(ValueError, match="allowed: non-paralyzable, paralyzable"):
        counted_rate(1.0, tau, "sticky")
    with pytest.raises(ValueError, match="allowed: low, high"):
        rate_from_counts(1.0, tau, "paralyzable", "middle")


@pytest.mark.parametrize("paralyzable", [False, True])
def test_afterpulses_and_dead_time_by_monte_carlo(paralyzable):
    # Common practice, no source: ~ n p spurious counts per second at rates well below 1/tau
    # (physics.md); here the cascade D(n)/(1 - p). Brute force, this test.
    rng = np.random.default_rng(7)
    n, tau, p, duration = 1e6, 50e-9, 0.05, 0.2
    model = "paralyzable" if paralyzable else "non-paralyzable"
    m = counter_with_afterpulses(n, tau, p, duration, rng, paralyzable) / duration
    budget = count_budget(n, efficiency=1.0, afterpulse_probability=p, dead_time_s=tau, model=model)
    # The model ignores afterpulses blocking primaries: a relative error ~ p n tau = 2.5e-3,
    # against the afterpulses' own 5 %.
    assert m == pytest.approx(budget.counted, rel=4e-3 + 4 / np.sqrt(n * duration))
    assert budget.afterpulses == pytest.approx(budget.counted * p)


def test_background_light_is_detected_with_the_efficiency_and_dark_counts_are_not():
    b = count_budget(1e5, background_photon_rate=2e4, efficiency=0.5, dark_rate=300.0)
    assert (b.signal, b.background, b.dark) == pytest.approx((5e4, 1e4, 300.0))
    assert b.counted == pytest.approx(b.primary)
    assert b.signal_fraction == pytest.approx(5e4 / 60300)
    # Afterpulses and dead time: counted signal share = (1 - p) signal / primary.
    b = count_budget(1e6, 1e5, 0.6, 500.0, 0.02, 40e-9, "paralyzable")
    assert b.signal_fraction == pytest.approx(0.98 * b.signal / b.primary)
    with pytest.raises(ValueError, match=r"\[0, 1\)"):
        count_budget(1.0, afterpulse_probability=1.0)
