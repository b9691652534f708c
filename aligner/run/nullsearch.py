"""Closed-loop null search: a run on a station's devices, not a fit.

1. A coarse scan around the bench file's null, narrowed to where the guard's prediction stays
   dark (every move through :meth:`Station.move`, every count through :meth:`Station.count`);
2. a Poisson fit of every point taken so far (:func:`aligner.fit.null.fit_null`);
3. a move to the fitted null (every move ends turning upwards, so backlash is always taken up
   on the same side);
4. a finer scan around it, and again, until the step is below the mount resolution or the
   statistical error of the null, or ``max_rounds`` is reached.

However it ends -- converged, a guard trip, a device fault, Ctrl-C -- the shutter is shut
(:meth:`Station.secure`) before the search returns or raises; the result's ``shutter`` says
how (:data:`aligner.run.station.SHUTTER_STATES`). A guard trip keeps the points already taken
in its ``points``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING, Any

import numpy as np

from ..errors import GuardTrip, InputError
from ..fit.csvdata import CountScan
from ..fit.null import NullFit, fit_null
from ..fit.scanmodel import null_reading_deg, require_mount

if TYPE_CHECKING:
    from .station import Station

__all__ = ["NullSearchResult", "search_null"]


@dataclass(frozen=True)
class NullSearchResult:
    """Outcome of :func:`search_null`: the fitted null reading (deg) and its error, the last fit
    (with the floor left at the null, its own quantity: :class:`aligner.fit.null.NullFit`),
    how many rounds and counter reads it took, each round's step (deg), and whether it
    converged (``message`` says why it stopped)."""

    mount: str
    null_reading_deg: float
    null_reading_err_deg: float
    final_reading_deg: float
    rounds: int
    counter_reads: int
    steps_deg: tuple[float, ...]
    converged: bool
    message: str
    last_fit: NullFit
    shutter: str = "none"

    def to_json(self) -> dict[str, Any]:
        """The JSON document of ``aligner null --json`` (docs/json.md): the search, and its
        last fit as ``aligner fit null --json`` gives it (the floor, the extinction ratios)."""
        return {
            "mount": self.mount,
            "null_reading_deg": self.null_reading_deg,
            "null_reading_err_deg": self.null_reading_err_deg,
            "final_reading_deg": self.final_reading_deg,
            "last_fit": self.last_fit.to_json(),
            "rounds": self.rounds,
            "counter_reads": self.counter_reads,
            "steps_deg": list(self.steps_deg),
            "converged": self.converged,
            "message": self.message,
            "shutter": self.shutter,
        }


def _safe_span(station: Station, name: str, centre: float, largest: float) -> float:
    """Half-width (deg) around ``centre`` where the predicted rate stays below half the
    guard's limit, at most ``largest``."""
    guard, readings = station.guard, station.readings()
    offsets = np.linspace(0.0, largest, 201)
    up = guard.rates({**readings, name: centre + offsets})
    down = guard.rates({**readings, name: centre - offsets})
    ok = (np.asarray(up) <= guard.limit / 2) & (np.asarray(down) <= guard.limit / 2)
    bad = np.flatnonzero(~ok)
    if not bad.size:
        return largest
    return float(offsets[bad[0] - 1]) if bad[0] > 0 else 0.0


def _check_options(span_deg: float, points: int, max_rounds: int, dwell_s: float) -> None:
    """One clear error per bad option, in the words of the CLI options of ``aligner null``."""
    problems = [
        (
            not (math.isfinite(span_deg) and span_deg > 0),
            f"the scan half-width span_deg (--span) must be a number of degrees > 0, got "
            f"{span_deg!r}",
        ),
        (
            not (points >= 5 and points == int(points)),
            f"the points per scan (points, --points) must be a whole number >= 5 (a null fit has "
            f"up to 3 parameters), got {points!r}",
        ),
        (
            not (max_rounds >= 1 and max_rounds == int(max_rounds)),
            f"the most scan-and-fit rounds (max_rounds, --rounds) must be a whole number >= 1, "
            f"got {max_rounds!r}",
        ),
        (
            not (math.isfinite(dwell_s) and dwell_s > 0),
            f"the gate per point dwell_s (--dwell) must be a number of seconds > 0, got "
            f"{dwell_s!r}",
        ),
    ]
    bad = [text for failed, text in problems if failed]
    if bad:
        raise InputError("null search: " + "; ".join(bad))


def search_null(
    station: Station,
    mount_name: str | None = None,
    *,
    dwell_s: float = 0.2,
    span_deg: float = 2.0,
    points: int = 21,
    max_rounds: int = 8,
) -> NullSearchResult:
    """Find the crossed reading of mount ``mount_name`` (default: the analyzer's) on the
    station's devices (see the module docstring); ``span_deg`` is the half-width of the coarse
    scan (narrowed to where the guard's prediction stays dark)."""
    bench = station.bench
    name = require_mount(bench, mount_name, bench.analyzer.mount, "null search")
    _check_options(span_deg, points, max_rounds, dwell_s)
    try:
        result = _search(station, name, dwell_s, span_deg, points, max_rounds)
    finally:
        shut = station.secure()
    return replace(result, shutter=shut)


def _search(
    station: Station, name: str, dwell_s: float, span_deg: float, points: int, max_rounds: int
) -> NullSearchResult:
    bench = station.bench
    current = station.readings(fresh=True)
    here = bench.with_mounts(
        **{k: replace(m, reading_deg=current[k]) for k, m in bench.mounts.items()}
    )
    resolution = bench.mounts[name].resolution_deg
    centre = null_reading_deg(here, name, bench.mounts[name].reading_deg, span_deg=10.0)
    span = _safe_span(station, name, centre, span_deg)
    if span < 10 * resolution:
        raise GuardTrip(
            f"null search: the predicted rate near the null of {name} is above "
            "the guard's limit; lower the source power before searching"
        )
    taken: list[tuple[float, int]] = []

    def measure(target: float) -> None:
        reached = station.move(name, target).readback_deg
        station.expose(station.readings())
        taken.append((reached, station.count(dwell_s)[0]))

    steps: list[float] = []
    fit: NullFit | None = None
    message = f"stopped after {max_rounds} rounds without converging"
    converged = False
    for _ in range(max_rounds):
        for target in np.linspace(centre - span, centre + span, points):
            try:
                measure(float(target))
            except GuardTrip as trip:
                trip.points = list(taken)  # type: ignore[attr-defined]
                raise
        data = np.array(taken, float)
        scan = CountScan(data[:, 0], data[:, 1], None, None, f"null search of {name}")
        fit = fit_null(here, scan, name, dwell_s=dwell_s)
        if not fit.fit.success:
            steps.append(math.nan)
            message = f"the last fit failed: {fit.fit.message}"
            continue
        step = abs(fit.null_reading_deg - centre)
        steps.append(step)
        centre = fit.null_reading_deg
        error = fit.null_reading_err_deg
        if step <= max(resolution, error if math.isfinite(error) else 0.0):
            converged = True
            below = (
                f"the mount resolution {resolution:g} deg"
                if step <= resolution
                else f"the statistical error of the null {error:.4f} deg"
            )
            message = f"converged: the last step, {step:.4f} deg, is within {below}"
            break
        span = max(4 * error if math.isfinite(error) else span / 4, 5 * resolution, span / 4)
    assert fit is not None
    final = station.move(name, centre).readback_deg
    return NullSearchResult(
        mount=name,
        null_reading_deg=fit.null_reading_deg,
        null_reading_err_deg=fit.null_reading_err_deg,
        final_reading_deg=final,
        rounds=len(steps),
        counter_reads=len(taken),
        steps_deg=tuple(steps),
        converged=converged,
        message=message,
        last_fit=fit,
    )
