"""Single-photon counters beyond :mod:`aligner.physics.detection`: a paralyzable dead time,
afterpulsing, and background light kept apart from dark counts.

Rates in counts (or photons) per second, times in seconds; every function broadcasts.

* Dead time (Knoll, Radiation Detection and Measurement, 4th ed., chapter on dead time):
  non-paralyzable ``m = n / (1 + n tau)`` (the counter is blind for ``tau`` after each *counted*
  event; :mod:`aligner.physics.detection`); paralyzable ``m = n exp(-n tau)`` (every event,
  counted or not, restarts the dead time). The paralyzable reading peaks at ``1/(e tau)`` for
  ``n = 1/tau`` and falls beyond, so one reading has two true rates: with ``x = n tau``,
  ``x e^-x = m tau`` gives ``n = -W_k(-m tau) / tau`` (Lambert W). Branch ``k = 0`` (``"low"``,
  ``n tau <= 1``) is the rate below the peak, the one to use unless the counter is known to be
  driven past it; branch ``k = -1`` (``"high"``, ``n tau >= 1``) is the rate past the peak.
  Readings above ``1/(e tau)`` come from no true rate (NaN).
* Afterpulsing: each counted avalanche, afterpulses included, is followed (after the dead
  time, so never lost to it) by a spurious one with probability ``p``: counts are
  ``D(n) / (1 - p)`` with ``D`` the dead-time response to the primary rate ``n``, about
  ``n p`` extra counts per second at low rates. Valid for ``p << 1`` and ``n tau << 1``, where
  an afterpulse rarely blocks a primary event (common practice, no source).
* Background light (photons/s reaching the detector, e.g. room light through the filters) is
  detected with the efficiency ``eta``; dark counts (counts/s) are not. Neither carries the
  pointer shift.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .detection import measured_rate, true_rate

__all__ = [
    "DEAD_TIME_MODELS",
    "CountBudget",
    "count_budget",
    "counted_rate",
    "paralyzable_peak",
    "rate_from_counts",
]

Real = NDArray[np.float64]

#: Dead-time models: the counter ignores events for ``tau`` after a counted event
#: ("non-paralyzable") or after any event ("paralyzable").
DEAD_TIME_MODELS = ("non-paralyzable", "paralyzable")
_BRANCHES = {"low": 0, "high": -1}


def _check_model(model: str) -> None:
    if model not in DEAD_TIME_MODELS:
        raise ValueError(
            f"unknown dead-time model {model!r}; allowed: {', '.join(DEAD_TIME_MODELS)}"
        )


def counted_rate(
    true_rate_hz: ArrayLike, dead_time_s: ArrayLike, model: str = "non-paralyzable"
) -> Real:
    """Rate a counter shows for a true event rate (see module)."""
    _check_model(model)
    if model == "non-paralyzable":
        return measured_rate(true_rate_hz, dead_time_s)
    n = np.asarray(true_rate_hz, float)
    return n * np.exp(-n * np.asarray(dead_time_s, float))


def rate_from_counts(
    counted_rate_hz: ArrayLike,
    dead_time_s: ArrayLike,
    model: str = "non-paralyzable",
    branch: str = "low",
) -> Real:
    """True event rate behind a counter's reading (inverse of :func:`counted_rate`).

    Non-paralyzable: ``m / (1 - m tau)`` (inf at or above ``1/tau``). Paralyzable:
    ``-W_k(-m tau) / tau`` with ``branch`` ``"low"`` (k = 0) or ``"high"`` (k = -1); NaN above
    the peak reading ``1/(e tau)``.
    """
    _check_model(model)
    if branch not in _BRANCHES:
        raise ValueError(f"unknown branch {branch!r}; allowed: low, high")
    if model == "non-paralyzable":
        return true_rate(counted_rate_hz, dead_time_s)
    from scipy.special import lambertw

    m = np.asarray(counted_rate_hz, float)
    tau = np.asarray(dead_time_s, float)
    y = -m * tau
    reachable = y >= -np.exp(-1.0)
    # W_-1(0) = -inf: a zero reading past the peak means an infinite rate.
    with np.errstate(divide="ignore", invalid="ignore"):
        w = lambertw(np.where(reachable, y, 0.0), _BRANCHES[branch])
        n = np.where(tau > 0, -np.real(w) / np.where(tau > 0, tau, 1.0), m)
    return np.where(reachable, n, np.nan)


def paralyzable_peak(dead_time_s: ArrayLike) -> tuple[Real, Real]:
    """``(true rate, reading)`` at the peak of a paralyzable counter: ``(1/tau, 1/(e tau))``."""
    tau = np.asarray(dead_time_s, float)
    return 1.0 / tau, np.exp(-1.0) / tau


@dataclass(frozen=True)
class CountBudget:
    """Where the counts come from (counts/s, arrays of the broadcast shape).

    ``signal``, ``background``: detected signal and background photons; ``dark``: dark counts
    (these three before dead-time losses); ``afterpulses``: counted spurious avalanches;
    ``counted``: what the counter shows.
    """

    signal: Real
    background: Real
    dark: Real
    afterpulses: Real
    counted: Real

    @property
    def primary(self) -> Real:
        """Signal, background and dark events per second before dead-time losses."""
        return self.signal + self.background + self.dark

    @property
    def signal_fraction(self) -> Real:
        """Share of the counts that hold a signal photon (the dead time removes primary events
        of all kinds alike; afterpulses hold none)."""
        with np.errstate(divide="ignore", invalid="ignore"):
            share = self.signal / self.primary * (1 - self.afterpulses / self.counted)
        return np.where(self.counted > 0, share, 0.0)


def count_budget(
    signal_photon_rate: ArrayLike,
    background_photon_rate: ArrayLike = 0.0,
    efficiency: ArrayLike = 1.0,
    dark_rate: ArrayLike = 0.0,
    afterpulse_probability: ArrayLike = 0.0,
    dead_time_s: ArrayLike = 0.0,
    model: str = "non-paralyzable",
) -> CountBudget:
    """Count rates of a continuous-wave counter (see module): photons at the detector (signal
    and background, photons/s) times ``efficiency``, plus ``dark_rate``; afterpulses with
    ``afterpulse_probability`` per counted avalanche; dead time ``dead_time_s`` of ``model``."""
    eta = np.asarray(efficiency, float)
    signal, background, dark = np.broadcast_arrays(
        eta * np.asarray(signal_photon_rate, float),
        eta * np.asarray(background_photon_rate, float),
        np.asarray(dark_rate, float),
    )
    primary = signal + background + dark
    p = np.asarray(afterpulse_probability, float)
    if np.any((p < 0) | (p >= 1)):
        raise ValueError("afterpulse_probability must be in [0, 1)")
    counted = counted_rate(primary, dead_time_s, model) / (1 - p)
    return CountBudget(signal, background, dark, counted * p, counted)
