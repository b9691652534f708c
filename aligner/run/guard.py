"""The detector guard: no move and no count may expose the detector above its safe rate.

Before a mount moves with the detector exposed, the guard predicts the count rate (true rate,
before dead-time losses, dark counts included; :func:`aligner.prediction.predict` on the bench
file) at readings every ``step_deg`` along the whole path the mount will turn through,
backlash approach included (one vectorized prediction over the mount's travel per setting of
the other mounts, then a look-up per move) -- a polarizer turned far from the null passes
through full transmission on the way, so checking the end point is not enough. The move is then:

1. made with the shutter open when the whole path stays below ``headroom * safe_rate``;
2. otherwise made with the shutter shut, when there is a shutter;
3. otherwise made to an optically equivalent reading (every polarization element repeats
   every 180 deg) whose path stays dark, if one lies within travel;
4. otherwise refused with :class:`~aligner.errors.GuardTrip`.

Counting is allowed only where the prediction at the read-back readings is below the limit,
and every gate's measured rate (corrected for dead time) is checked: above ``safe_rate`` the
shutter is shut and the sweep stops with ``GuardTrip``.

Every predicted rate is the worst case over the bench file's stated uncertainties
(:func:`uncertainty_benches`): each mount's offset at +/- :data:`OFFSET_SIGMAS` times its
``offset_err_deg`` and ``repeatability_deg`` combined (rms errors), each waveplate's retardance
at +/- its ``retardance_tol_waves`` (a bound), every combination of signs. ``headroom``
(default 0.5) covers what the file does not state (extinction errors, a drifting source;
common practice, no source).

Approach: every move ends turning towards higher readings by at least ``overshoot_deg``
(default ``max(2 backlash, 10 resolution)``), so the mechanical play is always taken up on
the same side.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..bench import Bench
from ..errors import GuardTrip, InputError

__all__ = [
    "ELEMENT_PERIOD_DEG",
    "OFFSET_SIGMAS",
    "DetectorGuard",
    "MovePlan",
    "uncertainty_benches",
]

#: Every element a mount can hold (polarizer, waveplate, rotator up to a global phase) looks
#: the same after half a turn.
ELEMENT_PERIOD_DEG = 180.0
#: Mount offsets are rms errors: the guard takes them this many standard deviations out.
OFFSET_SIGMAS = 2.0
#: Up to this many uncertain parameters every combination of signs is predicted; beyond it
#: each parameter alone and the two all-same-sign corners (2 k + 2 benches, not 2^k).
_MAX_CORNER_ITEMS = 5
_PLATES = ("hwp", "qwp", "retarder")


def uncertainty_benches(bench: Bench) -> list[Bench]:
    """``bench`` with its stated uncertainties pushed to their extremes (see the module
    docstring); just ``[bench]`` when the file states none."""
    import itertools
    from dataclasses import replace

    items: list[tuple[str, Any, float]] = [
        ("mount", name, OFFSET_SIGMAS * math.hypot(m.offset_err_deg, m.repeatability_deg))
        for name, m in bench.mounts.items()
        if m.offset_err_deg > 0 or m.repeatability_deg > 0
    ]
    items += [
        (arm, i, e.retardance_tol_waves)
        for arm in ("pre", "post")
        for i, e in enumerate(getattr(bench, arm))
        if e.type in _PLATES and e.retardance_tol_waves > 0
    ]
    if not items:
        return [bench]
    k = len(items)
    if k <= _MAX_CORNER_ITEMS:
        signs = list(itertools.product((-1.0, 1.0), repeat=k))
    else:
        signs = [tuple(s * (i == j) for i in range(k)) for j in range(k) for s in (-1.0, 1.0)]
        signs += [(1.0,) * k, (-1.0,) * k]

    def shifted(sign: tuple[float, ...]) -> Bench:
        mounts = dict(bench.mounts)
        arms = {"pre": list(bench.pre), "post": list(bench.post)}
        for s, (kind, key, size) in zip(sign, items, strict=True):
            if kind == "mount":
                mounts[key] = replace(mounts[key], offset_deg=mounts[key].offset_deg + s * size)
            else:
                e = arms[kind][key]
                arms[kind][key] = replace(e, retardance_waves=e.retardance_waves + s * size)
        return replace(bench, mounts=mounts, pre=tuple(arms["pre"]), post=tuple(arms["post"]))

    return [shifted(sign) for sign in signs]


@dataclass(frozen=True)
class MovePlan:
    """How to move one mount: the readings (deg) to visit in order (the last is the target),
    whether the shutter must be shut for the move, and the highest predicted rate (counts/s)
    along the path with the detector exposed."""

    mount: str
    waypoints: tuple[float, ...]
    shut_for_move: bool
    peak_rate: float
    note: str = ""

    @property
    def target(self) -> float:
        """The reading the move ends at (deg)."""
        return self.waypoints[-1]


class DetectorGuard:
    """Plans safe moves and checks count rates for one bench (see the module docstring)."""

    def __init__(
        self,
        bench: Bench,
        *,
        has_shutter: bool,
        headroom: float = 0.5,
        step_deg: float = 0.1,
        overshoot_deg: float | None = None,
    ) -> None:
        if not 0 < headroom <= 1:
            raise InputError(f"guard headroom must be in (0, 1], got {headroom:g}")
        if not step_deg > 0:
            raise InputError(f"guard step_deg must be > 0 deg, got {step_deg:g}")
        self.bench = bench
        self._benches = uncertainty_benches(bench)
        self.has_shutter = has_shutter
        self.safe_rate = bench.detector.safe_rate
        self.headroom = headroom
        self.limit = headroom * self.safe_rate
        self.step_deg = step_deg
        self._overshoot = overshoot_deg
        self._tables: dict[tuple[Any, ...], tuple[NDArray[np.float64], NDArray[np.float64]]] = {}
        # readings the mount was last approached from below at (None: unknown)
        self._approached: dict[str, float | None] = dict.fromkeys(bench.mounts)

    # -- prediction ---------------------------------------------------------------------------

    def rates(self, readings: Mapping[str, float | NDArray[np.float64]]) -> NDArray[np.float64]:
        """Predicted exposure rate (photons detected per second before saturation, counts/s)
        at ``readings`` (arrays broadcast), the worst case over the bench's stated
        uncertainties."""
        from ..prediction import predict

        return np.maximum.reduce(
            [np.asarray(predict(b, readings).exposure_rate, float) for b in self._benches]
        )

    @property
    def basis(self) -> str:
        """How the predictions are made, for messages."""
        if len(self._benches) == 1:
            return "predicted with the bench file's values (it states no uncertainties)"
        return (
            "predicted at the worst case of the bench file's stated uncertainties "
            "(offset_err_deg, repeatability_deg, retardance_tol_waves)"
        )

    def _table(
        self,
        readings: Mapping[str, float],
        mount: str,
    ) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        """Predicted rate at every ``step_deg`` over the whole travel of ``mount``, the other
        mounts at ``readings`` (computed once per setting of the others)."""
        key = (
            mount,
            tuple(sorted((k, round(float(v), 9)) for k, v in readings.items() if k != mount)),
        )
        table = self._tables.get(key)
        if table is None:
            low, high = self.bench.mounts[mount].travel_deg
            grid = np.linspace(low, high, math.ceil((high - low) / self.step_deg) + 1)
            table = (grid, self.rates({**readings, mount: grid}))
            if len(self._tables) >= 64:
                self._tables.clear()
            self._tables[key] = table
        return table

    def path_peak(
        self, readings: Mapping[str, float], mount: str, waypoints: tuple[float, ...]
    ) -> float:
        """Highest predicted rate (counts/s) along the path of ``mount`` through ``waypoints``
        with the others fixed: the rate at every ``step_deg`` the path covers and at its
        waypoints (interpolated)."""
        grid, rates = self._table(readings, mount)
        a, b = np.searchsorted(grid, [min(waypoints), max(waypoints)])
        ends = np.interp(waypoints, grid, rates)
        return float(max(np.max(ends), np.max(rates[a:b], initial=0.0)))

    # -- moves --------------------------------------------------------------------------------

    def overshoot_deg(self, mount: str) -> float:
        """How far below a target a downward move turns before approaching it (deg)."""
        if self._overshoot is not None:
            return self._overshoot
        m = self.bench.mounts[mount]
        return max(2 * m.backlash_deg, 10 * m.resolution_deg)

    def route(self, mount: str, start: float, target: float) -> tuple[float, ...]:
        """Waypoints from ``start`` to ``target`` (deg) that end turning upwards; just
        ``(start,)`` when the mount already sits there, approached from below."""
        m = self.bench.mounts[mount]
        low, high = m.travel_deg
        if not low <= target <= high:
            raise InputError(
                f"mount {mount!r}: reading {target:g} deg is outside travel_deg "
                f"[{low:g}, {high:g}] of the bench file"
            )
        approached = self._approached[mount]
        if approached is not None and math.isclose(approached, start, abs_tol=1e-9):
            if abs(target - start) <= m.resolution_deg / 2:
                return (start,)
            if target > start:
                return (start, target)
        below = target - self.overshoot_deg(mount)
        if below < low:
            raise InputError(
                f"mount {mount!r}: cannot approach {target:g} deg from below "
                f"(travel_deg starts at {low:g}); plan readings at least "
                f"{self.overshoot_deg(mount):g} deg inside the travel"
            )
        return (start, below, target)

    def plan_move(
        self, readings: Mapping[str, float], mount: str, target: float, *, shutter_open: bool = True
    ) -> MovePlan:
        """A safe way to bring ``mount`` from ``readings[mount]`` to ``target`` (deg).

        ``readings`` are the current readings of every mount. Raises ``GuardTrip`` when no
        safe way exists.
        """
        start = float(readings[mount])
        direct = self.route(mount, start, target)
        if len(direct) == 1:  # already there: nothing turns
            return MovePlan(mount, direct, shut_for_move=False, peak_rate=0.0)
        peak = self.path_peak(readings, mount, direct)
        if peak <= self.limit or not shutter_open:
            return MovePlan(mount, direct, shut_for_move=False, peak_rate=peak)
        if self.has_shutter:
            return MovePlan(
                mount,
                direct,
                shut_for_move=True,
                peak_rate=peak,
                note=f"shutter shut for the move of {mount}: the path passes {peak:.3g} counts/s",
            )
        m = self.bench.mounts[mount]
        k_low = math.ceil((m.travel_deg[0] - target) / ELEMENT_PERIOD_DEG)
        k_high = math.floor((m.travel_deg[1] - target) / ELEMENT_PERIOD_DEG)
        shifts = sorted((k for k in range(k_low, k_high + 1) if k), key=abs)
        for k in shifts:
            alt = target + k * ELEMENT_PERIOD_DEG
            try:
                path = self.route(mount, start, alt)
            except InputError:
                continue
            alt_peak = self.path_peak(readings, mount, path)
            if alt_peak <= self.limit:
                return MovePlan(
                    mount,
                    path,
                    shut_for_move=False,
                    peak_rate=alt_peak,
                    note=f"{mount} moved to {alt:g} deg instead of {target:g} deg "
                    "(the same element angle) to keep the detector dark",
                )
        raise GuardTrip(
            f"detector guard: moving {mount} from {start:g} to {target:g} deg would expose the "
            f"detector to about {peak:.3g} counts/s ({self.basis}; limit {self.limit:.3g}, "
            f"{self.headroom:g} x safe_rate {self.safe_rate:.3g}) and there is no shutter and no "
            "dark way round; block the beam and move by hand, or add a shutter"
        )

    def moved(self, mount: str, reached: float) -> None:
        """Record that a planned move (ending upwards) was made and ``mount`` reads ``reached``
        (deg): a further move up from there needs no new approach."""
        self._approached[mount] = reached

    def forget(self) -> None:
        """After a fault: approach every mount from below again."""
        self._approached = dict.fromkeys(self.bench.mounts)

    # -- counting -----------------------------------------------------------------------------

    def check_point(self, predicted_rate: float, readings: Mapping[str, float]) -> None:
        """Refuse to expose the detector where the prediction exceeds the limit."""
        if predicted_rate > self.limit:
            where = ", ".join(f"{k} {v:.4g} deg" for k, v in readings.items())
            raise GuardTrip(
                f"detector guard: at {where} the rate is {predicted_rate:.3g} counts/s "
                f"({self.basis}), above the limit {self.limit:.3g} ({self.headroom:g} x "
                f"safe_rate {self.safe_rate:.3g}); the point is refused"
            )

    def check_counts(self, counts: int, dwell_s: float) -> float:
        """The exposure rate (counts/s) behind a gate's ``counts``; ``GuardTrip`` above
        safe_rate. CW: dead time undone. Pulsed: clicks per pulse inverted to photons per pulse
        (a saturated detector gives infinity, so it trips)."""
        from ..physics.detection import (
            click_probability_from_rate,
            mean_photons_from_clicks,
            true_rate,
        )

        d = self.bench.detector
        tau = d.dead_time_s
        if d.mode == "pulsed" and d.rep_rate_hz is not None:
            p = click_probability_from_rate(counts / dwell_s, d.rep_rate_hz, tau)
            with np.errstate(divide="ignore", invalid="ignore"):
                mu = mean_photons_from_clicks(
                    np.minimum(p, 1.0), d.efficiency, d.gate_dark_probability
                )
            rate = float(d.rep_rate_hz * (d.efficiency * mu + d.gate_dark_probability))
        else:
            rate = float(true_rate(counts / dwell_s, tau))
        if rate > self.safe_rate:
            raise GuardTrip(
                f"detector guard: measured {rate:.3g} counts/s, above safe_rate "
                f"{self.safe_rate:.3g}; the shutter is shut and the run stopped. Check the "
                "beam path and the analyzer before resuming"
            )
        return rate
