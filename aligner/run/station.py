"""The station: one bench and its opened devices, the one object every front end drives.

The command line, the desk and recipes all open a :class:`Station` from a bench and call its
operations; none of them talks to a device or decides a safety rule itself:

* :meth:`Station.move` -- one guarded move: the detector guard plans the path (shutter shut,
  a dark route, or a refusal), timeouts and garbled replies are retried, and the read-back
  must agree with the commanded reading within the mount's tolerance
  (:attr:`aligner.bench.Mount.readback_tolerance_deg`), else :class:`ReadbackMismatch`;
* :meth:`Station.expose` and :meth:`Station.count` -- open the shutter only where the
  prediction allows it, count in gates (a short probe gate first), check every gate's
  exposure against ``safe_rate``;
* :meth:`Station.secure` -- stop every mount and shut the shutter, confirmed where the shutter
  can say; every operation that opens the shutter ends with it, whatever ends it (done, a
  fault, bad input, a guard trip, Ctrl-C or another signal, a full disk, an exception);
* sweeps (:meth:`Station.sweep`, :meth:`Station.resume`) and the closed-loop null search
  (:meth:`Station.null_search`).

Opening refuses a bench without ``detector.safe_rate`` and, on a bench with real devices, any
undeclared device (:mod:`aligner.run.devices`); it shuts the shutter and homes the mounts that
need it. :attr:`Station.provenance` is what every run records about the devices.

Laser safety: the guard is no substitute for a beam block and a shutter that fails closed;
follow your local laser-safety rules and your laser safety officer.
"""

from __future__ import annotations

import hashlib
import math
import threading
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, TypeVar

from ..bench import Bench
from ..errors import (
    AlignerError,
    BadReply,
    DeviceError,
    DeviceRefused,
    DeviceTimeout,
    ReadbackMismatch,
    SignalInterrupt,
    StopRequested,
)
from .devices import DeviceSet, Provenance, open_devices
from .guard import DetectorGuard
from .log import Event

if TYPE_CHECKING:
    from .log import LoggedPoint, RunLog
    from .nullsearch import NullSearchResult
    from .schedule import PlannedPoint, Schedule
    from .sweep import SweepResult

    StartCallback = Callable[[int, Sequence[PlannedPoint]], None]
    PointCallback = Callable[[LoggedPoint, int, int], None]

__all__ = ["RETRYABLE", "SHUTTER_STATES", "Move", "Station", "StationOptions", "shutter_words"]

T = TypeVar("T")

#: Device errors worth a retry (each failure is logged as a fault event).
RETRYABLE = (DeviceTimeout, BadReply, DeviceRefused)


#: The shutter after it was told to shut -> plain words for the operator.
SHUTTER_STATES = {
    "confirmed": "shutter shut (confirmed by the shutter)",
    "acknowledged": "shutter shut (acknowledged; it cannot report its state)",
    "failed": "the shutter did NOT confirm it is shut: block the beam by hand",
    "none": "no shutter: the beam is blocked only if you block it",
}


def shutter_words(state: str) -> str:
    """Plain words for a shutter state (:data:`SHUTTER_STATES`)."""
    return SHUTTER_STATES[state]


@dataclass(frozen=True)
class StationOptions:
    """Knobs: ``retries`` per device operation, guard ``headroom`` (fraction of safe_rate a
    prediction may reach) and path ``step_deg``, the first (probe) gate ``probe_s`` and the
    longest later gate ``gate_s`` (s; a dwell is split so a bright beam is caught early)."""

    retries: int = 2
    headroom: float = 0.5
    step_deg: float = 0.1
    probe_s: float = 0.01
    gate_s: float = 1.0


@dataclass(frozen=True)
class Move:
    """A finished guarded move: the reading commanded (deg; the target, or an optically
    equivalent one the guard chose to keep the detector dark), the read-back (deg), whether
    the shutter was shut for it, and the guard's note."""

    mount: str
    commanded_deg: float
    readback_deg: float
    shut_for_move: bool
    note: str = ""


def bench_sha256(bench: Bench) -> str | None:
    """SHA-256 of the bench file's bytes (None without a readable file)."""
    if bench.path is None:
        return None
    try:
        return hashlib.sha256(bench.path.read_bytes()).hexdigest()
    except OSError:
        return None


def _require_limits(bench: Bench) -> None:
    """Every detector that can see light has a safe rate: the post-selected one always, the
    reference one when it is the analyzer's other port (it sees nearly the whole beam)."""
    from ..errors import BenchFileError

    bench.detector.require_safe_rate(bench.path)
    ref = bench.reference
    if ref.kind == "port" and not math.isfinite(ref.safe_rate):
        raise BenchFileError(
            str(bench.path or "<bench>"),
            "reference.safe_rate",
            "is required with kind = 'port': the other port's detector sees nearly the whole "
            "beam; give the count rate it must never see (counts/s, from its data sheet)",
        )


class Station:
    """A bench and its devices (see the module docstring). Use :meth:`open`; close it (or use
    it as a context manager) to shut the shutter and release the devices."""

    def __init__(
        self, bench: Bench, devices: DeviceSet, options: StationOptions | None = None
    ) -> None:
        from .. import __version__

        _require_limits(bench)
        self.devices = devices
        self.options = options or StationOptions()
        self.bench = bench
        self.guard = self._guard(bench)
        #: events (faults, guard notes, device remarks) not yet written to a run log
        self.events: list[Event] = []
        self._positions: dict[str, float | None] = dict.fromkeys(devices.mounts)
        self._stop = threading.Event()
        self._stop_signal = 0
        self.provenance = Provenance(
            devices.records, __version__, bench_sha256(bench), devices.seed
        )

    @classmethod
    def open(
        cls,
        bench: Bench,
        *,
        overrides: Mapping[str, tuple[str, str | None]] | None = None,
        realtime: bool = False,
        seed: int | None = None,
        options: StationOptions | None = None,
    ) -> Station:
        """Open ``bench``'s devices (command-line ``overrides`` for the counter, shutter and
        pointer: ``{"counter": (spec, profile)}``), shut the shutter and home the mounts that
        need it. ``seed`` seeds the simulated devices (default: the file's, else fresh)."""
        _require_limits(bench)
        devices = open_devices(bench, overrides=overrides, realtime=realtime, seed=seed)
        try:
            station = cls(bench, devices, options)
            station.prepare()
        except BaseException:
            devices.close()
            raise
        return station

    def _guard(self, bench: Bench) -> DetectorGuard:
        return DetectorGuard(
            bench,
            has_shutter=self.devices.shutter is not None,
            headroom=self.options.headroom,
            step_deg=self.options.step_deg,
        )

    def use_bench(self, bench: Bench) -> None:
        """Predict and guard with ``bench`` from now on (e.g. the bench a resumed run was
        logged with); its ``safe_rate`` must be stated."""
        _require_limits(bench)
        self.bench = bench
        self.guard = self._guard(bench)

    # -- life cycle ----------------------------------------------------------------------------

    def __enter__(self) -> Station:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def prepare(self) -> None:
        """Shut the shutter, then home every mount whose driver needs it before moving."""
        self.shut()
        for name, mount in self.devices.mounts.items():
            if "needs_home" in mount.capabilities:
                self.attempt(f"homing {name}", None, mount.home)
                self.events.append(Event("device", f"{name} homed (its driver needs it)"))
                self._positions[name] = None
        self.guard.forget()

    def close(self) -> str:
        """Secure the bench (mounts stopped, shutter shut) and release the devices; return the
        shutter's state (:data:`SHUTTER_STATES`)."""
        try:
            return self.secure()
        finally:
            self.devices.close()

    # -- stopping ------------------------------------------------------------------------------

    def request_stop(self, signum: int = 0) -> None:
        """Ask the running operation to stop (thread-safe): a count stops before its next gate
        (:meth:`check_stop`; the partial count is discarded), a sweep or a recipe pauses,
        resumable. ``signum`` is the signal that asks (0: the operator); a signal outranks an
        operator's request."""
        self._stop_signal = signum or self._stop_signal
        self._stop.set()

    def clear_stop(self) -> None:
        """Forget a stop request (once it is answered, or before a new operation)."""
        self._stop_signal = 0
        self._stop.clear()

    @property
    def stop_requested(self) -> bool:
        """True after :meth:`request_stop` until :meth:`clear_stop`."""
        return self._stop.is_set()

    def check_stop(self) -> None:
        """Raise the interrupt a stop request stands for: ``SignalInterrupt`` for a signal,
        ``StopRequested`` for the operator (both end a run as Ctrl-C does: secured,
        resumable); nothing without a request."""
        if not self._stop.is_set():
            return
        if self._stop_signal:
            raise SignalInterrupt(self._stop_signal)
        raise StopRequested("stop asked for")

    # -- device operations ---------------------------------------------------------------------

    def attempt(self, what: str, idx: int | None, fn: Callable[[], T]) -> T:
        """Run ``fn``; retry timeouts, garbled replies and refusals ``retries`` times (each
        failure becomes a fault event and makes every position unknown). What the devices
        noticed meanwhile (late replies discarded, ...) becomes ``device`` events."""
        tries = self.options.retries + 1
        for n in range(1, tries + 1):
            try:
                return fn()
            except RETRYABLE as exc:
                self._collect_notices(idx)
                self.events.append(Event("fault", f"{what}: {exc} (attempt {n} of {tries})", idx))
                self._positions = dict.fromkeys(self._positions)
                self.guard.forget()
                if n == tries:
                    raise
            finally:
                self._collect_notices(idx)
        raise AssertionError("unreachable")

    def _collect_notices(self, idx: int | None) -> None:
        devices = self.devices
        every = (*devices.mounts.values(), devices.counter, devices.shutter, devices.pointer)
        for device in {id(d): d for d in every if d is not None}.values():
            take = getattr(device, "take_notices", None)
            if take is not None:
                self.events.extend(Event("device", text, idx) for text in take())

    def position(self, name: str, idx: int | None = None) -> float:
        """Read-back of mount ``name`` (deg), cached until the mount moves or a fault."""
        known = self._positions[name]
        if known is None:
            known = float(self.attempt(f"reading {name}", idx, self.devices.mounts[name].position))
            self._positions[name] = known
        return known

    def readings(self, idx: int | None = None, *, fresh: bool = False) -> dict[str, float]:
        """Every mount's read-back (deg); ``fresh`` asks the devices again."""
        if fresh:
            self._positions = dict.fromkeys(self._positions)
        return {name: self.position(name, idx) for name in self.devices.mounts}

    def shutter_open(self) -> bool:
        """True when the beam may reach the detector (no shutter: always)."""
        shutter = self.devices.shutter
        return True if shutter is None else shutter.is_open()

    def shut(self, idx: int | None = None) -> str:
        """Shut the shutter (with retries); return :data:`SHUTTER_STATES` ``confirmed`` (it
        reads back shut), ``acknowledged`` (it cannot read back its state) or ``none`` (no
        shutter). A shutter that reads back open raises ``DeviceError``."""
        shutter = self.devices.shutter
        if shutter is None:
            return "none"
        self.attempt("shutting the shutter", idx, shutter.shut)
        if "readback" not in shutter.capabilities:
            return "acknowledged"
        if shutter.is_open():
            raise DeviceError(
                "the shutter was told to shut but reports open: block the beam by hand"
            )
        return "confirmed"

    def move(self, name: str, target: float, idx: int | None = None) -> Move:
        """Bring mount ``name`` to ``target`` (deg) the guarded way (see the module
        docstring)."""
        if name not in self.devices.mounts:
            from ..errors import InputError

            raise InputError(f"no mount {name!r}; the bench has {', '.join(self.devices.mounts)}")
        return self.attempt(
            f"moving {name} to {target:.4f} deg", idx, lambda: self._move(name, target, idx)
        )

    def _move(self, name: str, target: float, idx: int | None) -> Move:
        readings = self.readings(idx)
        plan = self.guard.plan_move(readings, name, target, shutter_open=self.shutter_open())
        if plan.note and not plan.shut_for_move:
            self.events.append(Event("guard", plan.note, idx))
        if plan.shut_for_move:
            self.shut(idx)
        mount = self.devices.mounts[name]
        self._positions[name] = None
        for waypoint in plan.waypoints[1:]:
            mount.move_to(waypoint)
        reached = self.position(name, idx)
        tolerance = self.bench.mounts[name].readback_tolerance_deg
        if abs(reached - plan.target) > tolerance + 1e-9:
            self._positions[name] = None
            self.guard.forget()
            raise ReadbackMismatch(
                f"{name} was sent to {plan.target:.5f} deg but reads {reached:.5f} deg (off by "
                f"{reached - plan.target:+.5f} deg; tolerance {tolerance:g} deg = resolution + "
                f"backlash + repeatability, or mounts.{name}.readback_tol_deg): check the "
                "device profile's steps per degree, number format (decimal/hex, signed width) "
                "and sense, and that the mount is not blocked"
            )
        self.guard.moved(name, reached)
        return Move(name, plan.target, reached, plan.shut_for_move, plan.note)

    def expose(self, readings: Mapping[str, float], idx: int | None = None) -> None:
        """Open the shutter, if the predicted exposure at ``readings`` (deg; the worst case
        over the bench's stated uncertainties) allows it."""
        predicted = float(self.guard.rates(dict(readings)))
        self.guard.check_point(predicted, readings)
        self.guard.check_reference_point(readings)
        shutter = self.devices.shutter
        if shutter is not None and not shutter.is_open():
            self.attempt("opening the shutter", idx, shutter.open)

    @property
    def gate_step_s(self) -> float:
        """The counter's gate step (s): its window or gate resolution; 0 for any gate."""
        return float(getattr(self.devices.counter, "gate_step_s", 0.0) or 0.0)

    def check_dwell(self, dwell_s: float) -> None:
        """Refuse a dwell (s) the counter cannot gate: not a whole number of its gate step."""
        from ..errors import InputError

        step = self.gate_step_s
        if step > 0 and abs(max(1, round(dwell_s / step)) * step - dwell_s) > 1e-3 * dwell_s:
            raise InputError(
                f"dwell_s = {dwell_s:g} s is not a whole number of the counter's {step:g} s "
                f"gate step; use a multiple of {step:g} s"
            )

    def gates(self, dwell_s: float) -> list[float]:
        """Gate lengths (s) summing to ``dwell_s``: a short probe gate first, so a bright beam
        is caught within ``probe_s`` of opening the shutter, then gates of at most ``gate_s``;
        every gate a whole number of the counter's gate step when it has one."""
        step = self.gate_step_s
        if step > 0:
            total = max(1, round(dwell_s / step))
            probe = max(1, math.ceil(self.options.probe_s / step - 1e-9))
            if probe >= total:
                return [total * step]
            rest = total - probe
            n = max(1, math.ceil(rest / max(1, math.floor(self.options.gate_s / step))))
            sizes = [rest // n + (1 if i < rest % n else 0) for i in range(n)]
            return [probe * step] + [k * step for k in sizes]
        probe_s = min(self.options.probe_s, dwell_s)
        rest_s = dwell_s - probe_s
        if rest_s <= 1e-9:  # a dwell no longer than the probe
            return [dwell_s]
        n = max(1, math.ceil(rest_s / self.options.gate_s - 1e-9))
        return [probe_s] + [rest_s / n] * n

    def count(self, dwell_s: float, idx: int | None = None) -> tuple[int, int | None]:
        """Count for ``dwell_s`` s in gates, every gate's exposure checked: (post-selected
        counts, reference counts or None without a reference channel). A stop request ends
        the count before its next gate (:meth:`check_stop` raises; what was counted is
        discarded and a note event says so)."""
        return self.attempt("counting", idx, lambda: self._count(dwell_s, idx))

    def _count(self, dwell_s: float, idx: int | None) -> tuple[int, int | None]:
        counter = self.devices.counter
        post = ref = 0
        counted_s = 0.0
        for gate in self.gates(dwell_s):
            if counted_s > 0 and self.stop_requested:
                self.events.append(
                    Event(
                        "note",
                        f"counting stopped after {counted_s:g} of {dwell_s:g} s; the partial "
                        "count is discarded",
                        idx,
                    )
                )
            self.check_stop()
            counts = counter.count(gate)
            counted_s += gate
            self.guard.check_counts(counts[0], gate)
            if len(counts) > 1:
                self.guard.check_reference_counts(counts[1], gate)
            post += counts[0]
            ref += counts[1] if len(counts) > 1 else 0
        has_reference = counter.channels > 1 and self.bench.reference.kind != "none"
        return post, (ref if has_reference else None)

    def read_pointer(
        self, dwell_s: float, idx: int | None = None
    ) -> tuple[float | None, float | None]:
        """The pointer reading (mean, standard error; pointer units), (None, None) without a
        pointer reader."""
        reader = self.devices.pointer
        if reader is None:
            return None, None
        return self.attempt("reading the pointer", idx, lambda: reader.read(dwell_s))

    def secure(self) -> str:
        """Stop every mount and shut the shutter, never raising: failures become fault
        events. Returns the shutter's state (:data:`SHUTTER_STATES`; ``failed`` when it could
        not be shut or reads back open)."""
        for name, mount in self.devices.mounts.items():
            if "stop" in mount.capabilities:
                try:
                    mount.stop()
                except DeviceError as exc:
                    self.events.append(Event("fault", f"stopping {name}: {exc}"))
        try:
            return self.shut()
        except DeviceError as exc:
            self.events.append(
                Event("fault", f"shutter: did not confirm it is shut ({exc}); block the beam")
            )
            return "failed"

    def take_events(self) -> list[Event]:
        """The events gathered since the last call (for the run log)."""
        events, self.events = self.events, []
        return events

    # -- operations ----------------------------------------------------------------------------

    def start_sweep(
        self,
        log: RunLog,
        schedule: Schedule,
        *,
        plan: Sequence[PlannedPoint] | None = None,
        on_start: StartCallback | None = None,
        on_point: PointCallback | None = None,
    ) -> SweepResult:
        """Plan ``schedule`` on the station's bench (or take ``plan``), refuse a plan the guard
        or the travel forbids before anything is logged or moves, then log a new run and
        measure it. ``on_start(run_id, plan)`` is called once the run exists."""
        from .schedule import plan_points
        from .sweep import check_plan, run_sweep, start_run

        points = tuple(plan) if plan is not None else plan_points(self.bench, schedule)
        self.check_dwell(schedule.dwell_s)
        check_plan(self, points)
        run_id = start_run(log, self, schedule, points)
        if on_start is not None:
            on_start(run_id, points)
        return run_sweep(
            self,
            log,
            run_id,
            points,
            dwell_s=schedule.dwell_s,
            settle_s=schedule.settle_s,
            on_point=on_point,
        )

    def resume_sweep(
        self,
        log: RunLog,
        run_id: int,
        *,
        on_start: StartCallback | None = None,
        on_point: PointCallback | None = None,
    ) -> SweepResult:
        """Finish run ``run_id`` with the bench it was logged with (but the lower ``safe_rate``
        of that and the station's bench) and this station's devices, which the run's record
        gains; a note in the log says when the bench file changed since."""
        from ..errors import InputError
        from .sweep import check_plan, resume_bench, resume_plan, run_sweep

        record = log.run(run_id)
        if record.status == "complete":
            raise InputError(f"run {record.id} is already complete ({record.points} points)")
        logged, plan = resume_plan(record)
        bench, note = resume_bench(logged, self.bench, record)
        self.use_bench(bench)
        done = log.done_indices(run_id)
        try:
            self.check_dwell(record.dwell_s)
            check_plan(self, [p for p in plan if p.index not in done])
        except AlignerError as exc:
            if note:
                exc.args = (f"{note}. {exc}",)
            raise
        log.add_session(run_id, self.provenance.to_json())
        left = len(plan) - len(done)
        self.events.append(Event("resume", f"resumed with {left} of {len(plan)} points left"))
        if note:
            self.events.append(Event("note", note))
        if on_start is not None:
            on_start(run_id, plan)
        return run_sweep(
            self,
            log,
            run_id,
            plan,
            dwell_s=record.dwell_s,
            settle_s=record.settle_s,
            on_point=on_point,
            notes=(note,) if note else (),
        )

    def null_search(self, mount: str | None = None, **kwargs: Any) -> NullSearchResult:
        """The closed-loop null search of ``mount`` (:func:`.nullsearch.search_null`)."""
        from .nullsearch import search_null

        return search_null(self, mount, **kwargs)
