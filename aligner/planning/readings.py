"""Readings for a target imbalance or amplification, one call each (what schedules use)."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from numpy.typing import ArrayLike

from ..bench import Bench
from ..errors import InfeasibleTarget, InputError
from ..nulls import Segment, segments, signed_imbalance_deg
from .infeasible import infeasible
from .roots import preferred, solve
from .targets import make_target

__all__ = ["readings_for_amplification", "readings_for_imbalance"]


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
