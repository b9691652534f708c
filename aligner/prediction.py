"""Predictions for a bench: weak value, leak rate, amplification, detector rates, signal to noise,
and where the amplification stops growing.

Conventions (shown wherever these numbers appear):

* ``leak_rate``: exact post-selection probability per source photon (pointer overlap, analyzer
  transmission and extinction included; detector efficiency excluded).
* Amplification axis: a position or phase readout measures ``Re A_w`` (axis ``"re"``), a
  momentum readout ``Im A_w`` (axis ``"im"``) (Jozsa, Phys. Rev. A 76, 044103 (2007)).
  "linear" amplification is ``Re A_w`` or ``Im A_w``; "exact" is the all-orders pointer
  response, ``<q>/g`` for ``"re"`` and ``<p>/(g/(2 sigma^2))`` for ``"im"``. The phase readout
  is a coherent probe of N photons: its pointer variable is the probe phase (rad), its width
  ``1/(2 sqrt N)``.
* ``pointer_shift``: ``<q>`` in the bench's units (``<p>`` in 1/units for a momentum readout).
* Signal to noise of the coupling estimate per sqrt(second): ``g d<r>/dg f / sqrt(s^2/m + j^2)``
  with ``<r>`` the mean readout shift, ``s`` the per-photon pointer spread, ``m`` the counted
  rate, ``f`` the share of counts that are signal (dark counts carry no shift) and ``j`` the
  technical pointer jitter (``coupling.jitter_rms``; in 1/units for a momentum readout). The
  post-selected pointer spread is taken as the prepared one (exact in the weak regime).
* The standard measurement it is compared with: no analyzer, the same photons, pointer and
  detector, the input in the eigenstate of ``A`` with the larger ``|eigenvalue|``, read in
  position (so it reaches ``|a| g`` per photon).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, replace
from types import MappingProxyType
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .bench import INF, Bench
from .errors import InputError
from .model import (
    Forward,
    coupling_observable,
    forward,
    full_readings,
    ideal_optics,
    imbalance_deg,
    pure_overlap,
)
from .physics.detection import SATURATION_LOSS, DetectorRates
from .physics.weak import pointer_response, weak_value

__all__ = [
    "MECHANISMS",
    "READOUT_AXIS",
    "SETTING",
    "Limits",
    "MechanismLimit",
    "Prediction",
    "SnrChoice",
    "amplification",
    "best_snr_imbalance",
    "block_of",
    "detector_flags",
    "detector_rates",
    "find_null",
    "format_weak_value",
    "limits",
    "predict",
    "prediction_block",
    "readout_axis",
    "readout_units",
    "snr_per_sqrt_s",
    "standard_snr_per_sqrt_s",
]

Real = NDArray[np.float64]
Readings = Mapping[str, ArrayLike]

#: Which part of the weak value each readout measures (Jozsa 2007).
READOUT_AXIS = {"position": "re", "phase": "re", "momentum": "im"}

#: Mechanisms that cap the amplification, as named in ``Limits.limited_by``.
MECHANISMS = ("pointer", "extinction", "resolution", "dark counts")

#: Extra ``limited_by`` key when the imbalance mount cannot reach a null with the other mounts
#: where they are (e.g. an elliptical pre-selection against a linear analyzer).
SETTING = "setting"

# Imbalance-mount offsets from the null scanned by the limits and SNR searches (reading deg).
# Below ~1e-5 deg the plain post-selection probability of near-pure states (~1e-14) is lost in
# double-precision rounding of Tr(E rho), so no offset is evaluated closer to the null.
_FLOOR_DEG = 1e-5
_OFFSETS = np.logspace(np.log10(_FLOOR_DEG), np.log10(45.0), 240)
_COARSE_STEP_DEG = 0.5  # grid on which the null is first bracketed
_DERIVATIVE_STEP = 1e-4  # relative step in g for the readout sensitivity d<r>/dg


# --------------------------------------------------------------------------------------------
# Amplification and the readout


def readout_axis(bench: Bench) -> str:
    """``"re"`` for a position or phase readout, ``"im"`` for a momentum readout."""
    return READOUT_AXIS[bench.coupling.readout]


def _check_axis(axis: str) -> None:
    if axis not in ("re", "im"):
        raise InputError(f"amplification axis {axis!r}: allowed are 're' and 'im'")


def _equivalent_shift(bench: Bench, fwd: Forward, axis: str, g: float) -> tuple[Real, Real]:
    """Exact post-selection probability and the mean readout shift in position-equivalent units
    (``<q>`` for ``"re"``, ``2 sigma^2 <p>`` for ``"im"``) at coupling strength ``g``."""
    sigma = bench.coupling.pointer_sigma
    resp = pointer_response(fwd.rho, fwd.effect, coupling_observable(bench), g, sigma)
    shift = resp.position if axis == "re" else resp.momentum * 2 * sigma**2
    return resp.probability, shift


def amplification(bench: Bench, fwd: Forward, axis: str | None = None, exact: bool = True) -> Real:
    """Amplification of a Forward (``model.forward``) along ``axis`` (default: the readout's).

    ``exact=False``: ``Re A_w`` or ``Im A_w``. ``exact=True``: ``<q>/g`` or
    ``<p>/(g/(2 sigma^2))`` from the all-orders Gaussian-pointer response.
    """
    axis = axis or readout_axis(bench)
    _check_axis(axis)
    if not exact:
        wv = weak_value(fwd.rho, fwd.effect, coupling_observable(bench))
        return np.real(wv) if axis == "re" else np.imag(wv)
    g = bench.coupling.strength
    return _equivalent_shift(bench, fwd, axis, g)[1] / g


# --------------------------------------------------------------------------------------------
# Detector and signal to noise


def detector_rates(bench: Bench, leak_rate: ArrayLike) -> DetectorRates:
    """Expected detector rates for a post-selection probability per source photon ``leak_rate``."""
    return bench.detector.expected_rates(bench.source.photon_rate, leak_rate)


def detector_flags(
    bench: Bench, rates: DetectorRates
) -> tuple[NDArray[np.bool_], NDArray[np.bool_]]:
    """``(saturated, over_safe_rate)``.

    Saturated: the true rate exceeds ``detector.saturation_rate`` (when given) or more than
    :data:`SATURATION_LOSS` of the linear response is lost to dead time or multi-photon pulses.
    Over the safe rate: the exposure rate (the linear response ``photon_rate leak eta + dark``,
    in pulsed mode ``R (eta mu + p_d)``: photons detected per second before any saturation)
    exceeds ``detector.safe_rate``. In pulsed mode the click rate cannot exceed the repetition
    rate however bright the pulses are, so it must not be what the guard compares.
    """
    d = bench.detector
    saturated = rates.loss > SATURATION_LOSS
    if d.saturation_rate is not None:
        saturated = saturated | (rates.true_rate > d.saturation_rate)
    return np.asarray(saturated), np.asarray(rates.linear_rate > d.safe_rate)


def _jitter_equivalent(bench: Bench) -> float:
    c = bench.coupling
    scale = 2 * c.pointer_sigma**2 if c.readout == "momentum" else 1.0
    return c.jitter_rms * scale


def _snr(signal: ArrayLike, rates: DetectorRates, bench: Bench) -> Real:
    """``signal f / sqrt(sigma^2/m + j^2)`` with ``signal = g d<r>/dg`` (position-equivalent)."""
    sigma = bench.coupling.pointer_sigma
    m = np.asarray(rates.measured_rate, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        noise = np.sqrt(sigma**2 / m + _jitter_equivalent(bench) ** 2)
        out = np.abs(signal) * rates.signal_fraction / noise
    return np.where(m > 0, out, 0.0)


def snr_per_sqrt_s(
    bench: Bench, fwd: Forward, rates: DetectorRates | None = None, axis: str | None = None
) -> Real:
    """Signal to noise of the coupling estimate after one second of counting (see module doc)."""
    axis = axis or readout_axis(bench)
    _check_axis(axis)
    g = bench.coupling.strength
    h = _DERIVATIVE_STEP
    probability, _ = _equivalent_shift(bench, fwd, axis, g)
    up = _equivalent_shift(bench, fwd, axis, g * (1 + h))[1]
    down = _equivalent_shift(bench, fwd, axis, g * (1 - h))[1]
    signal = (up - down) / (2 * h)  # = g d<r>/dg
    return _snr(signal, rates or detector_rates(bench, probability), bench)


def _open_bench(bench: Bench) -> Bench:
    """The bench with its analyzer removed (an analyzer with extinction ratio 1 passes all)."""
    return replace(bench, analyzer=replace(bench.analyzer, extinction_ratio=1.0, transmission=1.0))


def standard_snr_per_sqrt_s(
    bench: Bench, readings: Readings | None = None, within_limits: bool = False
) -> float:
    """SNR per sqrt(s) of the standard measurement (no post-selection; see module doc).

    ``within_limits``: the beam is attenuated as far as needed to keep the detector below its
    safe rate and out of saturation (without it the detector may be overexposed).
    """
    fraction = float(np.ravel(forward(_open_bench(bench), readings).probability)[0])
    attenuation = np.logspace(-8, 0, 321) if within_limits else np.array([1.0])
    rates = detector_rates(bench, fraction * attenuation)
    a_max = float(np.max(np.abs(np.linalg.eigvalsh(coupling_observable(bench)))))
    snr = _snr(bench.coupling.strength * a_max, rates, bench)
    if within_limits:
        saturated, over = detector_flags(bench, rates)
        snr = np.where(saturated | over, 0.0, snr)
    return float(np.max(snr))


# --------------------------------------------------------------------------------------------
# Predictions


@dataclass(frozen=True)
class Prediction:
    """What the bench does at some readings (arrays of the readings' broadcast shape).

    ``weak_value`` (complex), ``leak_rate`` (per source photon), ``amplification_linear`` and
    ``amplification_exact`` (along ``axis``), ``pointer_shift`` (``units``), ``detector_rate``
    (true count rate incl. dark, counts/s), ``measured_rate`` (after dead time), ``saturated``,
    ``over_safe_rate``, ``exposure_rate`` (photons detected per second before saturation, what
    ``safe_rate`` limits), ``imbalance_deg``, ``snr_per_sqrt_s``, ``signal_fraction`` (share of the
    counts holding a signal photon; dark counts dilute the pointer shift by it); ``angles_deg``
    maps each mount to its element angle (deg).
    """

    weak_value: NDArray[np.complex128]
    leak_rate: Real
    amplification_linear: Real
    amplification_exact: Real
    pointer_shift: Real
    detector_rate: Real
    measured_rate: Real
    saturated: NDArray[np.bool_]
    over_safe_rate: NDArray[np.bool_]
    exposure_rate: Real
    imbalance_deg: Real
    snr_per_sqrt_s: Real
    signal_fraction: Real
    angles_deg: Mapping[str, Real]
    axis: str
    units: str


def format_weak_value(value: complex, digits: int = 6) -> str:
    """``A_w`` for people: parts below 1e-9 of ``|A_w|`` are rounding noise and show as 0."""
    z = complex(value)
    tiny = 1e-9 * abs(z)
    re, im = (0.0 if abs(x) <= tiny else x for x in (z.real, z.imag))
    sign = "-" if im < 0 else "+"
    return f"{re:.{digits}g} {sign} {abs(im):.{digits}g}i"


def readout_units(bench: Bench) -> str:
    """Units of ``pointer_shift``: the bench's (1/units for a momentum readout)."""
    c = bench.coupling
    return f"1/{c.units}" if c.readout == "momentum" else c.units


def predict(bench: Bench, readings: Readings | None = None) -> Prediction:
    """Predict the bench at mount ``readings`` (deg; floats or arrays broadcast together; the
    bench file's readings for mounts not given)."""
    r = full_readings(bench, readings)
    fwd = forward(bench, r)
    axis = readout_axis(bench)
    c = bench.coupling
    wv = weak_value(fwd.rho, fwd.effect, coupling_observable(bench))
    probability, shift = _equivalent_shift(bench, fwd, axis, c.strength)
    rates = detector_rates(bench, probability)
    saturated, over = detector_flags(bench, rates)
    shape = probability.shape
    scale = 1.0 if axis == "re" else 1.0 / (2 * c.pointer_sigma**2)
    return Prediction(
        weak_value=wv,
        leak_rate=probability,
        amplification_linear=np.real(wv) if axis == "re" else np.imag(wv),
        amplification_exact=shift / c.strength,
        pointer_shift=shift * scale,
        detector_rate=np.broadcast_to(rates.true_rate, shape),
        measured_rate=np.broadcast_to(rates.measured_rate, shape),
        saturated=np.broadcast_to(saturated, shape),
        over_safe_rate=np.broadcast_to(over, shape),
        exposure_rate=np.broadcast_to(rates.linear_rate, shape),
        imbalance_deg=np.broadcast_to(imbalance_deg(bench, r), shape),
        snr_per_sqrt_s=snr_per_sqrt_s(bench, fwd, rates, axis),
        signal_fraction=np.broadcast_to(rates.signal_fraction, shape),
        angles_deg=MappingProxyType(
            {k: np.broadcast_to(v, shape) for k, v in fwd.angles_deg.items()}
        ),
        axis=axis,
        units=readout_units(bench),
    )


# --------------------------------------------------------------------------------------------
# Limits of amplification


def _scalar_readings(bench: Bench, readings: Mapping[str, float] | None) -> dict[str, float]:
    out = {}
    for name, value in full_readings(bench, readings).items():
        if np.ndim(value) != 0:
            raise InputError(
                f"reading of mount {name!r}: the limits analysis needs one number, not an array"
            )
        out[name] = float(value)
    return out


def _closest_approach_deg(bench: Bench, readings: Mapping[str, ArrayLike]) -> Real:
    """Unsigned imbalance (deg), ``arcsin |<f|i>|`` of the pure parts (see model.imbalance_deg)."""
    gap = pure_overlap(bench, readings)
    return np.rad2deg(np.arcsin(np.clip(np.nan_to_num(gap, nan=1.0), 0.0, 1.0)))


def find_null(bench: Bench, readings: Mapping[str, float] | None = None) -> float:
    """Reading (deg) of the imbalance mount at the null (smallest imbalance) nearest its
    current reading, within the mount's travel; other mounts at ``readings``.

    The unsigned imbalance is scanned on a coarse grid over the travel, and the local minimum
    nearest the current reading is refined by bounded minimization. When the null cannot be
    reached (an elliptical state against a linear analyzer) this is the closest approach.
    """
    from scipy.optimize import minimize_scalar

    r = _scalar_readings(bench, readings)
    name = bench.imbalance_mount
    low, high = bench.mounts[name].travel_deg
    grid = np.arange(low, high + _COARSE_STEP_DEG / 2, _COARSE_STEP_DEG)
    gap = _closest_approach_deg(bench, {**r, name: grid})
    inner = np.flatnonzero((gap[1:-1] <= gap[:-2]) & (gap[1:-1] <= gap[2:])) + 1
    candidates = inner if inner.size else np.array([int(np.argmin(gap))])
    x0 = grid[candidates[np.argmin(np.abs(grid[candidates] - r[name]))]]
    bounds = (max(low, x0 - _COARSE_STEP_DEG), min(high, x0 + _COARSE_STEP_DEG))
    res = minimize_scalar(
        lambda x: float(_closest_approach_deg(bench, {**r, name: x})),
        bounds=bounds,
        method="bounded",
        options={"xatol": 1e-11},
    )
    return float(res.x)


@dataclass(frozen=True)
class MechanismLimit:
    """Largest ``|amplification|`` one mechanism allows and where (imbalance mount reading)."""

    max_amplification: float
    at_imbalance_deg: float
    at_reading_deg: float


@dataclass(frozen=True)
class Limits:
    """Where the amplification stops growing on a bench.

    ``mechanisms`` maps each of :data:`MECHANISMS` to its limit with every other mechanism
    switched off (ideal optics, linear response, continuous mount, no dark counts; for
    "resolution": only imbalances at least one mount step from the null); when even
    the ideal bench cannot reach a null at these settings of the other mounts it also holds
    :data:`SETTING`, the largest amplification the ideal bench reaches. The
    combined ``max_amplification`` has all of them at once: the exact pointer response, the
    real extinction, only imbalances at least one mount step from the null, and dark counts,
    which carry no pointer shift and so dilute it by the signal share of the counts.
    ``smallest_imbalance_deg``: the imbalance one mount step from the null. ``step_error``:
    change of the exact amplification for one mount step at the given reading. Mount steps
    finer than 1e-5 deg are evaluated at 1e-5 deg (the model's double-precision floor near the
    null), so the resolution limit is then a lower bound.
    """

    axis: str
    null_reading_deg: float
    max_amplification: float
    at_imbalance_deg: float
    at_reading_deg: float
    limited_by: str
    explanation: str
    mechanisms: Mapping[str, MechanismLimit]
    smallest_imbalance_deg: float
    step_error: float


def _amplifier(
    bench: Bench, readings: Mapping[str, float], axis: str, *, exact: bool, dark: bool
) -> Callable[[ArrayLike], Real]:
    """``|amplification|`` as a function of the imbalance mount reading, optionally diluted by
    the signal share of the detector counts."""
    name = bench.imbalance_mount

    def evaluate(x: ArrayLike) -> Real:
        fwd = forward(bench, {**readings, name: x})
        if exact:
            g = bench.coupling.strength
            probability, shift = _equivalent_shift(bench, fwd, axis, g)
            amp = shift / g
        else:
            probability, amp = fwd.probability, amplification(bench, fwd, axis, exact=False)
        if dark:
            amp = amp * detector_rates(bench, probability).signal_fraction
        return np.abs(amp)

    return evaluate


def _grid(bench: Bench, null: float, min_offset: float) -> Real:
    """Imbalance-mount readings either side of ``null``: log-spaced offsets of at least
    ``min_offset`` (reading deg), inside the mount's travel, in increasing order."""
    low, high = bench.mounts[bench.imbalance_mount].travel_deg
    offsets = _OFFSETS[min_offset < _OFFSETS]
    if min_offset >= _FLOOR_DEG:
        offsets = np.concatenate([[min_offset], offsets])
    x = np.concatenate([null - offsets[::-1], null + offsets])
    return x[(x >= low) & (x <= high)]


def _pick(x: Real, values: Real, null: float, prefer: float) -> int:
    """Index of the largest value; a maximum within 1e-9 on the side of the null holding the
    reading ``prefer`` wins over its mirror image."""
    best = np.max(values)
    near_best = values >= best - 1e-9 * abs(best)
    same_side = np.sign(x - null) == (np.sign(prefer - null) or 1.0)
    if np.any(near_best & same_side):
        return int(np.argmax(np.where(near_best & same_side, values, -np.inf)))
    return int(np.argmax(values))


def _maximize(
    f: Callable[[ArrayLike], Real], null: float, bench: Bench, min_offset: float, prefer: float
) -> tuple[float, float]:
    """Largest ``f`` on :func:`_grid`, refined between the neighbours of the best point (picked
    by :func:`_pick`)."""
    from scipy.optimize import minimize_scalar

    x = _grid(bench, null, min_offset)
    values = np.nan_to_num(f(x), nan=-np.inf)
    i = _pick(x, values, null, prefer)
    side_of = np.sign(x - null)
    side = side_of[i]
    edge = null + side * min_offset  # stay on this side, at least min_offset from the null
    lo = x[i - 1] if i > 0 and side_of[i - 1] == side else edge
    hi = x[i + 1] if i + 1 < x.size and side_of[i + 1] == side else edge
    lo, hi = sorted((lo, hi))
    if hi > lo:
        res = minimize_scalar(
            lambda t: -float(np.nan_to_num(f(t), nan=-np.inf)),
            bounds=(lo, hi),
            method="bounded",
            options={"xatol": 1e-9 * max(1.0, abs(null))},
        )
        if -res.fun > values[i]:
            return float(res.x), float(-res.fun)
    return float(x[i]), float(values[i])


def _explain(
    bench: Bench, key: str, lim: MechanismLimit, smallest_imbalance: float, closest: float
) -> str:
    c, d = bench.coupling, bench.detector
    amp = f"{lim.max_amplification:.4g}"
    if key == SETTING:
        return (
            f"the other mounts' settings: with them where they are, the "
            f"{bench.imbalance_mount} mount cannot reach a null (the closest it gets is an "
            f"imbalance of {closest:.3g} deg), so even ideal optics reach only {amp}; set "
            f"the other mounts (e.g. the phase mount) closer to a null"
        )
    if key == "pointer":
        return (
            f"the pointer: a shift cannot grow much beyond one pointer width "
            f"({c.pointer_sigma:g} {c.units}), so the amplification peaks at {amp}, near "
            f"sigma/g = {c.pointer_sigma / c.strength:.4g}, and falls again closer to the null"
        )
    if key == "extinction":
        return (
            f"extinction: light leaking through the analyzer (extinction ratio "
            f"{bench.analyzer.extinction_ratio:.3g}) and the source polarizer "
            f"({bench.source.extinction_ratio:.3g}) keeps the post-selected intensity from "
            f"reaching zero, so the weak value stops growing at {amp} (about sqrt(ER)/2) and "
            f"falls again closer to the null"
        )
    if key == "resolution":
        return (
            f"mount resolution: the {bench.imbalance_mount} mount steps in "
            f"{bench.mounts[bench.imbalance_mount].resolution_deg:g} deg, so the smallest "
            f"imbalance it can set is {abs(smallest_imbalance):.3g} deg, where the "
            f"amplification is {amp}"
        )
    return (
        f"dark counts: near the null the post-selected signal falls towards the detector's "
        f"dark rate ({d.dark_rate:g} counts/s), and dark counts carry no pointer shift, so "
        f"the shift seen per unit coupling stops growing at {amp}"
    )


def limits(
    bench: Bench, readings: Mapping[str, float] | None = None, axis: str | None = None
) -> Limits:
    """Largest achievable amplification on the bench, for each mechanism alone and together,
    by scanning the imbalance mount either side of the null on the model (other mounts at
    ``readings``, default the bench file's)."""
    axis = axis or readout_axis(bench)
    _check_axis(axis)
    r = _scalar_readings(bench, readings)
    name = bench.imbalance_mount
    step = bench.mounts[name].resolution_deg
    ideal = ideal_optics(bench)
    null = find_null(bench, r)
    ideal_null = find_null(ideal, r)

    def at(b: Bench, reading: float, value: float) -> MechanismLimit:
        return MechanismLimit(value, float(imbalance_deg(b, {**r, name: reading})), reading)

    mechanisms: dict[str, MechanismLimit] = {}
    for key, b, null_b, exact, dark, min_offset in (
        ("pointer", ideal, ideal_null, True, False, 0.0),
        ("extinction", bench, null, False, False, 0.0),
        ("resolution", ideal, ideal_null, False, False, step),
        ("dark counts", ideal, ideal_null, False, True, 0.0),
    ):
        mechanisms[key] = at(
            b,
            *_maximize(
                _amplifier(b, r, axis, exact=exact, dark=dark), null_b, bench, min_offset, r[name]
            ),
        )
    closest = float(_closest_approach_deg(ideal, {**r, name: ideal_null}))
    if closest > 10 * _FLOOR_DEG:
        mechanisms[SETTING] = at(
            ideal,
            *_maximize(
                _amplifier(ideal, r, axis, exact=False, dark=False), ideal_null, bench, 0.0, r[name]
            ),
        )
    side = np.sign(mechanisms["resolution"].at_reading_deg - ideal_null) or 1.0
    smallest = float(imbalance_deg(ideal, {**r, name: ideal_null + side * step}))

    reading, best = _maximize(
        _amplifier(bench, r, axis, exact=True, dark=True), null, bench, step, r[name]
    )
    limited_by = min(mechanisms, key=lambda k: mechanisms[k].max_amplification)
    if SETTING in mechanisms and (
        mechanisms[limited_by].max_amplification >= 0.99 * mechanisms[SETTING].max_amplification
    ):
        limited_by = SETTING  # no mechanism costs even 1 % below what the settings allow
    here = _amplifier(bench, r, axis, exact=True, dark=False)(r[name] + np.array([-step, 0, step]))
    together = at(bench, reading, best)
    why = _explain(bench, limited_by, mechanisms[limited_by], smallest, closest)
    explanation = (
        f"Limited by {why}. "
        f"With every mechanism together the largest amplification is {best:.4g}, at "
        f"an imbalance of {together.at_imbalance_deg:.4g} deg."
    )
    return Limits(
        axis=axis,
        null_reading_deg=null,
        max_amplification=best,
        at_imbalance_deg=together.at_imbalance_deg,
        at_reading_deg=reading,
        limited_by=limited_by,
        explanation=explanation,
        mechanisms=MappingProxyType(mechanisms),
        smallest_imbalance_deg=smallest,
        step_error=float(np.max(np.abs(here[[0, 2]] - here[1]))),
    )


# --------------------------------------------------------------------------------------------
# Best imbalance for signal to noise


@dataclass(frozen=True)
class SnrChoice:
    """Imbalance that maximizes the SNR within the detector's limits, against no post-selection.

    ``feasible`` is False when no scanned imbalance keeps the detector below its safe rate and
    out of saturation (then the other numbers describe the best overexposed point).
    ``ratio_to_standard`` compares with the standard measurement on the same detector without
    a rate limit; ``ratio_to_standard_within_limits`` with it attenuated to respect the limits.
    """

    feasible: bool
    reading_deg: float
    imbalance_deg: float
    snr_per_sqrt_s: float
    amplification: float
    leak_rate: float
    detector_rate: float
    standard_snr_per_sqrt_s: float
    standard_within_limits_snr_per_sqrt_s: float
    ratio_to_standard: float
    ratio_to_standard_within_limits: float
    message: str


def best_snr_imbalance(bench: Bench, readings: Mapping[str, float] | None = None) -> SnrChoice:
    """Scan the imbalance mount either side of the null (steps of at least one mount step) and
    pick the reading with the best SNR per sqrt(s) that keeps the detector within its limits."""
    r = _scalar_readings(bench, readings)
    name = bench.imbalance_mount
    mount = bench.mounts[name]
    null = find_null(bench, r)
    x = _grid(bench, null, mount.resolution_deg)
    p = predict(bench, {**r, name: x})
    allowed = ~(p.saturated | p.over_safe_rate)
    feasible = bool(np.any(allowed))
    i = _pick(
        x,
        np.where(allowed, p.snr_per_sqrt_s, -1.0) if feasible else p.snr_per_sqrt_s,
        null,
        r[name],
    )
    standard = standard_snr_per_sqrt_s(bench, r)
    limited = standard_snr_per_sqrt_s(bench, r, within_limits=True)
    snr = float(p.snr_per_sqrt_s[i])

    def ratio(x: float) -> float:
        return snr / x if x > 0 else INF

    if feasible:
        message = (
            f"Best SNR {snr:.4g}/sqrt(s) at an imbalance of {p.imbalance_deg[i]:.4g} deg "
            f"({name} at {x[i]:.4f} deg), {ratio(limited):.3g} times the standard "
            f"measurement kept within the detector's limits and {ratio(standard):.3g} "
            f"times it with the detector overexposed."
        )
    else:
        message = (
            "Every scanned imbalance overexposes or saturates the detector: attenuate "
            "the beam before counting (follow your laser-safety rules)."
        )
    return SnrChoice(
        feasible,
        float(x[i]),
        float(p.imbalance_deg[i]),
        snr,
        float(p.amplification_exact[i]),
        float(p.leak_rate[i]),
        float(p.detector_rate[i]),
        standard,
        limited,
        ratio(standard),
        ratio(limited),
        message,
    )


# --------------------------------------------------------------------------------------------
# The JSON block


def prediction_block(
    bench: Bench,
    readings: Mapping[str, float] | None = None,
) -> dict[str, Any]:
    """The stable JSON block of ``aligner predict`` (plain floats; single readings only)."""
    r = _scalar_readings(bench, readings)
    return block_of(predict(bench, r), limits(bench, r))


def block_of(p: Prediction, lim: Limits) -> dict[str, Any]:
    """The JSON block of a scalar prediction and the bench's limits (see
    :func:`prediction_block`)."""
    wv = complex(p.weak_value)
    return {
        "angles_deg": {k: float(v) for k, v in p.angles_deg.items()},
        "imbalance_deg": float(p.imbalance_deg),
        "weak_value": {"re": wv.real, "im": wv.imag},
        "leak_rate": float(p.leak_rate),
        "amplification": {
            "linear": float(p.amplification_linear),
            "exact": float(p.amplification_exact),
        },
        "pointer_shift": float(p.pointer_shift),
        "units": p.units,
        "detector": {
            "rate": float(p.detector_rate),
            "measured_rate": float(p.measured_rate),
            "saturated": bool(p.saturated),
            "over_safe_rate": bool(p.over_safe_rate),
        },
        "limit": {
            "max_amplification": lim.max_amplification,
            "at_imbalance_deg": lim.at_imbalance_deg,
            "limited_by": lim.limited_by,
        },
        "snr_per_sqrt_s": float(p.snr_per_sqrt_s),
    }
