"""What the desk works with: the bench, the engine calls and the devices, in one object.

The app is handed a :class:`DeskBackend`; tests build one with simulated time and a temporary
run log, the command line with real-time simulated (or real) devices. Every number the desk
shows comes from one of these calls; nothing here computes optics.

The devices are the bench's declared ones (:class:`aligner.run.station.Station`), opened at
the first sweep, meter, move or device read, and used by one operation at a time
(:meth:`DeskBackend.using_devices`): a sweep, the meter, a move to a plan or a read of the
device states. A typed-in counter or pointer reader asks the operator through the desk (a
question on screen) instead of the terminal the desk is drawn on.
"""

from __future__ import annotations

import threading
from collections.abc import Callable, Iterator, Mapping, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, replace
from pathlib import Path
from typing import TYPE_CHECKING

from numpy.typing import ArrayLike

from ..bench import Bench
from ..errors import AlignerError, DeviceError, GuardTrip, InputError

if TYPE_CHECKING:
    from ..planning import Plan
    from ..prediction import Limits, Prediction
    from ..recipe import Entry, Operator, Recipe, RecipeRunResult
    from ..run.devices import DeviceChoice, DeviceRecord
    from ..run.log import LoggedPoint, RunLog
    from ..run.schedule import PlannedPoint, Schedule
    from ..run.station import Move, Station
    from ..run.sweep import SweepResult
    from .messages import PlanRequest
    from .metering import MeterSession

__all__ = ["DeskBackend", "DeviceLine", "MoveResult", "PointHook", "SweepPreview"]

#: Called from the sweep thread after each committed point: (point, done, total, run log).
PointHook = Callable[["LoggedPoint", int, int, "RunLog"], None]
#: How long an operation waits for the devices to be free (s): a meter finishing its gate.
DEVICE_WAIT_S = 5.0
#: How long a read of the device states waits for them (s); busy devices are not asked.
POLL_WAIT_S = 0.5


@dataclass(frozen=True)
class SweepPreview:
    """A sweep planned but not started: the bench at the desk's readings, the parsed schedule,
    the planned points, the mounts whose planned readings differ from the desk's by more
    than one resolution step (``moves``, bench order) and what to tell the operator before
    it starts (``warnings``: :func:`aligner.run.sweep.plan_warnings`, as the command line)."""

    bench: Bench
    schedule: Schedule
    points: tuple[PlannedPoint, ...]
    moves: tuple[str, ...]
    warnings: tuple[str, ...] = ()


@dataclass(frozen=True)
class DeviceLine:
    """One device of the bench as the desk shows it: ``role`` (mount, counter, shutter,
    pointer), ``name``, ``spec``, ``source`` (the bench key or option it came from), the kind
    its declaration gives (``declared_kind``) and the kind of the device actually opened
    (``kind``; equal to ``declared_kind`` until it is opened), ``profile``, ``identity``,
    ``state`` in words and the ``error`` the desk last met with it ("" when none)."""

    role: str
    name: str
    spec: str
    source: str
    declared_kind: str
    kind: str
    profile: str
    identity: str
    state: str
    error: str = ""

    @property
    def replaced(self) -> bool:
        """True when a device declared real was opened as something else (never expected:
        shown as an alarm)."""
        return self.declared_kind == "real" and self.kind != "real"


@dataclass(frozen=True)
class MoveResult:
    """Mounts moved by the desk: the guarded moves made (bench order), the read-back of every
    mount afterwards (deg), the shutter's state at the end (it is shut after every desk move:
    :data:`aligner.run.station.SHUTTER_STATES`) and, when the moves stopped early, why."""

    moves: tuple[Move, ...]
    readings: Mapping[str, float]
    shutter: str
    error: str = ""


class DeskBackend:
    """The bench, its run log and its devices, and the engine calls the desk makes.

    ``db_path`` is the SQLite run log (default: the user data folder); ``station_factory``
    opens the station (the bench's declared devices) for a bench (default
    :meth:`aligner.run.station.Station.open` with ``realtime``). The station is opened on
    first use and kept until :meth:`close`, which shuts the shutter.
    """

    def __init__(
        self,
        bench: Bench,
        *,
        db_path: str | Path | None = None,
        station_factory: Callable[[Bench], Station] | None = None,
        realtime: bool = False,
    ) -> None:
        from ..run.log import default_db_path

        self.bench = bench
        self.db_path = Path(db_path) if db_path is not None else default_db_path()
        self.realtime = realtime
        self._station_factory = station_factory
        self._station: Station | None = None
        self._devices = threading.Lock()
        #: What uses the devices now ("" when nothing does).
        self.busy = ""
        #: The last error the desk met with each device (by device name).
        self.errors: dict[str, str] = {}
        #: Asks the operator for a typed value (set by the app; None: no one to ask).
        self.ask: Callable[[str], str | None] | None = None
        #: Shows the operator a note from a typed-in device (set by the app).
        self.tell: Callable[[str], None] | None = None
        #: The signal that is ending the desk, if one is.
        self.signalled: int | None = None
        self._meter: MeterSession | None = None
        #: A stop asked for while an operation holds the devices (the signal, 0 the operator;
        #: None: none), kept for a station still being opened.
        self._stop: int | None = None

    @property
    def sweeping(self) -> bool:
        """True while a run (a sweep or a recipe) holds the devices, in its worker thread:
        quitting then asks first."""
        return self.busy in ("sweep", "recipe")

    # -- bench and predictions ---------------------------------------------------------------

    def bench_at(self, readings: Mapping[str, float]) -> Bench:
        """The bench with its mounts' readings (deg) replaced by ``readings``."""
        unknown = sorted(set(readings) - set(self.bench.mounts))
        if unknown:
            raise InputError(
                f"unknown mount(s) {', '.join(unknown)}; the bench has "
                f"{', '.join(self.bench.mounts)}"
            )
        return self.bench.with_mounts(
            **{
                name: replace(self.bench.mounts[name], reading_deg=float(value))
                for name, value in readings.items()
            }
        )

    def predict(self, readings: Mapping[str, ArrayLike]) -> Prediction:
        """:func:`aligner.prediction.predict` at ``readings`` (deg; arrays broadcast)."""
        from ..prediction import predict

        return predict(self.bench, dict(readings))

    def predict_curve(
        self, readings: Mapping[str, float], imbalance_readings: ArrayLike
    ) -> Prediction:
        """The prediction along the imbalance mount (an array of its readings, deg), the other
        mounts at ``readings``."""
        return self.predict({**readings, self.bench.imbalance_mount: imbalance_readings})

    def limits(self, readings: Mapping[str, float]) -> Limits:
        """:func:`aligner.prediction.limits` at ``readings`` (deg)."""
        from ..prediction import limits

        return limits(self.bench, dict(readings))

    def find_null(self, readings: Mapping[str, float]) -> float:
        """Reading (deg) of the imbalance mount at the null nearest its reading."""
        from ..prediction import find_null

        return find_null(self.bench, dict(readings))

    def plan(self, readings: Mapping[str, float], request: PlanRequest) -> Plan:
        """:func:`aligner.planning.plan` for ``request`` on the bench at ``readings`` (deg)."""
        from ..planning import plan

        r = request
        return plan(
            self.bench_at(readings), r.amplification, axis=r.axis, exact=r.exact, branch=r.branch
        )

    def reference_rate(self) -> float | None:
        """The reference channel's expected count rate (counts/s) from the bench file: source
        photon rate times the reference's counts per source photon, plus its dark rate; None
        without a reference channel."""
        ref = self.bench.reference
        if ref.fraction is None:
            return None
        return self.bench.source.photon_rate * ref.fraction + ref.dark_rate

    # -- devices ------------------------------------------------------------------------------

    @property
    def opened(self) -> bool:
        """True once the devices are open."""
        return self._station is not None

    def station(self, readings: Mapping[str, float]) -> Station:
        """The bench's station (its declared devices), opened on first use with the mounts at
        ``readings``; a typed-in counter or pointer reader then asks through the desk."""
        if self._station is None:
            bench = self.bench_at(readings)
            try:
                if self._station_factory is not None:
                    station = self._station_factory(bench)
                else:
                    from ..run.station import Station

                    station = Station.open(bench, realtime=self.realtime)
            except DeviceError as exc:
                self.errors["devices"] = str(exc)
                raise
            self.errors.pop("devices", None)
            self._typed_through_desk(station)
            self._station = station
        return self._station

    def _typed_through_desk(self, station: Station) -> None:
        """Give typed-in devices the desk's question box (the terminal belongs to the desk)."""
        if self.ask is None:
            return
        from aligner_drivers.open import open_counter, open_pointer

        ask, note = self._typed_input, self._typed_note
        for record in station.provenance.devices:
            if record.kind != "typed":
                continue
            if record.role == "counter":
                channels = station.devices.counter.channels
                station.devices.counter = open_counter(
                    "manual", name=record.name, channels=channels, input_fn=ask, output_fn=note
                )
            elif record.role == "pointer":
                station.devices.pointer = open_pointer(
                    "manual", name=record.name, input_fn=ask, output_fn=note
                )

    def _typed_input(self, prompt: str) -> str:
        answer = self.ask(prompt) if self.ask is not None else None
        if answer is None:
            raise EOFError
        return answer

    def _typed_note(self, text: str) -> None:
        if self.tell is not None:
            self.tell(text)

    @contextmanager
    def _holding(self, what: str, wait_s: float) -> Iterator[bool]:
        """Hold the devices for ``what`` if they come free within ``wait_s`` s (yields
        whether they did)."""
        held = self._devices.acquire(timeout=wait_s)
        if held:
            self.busy = what
        try:
            yield held
        finally:
            if held:
                self.busy = ""
                self._devices.release()

    @contextmanager
    def using_devices(self, what: str, readings: Mapping[str, float]) -> Iterator[Station]:
        """Hold the devices for ``what`` (one operation at a time; waits up to
        :data:`DEVICE_WAIT_S` for the one before to finish), opening them with the mounts at
        ``readings`` (deg) if they are not open yet."""
        with self._holding(what, DEVICE_WAIT_S) as held:
            if not held:
                raise InputError(
                    f"the devices are busy ({self.busy}); stop that first, then try {what} again"
                )
            self._stop = None  # a request from before this operation is not for it
            if self._station is not None:
                self._station.clear_stop()
            station = self.station(readings)
            if self._stop is not None:  # asked while the devices were being opened
                station.request_stop(self._stop)
            yield station

    def declared(self) -> tuple[DeviceChoice, ...]:
        """Every device the bench declares (:func:`aligner.run.devices.choose_devices`);
        ``InputError`` when the declarations are incomplete on a bench with real devices."""
        from ..run.devices import choose_devices

        return choose_devices(self.bench)

    def device_lines(self, readings: Mapping[str, float], *, poll: bool) -> tuple[DeviceLine, ...]:
        """The bench's devices and their states; ``poll`` opens the devices (if needed) and
        asks each for its state unless another operation holds them. Blocking: call it from a
        worker thread."""
        choices = {(c.role, c.name): c for c in self.declared()}
        states: dict[str, str] = {}
        if poll:
            with self._holding("reading the devices", POLL_WAIT_S) as held:
                if held:
                    station = self.station(readings)
                    states = {
                        r.name: self._poll(station, r.role, r.name) for r in _records(station)
                    }
        lines = []
        records = {(r.role, r.name): r for r in _records(self._station)}
        for key, c in choices.items():
            r = records.get(key)
            if r is None:
                state = "not opened yet (Ctrl+R, the meter or a sweep opens it)"
            elif r.kind == "absent":
                state = "none on this bench"
            elif c.name in states:
                state = states[c.name]
            else:
                state = f"in use ({self.busy})" if self.busy else "open"
            lines.append(
                DeviceLine(
                    role=c.role,
                    name=c.name,
                    spec=c.spec,
                    source=c.source,
                    declared_kind=c.kind,
                    kind=r.kind if r is not None else c.kind,
                    profile=(r.profile if r is not None else c.profile) or "",
                    identity=r.identity if r is not None else "",
                    state=state,
                    error=self.errors.get(c.name, ""),
                )
            )
        return tuple(lines)

    def _poll(self, station: Station, role: str, name: str) -> str:
        """One device's state in words (its error is remembered in :attr:`errors`)."""
        try:
            if role == "mount":
                mount = station.devices.mounts[name]
                moving = " (moving)" if mount.is_moving() else ""
                reading = float(station.attempt(f"reading {name}", None, mount.position))
                return f"reads {reading:.4f}°{moving}"
            if role == "shutter":
                shutter = station.devices.shutter
                if shutter is None:
                    return "none on this bench"
                confirmed = "readback" in shutter.capabilities
                word = "OPEN" if shutter.is_open() else "shut"
                return word + ("" if confirmed else " (as last commanded; it cannot say)")
            if role == "counter":
                n = station.devices.counter.channels
                return f"ready, {n} channel{'s' if n > 1 else ''}"
            return "ready" if station.devices.pointer is not None else "none on this bench"
        except DeviceError as exc:
            self.errors[name] = str(exc)
            return "NOT ANSWERING"

    def note_error(self, name: str, error: BaseException) -> None:
        """Remember ``error`` as the last one met with device ``name``."""
        self.errors[name] = str(error)

    # -- moves and the meter ------------------------------------------------------------------

    def move_mounts(
        self, targets: Mapping[str, float], readings: Mapping[str, float]
    ) -> MoveResult:
        """Turn the mounts to ``targets`` (deg), one after the other in bench order, each
        through the detector guard (:meth:`aligner.run.station.Station.move`), then shut the
        shutter, however the moves ended. Blocking: call it from a worker thread. A device
        error is remembered for its mount; the result says where the moves stopped."""
        with self.using_devices("moving the mounts", readings) as station:
            moves: list[Move] = []
            error = ""
            for name in (n for n in self.bench.mounts if n in targets):
                if station.stop_requested:
                    error = "stopped as asked"
                    break
                try:
                    moves.append(station.move(name, float(targets[name])))
                except AlignerError as exc:
                    if isinstance(exc, DeviceError) and not isinstance(exc, GuardTrip):
                        self.note_error(name, exc)
                    error = f"{name}: {exc}"
                    break
            shutter = station.secure()
            try:
                after = station.readings(fresh=True)
            except DeviceError:
                after = {}
            return MoveResult(tuple(moves), after, shutter, error)

    def guard_limit(self) -> float | None:
        """The highest predicted rate (counts/s) at which the detector guard exposes the
        detector (headroom times safe_rate); None before the devices are open."""
        return self._station.guard.limit if self._station is not None else None

    def meter(self, gate_s: float) -> MeterSession:
        """A new meter session (:class:`aligner.tui.metering.MeterSession`) counting in gates
        of ``gate_s`` s; run it in a worker thread."""
        from .metering import MeterSession

        self.stop_meter()
        self._meter = MeterSession(self, gate_s)
        return self._meter

    def stop_meter(self) -> None:
        """Ask a running meter to stop (it shuts the shutter as it ends)."""
        if self._meter is not None:
            self._meter.stop()

    # -- sweeps -------------------------------------------------------------------------------

    def unmoved_differences(
        self, readings: Mapping[str, float], moved: set[str]
    ) -> dict[str, tuple[float, float]]:
        """Mounts a sweep will not move whose device reads other than ``readings`` by more
        than one resolution step: ``{mount: (device reading, desk reading)}`` (deg); for the
        sweep's ``on_start``, while the sweep holds the (open) devices."""
        if self._station is None:
            return {}
        out = {}
        for name, mount in self._station.devices.mounts.items():
            if name in moved:
                continue
            here = float(mount.position())
            if abs(here - readings[name]) > self.bench.mounts[name].resolution_deg:
                out[name] = (here, float(readings[name]))
        return out

    def hardware_mounts(self) -> tuple[str, ...]:
        """Mounts whose driver is not a simulation (their moves are real), bench order."""
        return tuple(
            name for name, m in self.bench.mounts.items() if m.driver.partition(":")[0] != "sim"
        )

    def preview(self, spec: str, dwell_s: float, readings: Mapping[str, float]) -> SweepPreview:
        """Parse and plan a sweep without touching any device (bad input: ``InputError``;
        ``ParameterError`` names ``schedule`` or ``dwell_s``)."""
        from ..run.schedule import parse_schedule, plan_points
        from ..run.sweep import plan_warnings

        bench = self.bench_at(readings)
        schedule = parse_schedule(spec, dwell_s=dwell_s)
        points = tuple(plan_points(bench, schedule))
        moves = tuple(
            name
            for name, m in bench.mounts.items()
            if any(
                abs(p.readings[name] - m.reading_deg) > m.resolution_deg
                for p in points
                if name in p.readings
            )
        )
        return SweepPreview(bench, schedule, points, moves, plan_warnings(bench, schedule))

    def request_stop(self, signum: int = 0) -> None:
        """Ask a running sweep, recipe or move to pause and the meter to stop: a count in
        progress stops before its next gate (:meth:`aligner.run.station.Station.request_stop`;
        the point being counted is discarded), the shutter shuts, the run stays resumable.
        ``signum`` is the signal ending the desk (0: the operator asks)."""
        self.stop_meter()
        if self.busy:
            self._stop = signum or self._stop or 0
        if self._station is not None:
            self._station.request_stop(signum)

    def sweep(
        self,
        spec: str,
        dwell_s: float,
        readings: Mapping[str, float],
        *,
        on_point: PointHook,
        on_start: Callable[[int, Sequence[PlannedPoint], RunLog], None] | None = None,
        resume_run: int | None = None,
        planned: SweepPreview | None = None,
    ) -> SweepResult:
        """Plan and run a sweep (or resume run ``resume_run``); blocking, for a worker thread.

        ``spec`` is a one-word schedule (:func:`aligner.run.schedule.parse_schedule`),
        ``dwell_s`` the count time per point (s); other mounts stay at ``readings`` (deg).
        ``planned`` (from :meth:`preview`) runs exactly that plan instead of planning again.
        ``on_start(run_id, planned_points, run_log)`` is called once the run exists. Returns
        the engine's ``SweepResult``; a pause asked with :meth:`request_stop` ends it
        ``interrupted``. A signal ending the desk is noted in the run's log.
        """
        from ..run.log import RunLog

        with self.using_devices("sweep", readings) as station:
            kinds = station.provenance.kinds
            with RunLog(self.db_path, durable=kinds != {"simulated"}) as log:
                ids: list[int] = []

                def started(run_id: int, points: Sequence[PlannedPoint]) -> None:
                    ids.append(run_id)
                    if on_start is not None:
                        on_start(run_id, points, log)

                def hook(point: LoggedPoint, done: int, total: int) -> None:
                    on_point(point, done, total, log)

                try:
                    if resume_run is not None:
                        return station.resume_sweep(
                            log, resume_run, on_start=started, on_point=hook
                        )
                    if planned is None:
                        planned = self.preview(spec, dwell_s, readings)
                    station.use_bench(planned.bench)
                    return station.start_sweep(
                        log, planned.schedule, plan=planned.points, on_start=started, on_point=hook
                    )
                finally:
                    if self.signalled is not None and ids:
                        log.note(ids[0], f"the desk was ended by signal {self.signalled}")

    # -- recipes (the recipe screen) -----------------------------------------------------------

    def recipes(self) -> list[Entry]:
        """Bundled and local recipes (:func:`aligner.recipe.catalog`), each with its error if
        it does not load."""
        from ..recipe import catalog

        return catalog()

    def run_recipe(
        self,
        recipe: Recipe | None,
        operator: Operator,
        readings: Mapping[str, float],
        *,
        resume_run: int | None = None,
    ) -> RecipeRunResult:
        """Run ``recipe`` (or resume recipe run ``resume_run``) on the desk's station with
        ``operator`` (:class:`aligner.recipe.Operator`); blocking, for a worker thread.
        :meth:`request_stop` pauses it at its next safe point. Returns the engine's
        ``RecipeRunResult``."""
        from ..recipe import resume_recipe, run_recipe

        with self.using_devices("recipe", readings) as station:
            if resume_run is not None:
                return resume_recipe(
                    resume_run, self.bench, operator, db=self.db_path, station=station
                )
            if recipe is None:
                raise InputError("choose a recipe first (or go on with a paused recipe run)")
            return run_recipe(recipe, self.bench, operator, db=self.db_path, station=station)

    # -- the run log --------------------------------------------------------------------------

    def run_log(self) -> RunLog:
        """A new connection to the run log (one per thread; close it after use)."""
        from ..run.log import RunLog

        return RunLog(self.db_path)

    def shutdown(self, wait_s: float = 60.0) -> None:
        """However the desk ends (quit, a signal, an error): ask a running sweep to pause and
        the meter to stop, wait up to ``wait_s`` s for them to secure the bench, then shut the
        shutter and close."""
        self.request_stop(self.signalled or 0)
        with self._holding("closing the devices", wait_s):
            self.close()

    def close(self) -> None:
        """Shut the shutter and close the devices, if they were opened."""
        if self._station is not None:
            self._station.close()
            self._station = None


def _records(station: Station | None) -> tuple[DeviceRecord, ...]:
    return station.provenance.devices if station is not None else ()
