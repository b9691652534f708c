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
)
from ..physics.detection import click_probability_from_rate, mean_photons_from_clicks, true_rate

__all__ = ["LeakMeasurement", "Verdict", "compare", "measure_leak"]

#: |residual| (standard deviations) up to which a measurement is called consistent.
CONSISTENT_SIGMA = 2.0

_WORDS = {
    "rate": ("high: the null has drifted or the analyzer leaks",
             "low: less light than predicted; check the photon rate, the detector efficiency "
             "and the beam path in the bench file"),
    "floor": ("high: the leak floor is above the bench's prediction; the analyzer or source "
              "extinction is worse than the file says, or a plate's retardance is off",
              "low: the floor is below the bench's prediction; the file understates the "
              "extinction"),
}


@dataclass(frozen=True)
class Verdict:
    """Measured against predicted: ``residual_sigma`` = (measured - predicted) / error,
    ``status`` ``consistent``/``high``/``low``/``unknown``, and ``text`` in plain words."""

    residual_sigma: float
    status: str
    text: str


def compare(measured: float, error: float, predicted: float, kind: str = "rate") -> Verdict:
    """Verdict on a measurement with 1-sigma ``error`` against ``predicted`` (same units);
    ``kind`` picks the wording (``rate`` or ``floor``)."""
    if not (math.isfinite(error) and error > 0 and math.isfinite(predicted)):
        return Verdict(math.nan, "unknown", "no verdict: the error or the prediction is unknown")
    residual = (measured - predicted) / error
    if abs(residual) <= CONSISTENT_SIGMA:
        return Verdict(residual, "consistent", f"consistent ({residual:+.1f} sigma)")
    high, low = _WORDS[kind]
    return (Verdict(residual, "high", f"{high} ({residual:+.1f} sigma)") if residual > 0
            else Verdict(residual, "low", f"{low} ({residual:+.1f} sigma)"))


@dataclass(frozen=True)
class LeakMeasurement:
    """A measured leak.

    ``signal_rate`` (counts/s): post-selected rate corrected for dead time and dark counts, as a
    linear detector of the same efficiency would count it (pulsed: ``eta mu R``); ``low`` and
    ``high`` its exact interval at ``level``. ``leak`` (fraction of the reference; None without
    one) with ``leak_low``, ``leak_high``. ``mean_photons_per_pulse`` and
    ``mean_photons_given_click`` only in pulsed mode. ``predicted_rate`` and ``verdict`` only
    with a prediction; the verdict uses half the interval width as the error on the side
    of the prediction.
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

    def to_json(self) -> dict[str, Any]:
        """The JSON document of ``aligner leak --json``."""
        doc: dict[str, Any] = {
            "counts": self.counts, "dwell_s": self.dwell_s, "level": self.level,
            "method": self.method, "signal_rate": self.signal_rate,
            "signal_rate_low": self.signal_rate_low, "signal_rate_high": self.signal_rate_high,
            "dark_rate": self.dark_rate, "leak": self.leak, "leak_low": self.leak_low,
            "leak_high": self.leak_high, "reference": self.reference,
            "mean_photons_per_pulse": self.mean_photons_per_pulse,
            "mean_photons_given_click": self.mean_photons_given_click,
            "predicted_rate": self.predicted_rate, "notes": list(self.notes),
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


def measure_leak(
    counts: float,
    dwell_s: float,
    *,
    reference: float | None = None,
    reference_dwell_s: float | None = None,
    reference_kind: str = "bright",
    reference_rate: float | None = None,
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
) -> LeakMeasurement:
    """Leak from counts (see the module docstring). Rates in counts/s, times in s; in pulsed
    mode (``rep_rate_hz`` given) ``dark``/``dark_probability`` are per gate."""
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
    pulsed = rep_rate_hz is not None
    if pulsed:
        rep = _positive(rep_rate_hz, "--rep-rate")
        if dark is not None:
            dark_probability = _whole(dark, "--dark") / (rep * t_dark)
        n_low, n_high = (float(x) for x in clopper_pearson(k, rep * t, level))
        bounds = np.array([n_low, k / (rep * t), n_high]) * rep  # click rates (counts/s)
        p_click = click_probability_from_rate(bounds, rep, tau)
        mu = mean_photons_from_clicks(np.minimum(p_click, 1.0), efficiency, dark_probability)
        rates = mu * efficiency * rep
        method = "Clopper-Pearson on clicks per pulse"
        dark_used = dark_probability * rep
        cond = photon_conditioning(mu[1], efficiency, dark_probability)
        mean_mu, given_click = float(mu[1]), float(cond.mean_given_click)
    else:
        if dark is not None:
            dark_rate = _whole(dark, "--dark") / t_dark
            d_low, d_high = garwood(dark, level)
            notes.append(f"dark measured: {dark_rate:.4g} counts/s, its own interval "
                         f"{d_low / t_dark:.4g} to {d_high / t_dark:.4g} counts/s is not "
                         "folded into the leak interval")
        g_low, g_high = (float(x) for x in garwood(k, level))
        bounds = np.array([g_low, k, g_high]) / t
        rates = np.maximum(true_rate(bounds, tau) - dark_rate, 0.0)
        method = "Garwood on counts"
        dark_used = float(dark_rate)
        mean_mu = given_click = None
    if rates[1] == 0.0 and k > 0:
        notes.append("the counts are at or below the dark level")
    leak = leak_low = leak_high = None
    ref_text = None
    if reference is not None:
        k_ref = _whole(reference, "--reference")
        t_ref = _positive(reference_dwell_s if reference_dwell_s is not None else t,
                          "--reference-dwell")
        r_low, r_high = (float(x) for x in poisson_ratio_interval(k, k_ref, level))
        measured = np.array([r_low, k / max(k_ref, 1e-300), r_high]) * t_ref / t
        ref_rate = true_rate(k_ref / t_ref, tau) if k_ref else 0.0
        if ref_rate <= 0:
            raise InputError("--reference is 0 counts: a reference needs light on it")
        sig_measured = k / t
        factor = (float(true_rate(sig_measured, tau)) / sig_measured if k else 1.0) / (
            float(ref_rate) / (k_ref / t_ref))
        ratio = np.maximum(measured * factor - dark_used / ref_rate, 0.0) / relative_efficiency
        leak_b = ratio / (1 + ratio) if reference_kind == "port" else ratio
        leak_low, leak, leak_high = (float(x) for x in leak_b)
        method += "; leak by Clopper-Pearson on the count ratio"
        ref_text = f"{reference_kind} reference: {k_ref} counts in {t_ref:g} s"
        if pulsed:
            notes.append("pulsed mode: the leak ratio treats the reference counts as clicks "
                         "of a linear detector; use --reference-rate for a bright reference")
    elif reference_rate is not None:
        r = _positive(reference_rate, "--reference-rate")
        leak_low, leak, leak_high = (float(x) for x in rates / r)
        ref_text = f"reference rate {r:g} counts/s"
    low, mid, high = (float(x) for x in rates)
    verdict = None
    if predicted_rate is not None:
        error = (mid - low) if predicted_rate < mid else (high - mid)
        verdict = compare(mid, error, float(predicted_rate))
    return LeakMeasurement(k, t, level, method, mid, low, high, dark_used, leak, leak_low,
                           leak_high, ref_text, mean_mu, given_click, predicted_rate, verdict,
                           tuple(notes))
