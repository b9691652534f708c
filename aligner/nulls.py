"""The null: the one definition shared by predictions, the planner and the fits.

A null is a setting where the pure part of the post-selection is orthogonal to the pure part of
the pre-selection: the overlap ``|<f|i>|`` of :func:`aligner.model.pure_overlap_of` vanishes
(the crossed position). It is a property of the optics' geometry, so it does not move with the
extinction ratios or the pointer; the post-selection probability is least there only up to
those. Where the mounts cannot bring the overlap to zero (an elliptical state against a linear
analyzer) the "null" is the closest approach, the least overlap.

* :func:`segments`: the stretches of one mount's travel, each holding one null (or closest
  approach), found on a coarse grid of the overlap and refined on the signed imbalance;
* :func:`nearest_null`, :func:`find_null`: the null of one mount nearest a reading;
* :func:`nulls`: nulls in the space of several mounts.

Readings in degrees. Results are cached per bench and fixed readings (benches are frozen).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .bench import Bench, Element
from .errors import InfeasibleTarget, InputError
from .model import forward, full_readings, imbalance_and_slope, imbalance_deg, pure_overlap

__all__ = [
    "ELEMENT_PERIOD_DEG",
    "IDEAL_HWP_PERIOD_DEG",
    "PERIOD_DEG",
    "Segment",
    "closest_approach_deg",
    "find_null",
    "mount_period_deg",
    "nearest_null",
    "null_in_window",
    "nulls",
    "segments",
    "signed_imbalance_deg",
]

Real = NDArray[np.float64]

#: Grid step (deg) of the coarse scan that locates nulls along one mount.
SCAN_STEP_DEG = 0.5
#: An imbalance below this (deg) counts as an exact null.
NULL_TOL_DEG = 1e-7

#: Period (deg) of each element type in its element angle, as an optical setting. A polarizer's
#: projector and a retarder's Jones matrix repeat after 180 deg; a rotator's Jones matrix changes
#: sign after 180 deg (a global phase: the same density matrix, the same Stokes vector).
ELEMENT_PERIOD_DEG = {
    "polarizer": 180.0,
    "hwp": 180.0,
    "qwp": 180.0,
    "retarder": 180.0,
    "rotator": 180.0,
}
PERIOD_DEG = 180.0  # the period of every element type above


#: Period (deg) of a half-wave plate of exactly half a wave: turned by 90 deg its fast and
#: slow axes swap, which for a retardance of pi only changes the global phase (the Jones
#: matrix changes sign), so it sets the same optics.
IDEAL_HWP_PERIOD_DEG = 90.0


def _element_period_deg(element: Element) -> float:
    if (
        element.type in ("hwp", "retarder")
        and abs((element.retardance_waves - 0.5) - round(element.retardance_waves - 0.5)) < 1e-12
    ):
        return IDEAL_HWP_PERIOD_DEG
    return ELEMENT_PERIOD_DEG.get(element.type, 360.0)


def mount_period_deg(bench: Bench, name: str) -> float:
    """Reading period (deg) after which mount ``name`` gives the same optical setting: the
    longest period of the elements it turns (:data:`ELEMENT_PERIOD_DEG`; 90 deg for a
    half-wave plate of exactly half a wave, :data:`IDEAL_HWP_PERIOD_DEG`) when each divides
    180 deg, else a full turn (an element type without a known period is never folded)."""
    periods = {_element_period_deg(e) for e in (*bench.pre, *bench.post) if e.mount == name}
    if name in (bench.source.mount, bench.analyzer.mount):
        periods.add(ELEMENT_PERIOD_DEG["polarizer"])
    if periods <= {IDEAL_HWP_PERIOD_DEG} and periods:
        return IDEAL_HWP_PERIOD_DEG
    return PERIOD_DEG if periods <= {IDEAL_HWP_PERIOD_DEG, PERIOD_DEG} else 360.0


def _with(fixed: Mapping[str, float], name: str, values: ArrayLike) -> dict[str, ArrayLike]:
    return {**fixed, name: values}


def closest_approach_deg(bench: Bench, readings: Mapping[str, ArrayLike]) -> Real:
    """Unsigned imbalance (deg), ``arcsin |<f|i>|`` of the pure parts (0 at a null)."""
    with np.errstate(invalid="ignore"):
        gap = pure_overlap(bench, readings)
    return np.rad2deg(np.arcsin(np.clip(np.nan_to_num(gap, nan=1.0), 0.0, 1.0)))


def signed_imbalance_deg(
    bench: Bench, name: str, readings: ArrayLike, fixed: Mapping[str, float]
) -> Real:
    """Signed imbalance (deg) along mount ``name`` at ``readings`` (others at ``fixed``):
    :func:`aligner.model.imbalance_deg` with ``name`` as the mount that sets the sign."""
    return imbalance_deg(bench, _with(fixed, name, readings), mount=name)


@dataclass(frozen=True)
class Segment:
    """A stretch of one mount's travel between two overlap maxima, holding one null.

    Readings (deg): ``low``..``high`` is where the signed imbalance rises monotonically;
    ``null`` is the reading of the null (``None`` when the null is not reachable inside the
    stretch), ``min_imbalance_deg`` the smallest imbalance reached there, at ``centre``.
    """

    low: float
    high: float
    null: float | None
    min_imbalance_deg: float
    centre: float  # reading of the smallest imbalance (the null when it exists)


_SEGMENT_CACHE: dict[tuple[str, str, tuple[tuple[str, float], ...]], tuple[Segment, ...]] = {}
_NULL_CACHE: dict[tuple[str, tuple[str, ...], tuple[tuple[str, float], ...]], Real] = {}


def segments(
    bench: Bench,
    name: str,
    fixed: Mapping[str, float] | None = None,
) -> tuple[Segment, ...]:
    """The null-holding stretches of mount ``name``'s travel, others at ``fixed`` readings
    (default: the file readings). Cached per bench (by its repr) and fixed readings."""
    fx = {k: float(v) for k, v in full_readings(bench, fixed).items() if k != name}
    key = (repr(bench), name, tuple(sorted(fx.items())))
    hit = _SEGMENT_CACHE.get(key)
    if hit is None:
        if len(_SEGMENT_CACHE) >= 64:
            _SEGMENT_CACHE.clear()
        hit = _SEGMENT_CACHE[key] = _find_segments(bench, name, fx)
    return hit


def _stretches(gap: Real) -> list[tuple[int, int, int]]:
    """(left, right, minimum) grid indices of each stretch between overlap maxima; the ends of
    a stretch are one step inside a maximum, where the imbalance is monotone."""
    n = len(gap)
    d = np.diff(gap)
    maxima = [i for i in range(1, n - 1) if d[i - 1] > 0 >= d[i]]
    minima = [i for i in range(1, n - 1) if d[i - 1] < 0 <= d[i]]
    if d[0] > 0:
        minima.insert(0, 0)
    if d[-1] < 0:
        minima.append(n - 1)
    bounds = [0, *maxima, n - 1]
    out = []
    for i_min in minima:
        k = int(np.searchsorted(bounds, i_min, side="right"))
        left = bounds[k - 1] if k > 0 else 0
        right = bounds[k] if k < len(bounds) else n - 1
        out.append((left + (left in maxima), right - (right in maxima), i_min))
    return out


def _find_segments(bench: Bench, name: str, fixed: Mapping[str, float]) -> tuple[Segment, ...]:
    lo, hi = bench.mounts[name].travel_deg
    grid = np.linspace(lo, hi, int(np.ceil((hi - lo) / SCAN_STEP_DEG)) + 1)
    with np.errstate(invalid="ignore", divide="ignore"):
        gap = pure_overlap(bench, _with(fixed, name, grid))
    if not np.all(np.isfinite(gap)):
        raise InputError(
            "the pre- or post-selection is unpolarized at these readings, so there "
            "is no null to plan around; check the source and analyzer settings"
        )
    if np.ptp(gap) < 1e-9:
        raise InfeasibleTarget(
            f"turning mount {name!r} does not change the overlap of pre- and post-selection, so "
            "it cannot set the imbalance; choose another imbalance_mount",
            limit="geometry",
        )
    spans = [(grid[a], grid[b], i) for a, b, i in _stretches(gap) if b > a]
    if not spans:
        return ()
    ends = signed_imbalance_deg(bench, name, np.array([[a, b] for a, b, _ in spans]), fixed)
    crossing = (ends[:, 0] < 0) & (ends[:, 1] > 0)
    centres = grid[[i for _, _, i in spans]].astype(float)
    if np.any(crossing):  # all crossings refined together
        k = np.flatnonzero(crossing)
        centres[k] = _crossings(
            bench,
            name,
            fixed,
            centres[k],
            np.array([spans[j][0] for j in k]),
            np.array([spans[j][1] for j in k]),
        )
    floors = np.abs(signed_imbalance_deg(bench, name, centres, fixed))
    out = []
    for j, (a, b, i_min) in enumerate(spans):
        centre, floor = float(centres[j]), float(floors[j])
        null = centre if crossing[j] and floor <= NULL_TOL_DEG else None
        if not crossing[j] and 0 < i_min < grid.size - 1:  # refine an inner closest approach
            from scipy.optimize import minimize_scalar

            best = minimize_scalar(
                lambda r: float(closest_approach_deg(bench, _with(fixed, name, r))),
                bounds=(max(a, centre - SCAN_STEP_DEG), min(b, centre + SCAN_STEP_DEG)),
                method="bounded",
                options={"xatol": 1e-11},
            )
            if best.fun < floor:
                centre, floor = float(best.x), float(best.fun)
        out.append(Segment(float(a), float(b), null, floor, centre))
    return tuple(out)


def _crossings(
    bench: Bench, name: str, fixed: Mapping[str, float], start: Real, low: Real, high: Real
) -> Real:
    """Readings where the signed imbalance along ``name`` crosses zero, one in each bracket
    ``[low, high]`` (it rises through each): Newton steps with the derivative in closed form
    (:func:`aligner.model.imbalance_and_slope`), a bisection of the shrinking bracket whenever
    a step would leave it, until the steps fall below 1e-12 deg (at most 100 steps)."""
    x = start.copy()
    for _ in range(100):
        value, rise = imbalance_and_slope(bench, forward(bench, _with(fixed, name, x)), name)
        low = np.where(value < 0, x, low)
        high = np.where(value > 0, x, high)
        with np.errstate(divide="ignore", invalid="ignore"):
            step = x - value / rise
        inside = np.isfinite(step) & (step > low) & (step < high)
        step = np.where(inside, step, 0.5 * (low + high))
        done = np.all((np.abs(step - x) <= 1e-12) | (value == 0))
        x = np.where(value == 0, x, step)
        if done:
            break
    return x


def nearest_null(
    bench: Bench,
    name: str,
    readings: Mapping[str, float] | None = None,
    near: float | None = None,
) -> float:
    """Reading (deg) of the null of mount ``name`` nearest ``near`` (default its reading),
    within its travel, other mounts at ``readings`` (default the file's); the closest approach
    where no null can be reached."""
    r = full_readings(bench, readings)
    fixed = {k: float(v) for k, v in r.items() if k != name}
    here = float(r[name]) if near is None else float(near)
    found = segments(bench, name, fixed)
    if not found:
        raise InputError(f"mount {name!r}: its travel holds no null")
    return min((s.centre for s in found), key=lambda c: abs(c - here))


def find_null(bench: Bench, readings: Mapping[str, float] | None = None) -> float:
    """Reading (deg) of the imbalance mount at the null nearest its current reading, within
    the mount's travel; other mounts at ``readings``. When the null cannot be reached (an
    elliptical state against a linear analyzer) this is the closest approach."""
    return nearest_null(bench, bench.imbalance_mount, readings)


def nulls(bench: Bench, names: Sequence[str], fixed: Mapping[str, float]) -> Real:
    """Nulls in the space of several mounts, one representative per 180-deg period, as an array
    (k, n) of readings (deg) within one period of the file readings. Cached per bench."""
    key = (repr(bench), tuple(names), tuple(sorted(fixed.items())))
    hit = _NULL_CACHE.get(key)
    if hit is None:
        if len(_NULL_CACHE) >= 64:
            _NULL_CACHE.clear()
        hit = _NULL_CACHE[key] = _find_nulls(bench, tuple(names), fixed)
    return hit


def _readings(names: Sequence[str], x: Real, fixed: Mapping[str, float]) -> dict[str, Real]:
    """Readings dict for points ``x`` (..., n) of the mounts ``names``."""
    out: dict[str, Real] = {name: np.asarray(value, float) for name, value in fixed.items()}
    out.update({name: x[..., k] for k, name in enumerate(names)})
    return out


def _find_nulls(bench: Bench, names: tuple[str, ...], fixed: Mapping[str, float]) -> Real:
    n = len(names)
    per_axis = max(12, round(3600 ** (1 / n)))
    base = np.array([bench.mounts[m].reading_deg for m in names]) - PERIOD_DEG / 2
    axes = [b + np.arange(per_axis) * PERIOD_DEG / per_axis for b in base]
    pts = np.stack(np.meshgrid(*axes, indexing="ij"), axis=-1)  # (p, p, ..., n)
    with np.errstate(invalid="ignore", divide="ignore"):
        gap = pure_overlap(bench, _readings(names, pts, fixed))
    is_min = gap < 0.35
    for shift in np.ndindex(*(3,) * n):  # compare with every neighbour on the periodic grid
        if any(shift_k != 1 for shift_k in shift):
            rolled = np.roll(gap, tuple(s - 1 for s in shift), axis=tuple(range(n)))
            is_min &= gap <= rolled
    # the file readings seed too: with more mounts than needed the nulls form a curve, and the
    # point of it nearest the current setting is the one a user wants
    seeds = np.concatenate([base[None, :] + PERIOD_DEG / 2, pts[is_min]])

    x, residual = _gauss_newton(bench, names, fixed, seeds)
    found: list[Real] = []
    for k in np.flatnonzero(residual < 1e-8):  # others: a local minimum, not a crossing
        folded = base + np.mod(x[k] - base, PERIOD_DEG)
        if not any(np.all(np.abs(_wrap(folded - y)) < 1e-6) for y in found):
            found.append(folded)
    return np.array(found).reshape(-1, n)


def _overlap_vector(
    bench: Bench, names: Sequence[str], fixed: Mapping[str, float], x: Real
) -> tuple[Real, Real]:
    """``m = n_i + n_f`` (twice the overlap of the pure parts, as a vector; (k, 3)) at the
    points ``x`` (k, n) and its Jacobian (k, 3, n) per degree of each mount's reading, from the
    derivatives of the two arms (:meth:`aligner.model.Arm.derivative`):
    ``dn = (dx - n (n . dx)) / |x|``."""
    fwd = forward(bench, _readings(names, x, fixed))
    k = x.shape[0]
    m = np.zeros((k, 3))
    jac = np.zeros((k, 3, len(names)))
    arms = ((fwd.pre, fwd.state_parts), (fwd.post, fwd.effect_parts))
    for arm, parts in arms:
        vec = np.stack([np.broadcast_to(parts[i], (k,)) for i in (1, 2, 3)], axis=-1)
        norm = np.linalg.norm(vec, axis=-1, keepdims=True)
        unit = vec / norm
        m += unit
        for j, name in enumerate(names):
            d = arm.derivative(name, bench.mounts[name].sense * np.pi / 180.0)
            if d is not None:
                dv = np.stack([np.broadcast_to(d[i], (k,)) for i in (1, 2, 3)], axis=-1)
                along = np.sum(unit * dv, axis=-1, keepdims=True)
                jac[:, :, j] += (dv - unit * along) / norm
    return m, jac


def _gauss_newton(
    bench: Bench, names: Sequence[str], fixed: Mapping[str, float], seeds: Real
) -> tuple[Real, Real]:
    """Points where ``m = n_i + n_f`` vanishes, from every seed at once: Gauss-Newton steps
    (minimum-norm, so with more mounts than needed a seed goes to the nearest point of the
    curve of nulls), at most 50, until every step is below 1e-12 deg. Returns the points and
    ``|m|`` there."""
    x = np.array(seeds, float)
    for _ in range(50):
        m, jac = _overlap_vector(bench, names, fixed, x)
        step = np.einsum("kij,kj->ki", np.linalg.pinv(jac), m)
        step = np.where(np.isfinite(step), step, 0.0)
        x = x - step
        if np.all(np.abs(step) < 1e-12):
            break
    m, _ = _overlap_vector(bench, names, fixed, x)
    return x, np.linalg.norm(m, axis=-1)


def _wrap(d: Real) -> Real:
    """Reading differences folded into [-90, 90) deg (one period)."""
    return np.mod(d + PERIOD_DEG / 2, PERIOD_DEG) - PERIOD_DEG / 2


def null_in_window(bench: Bench, name: str, near_deg: float, span_deg: float) -> float:
    """The null of mount ``name`` nearest ``near_deg`` among readings ``near_deg +/- span_deg``
    (other mounts at the file readings; the least overlap where the window holds no null)."""
    mount = bench.mounts[name]
    window = bench.with_mounts(
        **{name: replace(mount, travel_deg=(near_deg - span_deg, near_deg + span_deg))}
    )
    return nearest_null(window, name, near=near_deg)
