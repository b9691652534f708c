"""Exact confidence intervals for counts and photon-number conditioning of threshold detectors.

Pure functions, vectorized over array arguments. ``level`` is the two-sided confidence level
(default 0.683, the 1-sigma equivalent); each tail holds ``(1 - level) / 2``.

* :func:`clopper_pearson` -- exact interval for a binomial proportion ``k / n`` (clicks per
  pulse; one count channel's share of two).
* :func:`garwood` -- exact interval for a Poisson mean from ``k`` counts.
* :func:`poisson_upper_limit` -- upper limit on a Poisson signal mean over a known background
  (Bayesian, flat prior on the signal: Helene 1983), for counts at or below the background.
* :func:`poisson_ratio_interval` -- exact conditional interval for the ratio of two Poisson
  means (counts in one port over counts in another), by Clopper-Pearson on ``k1 | k1 + k2``.
* :func:`photon_conditioning` -- click probability and mean photon number given click / no
  click for a coherent pulse of mean ``mu`` on a detector of efficiency ``eta`` with an
  independent dark-click probability.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = [
    "DEFAULT_LEVEL",
    "PhotonConditioning",
    "clopper_pearson",
    "garwood",
    "photon_conditioning",
    "poisson_ratio_interval",
    "poisson_upper_limit",
]

Real = NDArray[np.float64]

#: Default two-sided confidence level: the coverage of +/- 1 standard deviation of a Gaussian.
DEFAULT_LEVEL = 0.683


def _tail(level: float) -> float:
    if not 0.0 < level < 1.0:
        raise ValueError(f"confidence level must be between 0 and 1 (e.g. 0.683), got {level!r}")
    return (1.0 - level) / 2.0


def clopper_pearson(k: ArrayLike, n: ArrayLike, level: float = DEFAULT_LEVEL) -> tuple[Real, Real]:
    """Exact (Clopper-Pearson) interval ``(low, high)`` for a binomial proportion.

    ``low = B^-1(a; k, n-k+1)`` (0 when ``k = 0``), ``high = B^-1(1-a; k+1, n-k)`` (1 when
    ``k = n``), with ``a = (1 - level)/2`` and ``B^-1`` the inverse regularized beta function.
    """
    from scipy.special import betaincinv

    a = _tail(level)
    k = np.asarray(k, float)
    n = np.asarray(n, float)
    if np.any((k < 0) | (k > n)):
        raise ValueError("need 0 <= k <= n for a binomial interval")
    with np.errstate(invalid="ignore", divide="ignore"):
        low = np.where(k > 0, betaincinv(np.maximum(k, 1e-300), n - k + 1, a), 0.0)
        high = np.where(k < n, betaincinv(k + 1, np.maximum(n - k, 1e-300), 1 - a), 1.0)
    return low, high


def garwood(k: ArrayLike, level: float = DEFAULT_LEVEL) -> tuple[Real, Real]:
    """Exact (Garwood) interval ``(low, high)`` for a Poisson mean from ``k`` counts.

    ``low = chi2(a; 2k)/2`` (0 when ``k = 0``), ``high = chi2(1-a; 2k+2)/2``, written with the
    inverse regularized incomplete gamma function (``chi2(q; 2k)/2 = P^-1(k, q)``).
    """
    from scipy.special import gammaincinv

    a = _tail(level)
    k = np.asarray(k, float)
    if np.any(k < 0):
        raise ValueError("counts must be >= 0 for a Poisson interval")
    low = np.where(k > 0, gammaincinv(np.maximum(k, 1e-300), a), 0.0)
    high = gammaincinv(k + 1, 1 - a)
    return low, high


def poisson_upper_limit(k: ArrayLike, background: ArrayLike, credibility: float) -> Real:
    """Upper limit on the signal mean ``s >= 0`` from ``k`` counts over a known background mean
    ``b`` (counts): Bayesian with a flat prior on ``s`` (Helene, Nucl. Instrum. Methods 212,
    319 (1983)), the limit ``s_up`` solving

        Q(k + 1, s_up + b) = (1 - credibility) Q(k + 1, b),

    ``Q`` the regularized upper incomplete gamma function (``Q(k + 1, mu)`` is the Poisson
    probability of at most ``k`` counts). It never collapses to zero when ``k`` is below
    ``b``; for ``b = 0`` it is the one-sided Garwood bound. Where ``Q(k + 1, b)`` underflows
    (``b`` far above ``k``) the limit is its asymptote ``-ln(1 - credibility) / (1 - k/b)``.
    """
    from scipy.special import gammaincc, gammainccinv

    if not 0.0 < credibility < 1.0:
        raise ValueError(f"credibility must be between 0 and 1, got {credibility!r}")
    k = np.asarray(k, float)
    b = np.asarray(background, float)
    if np.any(k < 0) or np.any(b < 0):
        raise ValueError("counts and background must be >= 0 for an upper limit")
    q = (1.0 - credibility) * gammaincc(k + 1, b)
    with np.errstate(divide="ignore", invalid="ignore"):
        exact = gammainccinv(k + 1, np.where(q > 0, q, 0.5)) - b
        tail = -np.log1p(-credibility) / (1.0 - k / np.where(b > 0, b, 1.0))
    return np.maximum(np.where(q > 0, exact, tail), 0.0)


def poisson_ratio_interval(
    k1: ArrayLike, k2: ArrayLike, level: float = DEFAULT_LEVEL
) -> tuple[Real, Real]:
    """Exact conditional interval ``(low, high)`` for ``lambda1 / lambda2`` from Poisson counts
    ``k1``, ``k2`` taken over equal times.

    Given ``k1 + k2``, ``k1`` is binomial with ``p = lambda1 / (lambda1 + lambda2)``; the
    Clopper-Pearson bounds on ``p`` map to the ratio by ``p / (1 - p)`` (``high`` is infinite
    when ``k2 = 0``). Scale by the ratio of the times for unequal gates.
    """
    k1 = np.asarray(k1, float)
    k2 = np.asarray(k2, float)
    p_low, p_high = clopper_pearson(k1, k1 + k2, level)
    with np.errstate(divide="ignore"):
        return p_low / (1 - p_low), np.where(p_high < 1, p_high / (1 - p_high), np.inf)


@dataclass(frozen=True)
class PhotonConditioning:
    """Threshold detection of a coherent pulse: ``click_probability``, and the mean photon
    number of the pulse given a click (``mean_given_click``) and given none
    (``mean_given_no_click``)."""

    click_probability: Real
    mean_given_click: Real
    mean_given_no_click: Real


def photon_conditioning(
    mean: ArrayLike, efficiency: ArrayLike, dark_probability: ArrayLike = 0.0
) -> PhotonConditioning:
    """Photon-number conditioning of a threshold detector on a coherent (Poisson) pulse.

    Each photon is detected independently with probability ``efficiency``, so the detected and
    missed photons are independent Poisson numbers of means ``eta mu`` and ``(1 - eta) mu``; a
    dark click (probability ``dark_probability`` per gate) is independent of both. No click
    means no detected photon and no dark click: ``P(no click) = (1 - d) exp(-eta mu)`` and
    ``E[n | no click] = (1 - eta) mu``. ``E[n | click]`` follows from
    ``mu = P(click) E[n | click] + P(no click) E[n | no click]``.
    """
    mu = np.asarray(mean, float)
    eta = np.asarray(efficiency, float)
    d = np.asarray(dark_probability, float)
    if np.any(mu < 0) or np.any((eta <= 0) | (eta > 1)) or np.any((d < 0) | (d >= 1)):
        raise ValueError("need mean >= 0, 0 < efficiency <= 1 and 0 <= dark_probability < 1")
    x = eta * mu
    p_none = (1 - d) * np.exp(-x)
    p_click = -np.expm1(-x) + d * np.exp(-x)  # 1 - p_none without cancellation
    given_none = (1 - eta) * mu
    with np.errstate(invalid="ignore", divide="ignore"):
        given_click = np.where(p_click > 0, (mu - p_none * given_none) / p_click, given_none + 1)
    return PhotonConditioning(p_click, given_click, given_none)
