"""Post-selected counts -> leak rate with an exact confidence interval, and a verdict against
the prediction.

Continuous wave: ``k`` counts in ``T`` s; the Garwood interval on the Poisson mean is mapped,
bound by bound, through the dead-time correction and the dark subtraction (both monotone), so
the interval stays exact for a known dark rate. Pulsed: ``k`` clicks in ``R T`` pulses; the
Clopper-Pearson interval on the click probability is mapped through the dead-time correction
and the click-probability inversion (clicks are not photons).

Reference (the denominator of the leak fraction):

* ``reference`` counts over ``reference_dwell_s``: the ratio of the two Poisson means gets the
  exact conditional interval (Clopper-Pearson on ``k | k + k_ref``), then the dead-time factors,
  the relative efficiency (post-selected detector / reference detector) and the dark.
  ``reference_kind="bright"``: the analyzer turned to transmission, leak = S / B;
  ``"port"``: the other port of a polarizing beam splitter, leak = S / (S + B).
* ``reference_rate``: a known full-transmission count rate (counts/s, same detector), or the
  bench's photon rate times the detector efficiency (the leak per source photon).

A measured dark (``dark`` counts over ``dark_dwell_s``) is used at its point estimate; its own
statistical error is reported in ``notes``.

Counts at or below the dark level: the interval would collapse to "0 to 0", so the result is
an upper limit instead (``upper_limit`` True, ``signal_rate_high`` the limit): the Bayesian
limit with a flat prior on the signal over the known dark (Helene 1983,
:func:`aligner.physics.counting.poisson_upper_limit`), at the credibility of the upper tail of
the two-sided interval (``1 - (1 - level)/2``, 84.15 % for the default 68.3 %).

Rates the detector saw above ``safe_rate`` (the bench detector's) give a safety warning.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..errors import InputError
from ..physics.counting import (
    DEFAULT_LEVEL,
    clopper_pearson,
    garwood,
    photon_conditioning,
    poisson_ratio_interval,
    poisson_upper_limit,
)
from ..physics.detection import (
    click_probability_from_rate,
    mean_photons_from_clicks,
    measured_rate,
    pulsed_measured_rate,
    true_rate,
)

__all__ = ["LeakMeasurement", "Verdict", "compare", "format_sigma", "measure_leak"]

#: |residual| (standard deviations) up to which a measurement is called consistent.
CONSISTENT_SIGMA = 2.0

_WORDS = {
    "rate": (
        "high: the null has drifted or the analyzer leaks",
        "low: less light than predicted; check the photon rate, the detector efficiency "
        "and the beam path in the bench file",
    ),
    "floor": (
        "high: the leak floor is above the bench's prediction; the analyzer or source "
        "extinction is worse than the file says, or a plate's retardance is off",
        "low: the floor is below the bench's prediction; the file understates the extinction",
    ),
}


@dataclass(frozen=True)
class Verdict:
    """Measured against predicted: ``residual_sigma`` = (measured - predicted) / error,
    ``status`` ``consistent``/``high``/``low``/``unknown``, and ``text`` in plain words."""

    residual_sigma: float
    status: str
    text: str


def format_sigma(value: float) -> str:
    """A residual in standard deviations for text: ``+1.3 sigma``, ``-0.4 sigma``; below 0.05
    in size ``0.0 sigma`` (never a signed zero); ``unknown sigma`` when not finite."""
    if not math.isfinite(value):
        return "unknown sigma"
    if abs(value) < 0.05:
        return "0.0 sigma"
    return f"{value:+.1f} sigma"


def compare(measured: float, error: float, predicted: float, kind: str = "rate") -> Verdict:
    """Verdict on a measurement with 1-sigma ``error`` against ``predicted`` (same units);
    ``kind`` picks the wording (``rate`` or ``floor``)."""
    if not (math.isfinite(error) and error > 0 and math.isfinite(predicted)):
        return Verdict(math.nan, "unknown", "no verdict: the error or the prediction is unknown")
    residual = (measured - predicted) / error
    if abs(residual) <= CONSISTENT_SIGMA:
        return Verdict(residual, "consistent", f"consistent ({format_sigma(residual)})")
    high, low = _WORDS[kind]
    return (
        Verdict(residual, "high", f"{high} ({format_sigma(residual)})")
        if residual > 0
        else Verdict(residual, "low", f"{low} ({format_sigma(residual)})")
    )


@dataclass(frozen=True)
class LeakMeasurement:
    """A measured leak.

    ``raw_rate`` (counts/s) is counts over dwell as counted; ``dead_time_corrected_rate`` the
    same after the dead-time correction (``dead_time_s``), before the dark; ``signal_rate``
    (counts/s) the post-selected rate corrected for dead time and dark counts, as a linear
    detector of the same efficiency would count it (pulsed: ``eta mu R``); ``low`` and
    ``high`` its exact interval at ``level`` -- or, when ``upper_limit``, 0 and the upper limit
    at ``upper_limit_credibility``. ``leak`` (fraction of the reference; None without one)
    with ``leak_low``, ``leak_high``; ``reference_raw_rate`` and ``reference_corrected_rate``
    (counts/s) for a counted reference. ``mean_photons_per_pulse`` and
    ``mean_photons_given_click`` only in pulsed mode. ``predicted_rate`` and ``verdict`` only
    with a prediction; the verdict uses half the interval width as the error on the side of
    the prediction. ``warnings`` are safety warnings (rates above the detector's safe rate).
    """

    counts: int
    dwell_s: float
    level: float
    method: str
    signal_rate: float
    signal_rate_low: float
    signal_rate_high: float
    dark_rate: float
    leak: float | None = None
    leak_low: float | None = None
    leak_high: float | None = None
    reference: str | None = None
    mean_photons_per_pulse: float | None = None
    mean_photons_given_click: float | None = None
    predicted_rate: float | None = None
    verdict: Verdict | None = None
    notes: tuple[str, ...] = field(default=())
    raw_rate: float = math.nan
    dead_time_s: float = 0.0
    dead_time_corrected_rate: float = math.nan
    reference_raw_rate: float | None = None
    reference_corrected_rate: float | None = None
    upper_limit: bool = False
    upper_limit_credibility: float | None = None
    warnings: tuple[str, ...] = field(default=())

    def to_json(self) -> dict[str, Any]:
        """The JSON document of ``aligner leak --json``."""
        doc: dict[str, Any] = {
            "counts": self.counts,
            "dwell_s": self.dwell_s,
            "level": self.level,
            "method": self.method,
            "signal_rate": self.signal_rate,
            "signal_rate_low": self.signal_rate_low,
            "signal_rate_high": self.signal_rate_high,
            "dark_rate": self.dark_rate,
            "leak": self.leak,
            "leak_low": self.leak_low,
            "leak_high": self.leak_high,
            "reference": self.reference,
            "mean_photons_per_pulse": self.mean_photons_per_pulse,
            "mean_photons_given_click": self.mean_photons_given_click,
            "predicted_rate": self.predicted_rate,
            "notes": list(self.notes),
            "raw_rate": self.raw_rate,
            "dead_time_s": self.dead_time_s,
            "dead_time_corrected_rate": self.dead_time_corrected_rate,
            "reference_raw_rate": self.reference_raw_rate,
            "reference_corrected_rate": self.reference_corrected_rate,
            "upper_limit": self.upper_limit,
            "upper_limit_credibility": self.upper_limit_credibility,
            "warnings": list(self.warnings),
        }
        if self.verdict is not None:
            doc["residual_sigma"] = self.verdict.residual_sigma
            doc["verdict"] = self.verdict.text
            doc["status"] = self.verdict.status
        return doc


def _whole(value: float, name: str) -> int:
    if not (math.isfinite(value) and value >= 0 and value == int(value)):
        raise InputError(f"{name} must be a whole number of counts >= 0, got {value!r}")
    return int(value)


def _positive(value: float, name: str) -> float:
    if not (math.isfinite(value) and value > 0):
        raise InputError(f"{name} must be a number > 0, got {value!r}")
    return float(value)


def _exposure_warning(what: str, rate: float, safe_rate: float) -> str | None:
    """A plain safety warning when the detector saw ``rate`` (counts/s) above ``safe_rate``."""
    if not rate > safe_rate:
        return None
    return (
        f"SAFETY: the detector was exposed to {rate:.4g} counts/s on the {what}, above its "
        f"safe rate of {safe_rate:.4g} counts/s (bench file, detector.safe_rate). Check the "
        "attenuation before the next bright measurement; follow your local laser-safety "
        "rules and your laser safety officer."
    )


def measure_leak(
    counts: float,
    dwell_s: float,
    *,
    reference: float | None = None,
    reference_dwell_s: float | None = None,
    reference_kind: str = "bright",
    reference_rate: float | None = None,
    reference_measured: bool = True,
    dark: float | None = None,
    dark_dwell_s: float | None = None,
    dark_rate: float = 0.0,
    dead_time_s: float = 0.0,
    relative_efficiency: float = 1.0,
    efficiency: float = 1.0,
    rep_rate_hz: float | None = None,
    dark_probability: float = 0.0,
    level: float = DEFAULT_LEVEL,
    predicted_rate: float | None = None,
    safe_rate: float = math.inf,
    reference_dark_rate: float = 0.0,
) -> LeakMeasurement:
    """Leak from counts (see the module docstring). Rates in counts/s, times in s; in pulsed
    mode (``rep_rate_hz`` given) ``dark``/``dark_probability`` are per gate.
    ``reference_measured`` False marks ``reference_rate`` as computed (e.g. the bench's photon
    rate times the efficiency), so it is not checked against ``safe_rate`` (counts/s)."""
    k = _whole(counts, "--counts")
    t = _positive(dwell_s, "--dwell")
    if not 0 < level < 1:
        raise InputError(f"--level must be between 0 and 1 (e.g. 0.683), got {level!r}")
    if reference is not None and reference_rate is not None:
        raise InputError("give either --reference (counts) or --reference-rate, not both")
    if reference_kind not in ("bright", "port"):
        raise InputError(f"--reference-kind must be bright or port, got {reference_kind!r}")
    _positive(relative_efficiency, "--relative-efficiency")
    notes: list[str] = []
    tau = max(float(dead_time_s), 0.0)
    t_dark = _positive(dark_dwell_s if dark_dwell_s is not None else t, "--dark-dwell")
    raw = k / t
    pulsed = rep_rate_hz is not None
    if pulsed:
        rep = _positive(rep_rate_hz, "--rep-rate")
        if dark is not None:
            dark_probability = _whole(dark, "--dark") / (rep * t_dark)
        p_floor = (
            float(garwood(dark, level)[0]) / (rep * t_dark)
            if dark is not None
            else dark_probability
        )
        n_low, n_high = (float(x) for x in clopper_pearson(k, rep * t, level))
        low_high = np.array([n_low, n_high]) * rep * t  # click counts

        def signal(clicks: np.ndarray, dark_level: float) -> np.ndarray:
            p_click = click_probability_from_rate(clicks / t, rep, tau)
            return (
                mean_photons_from_clicks(np.minimum(p_click, 1.0), efficiency, dark_level)
                * efficiency
                * rep
            )

        corrected = float(click_probability_from_rate(raw, rep, tau)) * rep
        background = float(pulsed_measured_rate(dark_probability, rep, tau)) * t
        floor = float(pulsed_measured_rate(p_floor, rep, tau)) * t
        dark_level, dark_floor = dark_probability, p_floor
        method = "Clopper-Pearson on clicks per pulse"
        dark_used = dark_probability * rep
    else:
        d_low = dark_rate * t_dark
        if dark is not None:
            dark_rate = _whole(dark, "--dark") / t_dark
            d_low, d_high = garwood(dark, level)
            notes.append(
                f"dark measured: {dark_rate:.4g} counts/s, its own interval "
                f"{d_low / t_dark:.4g} to {d_high / t_dark:.4g} counts/s is not "
                "folded into the leak interval"
            )
        low_high = np.array([float(x) for x in garwood(k, level)])

        def signal(n: np.ndarray, dark_level: float) -> np.ndarray:
            return np.maximum(true_rate(n / t, tau) - dark_level, 0.0)

        corrected = float(true_rate(raw, tau))
        background = float(measured_rate(dark_rate, tau)) * t
        floor = float(measured_rate(d_low / t_dark, tau)) * t
        dark_level, dark_floor = float(dark_rate), float(d_low / t_dark)
        method = "Garwood on counts"
        dark_used = float(dark_rate)
    rates = signal(np.array([low_high[0], k, low_high[1]], float), dark_level)
    credibility = None
    below = bool(rates[1] == 0.0 and background > 0)
    if below:
        from scipy.stats import poisson

        credibility = 1 - (1 - level) / 2
        # a smaller dark gives a higher limit: take the dark's lower bound (conservative)
        limit = float(poisson_upper_limit(k, floor, credibility))
        rates = np.array([0.0, 0.0, float(signal(np.array([floor + limit]), dark_floor)[0])])
        method = (
            f"upper limit: counts at or below the dark level ({background:.4g} dark "
            "counts expected in the gate); Bayesian flat-prior limit over the dark "
            f"(Helene 1983) at {credibility:.2%}, with the dark at its lower bound"
        )
        notes.append(
            f"the counts are at or below the dark level: the signal is below "
            f"{rates[2]:.4g} counts/s ({credibility:.2%} upper limit), no interval"
        )
        chance = float(poisson.cdf(k, background))
        if chance < 0.01:
            notes.append(
                f"{k} counts are improbably few for {background:.4g} expected dark "
                f"counts (probability {chance:.2g}): the dark measurement may not "
                "apply (another gate, detector or temperature?)"
            )
    if pulsed:
        cond = photon_conditioning(rates[1] / (efficiency * rep), efficiency, dark_probability)
        mean_mu, given_click = float(rates[1] / (efficiency * rep)), float(cond.mean_given_click)
    else:
        mean_mu = given_click = None
    warnings = [_exposure_warning("post-selected port", corrected, safe_rate)]
    leak = leak_low = leak_high = None
    ref_text = ref_raw = ref_corrected = None
    if reference is not None:
        k_ref = _whole(reference, "--reference")
        t_ref = _positive(
            reference_dwell_s if reference_dwell_s is not None else t, "--reference-dwell"
        )
        ref_raw = k_ref / t_ref
        ref_corrected = float(true_rate(ref_raw, tau))
        if ref_corrected <= 0:
            raise InputError("--reference is 0 counts: a reference needs light on it")
        warnings.append(_exposure_warning("reference", ref_corrected, safe_rate))
        # the reference detector's own dark counts (point estimate), taken off its rate
        if reference_dark_rate >= ref_corrected:
            raise InputError(
                f"the reference rate {ref_corrected:.4g} counts/s is not above its "
                f"dark rate {reference_dark_rate:.4g} counts/s: no light on it"
            )
        ref_light = ref_corrected / (ref_corrected - reference_dark_rate)
        if below:
            # the signal's limit over the reference's lower bound (same tail): conservative
            ref_low = float(true_rate(garwood(k_ref, level)[0] / t_ref, tau))
            ref_low -= reference_dark_rate
            ratio = np.array([0.0, 0.0, rates[2] / ref_low if ref_low > 0 else math.inf])
            ratio = ratio / relative_efficiency
            method += "; leak limit over the reference's lower Garwood bound"
        else:
            r_low, r_high = (float(x) for x in poisson_ratio_interval(k, k_ref, level))
            measured = np.array([r_low, k / max(k_ref, 1e-300), r_high]) * t_ref / t
            factor = (corrected / raw if k else 1.0) / (ref_corrected / ref_raw)
            ratio = (
                np.maximum(measured * factor - dark_used / ref_corrected, 0.0)
                * ref_light
                / relative_efficiency
            )
            method += "; leak by Clopper-Pearson on the count ratio"
        leak_b = ratio / (1 + ratio) if reference_kind == "port" else ratio
        leak_low, leak, leak_high = (float(x) for x in leak_b)
        ref_text = f"{reference_kind} reference: {k_ref} counts in {t_ref:g} s"
        if pulsed:
            notes.append(
                "pulsed mode: the leak ratio treats the reference counts as clicks "
                "of a linear detector; use --reference-rate for a bright reference"
            )
    elif reference_rate is not None:
        r = _positive(reference_rate, "--reference-rate")
        leak_low, leak, leak_high = (float(x) for x in rates / r)
        if reference_measured:
            warnings.append(_exposure_warning("reference", r, safe_rate))
            ref_text = f"reference rate {r:g} counts/s (measured)"
        else:
            ref_text = (
                f"reference rate {r:g} counts/s (the bench's photon rate times the "
                "detector efficiency: the leak per source photon)"
            )
    low, mid, high = (float(x) for x in rates)
    verdict = None
    if predicted_rate is not None:
        error = (mid - low) if predicted_rate < mid else (high - mid)
        verdict = compare(mid, error, float(predicted_rate))
    return LeakMeasurement(
        k,
        t,
        level,
        method,
        mid,
        low,
        high,
        dark_used,
        leak,
        leak_low,
        leak_high,
        ref_text,
        mean_mu,
        given_click,
        predicted_rate,
        verdict,
        tuple(notes),
        raw,
        tau,
        corrected,
        ref_raw,
        ref_corrected,
        below,
        credibility,
        tuple(w for w in warnings if w),
    )
