"""Where the amplification stops growing on a bench: each limiting mechanism alone, all of them
together, found by scanning the imbalance mount either side of the null (conventions:
:mod:`aligner.prediction`)."""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass
from types import MappingProxyType

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..bench import Bench
from ..errors import InputError
from ..model import forward, full_readings, ideal_optics, imbalance_deg
from ..nulls import closest_approach_deg, find_null
from .detector import detector_rates
from .readout import amplification, check_axis, readout_axis, response

__all__ = [
    "MECHANISMS",
    "SETTING",
    "Limits",
    "MechanismLimit",
    "limits",
    "pick_best",
    "scalar_readings",
    "scan_grid",
]

Real = NDArray[np.float64]

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


def scalar_readings(bench: Bench, readings: Mapping[str, float] | None) -> dict[str, float]:
    """Every mount's reading as one float (:class:`InputError` for an array)."""
    out = {}
    for name, value in full_readings(bench, readings).items():
        if np.ndim(value) != 0:
            raise InputError(
                f"reading of mount {name!r}: the limits analysis needs one number, not an array"
            )
        out[name] = float(value)
    return out


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
        with np.errstate(invalid="ignore", divide="ignore"):  # NaN at an exact null
            if exact:
                resp = response(bench, fwd)
                probability, amp = resp.probability, resp.shift(axis) / bench.coupling.strength
            else:
                probability, amp = fwd.probability, amplification(bench, fwd, axis, exact=False)
            if dark:
                amp = amp * detector_rates(bench, probability).signal_fraction
        return np.abs(amp)

    return evaluate


def scan_grid(bench: Bench, null: float, min_offset: float) -> Real:
    """Imbalance-mount readings either side of ``null``: log-spaced offsets of at least
    ``min_offset`` (reading deg), inside the mount's travel, in increasing order."""
    low, high = bench.mounts[bench.imbalance_mount].travel_deg
    offsets = _OFFSETS[min_offset < _OFFSETS]
    if min_offset >= _FLOOR_DEG:
        offsets = np.concatenate([[min_offset], offsets])
    x = np.concatenate([null - offsets[::-1], null + offsets])
    return x[(x >= low) & (x <= high)]


def pick_best(x: Real, values: Real, null: float, prefer: float) -> int:
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
    """Largest ``f`` on :func:`scan_grid` (picked by :func:`pick_best`), refined between the
    neighbours of the best point by :func:`_zoom`."""
    x = scan_grid(bench, null, min_offset)
    values = np.nan_to_num(f(x), nan=-np.inf)
    i = pick_best(x, values, null, prefer)
    side_of = np.sign(x - null)
    side = side_of[i]
    edge = null + side * min_offset  # stay on this side, at least min_offset from the null
    lo = x[i - 1] if i > 0 and side_of[i - 1] == side else edge
    hi = x[i + 1] if i + 1 < x.size and side_of[i + 1] == side else edge
    lo, hi = sorted((lo, hi))
    if hi > lo:
        at, best = _zoom(f, lo, hi, 1e-9 * max(1.0, abs(null)))
        if best > values[i]:
            return at, best
    return float(x[i]), float(values[i])


def _zoom(f: Callable[[ArrayLike], Real], lo: float, hi: float, tol: float) -> tuple[float, float]:
    """Maximum of ``f`` on ``[lo, hi]``: a grid of 33 points, then the same between the
    neighbours of its best point, until they are ``tol`` apart (vectorized: one evaluation
    of the model per round)."""
    while True:
        x = np.linspace(lo, hi, 33)
        values = np.nan_to_num(f(x), nan=-np.inf)
        i = int(np.argmax(values))
        lo, hi = x[max(i - 1, 0)], x[min(i + 1, x.size - 1)]
        if hi - lo <= tol:
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
    check_axis(axis)
    r = scalar_readings(bench, readings)
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
    closest = float(closest_approach_deg(ideal, {**r, name: ideal_null}))
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
