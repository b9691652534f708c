"""Inverse problems on the full bench model: mount readings for a target imbalance, weak value,
amplification or leak rate.

Everything here evaluates the *full imperfect* bench (offsets, sense, plate retardance at the
working wavelength, extinction of source and analyzer, exact pointer response) through
:func:`aligner.model.forward`, vectorized over many trial readings per call.

Conventions (degrees for readings, radians only inside physics):

* Amplification: ``linear`` = ``Re A_w`` (axis ``re``) or ``Im A_w`` (axis ``im``); ``exact`` =
  ``<q>/g`` (axis ``re``) or ``<p>/(g/(2 sigma^2))`` (axis ``im``) from the all-orders
  Gaussian-pointer response. Both are combined into one complex "response" ``w``: the weak value
  (linear) or ``<q>/g + i <p>/(g/(2 sigma^2))`` (exact).
* Leak rate: the exact post-selection probability per source photon (pointer overlap,
  analyzer transmission and extinction included, detector efficiency excluded).
* Null: a reading where the pure part of the post-selection is orthogonal to the pure part of
  the pre-selection; signed imbalance as :func:`aligner.model.imbalance_deg` (positive on the
  high-reading side of the null).

How solutions are found: nulls are located on a coarse grid of the free mounts and refined;
around each null the ideal closed form (extinction-free linearization, ``eps = arccot X`` in the
textbook case) gives the direction and scale of the search, the target is bracketed on a
logarithmic ray away from the null and the root is found by a bracketing root finder
(``scipy.optimize.elementwise.find_root``); two-mount targets are then polished by a vectorized
Gauss-Newton step with ``scipy.optimize.least_squares`` as the fallback.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace
from functools import cached_property

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..bench import Bench
from ..errors import InfeasibleTarget, InputError
from ..model import (
    coupling_observable,
    forward,
    full_readings,
    ideal_optics,
    imbalance_deg,
    overlap_of_pure_parts,
)
from ..physics.jones import stokes_from_density
from ..physics.weak import PointerResponse, pointer_response, weak_value

__all__ = [
    "Observed",
    "Segment",
    "observe",
    "readings_for_imbalance",
    "segments",
    "signed_imbalance_deg",
]

Real = NDArray[np.float64]
Cplx = NDArray[np.complex128]

#: Grid step (deg) of the coarse scan that locates nulls along one mount.
SCAN_STEP_DEG = 0.5
#: Finite-difference step (deg) for the sign of the imbalance.
SIGN_STEP_DEG = 1e-6
#: An imbalance below this (deg) counts as an exact null.
NULL_TOL_DEG = 1e-7


class Observed:
    """What the planner needs from the forward model at some readings (arrays of the readings'
    shape), each computed on first use.

    ``weak_value`` complex; ``exact`` = ``<q>/g + i <p>/(g/(2 sigma^2))``; ``leak_rate`` per
    source photon; ``gap`` = ``|<f|i>|`` of the pure parts (0 at a null).
    """

    def __init__(self, bench: Bench, readings: Mapping[str, ArrayLike] | None) -> None:
        self._bench = bench
        self._fwd = forward(bench, readings)

    @cached_property
    def weak_value(self) -> Cplx:
        with np.errstate(divide="ignore", invalid="ignore"):
            return weak_value(self._fwd.rho, self._fwd.effect, coupling_observable(self._bench))

    @cached_property
    def _pointer(self) -> PointerResponse:
        c = self._bench.coupling
        with np.errstate(divide="ignore", invalid="ignore"):
            return pointer_response(
                self._fwd.rho,
                self._fwd.effect,
                coupling_observable(self._bench),
                c.strength,
                c.pointer_sigma,
            )

    @cached_property
    def exact(self) -> Cplx:
        c = self._bench.coupling
        kick = 2 * c.pointer_sigma**2 / c.strength  # <p> per unit Im A_w is g/(2 sigma^2)
        return self._pointer.position / c.strength + 1j * self._pointer.momentum * kick

    @cached_property
    def leak_rate(self) -> Real:
        return np.asarray(self._pointer.probability, float)

    @cached_property
    def gap(self) -> Real:
        with np.errstate(divide="ignore", invalid="ignore"):
            return overlap_of_pure_parts(self._fwd.state_stokes, self._fwd.effect_stokes)

    def response(self, exact: bool) -> Cplx:
        """The complex amplification: exact pointer response or the weak value."""
        return self.exact if exact else self.weak_value


def observe(bench: Bench, readings: Mapping[str, ArrayLike] | None = None) -> Observed:
    """Weak value, exact amplification, leak rate and null gap at ``readings`` (deg)."""
    return Observed(bench, readings)


def _with(fixed: Mapping[str, float], name: str, values: ArrayLike) -> dict[str, ArrayLike]:
    return {**fixed, name: values}


def signed_imbalance_deg(
    bench: Bench, name: str, readings: ArrayLike, fixed: Mapping[str, float]
) -> Real:
    """Signed imbalance (deg) along mount ``name`` at ``readings`` (others at ``fixed``):
    :func:`aligner.model.imbalance_deg` with ``name`` as the mount that sets the sign."""
    return imbalance_deg(bench, _with(fixed, name, readings), SIGN_STEP_DEG, mount=name)


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


def _find_segments(bench: Bench, name: str, fixed: Mapping[str, float]) -> tuple[Segment, ...]:
    from scipy.optimize import brentq

    lo, hi = bench.mounts[name].travel_deg
    grid = np.linspace(lo, hi, int(np.ceil((hi - lo) / SCAN_STEP_DEG)) + 1)
    with np.errstate(invalid="ignore"):
        gap = observe(bench, _with(fixed, name, grid)).gap
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
    d = np.diff(gap)
    maxima = [i for i in range(1, len(grid) - 1) if d[i - 1] > 0 >= d[i]]
    minima = [i for i in range(1, len(grid) - 1) if d[i - 1] < 0 <= d[i]]
    if d[0] > 0:
        minima.insert(0, 0)
    if d[-1] < 0:
        minima.append(len(grid) - 1)
    bounds = [0, *maxima, len(grid) - 1]
    out = []
    for i_min in minima:
        k = int(np.searchsorted(bounds, i_min, side="right"))
        left = bounds[k - 1] if k > 0 else 0
        right = bounds[k] if k < len(bounds) else len(grid) - 1
        # one grid step inside the maxima, where the imbalance is monotone
        a = grid[left + 1] if left in maxima else grid[left]
        b = grid[right - 1] if right in maxima else grid[right]
        if b <= a:
            continue
        ends = signed_imbalance_deg(bench, name, np.array([a, b]), fixed)
        null = None
        centre = float(grid[i_min])
        if ends[0] < 0 < ends[1]:
            centre = brentq(
                lambda r: float(signed_imbalance_deg(bench, name, r, fixed)),
                a,
                b,
                xtol=1e-12,
                rtol=1e-15,
                disp=False,
            )
            floor = abs(float(signed_imbalance_deg(bench, name, centre, fixed)))
            if floor <= NULL_TOL_DEG:  # else a jump across a kink, not a crossing
                null = centre
        else:
            floor = float(np.rad2deg(np.arcsin(min(gap[i_min], 1.0))))
        out.append(Segment(float(a), float(b), null, floor, float(centre)))
    return tuple(out)


def _nearest(items: Sequence[Segment], near: float) -> list[Segment]:
    def distance(s: Segment) -> float:
        centre = s.null if s.null is not None else 0.5 * (s.low + s.high)
        return abs(centre - near)

    return sorted(items, key=distance)


def readings_for_imbalance(
    bench: Bench, imbalance_deg: float, *, near: float | None = None
) -> dict[str, float]:
    """Reading (deg) of the bench's ``imbalance_mount`` that gives the signed imbalance
    ``imbalance_deg`` (deg, :func:`aligner.model.imbalance_deg`), other mounts at the file
    readings.

    The sign picks the side of the null (positive = high-reading side); ``near`` (a reading of
    the imbalance mount, default its file reading) picks which null when the travel holds
    several: the nearest null whose solution lies inside the travel. Returns
    ``{imbalance_mount: reading_deg}`` only. Raises :class:`InputError` for a non-finite or
    out-of-range target and :class:`InfeasibleTarget` when no null of the travel reaches it.
    """
    from scipy.optimize import brentq

    name = bench.imbalance_mount
    mount = bench.mounts[name]
    target = float(imbalance_deg)
    if not np.isfinite(target) or abs(target) >= 90.0:
        raise InputError(
            f"imbalance_deg must be a finite angle between -90 and 90 deg, got {imbalance_deg!r}"
        )
    centre = mount.reading_deg if near is None else float(near)
    if not np.isfinite(centre):
        raise InputError(f"near must be a finite reading in degrees, got {near!r}")
    fixed = {k: v for k, v in bench.readings().items() if k != name}
    found = segments(bench, name, fixed)
    floor = min((s.min_imbalance_deg for s in found), default=90.0)
    for seg in _nearest(found, centre):
        ends = signed_imbalance_deg(bench, name, np.array([seg.low, seg.high]), fixed) - target
        if ends[0] < 0 < ends[1]:
            reading = brentq(
                lambda r, s=seg: float(signed_imbalance_deg(bench, name, r, fixed)) - target,
                seg.low,
                seg.high,
                xtol=1e-12,
                rtol=1e-15,
                disp=False,
            )
            got = float(signed_imbalance_deg(bench, name, reading, fixed))
            if abs(got - target) < 1e-6 + 1e-9 * abs(target):
                return {name: float(reading)}
    lo, hi = mount.travel_deg
    if abs(target) < floor:
        raise InfeasibleTarget(
            f"mount {name!r} cannot reach an imbalance of {target:g} deg: with the other mounts "
            f"at their readings the smallest imbalance it reaches is {floor:.4g} deg (the pre- "
            "and post-selection never cross exactly); adjust the other mounts so that they can "
            "cross",
            limit="geometry",
            achievable=floor,
        )
    raise InfeasibleTarget(
        f"an imbalance of {target:g} deg needs mount {name!r} outside its travel "
        f"[{lo:g}, {hi:g}] deg on that side of every null; use the other sign or widen "
        f"mounts.{name}.travel_deg",
        limit="travel",
    )


# --------------------------------------------------------------------------------------------
# Targets and solution branches


@dataclass(frozen=True)
class Target:
    """What the planner solves for.

    ``kind``: ``amplification`` (``value`` > 0, the size of the amplification; both signs are
    solution branches), ``weak_value`` (complex ``value``) or ``leak_rate`` (``value`` in
    (0, 1], per source photon). ``axis`` (``re``/``im``) and ``exact`` apply to amplification.
    """

    kind: str
    value: complex
    axis: str = "re"
    exact: bool = False

    def figure(self, obs: Observed) -> Real:
        """The scalar the target is about: the amplification on the axis, ``|A_w|`` for a
        weak-value target, the leak rate for a leak-rate target."""
        if self.kind == "leak_rate":
            return obs.leak_rate
        if self.kind == "weak_value":
            return np.abs(obs.weak_value)
        w = obs.response(self.exact)
        return np.real(w) if self.axis == "re" else np.imag(w)

    def describe(self) -> str:
        if self.kind == "leak_rate":
            return f"leak rate {self.value.real:.4g}"
        if self.kind == "weak_value":
            return f"weak value {self.value.real:+.4g}{self.value.imag:+.4g}i"
        kind = "exact" if self.exact else "linear"
        return f"{kind} amplification {self.value.real:g} on the {self.axis} axis"

    def signed_values(self) -> tuple[complex, ...]:
        """The complex responses to hit: both signs for an amplification, on its axis."""
        if self.kind == "amplification":
            v = self.value.real * (1.0 if self.axis == "re" else 1j)
            return (v, -v)
        return (self.value,)


def mounts_in_play(bench: Bench, free: Sequence[str] = (), *, phase: bool = True) -> list[str]:
    """The imbalance mount, the phase mount (when ``phase``) and the ``free`` mounts, in that
    order and once each; an unknown ``free`` mount is an :class:`InputError`."""
    names = [bench.imbalance_mount]
    if phase and bench.phase_mount and bench.phase_mount not in names:
        names.append(bench.phase_mount)
    for name in free:
        if name not in bench.mounts:
            raise InputError(
                f"--free {name!r}: unknown mount; the bench has: {', '.join(bench.mounts)}"
            )
        if name not in names:
            names.append(name)
    return names


def unknown_mounts(bench: Bench, target: Target, free: Sequence[str] = ()) -> tuple[str, ...]:
    """The mounts a target solves for: the imbalance mount, the phase mount for amplification
    (keeps the weak value on its axis) and weak-value targets, and any ``free`` mounts."""
    names = mounts_in_play(bench, free, phase=target.kind != "leak_rate")
    if target.kind == "leak_rate" and len(names) > 1:
        raise InputError(
            "a leak-rate target is set by the imbalance mount alone; drop --free "
            "(or change imbalance_mount in the bench file)"
        )
    if target.kind == "weak_value" and len(names) < 2:
        raise InputError(
            "a complex weak-value target needs two mounts: set phase_mount in the "
            "bench file or free a waveplate mount with --free MOUNT"
        )
    return tuple(names)


@dataclass(frozen=True)
class Root:
    """One solution of the target equations: readings (deg) of the unknown mounts and where it
    lies relative to the null it was found from."""

    readings: tuple[float, ...]
    null: tuple[float, ...]
    inner: bool  # inside the extinction floor (between the null and the response peak)
    residual: float
    value: complex  # the signed target this root meets (response, or the leak rate)


@dataclass(frozen=True)
class Solution:
    """All roots of a target on a bench, and the best value reachable where none exists."""

    unknowns: tuple[str, ...]
    roots: tuple[Root, ...]
    peak: float  # largest |figure| found on the search rays (nan for leak-rate targets)
    nulls: int


def _ray_offsets(length: float, count: int = 160) -> Real:
    """Logarithmic distances (deg) from a null: resolves both the extinction floor (micro-deg)
    and the weak-regime root (degrees)."""
    return np.geomspace(1e-7, length, count)


def _residual_scalar(target: Target, obs: Observed, value: ArrayLike, n: int) -> Real:
    """Scalar equation along a search ray, zero at a root: the component on the target's axis
    over its target value (one unknown mount), the magnitude ratio (several unknowns), or the
    log ratio of leak rates. ``value`` broadcasts against the observation."""
    v = np.asarray(value, complex)
    if target.kind == "leak_rate":
        return np.log(obs.leak_rate / v.real)
    w = obs.response(target.exact)
    if n > 1:
        return np.abs(w) / np.abs(v) - 1.0
    on_im = v.imag != 0
    return np.where(on_im, w.imag, w.real) / np.where(on_im, v.imag, v.real) - 1.0


def _readings(names: Sequence[str], x: Real, fixed: Mapping[str, float]) -> dict[str, Real]:
    """Readings dict for points ``x`` (..., n) of the unknown mounts ``names``."""
    return {**fixed, **{name: x[..., k] for k, name in enumerate(names)}}


def _solve_one_mount(
    bench: Bench, target: Target, name: str, fixed: Mapping[str, float]
) -> Solution:
    """Roots along the imbalance mount alone: a bracket on each side of every null."""
    from scipy.optimize.elementwise import find_root

    segs = segments(bench, name, fixed)
    rays = []  # (centre, direction, length)
    for seg in segs:
        for side, length in ((1.0, seg.high - seg.centre), (-1.0, seg.centre - seg.low)):
            if length > 1e-6:
                rays.append((seg.centre, side, length))
    if not rays:
        return Solution((name,), (), float("nan"), 0)
    offsets = np.stack([_ray_offsets(length) for _, _, length in rays])  # (R, S)
    centre = np.array([c for c, _, _ in rays])[:, None]
    side = np.array([d for _, d, _ in rays])[:, None]
    obs = observe(bench, _with(fixed, name, centre + side * offsets))
    fig = np.abs(target.figure(obs))
    peak_idx = np.argmax(np.where(np.isfinite(fig), fig, -np.inf), axis=1)
    starts, ends, meta = [], [], []
    for value in target.signed_values():
        f = _residual_scalar(target, obs, value, 1)
        for r in range(len(rays)):
            ok = np.isfinite(f[r])
            flips = np.nonzero(ok[:-1] & ok[1:] & (np.sign(f[r, :-1]) != np.sign(f[r, 1:])))[0]
            for i in flips:
                starts.append(offsets[r, i])
                ends.append(offsets[r, i + 1])
                meta.append((r, value, target.kind != "leak_rate" and i < peak_idx[r]))
    peak = float(np.nanmax(fig)) if target.kind != "leak_rate" else float("nan")
    if not meta:
        return Solution((name,), (), peak, sum(s.null is not None for s in segs))
    r_idx = np.array([m[0] for m in meta])
    values = [m[1] for m in meta]
    c, d = centre[r_idx, 0], side[r_idx, 0]

    def along(s: Real, c: Real, d: Real, v: Real) -> Real:
        return _residual_scalar(target, observe(bench, _with(fixed, name, c + d * s)), v, 1)

    v_arr = np.array(values, complex)
    res = find_root(
        along,
        (np.array(starts), np.array(ends)),
        args=(c, d, v_arr),
        tolerances={"xatol": 1e-13, "xrtol": 1e-14},
    )
    x = c + d * res.x
    resid = np.abs(along(res.x, c, d, v_arr))
    roots = tuple(
        Root((float(x[k]),), (float(c[k]),), bool(meta[k][2]), float(resid[k]), complex(v_arr[k]))
        for k in range(len(meta))
        if res.success[k]
    )
    return Solution((name,), roots, peak, sum(s.null is not None for s in segs))


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


def mount_period_deg(bench: Bench, name: str) -> float:
    """Reading period (deg) after which mount ``name`` gives the same optical setting: 180 deg
    when every element it turns has that period (:data:`ELEMENT_PERIOD_DEG`), else a full
    turn (an element type without a known period is never folded)."""
    types = [e.type for e in (*bench.pre, *bench.post) if e.mount == name]
    if bench.source.mount == name:
        types.append("polarizer")
    if bench.analyzer.mount == name:
        types.append("polarizer")
    periods = {ELEMENT_PERIOD_DEG.get(t, 360.0) for t in types}
    return PERIOD_DEG if periods <= {PERIOD_DEG} else 360.0


_NULL_CACHE: dict[tuple[str, tuple[str, ...], tuple[tuple[str, float], ...]], Real] = {}


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


def _find_nulls(bench: Bench, names: tuple[str, ...], fixed: Mapping[str, float]) -> Real:
    from scipy.optimize import least_squares

    n = len(names)
    per_axis = max(12, round(3600 ** (1 / n)))
    base = np.array([bench.mounts[m].reading_deg for m in names]) - PERIOD_DEG / 2
    axes = [b + np.arange(per_axis) * PERIOD_DEG / per_axis for b in base]
    pts = np.stack(np.meshgrid(*axes, indexing="ij"), axis=-1)  # (p, p, ..., n)
    gap = observe(bench, _readings(names, pts, fixed)).gap
    is_min = gap < 0.35
    for shift in np.ndindex(*(3,) * n):  # compare with every neighbour on the periodic grid
        if any(shift_k != 1 for shift_k in shift):
            rolled = np.roll(gap, tuple(s - 1 for s in shift), axis=tuple(range(n)))
            is_min &= gap <= rolled
    # the file readings seed too: with more mounts than needed the nulls form a curve, and the
    # point of it nearest the current setting is the one a user wants
    seeds = np.concatenate([base[None, :] + PERIOD_DEG / 2, pts[is_min]])

    def residual(x: Real) -> Real:
        fwd = forward(bench, _readings(names, x, fixed))
        s_i = stokes_from_density(fwd.rho)[1:]
        s_f = stokes_from_density(fwd.effect)[1:]
        return s_i / np.linalg.norm(s_i) + s_f / np.linalg.norm(s_f)

    found: list[Real] = []
    for seed in seeds:
        fit = least_squares(residual, seed, method="trf", xtol=1e-15, ftol=1e-15, gtol=1e-15)
        if np.linalg.norm(fit.fun) > 1e-8:
            continue  # a local minimum of the overlap, not a crossing
        x = base + np.mod(fit.x - base, PERIOD_DEG)
        if not any(np.all(np.abs(_wrap(x - y)) < 1e-6) for y in found):
            found.append(x)
    return np.array(found).reshape(-1, n)


def _wrap(d: Real) -> Real:
    """Reading differences folded into [-90, 90) deg (one period)."""
    return np.mod(d + PERIOD_DEG / 2, PERIOD_DEG) - PERIOD_DEG / 2


def _ray_directions(
    bench: Bench, names: Sequence[str], fixed: Mapping[str, float], centres: Real, values: Real
) -> Real:
    """Unit search directions (deg space) from each null towards the target, from the ideal
    closed form: the extinction-free ``1/A_w`` is linear near a null, ``1/A_w ~ J dx``, so the
    target weak value ``T`` lies along ``dx = J^+ (1/T)`` (``eps = arccot X`` in the crossed
    linear case). Returns (k, n) unit vectors and the (k,) seed distances."""
    n = centres.shape[-1]
    h = 1e-4  # central differences: 1/A_w is 0/0 at the null itself
    pts = centres[:, None, :] + np.concatenate([h * np.eye(n), -h * np.eye(n)])[None]
    with np.errstate(divide="ignore", invalid="ignore"):
        u = 1.0 / observe(ideal_optics(bench), _readings(names, pts, fixed)).weak_value  # (k, 2n)
    du = (u[:, :n] - u[:, n:]) / (2 * h)  # (k, n) complex
    jac = np.stack([du.real, du.imag], axis=1)  # (k, 2, n)
    goal = 1.0 / values
    dx = np.einsum("kij,kj->ki", np.linalg.pinv(jac), np.stack([goal.real, goal.imag], -1))
    dist = np.linalg.norm(dx, axis=-1)
    return dx / dist[:, None], dist


def _polish(
    bench: Bench,
    target: Target,
    names: Sequence[str],
    fixed: Mapping[str, float],
    x0: Real,
    values: Real,
) -> tuple[Real, Real]:
    """Gauss-Newton on ``(w(x) - T)/|T|`` for all roots at once (one forward call per step,
    forward-difference Jacobian); ``scipy.optimize.least_squares`` for any that stall."""
    from scipy.optimize import least_squares

    n = x0.shape[-1]
    h = 1e-7
    steps = np.concatenate([np.zeros((1, n)), h * np.eye(n)])[None]
    scale = np.abs(values)[:, None]

    def residuals(x: Real, v: Real, s: Real) -> Real:
        w = observe(bench, _readings(names, x, fixed)).response(target.exact)
        r = (w - v) / s
        return np.stack([r.real, r.imag], axis=-1)

    x = x0.copy()
    for _ in range(25):
        rr = residuals(x[:, None, :] + steps, values[:, None], scale)  # (k, n+1, 2)
        jac = np.swapaxes((rr[:, 1:] - rr[:, :1]) / h, 1, 2)  # (k, 2, n)
        step = np.einsum("kij,kj->ki", np.linalg.pinv(jac), rr[:, 0])
        x = x - step
        if np.all(np.abs(step) < 1e-11):
            break
    res = np.linalg.norm(residuals(x, values, scale[:, 0]), axis=-1)
    for k in np.nonzero(~(res < 1e-9))[0]:
        fit = least_squares(
            lambda y, k=k: residuals(y, values[k], scale[k, 0]),
            x0[k],
            xtol=1e-15,
            ftol=1e-15,
            gtol=1e-15,
        )
        x[k], res[k] = fit.x, np.linalg.norm(fit.fun)
    return x, res


def _translations(x: Real, names: Sequence[str], bench: Bench) -> list[Real]:
    """Copies of a solution shifted by whole periods of each mount that stay inside travel."""
    options = []
    for k, name in enumerate(names):
        lo, hi = bench.mounts[name].travel_deg
        period = mount_period_deg(bench, name)
        first = np.ceil((lo - x[k]) / period)
        last = np.floor((hi - x[k]) / period)
        options.append(x[k] + period * np.arange(first, last + 1))
    if any(len(o) == 0 for o in options):
        return []
    grid = np.meshgrid(*options, indexing="ij")
    return list(np.stack([g.ravel() for g in grid], axis=-1))


def _solve_many_mounts(
    bench: Bench, target: Target, names: tuple[str, ...], fixed: Mapping[str, float]
) -> Solution:
    """Roots in several mounts: ray searches from each null, then a joint polish."""
    from scipy.optimize.elementwise import find_root

    centres = nulls(bench, names, fixed)
    if len(centres) == 0:
        return Solution(names, (), float("nan"), 0)
    values = np.array(target.signed_values(), complex)
    k_null = np.repeat(np.arange(len(centres)), len(values))
    v_ray = np.tile(values, len(centres))
    c_ray = centres[k_null]
    direction, seed = _ray_directions(bench, names, fixed, c_ray, v_ray)
    offsets = np.stack([_ray_offsets(min(89.0, max(60.0, 3 * s))) for s in seed])  # (R, S)
    pts = c_ray[:, None, :] + offsets[..., None] * direction[:, None, :]
    obs = observe(bench, _readings(names, pts, fixed))
    fig = np.abs(obs.response(target.exact))
    peak_idx = np.argmax(np.where(np.isfinite(fig), fig, -np.inf), axis=1)
    f = _residual_scalar(target, obs, v_ray[:, None], len(names))
    starts, ends, meta = [], [], []
    for r in range(len(v_ray)):
        ok = np.isfinite(f[r])
        flips = np.nonzero(ok[:-1] & ok[1:] & (np.sign(f[r, :-1]) != np.sign(f[r, 1:])))[0]
        for i in flips:
            starts.append(offsets[r, i])
            ends.append(offsets[r, i + 1])
            meta.append((r, bool(i < peak_idx[r])))
    peak = float(np.nanmax(fig))
    count = sum(len(_translations(c, names, bench)) for c in centres)
    if not meta:
        return Solution(names, (), peak, count)
    rays = np.array([m[0] for m in meta])

    def along(s: Real, r: Real) -> Real:
        r = r.astype(int)
        x = c_ray[r] + s[..., None] * direction[r]
        return _residual_scalar(
            target, observe(bench, _readings(names, x, fixed)), v_ray[r], len(names)
        )

    res = find_root(
        along,
        (np.array(starts), np.array(ends)),
        args=(rays.astype(float),),
        tolerances={"xatol": 1e-12, "xrtol": 1e-13},
    )
    x0 = c_ray[rays] + res.x[:, None] * direction[rays]
    x, resid = _polish(bench, target, names, fixed, x0, v_ray[rays])
    roots: list[Root] = []
    for k in range(len(rays)):
        if not resid[k] < 1e-8:
            continue
        null = c_ray[rays[k]]
        for y in _translations(x[k], names, bench):
            shift = y - x[k]
            roots.append(
                Root(
                    tuple(float(v) for v in y),
                    tuple(float(v) for v in null + shift),
                    meta[k][1],
                    float(resid[k]),
                    complex(v_ray[rays[k]]),
                )
            )
    return Solution(names, tuple(roots), peak, count)


def solve(bench: Bench, target: Target, free: Sequence[str] = ()) -> Solution:
    """Every root of ``target`` within the mounts' travel (other mounts at the file readings)."""
    names = unknown_mounts(bench, target, free)
    fixed = {k: v for k, v in bench.readings().items() if k not in names}
    if len(names) == 1:
        sol = _solve_one_mount(bench, target, names[0], fixed)
    else:
        sol = _solve_many_mounts(bench, target, names, fixed)
    unique: dict[tuple[float, ...], Root] = {}
    for root in sol.roots:  # a polish may land on a root already found from another null
        unique.setdefault(tuple(np.round(root.readings, 6)), root)
    return replace(sol, roots=tuple(unique.values()))


def pointer_cap(bench: Bench) -> float:
    """Largest exact amplification a Gaussian pointer allows for a real weak value,
    ``1/sqrt(1 - exp(-g^2/sigma^2))`` (about ``sigma/g``; physics.md, all-orders response)."""
    c = bench.coupling
    return float(1.0 / np.sqrt(-np.expm1(-((c.strength / c.pointer_sigma) ** 2))))


def infeasible(bench: Bench, target: Target, solution: Solution) -> InfeasibleTarget:
    """The error for a target with no root in travel: what limits it and what to change."""
    names = ", ".join(solution.unknowns)
    if solution.nulls == 0 and _null_beyond_travel(bench, solution.unknowns):
        best = _best_in_travel(bench, target, solution.unknowns)
        return InfeasibleTarget(
            f"the null (crossed setting) of mounts {names} lies outside their travel, so "
            f"{target.describe()} cannot be reached"
            + ("" if best is None else f" (at most {best:.4g} inside the travel)")
            + "; widen travel_deg in the bench file or re-mount the optic",
            limit="travel",
            achievable=best,
        )
    if solution.nulls == 0:
        return InfeasibleTarget(
            f"mounts {names} cannot bring the post-selection orthogonal to the pre-selection "
            "(no null inside their travel), so no amplification can be planned; check the "
            "element angles and the travel limits in the bench file",
            limit="geometry",
        )
    if target.kind == "leak_rate":
        return _leak_infeasible(bench, target, solution.unknowns[0])
    wanted = abs(target.value)
    if solution.peak >= wanted:
        return InfeasibleTarget(
            f"{target.describe()} is reachable only with mounts {names} outside their travel; "
            "widen travel_deg in the bench file or re-mount the optic",
            limit="travel",
            achievable=solution.peak,
        )
    an, src = bench.analyzer.extinction_ratio, bench.source.extinction_ratio
    d_a, d_s = 1.0 / an, 1.0 / src  # leak of each polarizer (0 for a perfect one)
    with np.errstate(divide="ignore"):
        ideal_cap = 0.5 / np.sqrt(np.float64(d_a + d_s))
    cap = pointer_cap(bench)
    if target.exact and cap < 1.2 * solution.peak:
        return InfeasibleTarget(
            f"{target.describe()} is beyond the pointer limit: the mean pointer shift cannot "
            f"exceed about one pointer width, so the exact amplification peaks near "
            f"{solution.peak:.4g} here (sigma/g = "
            f"{bench.coupling.pointer_sigma / bench.coupling.strength:.4g}); use a wider "
            "pointer (larger pointer_sigma) or a weaker coupling",
            limit="pointer",
            achievable=solution.peak,
        )
    worse = "analyzer" if d_a >= d_s else "source polarizer"
    arm = [
        e.key
        for e in (*bench.pre, *bench.post)
        if e.type == "polarizer" and np.isfinite(e.extinction_ratio)
    ]
    also = (
        f"; the leak of the polarizer(s) {', '.join(arm)} in the arms adds to the floor and "
        "is not in that estimate"
        if arm
        else ""
    )
    return InfeasibleTarget(
        f"{target.describe()} is beyond the extinction limit: light leaking through the source "
        f"polarizer (extinction ratio {src:.3g}, leak d_s = 1/ER = {d_s:.3g}) and the analyzer "
        f"(extinction ratio {an:.3g}, leak d_a = {d_a:.3g}) sets a floor under the "
        f"post-selection, which caps the amplification at {solution.peak:.4g} on this bench "
        f"(for ideal states about 1/(2 sqrt(d_a + d_s)) = {ideal_cap:.4g}, with the combined "
        f"leak d_a + d_s = {d_a + d_s:.3g}){also}; the {worse} leaks more: use one with a "
        "higher extinction ratio",
        limit="extinction",
        achievable=solution.peak,
    )


def _null_beyond_travel(bench: Bench, names: Sequence[str]) -> bool:
    """Would the mounts reach a null if their travel were a full turn?"""
    wide = {
        n: replace(
            bench.mounts[n],
            travel_deg=(bench.mounts[n].reading_deg - 180.0, bench.mounts[n].reading_deg + 180.0),
        )
        for n in names
    }
    fixed = {k: v for k, v in bench.readings().items() if k not in names}
    free_bench = bench.with_mounts(**wide)
    if len(names) == 1:
        return any(s.null is not None for s in segments(free_bench, names[0], fixed))
    return len(nulls(free_bench, names, fixed)) > 0


def _best_in_travel(bench: Bench, target: Target, names: Sequence[str]) -> float | None:
    """Largest |target quantity| over one mount's travel (None for several mounts)."""
    if len(names) != 1:
        return None
    lo, hi = bench.mounts[names[0]].travel_deg
    fixed = {k: v for k, v in bench.readings().items() if k != names[0]}
    grid = np.linspace(lo, hi, 4001)
    return float(np.nanmax(np.abs(target.figure(observe(bench, _with(fixed, names[0], grid))))))


def _leak_infeasible(bench: Bench, target: Target, name: str) -> InfeasibleTarget:
    fixed = {k: v for k, v in bench.readings().items() if k != name}
    segs = segments(bench, name, fixed)
    grid = np.concatenate([np.linspace(s.low, s.high, 721) for s in segs])
    leak = observe(bench, _with(fixed, name, grid)).leak_rate
    lo, hi = float(np.min(leak)), float(np.max(leak))
    if target.value.real < lo:
        return InfeasibleTarget(
            f"a leak rate of {target.value.real:.3g} is below the floor of {lo:.3g} per photon "
            "set by the extinction of the analyzer and source polarizer; use polarizers with a "
            "higher extinction ratio",
            limit="extinction",
            achievable=lo,
        )
    return InfeasibleTarget(
        f"a leak rate of {target.value.real:.3g} is above the largest reachable, {hi:.3g} per "
        "photon (analyzer transmission and the optics' losses); lower the target",
        limit="transmission",
        achievable=hi,
    )


def _distance(root: Root, names: Sequence[str], near: Mapping[str, float]) -> float:
    return float(np.linalg.norm([r - near[n] for r, n in zip(root.readings, names, strict=True)]))


def preferred(
    roots: Sequence[Root],
    names: Sequence[str],
    near: Mapping[str, float],
) -> list[int]:
    """Root indices in the default order: weak-regime roots (outside the extinction floor)
    first, each group nearest to ``near`` first."""
    return sorted(
        range(len(roots)), key=lambda k: (roots[k].inner, _distance(roots[k], names, near))
    )


def make_target(
    amplification: float | None = None,
    *,
    axis: str = "re",
    exact: bool = False,
    weak_value: complex | None = None,
    leak_rate: float | None = None,
) -> Target:
    """Validate exactly one target and build it (errors name the argument)."""
    given = [
        k
        for k, v in (
            ("amplification", amplification),
            ("weak_value", weak_value),
            ("leak_rate", leak_rate),
        )
        if v is not None
    ]
    if len(given) != 1:
        raise InputError(
            "give exactly one target: amplification, weak_value or leak_rate"
            + (f" (got {', '.join(given)})" if given else "")
        )
    if axis not in ("re", "im"):
        raise InputError(f"axis {axis!r}: allowed are 're' and 'im'")
    if amplification is not None:
        x = float(amplification)
        if not np.isfinite(x) or x <= 0:
            raise InputError(
                f"amplification must be a finite number > 0 (its size; both signs "
                f"are offered as branches), got {amplification!r}"
            )
        return Target("amplification", complex(x), axis, bool(exact))
    if weak_value is not None:
        w = complex(weak_value)
        if not np.isfinite(w) or w == 0:
            raise InputError(
                f"weak_value must be a finite, non-zero complex number, got {weak_value!r}"
            )
        return Target("weak_value", w)
    p = float(leak_rate)  # type: ignore[arg-type]
    if not np.isfinite(p) or not 0 < p <= 1:
        raise InputError(f"leak_rate must be a probability per photon in (0, 1], got {leak_rate!r}")
    return Target("leak_rate", complex(p))


def readings_for_amplification(
    bench: Bench,
    amplification: ArrayLike,
    *,
    axis: str | None = None,
    exact: bool = False,
) -> dict[str, ArrayLike]:
    """Readings (deg) of the planner's unknown mounts (the imbalance mount, plus the phase mount
    when the bench has one, which keeps the weak value on ``axis``) for an amplification of
    size ``amplification`` (linear ``Re``/``Im A_w``, or exact pointer response). ``axis``
    defaults to the readout's (position and phase: ``re``; momentum: ``im``).

    The root chosen is the plan's default: the weak-regime branch nearest the file readings;
    for an array of targets, each is taken nearest the previous one (a continuous sweep).
    Floats in, floats out; arrays give arrays of the same shape. Raises
    :class:`InfeasibleTarget` (with the limit) for an unreachable target.
    """
    from ..prediction import readout_axis

    values = np.asarray(amplification, float)
    axis = axis or readout_axis(bench)
    near = dict(bench.readings())
    out: dict[str, list[float]] = {}
    for x in values.ravel():
        target = make_target(float(x), axis=axis, exact=exact)
        sol = solve(bench, target)
        if not sol.roots:
            raise infeasible(bench, target, sol)
        root = sol.roots[preferred(sol.roots, sol.unknowns, near)[0]]
        for name, r in zip(sol.unknowns, root.readings, strict=True):
            out.setdefault(name, []).append(r)
            near[name] = r
    if values.ndim == 0:
        return {k: float(v[0]) for k, v in out.items()}
    return {k: np.array(v).reshape(values.shape) for k, v in out.items()}
