"""Post-selected counts -> leak rate with its interval, and verdicts against the prediction.

The signal (one function per detector mode):

* continuous wave: ``k`` counts in ``T`` s; the Garwood interval on the Poisson mean is mapped,
  bound by bound, through the dead-time correction and the dark subtraction (both monotone),
  so the interval stays exact for a known dark rate;
* pulsed: ``k`` clicks in ``R T`` pulses; the Clopper-Pearson interval on the click
  probability is mapped through the dead-time correction and the click-probability inversion
  (clicks are not photons).

Counts at or below the dark level: the interval would collapse to "0 to 0", so the signal gets
an upper limit instead (``upper_limit`` True, ``signal_rate_high`` the limit): the Bayesian
limit with a flat prior on the signal over the known dark (Helene 1983,
:func:`aligner.physics.counting.poisson_upper_limit`) at the credibility of the upper tail of
the two-sided interval (``1 - (1 - level)/2``, 84.15 % for the default 68.3 %). A measured
dark (:class:`DarkCounts`) is used at its point estimate; its own error is stated in ``notes``.

The reference (the denominator of the leak):

* :class:`CountedReference`, counts of a second detector (continuous wave only): the ratio of
  the two light rates over both detectors' known dark rates, each channel with its own live
  time (dead time), by profile likelihood (:func:`aligner.physics.rateratio.rate_ratio`: the
  reference's own Poisson noise is in the interval), then each channel's photons through its
  own efficiency. ``bright``, the analyzer turned to transmission: leak = S / B. ``port``, the
  analyzer's other port: leak = S / (S + R), the share of the light reaching the analyzer.
  ``monitor``, a pick-off with ``efficiency`` = counts per source photon: leak = S / (R / f)
  per source photon.
* :class:`RateReference`: a known full-transmission count rate (counts/s, same detector) or
  the bench's photon rate times the detector efficiency (the leak per source photon).

Rates a detector saw above its ``safe_rate`` give a safety warning. Bad arguments raise
:class:`aligner.errors.ParameterError` naming the parameter (a command names its option).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np

from ..bench import Detector, Reference
from ..errors import ParameterError
from ..physics.counting import (
    DEFAULT_LEVEL,
    clopper_pearson,
    garwood,
    photon_conditioning,
    poisson_upper_limit,
)
from ..physics.detection import (
    click_probability_from_rate,
    mean_photons_from_clicks,
    measured_rate,
    pulsed_measured_rate,
    true_rate,
)

__all__ = [
    "REFERENCE_KINDS",
    "Channel",
    "CountedReference",
    "DarkCounts",
    "Gating",
    "HeraldedLeakResult",
    "LeakMeasurement",
    "RateReference",
    "Verdict",
    "compare",
    "format_sigma",
    "measure_leak",
]

#: |residual| (standard deviations) up to which a measurement is called consistent.
CONSISTENT_SIGMA = 2.0
#: What a counted reference can be (see the module docstring).
REFERENCE_KINDS = ("bright", "port", "monitor")

_WORDS = {
    "rate": (
        "high: the null has drifted or the analyzer leaks",
        "low: less light than predicted; check the photon rate, the detector efficiency "
        "and the beam path in the bench file",
    ),
    "leak": (
        "high: the null has drifted or the analyzer leaks",
        "low: less leak than predicted; the imbalance is smaller than the bench file says, "
        "or a detector efficiency or the monitor fraction in it is off",
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

    def to_json(self) -> dict[str, Any]:
        """``residual_sigma``, ``status`` and ``text``."""
        return {"residual_sigma": self.residual_sigma, "status": self.status, "text": self.text}


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
    ``kind`` picks the wording (``rate``, ``leak`` or ``floor``)."""
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


def _interval_verdict(low: float, mid: float, high: float, predicted: float, kind: str) -> Verdict:
    """Verdict with half the interval on the side of the prediction as the error."""
    return compare(mid, (mid - low) if predicted < mid else (high - mid), predicted, kind)


@dataclass(frozen=True)
class Channel:
    """One detector channel: ``efficiency`` (a detector's in (0, 1]; a monitor's is its counts
    per source photon; a counted reference uses only the ratio of the two channels'),
    ``dark_rate`` (counts/s), non-paralyzable ``dead_time_s`` (s) and ``safe_rate`` (counts/s;
    a rate above it gives a safety warning)."""

    efficiency: float = 1.0
    dark_rate: float = 0.0
    dead_time_s: float = 0.0
    safe_rate: float = math.inf

    @classmethod
    def of_detector(cls, detector: Detector) -> Channel:
        """The bench's post-selected detector."""
        return cls(
            detector.efficiency, detector.dark_rate, detector.dead_time_s, detector.safe_rate
        )

    @classmethod
    def of_reference(cls, reference: Reference) -> Channel:
        """The bench's reference detector (``[reference]``): a monitor's ``fraction`` is its
        efficiency per source photon, a port's detector has its own ``efficiency``."""
        efficiency = reference.fraction if reference.kind == "monitor" else reference.efficiency
        if efficiency is None:
            raise ParameterError("reference", "the bench has no reference channel")
        return cls(efficiency, reference.dark_rate, reference.dead_time_s)


@dataclass(frozen=True)
class Gating:
    """Pulsed counting: ``rep_rate_hz`` pulses per second, ``dark_probability`` per gate."""

    rep_rate_hz: float
    dark_probability: float = 0.0

    @staticmethod
    def of_detector(detector: Detector) -> Gating | None:
        """The bench detector's gating in pulsed mode; None when it counts continuously."""
        rate = detector.pulse_rate_hz
        return None if rate is None else Gating(rate, detector.gate_dark_probability)


@dataclass(frozen=True)
class DarkCounts:
    """Dark counts measured with the shutter closed over ``dwell_s`` s (None: the signal's
    gate)."""

    counts: float
    dwell_s: float | None = None


@dataclass(frozen=True)
class CountedReference:
    """Counts of a reference detector (see the module docstring): ``kind`` from
    :data:`REFERENCE_KINDS`, ``counts`` over ``dwell_s`` s (None: the signal's gate) on
    ``channel`` (None: the post-selected detector itself, as for a bright reference)."""

    kind: str
    counts: float
    dwell_s: float | None = None
    channel: Channel | None = None


@dataclass(frozen=True)
class RateReference:
    """A full-transmission count rate (counts/s); ``measured`` False marks it as computed
    (the bench's photon rate times the efficiency), so no safety warning applies to it."""

    rate: float
    measured: bool = True


@dataclass(frozen=True)
class LeakMeasurement:
    """A measured leak.

    ``raw_rate`` (counts/s) is counts over dwell as counted; ``dead_time_corrected_rate`` the
    same after the dead-time correction (``dead_time_s``), before the dark; ``signal_rate``
    (counts/s) the post-selected rate corrected for dead time and dark counts, as a linear
    detector of the same efficiency would count it (pulsed: ``eta mu R``); ``low`` and
    ``high`` its interval at ``level`` -- or, when ``upper_limit``, 0 and the upper limit at
    ``upper_limit_credibility``. ``leak`` (None without a reference, or with ``flag`` saying
    why there is none) with ``leak_low``, ``leak_high``; ``reference_raw_rate`` and
    ``reference_corrected_rate`` (counts/s, the reference's own dead time) for a counted
    reference. ``mean_photons_per_pulse`` and ``mean_photons_given_click`` only in pulsed
    mode. ``rate_verdict`` compares the signal rate with ``predicted_rate``, ``leak_verdict``
    the leak with ``predicted_leak`` (same units as ``leak``); each uses half the interval on
    the side of the prediction as the error. ``warnings`` are safety warnings and data that
    cannot be right (a leak above 1).
    """

    counts: int
    dwell_s: float
    level: float
    method: str
    signal_rate: float
    signal_rate_low: float
    signal_rate_high: float
    dark_rate: float
    raw_rate: float
    dead_time_s: float
    dead_time_corrected_rate: float
    leak: float | None = None
    leak_low: float | None = None
    leak_high: float | None = None
    reference: str | None = None
    reference_raw_rate: float | None = None
    reference_corrected_rate: float | None = None
    flag: str = ""
    mean_photons_per_pulse: float | None = None
    mean_photons_given_click: float | None = None
    predicted_rate: float | None = None
    predicted_leak: float | None = None
    rate_verdict: Verdict | None = None
    leak_verdict: Verdict | None = None
    upper_limit: bool = False
    upper_limit_credibility: float | None = None
    notes: tuple[str, ...] = field(default=())
    warnings: tuple[str, ...] = field(default=())

    @property
    def verdict(self) -> Verdict | None:
        """The verdict that says most: the leak's when there is one (drift cancels in it),
        else the signal rate's."""
        return self.leak_verdict or self.rate_verdict

    def to_json(self) -> dict[str, Any]:
        """The JSON document of ``aligner leak --json`` (docs/json.md): every field, the
        reference in words as ``reference_text`` (``reference`` is a count elsewhere), the
        predicted signal rate as ``predicted_signal_rate``, and the verdicts as objects (the
        leading one again as ``verdict``; null where there is none)."""
        renamed = {"reference": "reference_text", "predicted_rate": "predicted_signal_rate"}
        doc: dict[str, Any] = {
            renamed.get(name, name): getattr(self, name)
            for name in self.__dataclass_fields__
            if name not in ("rate_verdict", "leak_verdict", "notes", "warnings")
        }
        doc["notes"] = list(self.notes)
        doc["warnings"] = list(self.warnings)
        for name in ("rate_verdict", "leak_verdict", "verdict"):
            v = getattr(self, name)
            doc[name] = None if v is None else v.to_json()
        return doc


def _whole(value: float, name: str) -> int:
    if not (math.isfinite(value) and value >= 0 and value == int(value)):
        raise ParameterError(name, f"must be a whole number of counts >= 0, got {value!r}")
    return int(value)


def _positive(value: float, name: str) -> float:
    if not (math.isfinite(value) and value > 0):
        raise ParameterError(name, f"must be a number > 0, got {value!r}")
    return float(value)


def _check_channel(c: Channel, name: str) -> None:
    if not (math.isfinite(c.efficiency) and c.efficiency > 0):
        raise ParameterError(f"{name}.efficiency", f"must be > 0, got {c.efficiency!r}")
    if not (math.isfinite(c.dark_rate) and c.dark_rate >= 0):
        raise ParameterError(f"{name}.dark_rate", f"must be >= 0 counts/s, got {c.dark_rate!r}")
    if not (math.isfinite(c.dead_time_s) and c.dead_time_s >= 0):
        raise ParameterError(f"{name}.dead_time_s", f"must be >= 0 s, got {c.dead_time_s!r}")


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


@dataclass(frozen=True)
class _Signal:
    """The signal part of a measurement (see :class:`LeakMeasurement` for the fields)."""

    low: float
    mid: float
    high: float
    corrected: float
    dark_rate: float
    method: str
    upper_limit: bool = False
    credibility: float | None = None
    notes: tuple[str, ...] = ()
    mean_photons_per_pulse: float | None = None
    mean_photons_given_click: float | None = None


def _live(k: int, t: float, tau: float, name: str) -> float:
    """Live time of a non-paralyzable counter (s); none left is an impossible reading."""
    live = t - k * tau
    if live <= 0:
        raise ParameterError(
            name,
            f"leaves no live time: {k} counts in {t:g} s with a dead time of "
            f"{tau * 1e9:.4g} ns; the counter saturated, or the dead time given is too long",
        )
    return live


def _limited(
    k: int, background: float, floor: float, rates: np.ndarray, to_rate: Any, level: float
) -> tuple[np.ndarray, float, str, list[str]] | None:
    """The upper limit when the signal (``rates[1]``) is at or below the dark level:
    (rates 0, 0 and the limit, its credibility, the method, notes); None otherwise.
    ``to_rate(counts)`` maps counts in the gate over the dark's lower bound to a signal rate;
    ``background`` and ``floor`` are the dark counts expected in the gate (point estimate and
    lower bound)."""
    from scipy.stats import poisson

    if not (rates[1] == 0.0 and background > 0):
        return None
    credibility = 1 - (1 - level) / 2
    # a smaller dark gives a higher limit: take the dark's lower bound (conservative)
    limit = float(poisson_upper_limit(k, floor, credibility))
    high = float(to_rate(floor + limit))
    method = (
        f"upper limit: counts at or below the dark level ({background:.4g} dark counts "
        "expected in the gate); Bayesian flat-prior limit over the dark (Helene 1983) at "
        f"{credibility:.2%}, with the dark at its lower bound"
    )
    notes = [
        f"the counts are at or below the dark level: the signal is below {high:.4g} "
        f"counts/s ({credibility:.2%} upper limit), no interval"
    ]
    chance = float(poisson.cdf(k, background))
    if chance < 0.01:
        notes.append(
            f"{k} counts are improbably few for {background:.4g} expected dark counts "
            f"(probability {chance:.2g}): the dark measurement may not apply (another gate, "
            "detector or temperature?)"
        )
    return np.array([0.0, 0.0, high]), credibility, method, notes


def _dark_note(dark_rate: float, low: float, high: float) -> str:
    return (
        f"dark measured: {dark_rate:.4g} counts/s, its own interval {low:.4g} to "
        f"{high:.4g} counts/s is not folded into the leak interval"
    )


def _cw_signal(k: int, t: float, c: Channel, dark: DarkCounts | None, level: float) -> _Signal:
    """Continuous-wave signal rate (Garwood, mapped through dead time and dark)."""
    tau = c.dead_time_s
    _live(k, t, tau, "counts")
    dark_rate, dark_low, notes = c.dark_rate, c.dark_rate, []
    if dark is not None:
        kd = _whole(dark.counts, "dark")
        td = _positive(dark.dwell_s if dark.dwell_s is not None else t, "dark_dwell_s")
        d_low, d_high = (float(x) / td for x in garwood(kd, level))
        dark_rate, dark_low = kd / td, d_low
        notes.append(_dark_note(dark_rate, d_low, d_high))

    def signal(n: np.ndarray, dark_level: float) -> np.ndarray:
        return np.maximum(true_rate(n / t, tau) - dark_level, 0.0)

    k_low, k_high = (float(x) for x in garwood(k, level))
    rates = signal(np.array([k_low, k, k_high]), dark_rate)
    background = float(measured_rate(dark_rate, tau)) * t
    floor = float(measured_rate(dark_low, tau)) * t
    limited = _limited(
        k, background, floor, rates, lambda n: signal(np.array([n]), dark_low)[0], level
    )
    method, credibility = "Garwood on counts", None
    if limited is not None:
        rates, credibility, method, more = limited
        notes += more
    return _Signal(
        low=float(rates[0]),
        mid=float(rates[1]),
        high=float(rates[2]),
        corrected=float(true_rate(k / t, tau)),
        dark_rate=float(dark_rate),
        method=method,
        upper_limit=limited is not None,
        credibility=credibility,
        notes=tuple(notes),
    )


def _pulsed_signal(
    k: int, t: float, c: Channel, g: Gating, dark: DarkCounts | None, level: float
) -> _Signal:
    """Pulsed signal rate ``eta mu R`` (Clopper-Pearson on clicks per pulse, mapped through
    the pulsed dead time and the click-probability inversion)."""
    rep = _positive(g.rep_rate_hz, "rep_rate_hz")
    if k > rep * t:
        raise ParameterError(
            "counts",
            f"= {k} is more than the {rep * t:.6g} pulses in the gate (one click per "
            "pulse at most): check the repetition rate and the gate time",
        )
    tau = c.dead_time_s
    p_dark = p_floor = float(g.dark_probability)
    if dark is not None:
        kd = _whole(dark.counts, "dark")
        gates = rep * _positive(dark.dwell_s if dark.dwell_s is not None else t, "dark_dwell_s")
        if kd > gates:
            raise ParameterError("dark", f"= {kd} is more than the {gates:.6g} pulses of its gate")
        p_dark, p_floor = kd / gates, float(garwood(kd, level)[0]) / gates

    def signal(clicks: np.ndarray, dark_level: float) -> np.ndarray:
        p_click = click_probability_from_rate(clicks / t, rep, tau)
        mu = mean_photons_from_clicks(np.minimum(p_click, 1.0), c.efficiency, dark_level)
        return mu * c.efficiency * rep

    n_low, n_high = (float(x) * rep * t for x in clopper_pearson(k, rep * t, level))
    rates = signal(np.array([n_low, k, n_high], float), p_dark)
    background = float(pulsed_measured_rate(p_dark, rep, tau)) * t
    floor = float(pulsed_measured_rate(p_floor, rep, tau)) * t
    limited = _limited(
        k, background, floor, rates, lambda n: signal(np.array([n]), p_floor)[0], level
    )
    method, credibility = "Clopper-Pearson on clicks per pulse", None
    notes: list[str] = []
    if limited is not None:
        rates, credibility, method, notes = limited
    mu = float(rates[1] / (c.efficiency * rep))
    cond = photon_conditioning(mu, c.efficiency, p_dark)
    return _Signal(
        low=float(rates[0]),
        mid=float(rates[1]),
        high=float(rates[2]),
        corrected=float(click_probability_from_rate(k / t, rep, tau)) * rep,
        dark_rate=p_dark * rep,
        method=method,
        upper_limit=limited is not None,
        credibility=credibility,
        notes=tuple(notes),
        mean_photons_per_pulse=mu,
        mean_photons_given_click=float(cond.mean_given_click),
    )


@dataclass(frozen=True)
class _Ratio:
    """The leak from a counted reference (see :class:`LeakMeasurement`)."""

    low: float | None
    mid: float | None
    high: float | None
    text: str
    raw_rate: float
    corrected_rate: float
    method: str
    flag: str = ""


def _counted_leak(
    k: int, t: float, c: Channel, dark_rate: float, ref: CountedReference, level: float
) -> _Ratio:
    """The leak from the ratio of the two channels' light (profile likelihood; see the module
    docstring)."""
    from ..physics.rateratio import rate_ratio

    if ref.kind not in REFERENCE_KINDS:
        raise ParameterError(
            "reference.kind", f"must be one of {', '.join(REFERENCE_KINDS)}, got {ref.kind!r}"
        )
    rc = ref.channel or c
    _check_channel(rc, "reference")
    k_ref = _whole(ref.counts, "reference")
    t_ref = _positive(ref.dwell_s if ref.dwell_s is not None else t, "reference_dwell_s")
    live_ref = _live(k_ref, t_ref, rc.dead_time_s, "reference")
    r = rate_ratio(
        k, _live(k, t, c.dead_time_s, "counts"), dark_rate, k_ref, live_ref, rc.dark_rate, level
    )
    raw = k_ref / t_ref
    text = f"{ref.kind} reference: {k_ref} counts in {t_ref:g} s"
    method = "leak by profile likelihood on the two channels' light (own dead times and darks)"
    corrected = float(true_rate(raw, rc.dead_time_s))
    if not r.bounded:
        flag = "reference at or below its dark level: no leak rate"
        return _Ratio(None, None, None, text, raw, corrected, method, flag)
    # photons per photon: each channel's light over its own efficiency
    x = np.array([r.low, r.estimate, r.high]) * rc.efficiency / c.efficiency
    leak = x / (1 + x) if ref.kind == "port" else x
    low, mid, high = (float(v) for v in leak)
    return _Ratio(low, mid, high, text, raw, corrected, method)


def measure_leak(
    counts: float,
    dwell_s: float,
    *,
    detector: Channel | None = None,
    gating: Gating | None = None,
    dark: DarkCounts | None = None,
    reference: CountedReference | RateReference | None = None,
    level: float = DEFAULT_LEVEL,
    predicted_rate: float | None = None,
    predicted_leak: float | None = None,
) -> LeakMeasurement:
    """Leak from ``counts`` of the post-selected ``detector`` in ``dwell_s`` s (see the
    module docstring); ``gating`` for pulsed counting. ``predicted_rate`` (signal counts/s)
    and ``predicted_leak`` (in the units of the leak this reference gives) add verdicts."""
    c = detector or Channel()
    _check_channel(c, "detector")
    k = _whole(counts, "counts")
    t = _positive(dwell_s, "dwell_s")
    if not 0 < level < 1:
        raise ParameterError("level", f"must be between 0 and 1 (e.g. 0.683), got {level!r}")
    if gating is not None and isinstance(reference, CountedReference):
        raise ParameterError(
            "reference",
            "counts cannot normalise pulsed clicks (clicks are not photons); give the "
            "reference as a rate",
        )
    s = (
        _cw_signal(k, t, c, dark, level)
        if gating is None
        else _pulsed_signal(k, t, c, gating, dark, level)
    )
    warnings = [_exposure_warning("post-selected port", s.corrected, c.safe_rate)]
    fields: dict[str, Any] = {}
    if isinstance(reference, CountedReference):
        ratio = _counted_leak(k, t, c, s.dark_rate, reference, level)
        rc = reference.channel or c
        warnings.append(_exposure_warning("reference", ratio.corrected_rate, rc.safe_rate))
        fields = {
            "leak_low": ratio.low,
            "leak": ratio.mid,
            "leak_high": ratio.high,
            "reference": ratio.text,
            "reference_raw_rate": ratio.raw_rate,
            "reference_corrected_rate": ratio.corrected_rate,
            "flag": ratio.flag,
        }
        method = f"{s.method}; {ratio.method}"
    elif isinstance(reference, RateReference):
        r = _positive(reference.rate, "reference_rate")
        fields = {"leak_low": s.low / r, "leak": s.mid / r, "leak_high": s.high / r}
        if reference.measured:
            warnings.append(_exposure_warning("reference", r, c.safe_rate))
            fields["reference"] = f"reference rate {r:g} counts/s (measured)"
        else:
            fields["reference"] = (
                f"reference rate {r:g} counts/s (the bench's photon rate times the "
                "detector efficiency: the leak per source photon)"
            )
        method = s.method
    else:
        method = s.method
    leak = fields.get("leak")
    if leak is not None and fields["leak_low"] > 1.0:
        warnings.append(
            f"the leak rate is {leak:.4g}, above 1 beyond its interval: more light in the "
            "post-selected port than the reference says there is; are the counts and the "
            "reference swapped, or is the reference kind wrong?"
        )
    return LeakMeasurement(
        counts=k,
        dwell_s=t,
        level=level,
        method=method,
        signal_rate=s.mid,
        signal_rate_low=s.low,
        signal_rate_high=s.high,
        dark_rate=s.dark_rate,
        raw_rate=k / t,
        dead_time_s=c.dead_time_s,
        dead_time_corrected_rate=s.corrected,
        mean_photons_per_pulse=s.mean_photons_per_pulse,
        mean_photons_given_click=s.mean_photons_given_click,
        predicted_rate=predicted_rate,
        predicted_leak=predicted_leak,
        rate_verdict=None
        if predicted_rate is None
        else _interval_verdict(s.low, s.mid, s.high, float(predicted_rate), "rate"),
        leak_verdict=None
        if predicted_leak is None or leak is None
        else _interval_verdict(
            fields["leak_low"], leak, fields["leak_high"], float(predicted_leak), "leak"
        ),
        upper_limit=s.upper_limit,
        upper_limit_credibility=s.credibility,
        notes=s.notes,
        warnings=tuple(w for w in warnings if w),
        **fields,
    )


@dataclass(frozen=True)
class HeraldedLeakResult:
    """The leak per heralded photon from coincidences among heralds: ``leak`` with its
    interval ``leak_low``..``leak_high`` at ``level``, the accidental coincidence probability
    per herald removed, ``|A_w|`` from it, the prediction and the bench file used (None
    without a bench)."""

    coincidences: int
    heralds: int
    accidental_probability: float
    leak: float
    leak_low: float
    leak_high: float
    level: float
    predicted_leak: float | None
    bench_path: str | None

    @property
    def weak_value_abs(self) -> float:
        """``|A_w|`` from the leak (pure states, ``A^2 = 1``)."""
        from ..physics.heralded import weak_value_from_leak

        return float(weak_value_from_leak(self.leak))

    def to_json(self) -> dict[str, Any]:
        """The JSON document of ``aligner leak --coincidences ... --json`` (docs/json.md)."""
        return {**asdict(self), "weak_value_abs": self.weak_value_abs}
