"""The upper limit for counts at or below the dark level, against references outside the
project."""

import numpy as np
import pytest
from scipy import integrate
from scipy.stats import chi2, poisson

from aligner.physics.counting import poisson_upper_limit


@pytest.mark.parametrize("k", [0, 1, 5, 20])
@pytest.mark.parametrize("cl", [0.8415, 0.9, 0.95])
def test_no_background_is_the_one_sided_garwood_bound(k, cl):
    # Garwood, Biometrika 28, 437 (1936): one-sided upper bound chi2(cl; 2k+2)/2; with b = 0
    # the flat-prior limit equals it (Helene, Nucl. Instrum. Methods 212, 319 (1983); citation
    # from memory). Reference values from scipy.stats.chi2.
    assert poisson_upper_limit(k, 0.0, cl) == pytest.approx(chi2.ppf(cl, 2 * k + 2) / 2, rel=1e-9)


@pytest.mark.parametrize("b", [0.5, 3.0, 140.0])
def test_zero_counts_limit_is_independent_of_the_background(b):
    # Helene (1983), also the PDG review of statistics (flat-prior Poisson limit; from memory):
    # for n = 0 the limit is -ln(1 - CL) whatever b is, 2.303 at 90 %.
    assert poisson_upper_limit(0, b, 0.9) == pytest.approx(2.302585, abs=1e-6)


@pytest.mark.parametrize(("k", "b"), [(50, 140.0), (3, 2.5), (10, 10.0), (0, 4.0)])
def test_limit_matches_integrated_posterior(k, b):
    # Definition of the flat-prior limit: the posterior of s >= 0, proportional to the Poisson
    # likelihood P(k; s + b), integrates to CL below the limit. Reference: numerical
    # integration with scipy.integrate.quad of scipy.stats.poisson.pmf.
    cl = 0.8415
    s_up = float(poisson_upper_limit(k, b, cl))
    assert s_up > 0
    top = s_up * 40 + 50

    def pmf(s):
        return poisson.pmf(k, s + b)

    below = integrate.quad(pmf, 0, s_up, limit=200)[0]
    total = below + integrate.quad(pmf, s_up, top, limit=200)[0]
    assert below / total == pytest.approx(cl, abs=1e-7)


def test_far_below_background_uses_the_asymptote_and_stays_positive():
    # The posterior ~ exp(-s (1 - k/b)) for s << b (expansion of (1 + s/b)^k e^-s; common
    # practice, no source): limit -ln(1 - CL)/(1 - k/b) when Q(k+1, b) underflows.
    limits = poisson_upper_limit(np.array([50, 50]), np.array([2e4, 1e5]), 0.9)
    assert np.all(limits > 0)
    assert limits == pytest.approx(2.302585 / (1 - 50 / np.array([2e4, 1e5])), rel=1e-3)


def test_bad_arguments():
    with pytest.raises(ValueError):
        poisson_upper_limit(-1, 1.0, 0.9)
    with pytest.raises(ValueError):
        poisson_upper_limit(1, 1.0, 1.5)
