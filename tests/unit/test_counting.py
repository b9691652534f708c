"""Exact intervals and photon-number conditioning against references outside the project."""

import numpy as np
import pytest
from scipy.stats import binomtest, chi2

from aligner.physics.counting import (
    clopper_pearson,
    garwood,
    photon_conditioning,
    poisson_ratio_interval,
)


@pytest.mark.parametrize(("k", "n"), [(0, 10), (5, 10), (10, 10), (3, 250), (97, 100)])
@pytest.mark.parametrize("level", [0.683, 0.95])
def test_clopper_pearson_matches_scipy_binomtest(k, n, level):
    # Reference: scipy.stats.binomtest(...).proportion_ci(method="exact") (Clopper & Pearson,
    # Biometrika 26, 404 (1934)).
    ref = binomtest(k, n).proportion_ci(confidence_level=level, method="exact")
    low, high = clopper_pearson(k, n, level)
    assert low == pytest.approx(ref.low, abs=1e-10)
    assert high == pytest.approx(ref.high, abs=1e-10)


def test_clopper_pearson_check_values():
    # physics.md check values, Clopper & Pearson, Biometrika 26, 404 (1934).
    low, high = clopper_pearson(5, 10, 0.95)
    assert (low, high) == pytest.approx((0.187086, 0.812914), abs=1e-6)
    assert clopper_pearson(0, 10, 0.95)[1] == pytest.approx(0.308497, abs=1e-6)


@pytest.mark.parametrize(
    ("k", "expected"),
    [(0, (0.0, 3.688879)), (5, (1.623486, 11.668332)), (10, (4.795389, 18.390356))],
)
def test_garwood_check_values(k, expected):
    # Garwood, Biometrika 28, 437 (1936); check values from physics.md (95 %).
    assert garwood(k, 0.95) == pytest.approx(expected, abs=1e-6)


def test_garwood_matches_chi_square_form():
    # Garwood, Biometrika 28, 437 (1936): [chi2(a/2; 2k)/2, chi2(1-a/2; 2k+2)/2], scipy.stats.chi2.
    k = np.arange(1, 60)
    low, high = garwood(k, 0.683)
    a = (1 - 0.683) / 2
    assert np.allclose(low, chi2.ppf(a, 2 * k) / 2, rtol=1e-10)
    assert np.allclose(high, chi2.ppf(1 - a, 2 * k + 2) / 2, rtol=1e-10)


def test_ratio_interval_is_clopper_pearson_on_the_share():
    # Conditional binomial method for a ratio of Poisson means (Clopper & Pearson 1934 on
    # k1 | k1 + k2); reference: scipy.stats.binomtest.
    ref = binomtest(7, 7 + 900).proportion_ci(confidence_level=0.683, method="exact")
    low, high = poisson_ratio_interval(7, 900)
    assert low == pytest.approx(ref.low / (1 - ref.low), rel=1e-9)
    assert high == pytest.approx(ref.high / (1 - ref.high), rel=1e-9)


def test_conditioning_check_value():
    # physics.md check value mu = 3.7, eta = 0.63 (threshold-detector model: Lee et al.,
    # J. Mod. Opt. 51, 1517 (2004)).
    c = photon_conditioning(3.7, 0.63)
    assert 1 - c.click_probability == pytest.approx(0.0971985, abs=1e-7)
    assert c.mean_given_no_click == pytest.approx(1.369, abs=1e-12)
    assert c.mean_given_click == pytest.approx(3.950963, abs=1e-6)


def test_conditioning_weak_limit():
    # Fact of the trade (no source): as eta*mu -> 0 a click adds one photon,
    # E[n|click] -> (1 - eta) mu + 1, and E[n|no click] = (1 - eta) mu.
    mu = np.array([1e-3, 1e-5, 1e-7])
    c = photon_conditioning(mu, 0.4)
    # the correction is eta mu / 2 + O((eta mu)^2): it vanishes with eta mu
    assert np.all(np.abs(c.mean_given_click - (0.6 * mu + 1)) <= 0.4 * mu)
    assert np.allclose(c.mean_given_no_click, 0.6 * mu)


def test_conditioning_balances_the_mean_with_dark_clicks():
    # Law of total expectation (definition): mu = P(c) E[n|c] + P(no c) E[n|no c].
    mu, eta, d = np.linspace(0.01, 8, 50), 0.55, 0.02
    c = photon_conditioning(mu, eta, d)
    p = c.click_probability
    total = p * c.mean_given_click + (1 - p) * c.mean_given_no_click
    assert np.allclose(total, mu, rtol=1e-12)
