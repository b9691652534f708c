"""The time-tagger counter against a fake library object of ours (Poisson time tags)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from aligner.errors import BadReply, DeviceError, Disconnected, InputError
from aligner_drivers.adapters.tagger import TaggerCounter, coincidences
from aligner_drivers.open import open_counter
from aligner_drivers.protocols import Counter


class FakeTagger:
    """Poisson streams on inputs at ``rates`` (1/s) plus photon pairs at ``pair_rate`` (1/s)
    arriving on inputs a and b, b later by ``delay_s`` with a Gaussian ``jitter_s``."""

    def __init__(self, rates, pair_rate=0.0, pair=(1, 2), delay_s=0.0, jitter_s=0.0, seed=0):
        self.rates, self.pair_rate, self.pair = rates, pair_rate, pair
        self.delay_s, self.jitter_s = delay_s, jitter_s
        self.rng = np.random.default_rng(seed)
        self.pairs = []  # pairs emitted per gate
        self.closed = False

    def time_tags(self, gate_s):
        chans, times = [], []
        for channel, rate in self.rates.items():
            n = self.rng.poisson(rate * gate_s)
            chans.append(np.full(n, channel))
            times.append(self.rng.uniform(0.0, gate_s, n))
        n = self.rng.poisson(self.pair_rate * gate_s)
        self.pairs.append(n)
        t = self.rng.uniform(0.0, gate_s, n)
        chans += [np.full(n, self.pair[0]), np.full(n, self.pair[1])]
        times += [t, t + self.delay_s + self.rng.normal(0.0, self.jitter_s, n)]
        order = self.rng.permutation(sum(len(c) for c in chans))  # the library's own order
        return np.concatenate(chans)[order], np.concatenate(times)[order]

    def close(self):
        self.closed = True


def test_pair_counting_against_brute_force():
    rng = np.random.default_rng(1)
    a, b = rng.uniform(0, 1e-6, 300), rng.uniform(0, 1e-6, 400)
    window, delay = 7e-9, 2e-9
    brute = int(np.sum(np.abs(b[None, :] - delay - a[:, None]) <= window / 2))
    assert coincidences(a, b, window, delay) == brute > 0
    assert coincidences([0.0], [1.0, 1.0], 0.5, 1.0) == 2  # every pair counts


def test_accidental_coincidences_match_ra_rb_tau():
    """Uncorrelated Poisson streams: accidentals R_acc = R_a R_b T_c (common practice, no
    source; see shared physics.md). Pair counts of independent streams are close to Poisson
    when R T_c << 1, so the total over the gates is checked with scipy.stats.poisson."""
    ra, rb, window, gate, gates = 2.0e5, 3.0e5, 10e-9, 0.25, 8
    source = FakeTagger({1: ra, 2: rb}, seed=7)
    counter = TaggerCounter(source, post=(1, 2), ref=(1,), window_s=window)
    totals = np.sum([counter.count(gate) for _ in range(gates)], axis=0)
    expected = ra * rb * window * gate * gates  # 600 per gate, 4800 in all
    low, high = stats.poisson.interval(0.999, expected)
    assert low <= totals[0] <= high
    # the reference channel is input 1's singles: Poisson of mean R_a T
    low, high = stats.poisson.interval(0.999, ra * gate * gates)
    assert low <= totals[1] <= high


def test_true_pairs_are_found_at_their_delay():
    """Pairs only (no background): with the delay compensated, every pair is one coincidence;
    without it, none falls in the window (30 ns away from a 2 ns window)."""
    source = FakeTagger({}, pair_rate=5e4, delay_s=30e-9, jitter_s=0.2e-9, seed=3)
    matched = TaggerCounter(source, post=(1, 2), window_s=2e-9, delay_s=30e-9)
    assert matched.count(0.1) == (source.pairs[-1],) and source.pairs[-1] > 4000
    unmatched = TaggerCounter(source, post=(1, 2), window_s=2e-9)
    assert unmatched.count(0.1) == (0,)


def test_pairs_over_background_rate():
    """True pairs plus accidentals: R_c = R_p + R_a R_b T_c with R_a, R_b the singles rates
    (common practice, no source); the jitter (0.2 ns rms) is well inside the 4 ns window."""
    rp, ra, rb, window = 2e4, 3e5, 2e5, 4e-9
    source = FakeTagger({1: ra, 2: rb}, pair_rate=rp, delay_s=12e-9, jitter_s=0.2e-9, seed=11)
    counter = TaggerCounter(source, post=(1, 2), ref=(2,), window_s=window, delay_s=12e-9)
    gate, gates = 0.2, 5
    post, ref = np.sum([counter.count(gate) for _ in range(gates)], axis=0)
    t = gate * gates
    expected = rp * t + (ra + rp) * (rb + rp) * window * t
    sd = np.sqrt(expected)  # Poisson pairs plus Poisson accidentals
    assert abs(post - expected) < 4 * sd
    assert (
        stats.poisson.cdf(ref, (rb + rp) * t) > 1e-4 and stats.poisson.sf(ref, (rb + rp) * t) > 1e-4
    )


def test_spec_with_the_source_as_a_keyword():
    source = FakeTagger({1: 1e3, 3: 2e3}, seed=2)
    counter = open_counter(
        "py:aligner_drivers.adapters.tagger:TaggerCounter?post=3&ref=1&window_s=1e-9&name=tt",
        source=source,
    )
    assert isinstance(counter, Counter) and counter.channels == 2
    post, ref = counter.count(0.5)
    assert isinstance(post, int) and isinstance(ref, int) and post > ref > 0
    counter.close()
    assert source.closed
    with pytest.raises(Disconnected, match="closed"):
        counter.count(0.1)


class CountsOnly:
    def __init__(self):
        self.asked = []

    def counts(self, channels, gate_s):
        self.asked.append((list(channels), gate_s))
        return [int(1000 * gate_s * c) for c in channels]


def test_a_counts_only_source_gives_singles():
    source = CountsOnly()
    counter = TaggerCounter(source, post=(4,), ref=(2,))
    assert counter.count(0.5) == (2000, 1000)
    assert source.asked == [([4, 2], 0.5)]
    with pytest.raises(InputError, match="coincidences need time tags"):
        TaggerCounter(source, post=(1, 2))


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"post": (1, 1)}, "two different inputs"),
        ({"post": (1, 2, 3)}, "one tagger input"),
        ({"window_s": 0.0}, "window_s must be > 0 s"),
    ],
)
def test_bad_settings_are_refused(kwargs, message):
    with pytest.raises(InputError, match=message):
        TaggerCounter(FakeTagger({}), **kwargs)
    with pytest.raises(InputError, match="neither time_tags"):
        TaggerCounter(object())


def test_library_faults_become_device_errors():
    class Broken:
        def __init__(self, result=None, exc=None):
            self.result, self.exc = result, exc

        def time_tags(self, gate_s):
            if self.exc:
                raise self.exc
            return self.result

    with pytest.raises(BadReply, match="two equal-length 1-D arrays"):
        TaggerCounter(Broken(([1, 2], [0.1]))).count(1.0)
    with pytest.raises(BadReply):
        TaggerCounter(Broken(([1], [float("nan")]))).count(1.0)
    with pytest.raises(DeviceError, match=r"time_tags\(\) failed .*RuntimeError") as e:
        TaggerCounter(Broken(exc=RuntimeError("buffer overflow"))).count(1.0)
    assert isinstance(e.value.__cause__, RuntimeError)
    with pytest.raises(Disconnected):
        TaggerCounter(Broken(exc=ConnectionResetError("usb gone"))).count(1.0)
