"""Simulated devices with no optics in them: mechanics, timing and faults only.

``SimMount`` models a stepper-driven rotation mount:

- the *drive* (what ``position()`` reads back) goes to the commanded reading rounded to
  ``resolution_deg``;
- the *element* follows the drive through a mechanical play of ``backlash_deg``: it stays
  within ``[drive, drive + backlash_deg]``, so an approach from below (increasing readings)
  leaves it exactly at the drive, an approach from above leaves it ``backlash_deg`` high, and a
  reversal turns the drive up to ``backlash_deg`` before the element moves;
- each move that turns the drive adds a fresh repeatability error drawn from a normal
  distribution of rms ``noise_rms_deg`` (seeded ``numpy.random.Generator``);
- ``true_angle_deg()`` returns the element's actual reading (play and noise included); the
  engine builds its physics-driven counter on it with ``FunctionCounter``.

Moves take ``|distance| / speed_deg_s`` seconds; with ``realtime=False`` (the default) nothing
sleeps and the time is only added up in ``motion_s``.
"""

from __future__ import annotations

import math
import operator
import threading
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from aligner.errors import BadReply, DeviceError, Disconnected, InputError

from ._checks import check_channels, check_dwell, check_reading

__all__ = [
    "FunctionCounter",
    "MoveRecord",
    "SimMount",
    "SimPointer",
    "SimShutter",
    "poisson_counter",
]


@dataclass(frozen=True)
class MoveRecord:
    """One commanded move: target reading (deg) and the drive's direction of approach.

    ``direction`` is +1 when the drive turned towards larger readings, -1 towards smaller,
    0 when it did not turn. ``kind`` is ``"move"`` or ``"home"``.
    """

    target_deg: float
    direction: int
    kind: str = "move"


class _Closable:
    """Shared open/closed bookkeeping: a closed simulated device raises ``Disconnected``."""

    name: str
    _closed: bool = False

    def _require_open(self) -> None:
        if self._closed:
            raise Disconnected(f"{self.name}: the device was closed; open it again")

    def close(self) -> None:
        """Release the device; later calls raise ``Disconnected``."""
        self._closed = True


class SimMount(_Closable):
    """A simulated rotation mount (see the module docstring for the mechanical model)."""

    capabilities = frozenset({"home", "stop", "readback"})

    def __init__(
        self,
        name: str = "sim-mount",
        *,
        resolution_deg: float = 0.0,
        backlash_deg: float = 0.0,
        speed_deg_s: float = 20.0,
        travel_deg: tuple[float, float] = (-math.inf, math.inf),
        noise_rms_deg: float = 0.0,
        seed: int | None = None,
        realtime: bool = False,
        start_deg: float = 0.0,
    ) -> None:
        for key, value in (
            ("resolution_deg", resolution_deg),
            ("backlash_deg", backlash_deg),
            ("noise_rms_deg", noise_rms_deg),
        ):
            if not (math.isfinite(value) and value >= 0.0):
                raise InputError(f"{key} must be a finite number >= 0 deg, got {value!r}")
        if not speed_deg_s > 0.0:
            raise InputError(f"speed_deg_s must be > 0 deg/s, got {speed_deg_s!r}")
        low, high = (float(v) for v in travel_deg)
        if not low < high:
            raise InputError(f"travel_deg must be (low, high) with low < high, got {travel_deg!r}")
        self.name = name
        self.resolution_deg = float(resolution_deg)
        self.backlash_deg = float(backlash_deg)
        self.speed_deg_s = float(speed_deg_s)
        self.travel_deg = (low, high)
        self.noise_rms_deg = float(noise_rms_deg)
        self.realtime = realtime
        self.move_log: list[MoveRecord] = []
        #: total time (s) the drive has spent turning, slept or not.
        self.motion_s = 0.0
        self._rng = np.random.default_rng(seed)
        self._stop = threading.Event()
        self._moving = False
        start = self._check_travel(check_reading(start_deg, "start_deg"))
        self._drive = self._quantize(start)
        self._element = self._drive
        self._error = 0.0

    # -- mechanics -------------------------------------------------------------------------

    def _quantize(self, reading: float) -> float:
        if self.resolution_deg == 0.0:
            return reading
        return round(reading / self.resolution_deg) * self.resolution_deg

    def _check_travel(self, reading: float) -> float:
        low, high = self.travel_deg
        if not low <= reading <= high:
            raise InputError(
                f"{self.name}: {reading:g} deg is outside the travel limits "
                f"{low:g} to {high:g} deg (travel_deg); choose a reading inside them"
            )
        return reading

    def _turn_drive(self, target: float) -> None:
        """Turn the drive to ``target`` (already quantized), sleeping if realtime."""
        start = self._drive
        duration = abs(target - start) / self.speed_deg_s
        stopped = False
        if self.realtime and duration > 0.0:
            self._stop.clear()
            self._moving = True
            t0 = time.monotonic()
            try:
                stopped = self._stop.wait(duration)
            finally:
                self._moving = False
            elapsed = min(time.monotonic() - t0, duration)
            reached = self._quantize(start + (target - start) * elapsed / duration)
        else:
            elapsed, reached = duration, target
        self.motion_s += elapsed
        self._drive = reached
        # mechanical play: the element stays within [drive, drive + backlash]
        self._element = min(max(self._element, reached), reached + self.backlash_deg)
        if reached != start and self.noise_rms_deg > 0.0:
            self._error = float(self._rng.normal(0.0, self.noise_rms_deg))
        if stopped:
            raise DeviceError(
                f"{self.name}: the move to {target:g} deg was stopped at {reached:g} deg "
                "by stop(); move again to continue"
            )

    @staticmethod
    def _direction(start: float, target: float) -> int:
        return (target > start) - (target < start)

    # -- RotationMount ---------------------------------------------------------------------

    def move_to(self, reading_deg: float) -> None:
        """Move to ``reading_deg`` (deg); blocks (sleeps only if realtime) until there."""
        self._require_open()
        target = self._quantize(self._check_travel(check_reading(reading_deg)))
        self.move_log.append(MoveRecord(float(reading_deg), self._direction(self._drive, target)))
        self._turn_drive(target)

    def position(self) -> float:
        """The drive's reading (deg), quantized; play and noise are not seen here."""
        self._require_open()
        return self._drive

    def true_angle_deg(self) -> float:
        """The element's actual mechanical reading (deg), with play and repeatability error."""
        return self._element + self._error

    def home(self) -> None:
        """Drive to reading 0 and re-reference there (play taken up, as from below)."""
        self._require_open()
        self.move_log.append(MoveRecord(0.0, self._direction(self._drive, 0.0), kind="home"))
        self._turn_drive(0.0)
        self._element = self._drive

    def stop(self) -> None:
        """Stop a realtime move under way (a no-op otherwise)."""
        self._stop.set()

    def is_moving(self) -> bool:
        """True while a realtime move is under way."""
        return self._moving


class SimShutter(_Closable):
    """A simulated shutter; ``history`` lists every state it was put in (True = open)."""

    capabilities = frozenset({"readback"})

    def __init__(self, name: str = "sim-shutter", *, start_open: bool = False) -> None:
        self.name = name
        self._open = bool(start_open)
        self.history: list[bool] = [self._open]

    def _set(self, state: bool) -> None:
        self._require_open()
        self._open = state
        self.history.append(state)

    def open(self) -> None:
        """Open the beam path."""
        self._set(True)

    def shut(self) -> None:
        """Block the beam path."""
        self._set(False)

    def is_open(self) -> bool:
        """True when the beam path is open."""
        self._require_open()
        return self._open


class FunctionCounter(_Closable):
    """A counter made from one function ``fn(dwell_s) -> tuple[int, ...]`` (one per channel)."""

    def __init__(
        self,
        fn: Callable[[float], Sequence[int]],
        channels: int = 1,
        *,
        name: str = "function-counter",
    ) -> None:
        self.fn = fn
        self.channels = check_channels(channels)
        self.name = name

    def count(self, dwell_s: float) -> tuple[int, ...]:
        """Call ``fn(dwell_s)``; check it gave ``channels`` whole counts >= 0."""
        self._require_open()
        raw = self.fn(check_dwell(dwell_s))
        try:
            counts = tuple(operator.index(c) for c in raw)
        except TypeError:
            raise BadReply(f"{self.name}: expected whole counts, got {raw!r}") from None
        if len(counts) != self.channels or min(counts) < 0:
            raise BadReply(f"{self.name}: expected {self.channels} whole counts >= 0, got {raw!r}")
        return counts


def poisson_counter(
    rates_hz: Sequence[float] = (1000.0,), *, seed: int | None = None, name: str = "sim-counter"
) -> FunctionCounter:
    """A ``FunctionCounter`` drawing Poisson counts at fixed mean rates (counts/s per channel)."""
    rates = np.asarray(rates_hz, dtype=float)
    if rates.ndim != 1 or not np.all(np.isfinite(rates) & (rates >= 0.0)):
        raise InputError(f"rates_hz must be finite rates >= 0 counts/s, got {rates_hz!r}")
    rng = np.random.default_rng(seed)

    def draw(dwell_s: float) -> tuple[int, ...]:
        return tuple(int(c) for c in rng.poisson(rates * dwell_s))

    return FunctionCounter(draw, channels=len(rates), name=name)


class SimPointer(_Closable):
    """A pointer reader returning ``fn(dwell_s) -> (mean, standard error)`` in pointer units."""

    def __init__(
        self, fn: Callable[[float], tuple[float, float]], *, name: str = "sim-pointer"
    ) -> None:
        self.fn = fn
        self.name = name

    def read(self, dwell_s: float) -> tuple[float, float]:
        """Call ``fn(dwell_s)``; check it gave a finite mean and a finite standard error >= 0."""
        self._require_open()
        raw = self.fn(check_dwell(dwell_s))
        try:
            mean, sem = (float(v) for v in raw)
        except (TypeError, ValueError):
            raise BadReply(f"{self.name}: expected (mean, standard error), got {raw!r}") from None
        if not (math.isfinite(mean) and math.isfinite(sem) and sem >= 0.0):
            raise BadReply(
                f"{self.name}: expected a finite mean and a standard error >= 0, got {raw!r}"
            )
        return mean, sem
