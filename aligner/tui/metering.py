"""The alignment meter's loop: count in short gates, step mounts through the guard, repeat.

A :class:`MeterSession` runs in one worker thread and holds the devices while it runs
(:meth:`aligner.tui.backend.DeskBackend.using_devices`). Each turn of the loop it makes the
mount steps asked since the last turn (added up per mount, so a burst of keystrokes is one
move; each move through :meth:`aligner.run.station.Station.move`, which may shut the shutter
for the move or refuse it), exposes the detector only where the prediction at the read-back
allows it (:meth:`~aligner.run.station.Station.expose`), counts one gate
(:meth:`~aligner.run.station.Station.count`: every gate checked against ``safe_rate``) and
reports a :class:`MeterSample`.

With a typed-in counter nothing is counted: the operator types the rates read off their own
instrument, and each typed rate is checked against ``safe_rate`` the way a counted gate is.

However the loop ends (stop asked, guard trip, device fault, the desk quitting), the mounts
stop and the shutter shuts (:meth:`~aligner.run.station.Station.secure`); the last
:class:`MeterState` says how it ended and in what state the shutter is.
"""

from __future__ import annotations

import queue
import threading
import time
from collections import Counter
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING, cast

from ..errors import AlignerError, DeviceError, GuardTrip

if TYPE_CHECKING:
    from ..run.station import Station
    from .backend import DeskBackend

__all__ = ["MeterSample", "MeterSession", "MeterState"]

#: How long the loop waits for a typed rate or a step before it looks again (s).
IDLE_WAIT_S = 0.1


@dataclass(frozen=True)
class MeterSample:
    """One gate (or one typed line): the counted rate of each channel (counts/s; post-selected
    first, then the reference), the read-back readings (deg), the predicted counted rate of the
    post-selected channel there (counts/s, dead time and dark counts included), when it was
    taken (``time.monotonic`` s) and whether the operator typed it."""

    rates: tuple[float, ...]
    readings: Mapping[str, float]
    predicted: float
    t_s: float
    typed: bool = False


@dataclass(frozen=True)
class MeterState:
    """What the meter is doing: ``phase`` (``opening``, ``counting``, ``waiting`` for typed
    rates, ``refused`` by the guard at these readings, ``stopped``), plain words, whether it is
    a problem, and the shutter's state once stopped (:data:`SHUTTER_STATES` key, or "")."""

    phase: str
    message: str
    problem: bool = False
    shutter: str = ""
    readings: Mapping[str, float] = field(default_factory=dict)


class MeterSession:
    """One run of the meter (see the module docstring). ``gate_s`` is the gate length (s)."""

    def __init__(self, backend: DeskBackend, gate_s: float) -> None:
        self.backend = backend
        self.gate_s = gate_s
        self._requests: queue.Queue[tuple[str, object]] = queue.Queue()
        self._stop = threading.Event()
        self._station: Station | None = None  # while the loop holds the devices

    # -- asked from the UI thread --------------------------------------------------------------

    def step(self, mount: str, steps: int) -> None:
        """Turn ``mount`` by ``steps`` of its resolution (added to steps not yet made)."""
        self._requests.put(("step", (mount, steps)))

    def typed(self, rates: tuple[float, ...]) -> None:
        """The rates (counts/s per channel) the operator read off a typed-in counter."""
        self._requests.put(("typed", rates))

    def stop(self) -> None:
        """Stop before the next gate (the shutter shuts)."""
        self._stop.set()
        self._requests.put(("stop", None))
        station = self._station
        if station is not None:  # cut a count in progress short
            station.request_stop()

    # -- the loop (worker thread) --------------------------------------------------------------

    def run(
        self,
        readings: Mapping[str, float],
        on_sample: Callable[[MeterSample], None],
        on_state: Callable[[MeterState], None],
    ) -> None:
        """Run until stopped (blocking). ``readings`` (deg) open the devices if needed."""
        on_state(MeterState("opening", "opening the devices…"))
        try:
            with self.backend.using_devices("the meter", readings) as station:
                typed = _typed_counter(station)
                self._station = station
                if self._stop.is_set():  # stopped while the devices were being opened
                    station.request_stop()
                try:
                    self._loop(station, typed, on_sample, on_state)
                    ending = MeterState("stopped", "stopped")
                except KeyboardInterrupt:  # a stop request or a signal, met while counting
                    ending = MeterState("stopped", "stopped")
                except GuardTrip as exc:
                    ending = MeterState("stopped", f"STOPPED BY THE DETECTOR GUARD: {exc}", True)
                except DeviceError as exc:
                    ending = MeterState("stopped", f"STOPPED BY A DEVICE FAULT: {exc}", True)
                except AlignerError as exc:
                    ending = MeterState("stopped", f"stopped: {exc}", True)
                finally:
                    self._station = None
                    shutter = station.secure()
                    station.clear_stop()
                on_state(replace(ending, shutter=shutter, readings=_read_back(station)))
        except AlignerError as exc:  # the devices could not be opened or are busy
            on_state(MeterState("stopped", f"not started: {exc}", True))

    def _loop(
        self,
        station: Station,
        typed: bool,
        on_sample: Callable[[MeterSample], None],
        on_state: Callable[[MeterState], None],
    ) -> None:
        steps: Counter[str] = Counter()
        exposed = refused = False
        while not self._stop.is_set():
            rates = self._take_requests(steps, wait=typed or refused)
            if self._stop.is_set():
                return
            if steps:
                self._move(station, steps, on_state)
                exposed = refused = False
            if refused:
                continue  # wait for a step back towards the null, or a stop
            readings = station.readings()
            if not exposed:
                try:
                    station.expose(readings)
                except GuardTrip as exc:
                    on_state(MeterState("refused", str(exc), True, readings=readings))
                    refused = True
                    continue
                exposed = True
                words = "type the rates you read" if typed else "counting"
                on_state(MeterState("waiting" if typed else "counting", words, readings=readings))
            if typed:
                if rates is not None:
                    station.guard.check_counts(round(rates[0]), 1.0)  # as a counted gate
                    on_sample(self._sample(rates, readings, typed=True))
                continue
            started = time.monotonic()
            post, ref = station.count(self.gate_s)
            counted_s = sum(station.gates(self.gate_s))  # whole steps of the counter's gate
            counted = (post / counted_s,) + (() if ref is None else (ref / counted_s,))
            on_sample(self._sample(counted, readings, typed=False))
            if station.devices.simulated_time:  # keep a live pace on a simulated clock
                time.sleep(max(0.0, self.gate_s - (time.monotonic() - started)))

    def _take_requests(self, steps: Counter[str], *, wait: bool) -> tuple[float, ...] | None:
        """Gather the steps asked so far into ``steps``; return the typed rates if some came
        (the latest). With ``wait``, wait a moment for the first request."""
        rates: tuple[float, ...] | None = None
        try:
            item = self._requests.get(timeout=IDLE_WAIT_S) if wait else self._requests.get_nowait()
            while True:
                kind, value = item
                if kind == "step":
                    mount, n = cast(tuple[str, int], value)
                    steps[mount] += n
                elif kind == "typed":
                    rates = cast(tuple[float, ...], value)
                item = self._requests.get_nowait()
        except queue.Empty:
            return rates

    def _move(
        self, station: Station, steps: Counter[str], on_state: Callable[[MeterState], None]
    ) -> None:
        """Make the gathered steps, one guarded move per mount (clipped to its travel); a
        move the guard refuses is reported and not made."""
        here = station.readings()
        for mount, n in list(steps.items()):
            del steps[mount]
            m = self.backend.bench.mounts[mount]
            low, high = m.travel_deg
            target = min(max(here[mount] + n * m.resolution_deg, low), high)
            try:
                station.move(mount, target)
            except GuardTrip as exc:
                on_state(MeterState("refused", str(exc), True, readings=here))
            except DeviceError as exc:
                self.backend.note_error(mount, exc)
                raise

    def _sample(
        self, rates: tuple[float, ...], readings: Mapping[str, float], *, typed: bool
    ) -> MeterSample:
        predicted = float(self.backend.predict(readings).measured_rate)
        return MeterSample(tuple(rates), dict(readings), predicted, time.monotonic(), typed)


def _typed_counter(station: Station) -> bool:
    return any(r.role == "counter" and r.kind == "typed" for r in station.provenance.devices)


def _read_back(station: Station) -> dict[str, float]:
    """Every mount's read-back (deg), or none when a device does not answer."""
    try:
        return station.readings()
    except DeviceError:
        return {}
