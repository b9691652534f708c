"""The ratio of two light rates measured over known dark rates: estimate and interval.

Two channels count for live times ``t1`` and ``t2`` (s): ``k1 ~ Poisson(t1 (rho lam + d1))``
and ``k2 ~ Poisson(t2 (lam + d2))``, with known dark rates ``d1``, ``d2`` (counts/s), the
reference light rate ``lam >= 0`` (counts/s) a nuisance parameter and ``rho >= 0`` the ratio
of the light rates wanted (a leak over a monitor, one port over the other).

The interval is the profile-likelihood one: ``{rho : 2 [l(rho_hat) - l_p(rho)] <= q}`` with
``q`` the ``level`` quantile of chi-squared with one degree of freedom (Wilks' theorem; see
e.g. Cowan, Statistical Data Analysis, Oxford 1998, ch. 9). For fixed ``rho`` the likelihood
is concave in ``lam`` and its maximum is the non-negative root of a quadratic, so the profile
costs one square root. Unlike the conditional binomial interval (exact only without darks) it
keeps its coverage when the darks are comparable to the light (checked by simulation in the
tests). When the reference counts do not exceed its dark level the ratio has no upper bound
(``high`` is infinite).

Dead time: pass the live times ``t - k tau`` (non-paralyzable), under which the counts are
Poisson in the true rates to first order (live-time correction, common practice).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = ["RateRatio", "rate_ratio"]


@dataclass(frozen=True)
class RateRatio:
    """``estimate`` of the ratio with its interval ``low``..``high`` at ``level``; ``bounded``
    False when the data give no upper bound (reference at or below its dark level)."""

    estimate: float
    low: float
    high: float
    level: float

    @property
    def bounded(self) -> bool:
        """True when the interval has a finite upper end."""
        return math.isfinite(self.high)


def _profile(rho: float, k1: int, a: float, b: float, k2: int, c: float, e: float) -> float:
    """Log-likelihood maximised over ``lam >= 0`` at ratio ``rho`` (constants dropped);
    ``a, b`` = exposure and dark counts of channel 1, ``c, e`` of channel 2."""
    u = a * rho
    if u == 0.0:
        lam = max(0.0, (k2 - e) / c)
    else:
        qa = (u + c) * u * c
        qb = (u + c) * (u * e + b * c) - u * c * (k1 + k2)
        qc = (u + c) * b * e - k1 * u * e - k2 * c * b
        disc = max(qb * qb - 4.0 * qa * qc, 0.0)
        lam = max(0.0, (-qb + math.sqrt(disc)) / (2.0 * qa))
    mu1, mu2 = u * lam + b, c * lam + e
    return _poisson_log(k1, mu1) + _poisson_log(k2, mu2)


def _poisson_log(k: int, mu: float) -> float:
    if mu <= 0.0:
        return 0.0 if k == 0 else -math.inf
    return k * math.log(mu) - mu


def rate_ratio(
    k1: int,
    t1: float,
    d1: float,
    k2: int,
    t2: float,
    d2: float,
    level: float = 0.683,
) -> RateRatio:
    """Ratio of the light rates of channel 1 over channel 2 (see the module docstring): counts
    ``k1``, ``k2`` over live times ``t1``, ``t2`` (s) with known dark rates ``d1``, ``d2``
    (counts/s)."""
    from scipy.optimize import brentq, minimize_scalar
    from scipy.stats import chi2

    if not (t1 > 0 and t2 > 0 and d1 >= 0 and d2 >= 0 and k1 >= 0 and k2 >= 0):
        raise ValueError("need t1, t2 > 0 s, dark rates >= 0 and counts >= 0")
    if not 0.0 < level < 1.0:
        raise ValueError(f"confidence level must be between 0 and 1, got {level!r}")
    a, b, c, e = t1, t1 * d1, t2, t2 * d2
    q = float(chi2.ppf(level, 1))

    def ell(rho: float) -> float:
        return _profile(rho, k1, a, b, k2, c, e)

    light2 = k2 / t2 - d2
    if light2 <= 0.0:
        return RateRatio(math.nan, 0.0, math.inf, level)
    guess = max(k1 / t1 - d1, 0.0) / light2
    if guess > 0.0:
        best = guess
    else:  # counts at or below the dark in channel 1: the maximum sits at (or near) zero
        scale = (k1 + 1.0) / t1 / light2
        found = minimize_scalar(lambda r: -ell(r), bounds=(0.0, scale), method="bounded")
        best = float(found.x) if -found.fun > ell(0.0) else 0.0
    top = ell(best)

    def excess(rho: float) -> float:
        return 2.0 * (top - ell(rho)) - q

    low = 0.0
    if best > 0.0 and excess(0.0) > 0.0:
        low = float(brentq(excess, 0.0, best, xtol=1e-14 * max(best, 1e-300), rtol=1e-12))
    step = max(best, (k1 + 1.0) / t1 / light2)
    high_end = best + step
    while excess(high_end) < 0.0:
        high_end += step
        step *= 2.0
        if high_end > 1e300:
            return RateRatio(best, low, math.inf, level)
    high = float(brentq(excess, best, high_end, rtol=1e-12))
    return RateRatio(best, low, high, level)
