"""Single-photon detector response: dead time, threshold (click) detection, expected rates.

Rates are in counts (or photons) per second, times in seconds, probabilities per pulse.
Every function broadcasts over numpy arrays.

* Continuous-wave counting with a non-paralyzable dead time ``tau``: a true rate ``n`` is
  measured as ``m = n / (1 + n tau)`` and corrected back with ``n = m / (1 - m tau)``.
* Pulsed (gated) counting with a threshold detector of efficiency ``eta``: a coherent pulse of
  mean ``mu`` photons gives no photo-click with probability ``exp(-eta mu)``; dark clicks of
  probability ``p_d`` per gate are independent, so ``P(click) = 1 - (1 - p_d) exp(-eta mu)``.
  At most one click per pulse is counted; a dead time longer than the pulse period blocks the
  ``k = ceil(tau R) - 1`` pulses after each click, so the measured rate is
  ``R P / (1 + k P)`` at repetition rate ``R``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = [
    "SATURATION_LOSS",
    "DetectorRates",
    "click_probability",
    "click_probability_from_rate",
    "expected_rates",
    "mean_photons_from_clicks",
    "measured_rate",
    "pulsed_measured_rate",
    "pulses_blocked",
    "true_rate",
]

Real = NDArray[np.float64]

#: Fraction of counts lost to dead time or to multi-photon pulses above which the detector is
#: reported as saturated (its response is no longer close to linear). Common practice, no source.
SATURATION_LOSS = 0.1


def measured_rate(true_rate: ArrayLike, dead_time_s: ArrayLike) -> Real:
    """Rate a non-paralyzable counter shows for a ``true_rate`` (counts/s): ``n / (1 + n tau)``."""
    n = np.asarray(true_rate, float)
    return n / (1.0 + n * np.asarray(dead_time_s, float))


def true_rate(measured_rate: ArrayLike, dead_time_s: ArrayLike) -> Real:
    """True rate behind a non-paralyzable counter's ``measured_rate``: ``m / (1 - m tau)``.

    Measured rates at or above ``1/tau`` cannot come from any true rate; they give ``inf``.
    """
    m = np.asarray(measured_rate, float)
    live = 1.0 - m * np.asarray(dead_time_s, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(live > 0, m / np.where(live > 0, live, 1.0), np.inf)


def click_probability(
    mean_photons_per_pulse: ArrayLike, efficiency: ArrayLike, dark_probability: ArrayLike = 0.0
) -> Real:
    """Click probability per pulse of a threshold detector: ``1 - (1 - p_d) exp(-eta mu)``."""
    mu = np.asarray(mean_photons_per_pulse, float)
    eta = np.asarray(efficiency, float)
    return 1.0 - (1.0 - np.asarray(dark_probability, float)) * np.exp(-eta * mu)


def mean_photons_from_clicks(
    click_probability: ArrayLike, efficiency: ArrayLike, dark_probability: ArrayLike = 0.0
) -> Real:
    """Mean photons per pulse (before the detector's efficiency) behind a click probability:
    ``mu = -ln((1 - P) / (1 - p_d)) / eta``.

    A click probability at or below the dark probability gives 0; a probability of 1 gives inf.
    """
    p = np.asarray(click_probability, float)
    no_dark = 1.0 - np.asarray(dark_probability, float)
    with np.errstate(divide="ignore"):
        mu = -np.log((1.0 - p) / no_dark) / np.asarray(efficiency, float)
    return np.maximum(mu, 0.0)


def pulses_blocked(dead_time_s: ArrayLike, rep_rate_hz: ArrayLike) -> Real:
    """Pulses after a click that fall inside the dead time: ``max(ceil(tau R) - 1, 0)``."""
    periods = np.asarray(dead_time_s, float) * np.asarray(rep_rate_hz, float)
    # A dead time equal to a whole number of periods ends just as that pulse arrives.
    return np.maximum(np.ceil(periods * (1 - 1e-12)) - 1.0, 0.0)


def pulsed_measured_rate(
    click_probability: ArrayLike, rep_rate_hz: ArrayLike, dead_time_s: ArrayLike = 0.0
) -> Real:
    """Counted clicks per second in pulsed mode: ``R P / (1 + k P)``, ``k`` from
    :func:`pulses_blocked`."""
    p = np.asarray(click_probability, float)
    rep = np.asarray(rep_rate_hz, float)
    return rep * p / (1.0 + pulses_blocked(dead_time_s, rep) * p)


def click_probability_from_rate(
    measured_rate: ArrayLike, rep_rate_hz: ArrayLike, dead_time_s: ArrayLike = 0.0
) -> Real:
    """Inverse of :func:`pulsed_measured_rate`: ``P = m / (R - k m)`` (inf when ``m >= R/k``)."""
    m = np.asarray(measured_rate, float)
    rep = np.asarray(rep_rate_hz, float)
    free = rep - pulses_blocked(dead_time_s, rep) * m
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(free > 0, m / np.where(free > 0, free, 1.0), np.inf)


@dataclass(frozen=True)
class DetectorRates:
    """Expected detector response (counts/s, arrays of the broadcast shape).

    ``true_rate``: clicks per second before dead-time losses, dark counts included (in pulsed
    mode ``R P(click)``). ``measured_rate``: what the counter shows. ``linear_rate``: the
    ideal linear response ``photon_rate leak eta + dark`` (pulsed: ``R (eta mu + p_d)``).
    ``signal_fraction``: share of counted clicks that hold at least one signal photon.
    ``loss``: ``1 - measured/linear``, the fraction lost to dead time and multi-photon pulses.
    """

    true_rate: Real
    measured_rate: Real
    linear_rate: Real
    signal_fraction: Real

    @property
    def loss(self) -> Real:
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(self.linear_rate > 0, 1.0 - self.measured_rate / self.linear_rate, 0.0)


def expected_rates(
    photon_rate: ArrayLike,
    leak_rate: ArrayLike,
    efficiency: ArrayLike = 1.0,
    dark_rate: ArrayLike = 0.0,
    dead_time_s: ArrayLike = 0.0,
    *,
    rep_rate_hz: float | None = None,
    dark_probability: ArrayLike = 0.0,
) -> DetectorRates:
    """Expected count rates for ``photon_rate`` photons/s of which ``leak_rate`` reach the detector.

    Continuous wave (``rep_rate_hz`` None): true rate ``photon_rate leak eta + dark_rate``, then
    non-paralyzable dead time. Pulsed: mean ``mu = photon_rate leak / R`` photons per pulse at the
    detector, click probability ``1 - (1 - dark_probability) exp(-eta mu)``, true rate ``R P``,
    then the pulsed dead time; ``dark_rate`` is not used (dark counts come per gate).
    """
    arriving = np.asarray(photon_rate, float) * np.asarray(leak_rate, float)
    eta = np.asarray(efficiency, float)
    if rep_rate_hz is None:
        signal = arriving * eta
        dark = np.asarray(dark_rate, float)
        true = signal + dark
        with np.errstate(divide="ignore", invalid="ignore"):
            fraction = np.where(true > 0, signal / np.where(true > 0, true, 1.0), 0.0)
        return DetectorRates(true, measured_rate(true, dead_time_s), true, fraction)
    mu = arriving / rep_rate_hz
    p_dark = np.asarray(dark_probability, float)
    p = click_probability(mu, eta, p_dark)
    p_signal = -np.expm1(-eta * mu)
    with np.errstate(divide="ignore", invalid="ignore"):
        fraction = np.where(p > 0, p_signal / np.where(p > 0, p, 1.0), 0.0)
    linear = rep_rate_hz * (eta * mu + p_dark)
    return DetectorRates(
        rep_rate_hz * p, pulsed_measured_rate(p, rep_rate_hz, dead_time_s), linear, fraction
    )
