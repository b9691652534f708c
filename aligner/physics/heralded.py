"""Heralded single photons: a pair source with a herald detector, accidental coincidences,
the heralded second-order correlation, and the post-selection probability and weak value
measured with heralded photons.

Rates in counts/s, windows and times in s, probabilities per herald (or per window).

* Accidentals: two uncorrelated streams of rates ``R_a``, ``R_b`` meet within a coincidence
  window of total width ``T_c`` at ``R_a R_b T_c`` per second (common practice); one herald finds
  an uncorrelated signal-arm count in its window with probability ``1 - exp(-R_u T_c)``,
  ``R_u`` the uncorrelated (singles minus coincidences) rate of the signal detector.
* Continuous pair source, rate ``R`` pairs/s, arm efficiencies ``eta_h``, ``eta_s`` (collection
  times detection), dark counts ``d_h``, ``d_s``: singles ``eta R + d``, true coincidences
  ``eta_h eta_s R``; heralding efficiency ``(N_c - N_acc) / N_h`` (Klyshko, Sov. J. Quantum
  Electron. 10, 1112 (1980), from memory).
* Heralded ``g2``: the herald ``a`` and the two outputs ``b``, ``c`` of a beam splitter in the
  signal arm: ``g2 = N_abc N_a / (N_ab N_ac)`` (Grangier, Roger, Aspect, Europhys. Lett. 1, 173
  (1986)); below 1 for single photons. :func:`pulsed_pair_clicks` gives its expectation for a
  pulsed source with Poisson-distributed pairs per pulse (or per window), threshold detectors
  and dark counts: each pair lands independently, so the pairs that fire any set ``S`` of
  detectors are Poisson with mean ``mu p_S`` and ``P(none of S fires) = exp(-mu p_S - sum d)``;
  inclusion-exclusion gives the click probabilities.
* Leak rate from coincidences (:func:`heralded_leak`): each of ``n`` heralds is a trial; it
  shows a coincidence with the post-selected detector when its photon passes and is detected
  (probability ``q = eta_s P``) or an uncorrelated count falls in its window (probability
  ``a``), independently: ``p = 1 - (1 - q)(1 - a)``. The Clopper-Pearson interval on ``p`` from
  ``k`` coincidences maps monotonically to ``q = (p - a)/(1 - a)`` (clipped at 0) and to
  ``P = q / eta_s``: exact coverage, with ``a`` and the open-arm heralding efficiency ``eta_s``
  taken as known (measured in much longer reference runs).
* Weak value from the leak rate: for pure states, ``A^2 = 1`` and ``<i|A|i> = 0`` (the worked
  case of a pre-selection at 45 deg, ``A = HV``), ``|i>`` and ``A|i>`` are orthonormal, so
  ``|<f|A|i>|^2 = 1 - P`` and ``|A_w| = sqrt(1/P - 1)`` (physics.md: ``P |A_w|^2 =
  |<f|A|i>|^2``), decreasing in ``P``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .counting import DEFAULT_LEVEL, clopper_pearson

__all__ = [
    "HeraldedLeak",
    "PairRates",
    "TripleClicks",
    "accidental_probability",
    "accidental_rate",
    "heralded_g2",
    "heralded_leak",
    "heralding_efficiency",
    "pair_rates",
    "pulsed_pair_clicks",
    "weak_value_from_leak",
]

Real = NDArray[np.float64]


def accidental_rate(rate_a: ArrayLike, rate_b: ArrayLike, window_s: ArrayLike) -> Real:
    """Accidental coincidences per second, ``R_a R_b T_c`` (``T_c`` the total window width)."""
    return np.asarray(rate_a, float) * np.asarray(rate_b, float) * np.asarray(window_s, float)


def accidental_probability(uncorrelated_rate: ArrayLike, window_s: ArrayLike) -> Real:
    """Probability that one herald's window holds an uncorrelated count,
    ``1 - exp(-R_u T_c)``."""
    return -np.expm1(-np.asarray(uncorrelated_rate, float) * np.asarray(window_s, float))


@dataclass(frozen=True)
class PairRates:
    """Expected rates (1/s) of a continuous pair source: ``herald`` and ``signal`` singles,
    ``true`` coincidences, ``accidental`` coincidences (``R_h R_s T_c``)."""

    herald: Real
    signal: Real
    true: Real
    accidental: Real

    @property
    def heralding_efficiency(self) -> Real:
        """True coincidences per herald: the probability that a herald's partner is counted."""
        return self.true / self.herald


def pair_rates(
    pair_rate: ArrayLike,
    herald_efficiency: ArrayLike,
    signal_efficiency: ArrayLike,
    window_s: ArrayLike,
    herald_dark: ArrayLike = 0.0,
    signal_dark: ArrayLike = 0.0,
) -> PairRates:
    """Singles, true and accidental coincidence rates of a pair source (see module)."""
    r = np.asarray(pair_rate, float)
    eta_h = np.asarray(herald_efficiency, float)
    eta_s = np.asarray(signal_efficiency, float)
    herald = eta_h * r + np.asarray(herald_dark, float)
    signal = eta_s * r + np.asarray(signal_dark, float)
    return PairRates(herald, signal, eta_h * eta_s * r, accidental_rate(herald, signal, window_s))


def heralding_efficiency(
    coincidences: ArrayLike, heralds: ArrayLike, accidentals: ArrayLike = 0.0
) -> Real:
    """Measured heralding efficiency ``(N_c - N_acc) / N_h``."""
    n_c = np.asarray(coincidences, float)
    return (n_c - np.asarray(accidentals, float)) / np.asarray(heralds, float)


def heralded_g2(
    triples: ArrayLike, heralds: ArrayLike, herald_b: ArrayLike, herald_c: ArrayLike
) -> Real:
    """Heralded second-order correlation ``N_abc N_a / (N_ab N_ac)`` (Grangier et al. 1986)."""
    num = np.asarray(triples, float) * np.asarray(heralds, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return num / (np.asarray(herald_b, float) * np.asarray(herald_c, float))


@dataclass(frozen=True)
class TripleClicks:
    """Click probabilities per pulse: herald ``a``, ``ab``, ``ac`` and ``abc``."""

    a: Real
    ab: Real
    ac: Real
    abc: Real

    @property
    def g2(self) -> Real:
        """Expected heralded ``g2``, ``P_abc P_a / (P_ab P_ac)``."""
        return self.abc * self.a / (self.ab * self.ac)


def pulsed_pair_clicks(
    mean_pairs: ArrayLike,
    herald_efficiency: ArrayLike,
    efficiency_b: ArrayLike,
    efficiency_c: ArrayLike,
    dark_a: ArrayLike = 0.0,
    dark_b: ArrayLike = 0.0,
    dark_c: ArrayLike = 0.0,
) -> TripleClicks:
    """Click probabilities of a herald and two signal-arm detectors behind a beam splitter
    (``efficiency_b + efficiency_c <= 1``: splitting included), Poisson pairs of mean
    ``mean_pairs`` per pulse, dark-click probabilities per pulse (see module)."""
    mu = np.asarray(mean_pairs, float)
    ea, eb, ec = (np.asarray(x, float) for x in (herald_efficiency, efficiency_b, efficiency_c))
    da, db, dc = (-np.log1p(-np.asarray(x, float)) for x in (dark_a, dark_b, dark_c))

    def none(p_pair: Real, dark: Real) -> Real:
        return np.exp(-mu * p_pair - dark)

    a0 = none(ea, da)
    b0 = none(eb, db)
    c0 = none(ec, dc)
    ab0 = none(1 - (1 - ea) * (1 - eb), da + db)
    ac0 = none(1 - (1 - ea) * (1 - ec), da + dc)
    bc0 = none(eb + ec, db + dc)
    abc0 = none(1 - (1 - ea) * (1 - eb - ec), da + db + dc)
    return TripleClicks(
        a=1 - a0,
        ab=1 - a0 - b0 + ab0,
        ac=1 - a0 - c0 + ac0,
        abc=1 - a0 - b0 - c0 + ab0 + ac0 + bc0 - abc0,
    )


@dataclass(frozen=True)
class HeraldedLeak:
    """Post-selection probability from heralded coincidences (see module).

    ``leak`` with its interval ``low``/``high`` at ``level``; ``per_herald``: raw coincidences per
    herald ``k/n``; ``weak_value``, ``weak_value_low``, ``weak_value_high``: ``|A_w|`` under the
    stated conditions (the low bound from the high leak).
    """

    leak: Real
    low: Real
    high: Real
    per_herald: Real
    level: float

    @property
    def weak_value(self) -> Real:
        return weak_value_from_leak(self.leak)

    @property
    def weak_value_low(self) -> Real:
        return weak_value_from_leak(self.high)

    @property
    def weak_value_high(self) -> Real:
        return weak_value_from_leak(self.low)


def heralded_leak(
    coincidences: ArrayLike,
    heralds: ArrayLike,
    accidental: ArrayLike,
    heralding_efficiency: ArrayLike,
    level: float = DEFAULT_LEVEL,
) -> HeraldedLeak:
    """Leak rate (post-selection probability) from ``coincidences`` among ``heralds``, with the
    per-herald ``accidental`` probability (:func:`accidental_probability`) and the open-arm
    ``heralding_efficiency`` (see module)."""
    k = np.asarray(coincidences, float)
    n = np.asarray(heralds, float)
    a = np.asarray(accidental, float)
    eta = np.asarray(heralding_efficiency, float)
    if np.any((a < 0) | (a >= 1)):
        raise ValueError("accidental probability must be in [0, 1)")
    if np.any((eta <= 0) | (eta > 1)):
        raise ValueError("heralding efficiency must be in (0, 1]")
    p_low, p_high = clopper_pearson(k, n, level)

    def leak_of(p: Real) -> Real:
        return np.clip((p - a) / (1 - a), 0.0, 1.0) / eta

    with np.errstate(divide="ignore", invalid="ignore"):
        per_herald = np.where(n > 0, k / np.where(n > 0, n, 1.0), np.nan)
    return HeraldedLeak(leak_of(per_herald), leak_of(p_low), leak_of(p_high), per_herald, level)


def weak_value_from_leak(leak: ArrayLike) -> Real:
    """``|A_w| = sqrt(1/P - 1)`` (pure states, ``A^2 = 1``, ``<i|A|i> = 0``; see module);
    infinite at ``P = 0``."""
    p = np.asarray(leak, float)
    with np.errstate(divide="ignore"):
        return np.sqrt(np.maximum(1.0 / p - 1.0, 0.0))
