"""Sweep schedules: the one-word forms of the command line and their mapping to mount readings.

Forms (imbalance in degrees, signed as :func:`aligner.model.imbalance_deg`: positive on the
high-reading side of the null of the bench's ``imbalance_mount``):

``linear:START:STOP:N``
    N imbalances evenly spaced from START to STOP (deg).
``amplification:START:STOP:N``
    N amplifications log-spaced from START to STOP (real axis; e.g. ``amplification:5:60:8``).
``list:V1,V2,...``
    explicit imbalances (deg).
``outback:START:STOP:N``
    N imbalances out from START to STOP, then the same N back (2N points), a hysteresis check.

``repeats`` runs the whole schedule that many times in a row (passes); ``dwell_s`` is the
count time per point (s) and ``settle_s`` the wait after a move before the read-back (s).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from ..bench import Bench
from ..errors import ParameterError, outside_range

__all__ = [
    "DWELL_RANGE_S",
    "FORMS",
    "REPEATS_RANGE",
    "SETTLE_RANGE_S",
    "PlannedPoint",
    "Schedule",
    "parse_schedule",
    "plan_points",
]

#: schedule form -> (quantity stepped, help text)
FORMS: Mapping[str, tuple[str, str]] = {
    "linear": ("imbalance_deg", "linear:START:STOP:N  N imbalances (deg) evenly spaced"),
    "amplification": ("amplification", "amplification:START:STOP:N  N amplifications, log-spaced"),
    "list": ("imbalance_deg", "list:V1,V2,...  explicit imbalances (deg)"),
    "outback": ("imbalance_deg", "outback:START:STOP:N  N imbalances out, then the same back"),
}
#: Most points one run may plan (all passes), so a typo cannot start a run of days.
MAX_POINTS = 10_000
#: Allowed size of a schedule's values: amplifications, and imbalances (deg).
AMPLIFICATION_RANGE = (1e-3, 1e6)
IMBALANCE_LIMIT_DEG = 90.0
#: Allowed count time per point (s), wait after a move (s) and passes of one run: the command
#: line's options and the desk's fields take the same bounds.
DWELL_RANGE_S = (1e-3, 3600.0)
SETTLE_RANGE_S = (0.0, 600.0)
REPEATS_RANGE = (1, 1000)


@dataclass(frozen=True)
class Schedule:
    """A parsed schedule. ``targets`` are one pass, in ``quantity`` (``imbalance_deg`` in deg, or
    ``amplification``, dimensionless)."""

    spec: str
    form: str
    quantity: str
    targets: tuple[float, ...]
    repeats: int = 1
    dwell_s: float = 1.0
    settle_s: float = 0.0

    @property
    def n_points(self) -> int:
        """Points over all passes."""
        return len(self.targets) * self.repeats


@dataclass(frozen=True)
class PlannedPoint:
    """One point of a planned sweep: the target and the mount readings (deg) that realise it."""

    index: int
    pass_index: int
    target: float
    readings: Mapping[str, float]


def _error(spec: str, problem: str) -> ParameterError:
    forms = "; ".join(text for _, text in FORMS.values())
    return ParameterError("schedule", f"{spec!r}: {problem} (forms: {forms})")


def _check_range(parameter: str, value: float, bounds: tuple[float, float]) -> None:
    low, high = bounds
    if not (math.isfinite(value) and low <= value <= high):
        integer = isinstance(value, int)
        raise ParameterError(parameter, outside_range(f"{value:.12g}", low, high, integer=integer))


def _number(spec: str, text: str, what: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise _error(spec, f"{what} {text!r} is not a number") from None
    if not math.isfinite(value):
        raise _error(spec, f"{what} must be finite, got {text!r}")
    return value


def _range(spec: str, fields: list[str]) -> tuple[float, float, int]:
    if len(fields) != 3:
        raise _error(spec, "expected START:STOP:N")
    start = _number(spec, fields[0], "START")
    stop = _number(spec, fields[1], "STOP")
    try:
        n = int(fields[2])
    except ValueError:
        raise _error(spec, f"N {fields[2]!r} is not a whole number of points") from None
    if not 1 <= n <= MAX_POINTS:
        raise _error(spec, f"N must be at least 1 and at most {MAX_POINTS}, got {n}")
    return start, stop, n


def parse_schedule(
    spec: str, *, repeats: int = 1, dwell_s: float = 1.0, settle_s: float = 0.0
) -> Schedule:
    """Parse a one-word schedule (see the module docstring). Bad input raises
    ``ParameterError`` naming ``schedule``, ``repeats``, ``dwell_s`` or ``settle_s``
    (:data:`DWELL_RANGE_S`, :data:`SETTLE_RANGE_S`, :data:`REPEATS_RANGE`); a command or the
    desk names its own option or field instead."""
    import numpy as np

    form, sep, rest = spec.strip().partition(":")
    if not sep or form not in FORMS:
        raise _error(spec, f"unknown form {form!r}")
    _check_range("repeats", repeats, REPEATS_RANGE)
    _check_range("dwell_s", dwell_s, DWELL_RANGE_S)
    _check_range("settle_s", settle_s, SETTLE_RANGE_S)
    if form == "list":
        items = [t for t in rest.split(",") if t.strip()]
        if not items:
            raise _error(spec, "expected at least one value after list:")
        targets = [_number(spec, t.strip(), "value") for t in items]
        if len(targets) > MAX_POINTS:
            raise _error(spec, f"{len(targets)} values is more than {MAX_POINTS}")
    else:
        start, stop, n = _range(spec, rest.split(":"))
        if form == "amplification":
            low, high = AMPLIFICATION_RANGE
            if not (low <= start <= high and low <= stop <= high):
                raise _error(spec, f"amplifications must be from {low:g} to {high:g}")
            targets = np.geomspace(start, stop, n).tolist()
        else:
            targets = np.linspace(start, stop, n).tolist()
            if form == "outback":
                targets = targets + targets[::-1]
    if len(targets) * repeats > MAX_POINTS:
        raise _error(spec, f"{len(targets) * repeats} points is more than {MAX_POINTS}")
    if form != "amplification" and any(abs(t) > IMBALANCE_LIMIT_DEG for t in targets):
        raise _error(
            spec, f"imbalances must be from -{IMBALANCE_LIMIT_DEG:g} to {IMBALANCE_LIMIT_DEG:g} deg"
        )
    return Schedule(
        spec.strip(),
        form,
        FORMS[form][0],
        tuple(float(t) for t in targets),
        repeats,
        float(dwell_s),
        float(settle_s),
    )


def plan_points(bench: Bench, schedule: Schedule) -> tuple[PlannedPoint, ...]:
    """Readings of every mount for every point, through the planner (mounts it does not solve
    for stay at the file readings); each imbalance is solved near the previous point's reading
    so a sweep stays by one null."""
    from ..planning import readings_for_amplification, readings_for_imbalance

    base = bench.readings()
    one_pass: list[dict[str, float]] = []
    near: float | None = None
    for target in schedule.targets:
        solved: Mapping[str, Any] = (
            readings_for_amplification(bench, target, axis="re")
            if schedule.quantity == "amplification"
            else readings_for_imbalance(bench, target, near=near)
        )
        readings = {**base, **{name: float(value) for name, value in solved.items()}}
        near = readings[bench.imbalance_mount]
        one_pass.append(readings)
    n = len(one_pass)
    return tuple(
        PlannedPoint(p * n + i, p, schedule.targets[i], one_pass[i])
        for p in range(schedule.repeats)
        for i in range(n)
    )
