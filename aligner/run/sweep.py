"""The sweep loop: step the mounts through a planned schedule, count, log every point.

Each point: every mount of the point is moved as the detector guard plans it (path predicted,
shutter shut or dark route or refusal; every move ends turning upwards so the backlash is
taken up on one side), the settle time passes, the positions are read back, the detector is
exposed only if the prediction at the read-back allows it, the counter counts (each gate's
measured rate checked against ``safe_rate``), the pointer is read when there is one, the
measured leak rate with its interval and the prediction at the read-back readings are
computed, and the point and the events raised while taking it are written in one transaction.

Device timeouts, garbled replies and refusals are retried ``retries`` times (each failure is
an event); then, or on a disconnect, a guard trip or Ctrl-C, the sweep pauses: mounts
stopped, shutter shut, the run marked ``interrupted`` with the reason, resumable with
:func:`resume_plan`. Bad input (a reading outside travel, a point above the safe rate) is
refused before anything moves.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from ..bench import Bench, parse_bench, snapshot_text
from ..errors import (
    BadReply,
    DeviceError,
    DeviceRefused,
    DeviceTimeout,
    GuardTrip,
    InputError,
)
from .guard import DetectorGuard
from .log import Event, LoggedPoint, RunLog, RunRecord, utc_now
from .schedule import PlannedPoint, Schedule
from .simbench import DeviceSet

__all__ = [
    "MeasuredLeak",
    "SweepOptions",
    "SweepResult",
    "measured_leak",
    "resume_plan",
    "run_sweep",
    "start_run",
]

RETRYABLE = (DeviceTimeout, BadReply, DeviceRefused)


@dataclass(frozen=True)
class SweepOptions:
    """Knobs of the loop: ``retries`` per device operation, guard ``headroom`` (fraction of
    safe_rate a prediction may reach) and path ``step_deg``, the first (probe) gate ``probe_s``
    and the longest later gate ``gate_s`` (s; the dwell is split so a bright beam is caught
    early)."""

    retries: int = 2
    headroom: float = 0.5
    step_deg: float = 0.1
    probe_s: float = 0.01
    gate_s: float = 1.0


@dataclass(frozen=True)
class SweepResult:
    """How a sweep ended. ``status`` is ``complete`` or ``interrupted``; ``reason`` is ``""``,
    ``interrupt`` (Ctrl-C), ``operator`` (asked to stop), ``device`` or ``guard``."""

    run_id: int
    status: str
    points_done: int
    points_total: int
    message: str = ""
    reason: str = ""


@dataclass(frozen=True)
class MeasuredLeak:
    """Leak rate per incident photon from a count, with its interval (same units)."""

    leak: float
    low: float
    high: float


def measured_leak(
    bench: Bench, counts: int, dwell_s: float, reference: int | None = None
) -> MeasuredLeak:
    """Leak rate per source photon from ``counts`` of the post-selected port in ``dwell_s`` s,
    with its exact 68.3 % interval (:func:`aligner.fit.counts.measure_leak`: dead time undone,
    the bench's dark rate removed; Clopper-Pearson on clicks per pulse in pulsed mode).

    The denominator: with ``[source] monitor_fraction`` and ``reference`` counts, the reference
    channel (exact interval on the count ratio, its dark removed, so source drift cancels);
    otherwise the nominal ``photon_rate`` times the detector efficiency (Garwood on the counts).
    """
    from ..fit.counts import measure_leak

    d = bench.detector
    pulsed = d.mode == "pulsed"
    common = {
        "dark_rate": d.dark_rate,
        "dead_time_s": d.dead_time_ns * 1e-9,
        "efficiency": d.efficiency,
        "rep_rate_hz": d.rep_rate_hz if pulsed else None,
        "dark_probability": d.gate_dark_probability,
    }
    monitor = bench.source.monitor_fraction
    if monitor is not None and reference is not None and reference > 0 and not pulsed:
        m = measure_leak(
            counts,
            dwell_s,
            reference=reference,
            reference_kind="bright",
            relative_efficiency=d.efficiency / monitor,
            reference_dark_rate=d.dark_rate,
            **common,
        )
    else:
        m = measure_leak(
            counts,
            dwell_s,
            reference_rate=bench.source.photon_rate * d.efficiency,
            reference_measured=False,
            **common,
        )
    return MeasuredLeak(float(m.leak or 0.0), float(m.leak_low or 0.0), float(m.leak_high or 0.0))


def _bench_text(bench: Bench) -> str:
    if bench.path is None:
        raise InputError(
            "the bench has no file; a run log keeps the bench file's text, so load "
            "the bench with load_bench(path)"
        )
    return snapshot_text(bench)


def start_run(
    log: RunLog,
    bench: Bench,
    schedule: Schedule,
    plan: Sequence[PlannedPoint],
) -> int:
    """Create the run (status ``running``) with the bench snapshot and the plan; return its id."""
    from .. import __version__

    return log.create_run(
        bench_name=bench.name,
        bench_path=str(bench.path),
        bench_toml=_bench_text(bench),
        schedule=schedule.spec,
        plan=plan_rows(plan),
        dwell_s=schedule.dwell_s,
        settle_s=schedule.settle_s,
        repeats=schedule.repeats,
        imbalance_mount=bench.imbalance_mount,
        software_version=__version__,
    )


def resume_plan(record: RunRecord) -> tuple[Bench, tuple[PlannedPoint, ...]]:
    """The bench (from the run's snapshot) and the planned points of a logged run."""
    import tomlkit

    where = record.bench_path or f"run {record.id}"
    bench = parse_bench(tomlkit.parse(record.bench_toml).unwrap(), where)
    plan = tuple(
        PlannedPoint(
            int(p["index"]),
            int(p["pass"]),
            float(p["target"]),
            {k: float(v) for k, v in p["readings"].items()},
        )
        for p in record.plan
    )
    return bench, plan


PointCallback = Callable[[LoggedPoint, int, int], None]


class _Sweep:
    """State of one sweep (see :func:`run_sweep`)."""

    def __init__(
        self,
        bench: Bench,
        devices: DeviceSet,
        log: RunLog,
        run_id: int,
        plan: Sequence[PlannedPoint],
        dwell_s: float,
        settle_s: float,
        options: SweepOptions,
        on_point: PointCallback | None,
        stop: Callable[[], bool] | None,
    ) -> None:
        self.bench, self.devices, self.log, self.run_id = bench, devices, log, run_id
        self.plan, self.dwell_s, self.settle_s = plan, dwell_s, settle_s
        self.options, self.on_point, self.stop = options, on_point, stop
        self.guard = DetectorGuard(
            bench,
            has_shutter=devices.shutter is not None,
            headroom=options.headroom,
            step_deg=options.step_deg,
        )
        self.pending: list[Event] = []
        self.positions: dict[str, float | None] = dict.fromkeys(devices.mounts)
        self.commanded: dict[str, float] = {}
        self.done = 0

    # -- device operations with bounded retries ----------------------------------------------

    def attempt(self, what: str, idx: int | None, fn: Callable[[], Any]) -> Any:
        tries = self.options.retries + 1
        for n in range(1, tries + 1):
            try:
                return fn()
            except RETRYABLE as exc:
                self.pending.append(Event("fault", f"{what}: {exc} (attempt {n} of {tries})", idx))
                self.positions = dict.fromkeys(self.positions)
                self.guard.forget()
                if n == tries:
                    raise
        raise AssertionError("unreachable")

    def position(self, name: str, idx: int | None) -> float:
        known = self.positions[name]
        if known is None:
            known = self.attempt(f"reading {name}", idx, self.devices.mounts[name].position)
            self.positions[name] = known
        return float(known)

    def shutter_open(self) -> bool:
        shutter = self.devices.shutter
        return True if shutter is None else shutter.is_open()

    def set_shutter(self, want_open: bool, idx: int | None) -> None:
        shutter = self.devices.shutter
        if shutter is None or shutter.is_open() == want_open:
            return
        self.attempt(
            "opening the shutter" if want_open else "shutting the shutter",
            idx,
            shutter.open if want_open else shutter.shut,
        )

    def move(self, name: str, target: float, idx: int) -> None:
        readings = {n: self.position(n, idx) for n in self.devices.mounts}
        plan = self.guard.plan_move(readings, name, target, shutter_open=self.shutter_open())
        if plan.note and not plan.shut_for_move:
            self.pending.append(Event("guard", plan.note, idx))
        if plan.shut_for_move:
            self.set_shutter(False, idx)
        mount = self.devices.mounts[name]
        self.commanded[name] = plan.target
        self.positions[name] = None
        for waypoint in plan.waypoints[1:]:
            mount.move_to(waypoint)

    # -- one point ----------------------------------------------------------------------------

    def gates(self) -> list[float]:
        """Gate lengths (s) summing to the dwell: a short probe gate first, so a bright beam is
        caught within ``probe_s`` of opening the shutter, then gates of at most ``gate_s``."""
        probe = min(self.options.probe_s, self.dwell_s)
        rest = self.dwell_s - probe
        if rest <= 1e-9:  # a dwell no longer than the probe
            return [self.dwell_s]
        n = max(1, math.ceil(rest / self.options.gate_s - 1e-9))
        return [probe] + [rest / n] * n

    def count(self, idx: int) -> tuple[int, int | None]:
        counter = self.devices.counter
        post, ref = 0, 0
        for gate in self.gates():
            counts = counter.count(gate)
            self.guard.check_counts(counts[0], gate)
            post += counts[0]
            ref += counts[1] if len(counts) > 1 else 0
        return post, (ref if counter.channels > 1 else None)

    def point(self, p: PlannedPoint) -> LoggedPoint:
        from ..prediction import predict

        started = utc_now()
        self.commanded = dict(p.readings)
        for name, target in p.readings.items():
            self.attempt(
                f"point {p.index}: moving {name} to {target:.4f} deg",
                p.index,
                lambda n=name, t=target: self.move(n, t, p.index),
            )
        self.devices.wait(self.settle_s)
        self.positions = dict.fromkeys(self.positions)
        readback = {n: self.position(n, p.index) for n in self.devices.mounts}
        for name in p.readings:
            self.guard.moved(name, readback[name])
        pred = predict(self.bench, readback)
        self.guard.check_point(float(pred.detector_rate), readback)
        self.set_shutter(True, p.index)
        post, ref = self.attempt(f"point {p.index}: counting", p.index, lambda: self.count(p.index))
        pointer = pointer_err = None
        if self.devices.pointer is not None:
            reader = self.devices.pointer
            pointer, pointer_err = self.attempt(
                f"point {p.index}: reading the pointer", p.index, lambda: reader.read(self.dwell_s)
            )
        leak = measured_leak(self.bench, post, self.dwell_s, ref)
        return LoggedPoint(
            idx=p.index,
            target=p.target,
            commanded=dict(self.commanded),
            readback=readback,
            reading_deg=readback[self.bench.imbalance_mount],
            counts=post,
            reference=ref,
            dwell_s=self.dwell_s,
            leak=leak.leak,
            leak_lo=leak.low,
            leak_hi=leak.high,
            predicted_leak=float(pred.leak_rate),
            predicted_rate=float(pred.measured_rate),
            imbalance_deg=float(pred.imbalance_deg),
            pointer=pointer,
            pointer_err=pointer_err,
            started_utc=started,
            ended_utc=utc_now(),
        )

    # -- the loop -----------------------------------------------------------------------------

    def check_plan(self, todo: Sequence[PlannedPoint]) -> None:
        """Refuse, before anything moves, readings outside travel and points whose predicted
        rate is above the guard's limit."""
        import numpy as np

        base = self.bench.readings()
        for p in todo:
            for name, reading in p.readings.items():
                if name not in self.bench.mounts:
                    raise InputError(f"point {p.index}: unknown mount {name!r}")
                self.guard.route(name, reading, reading)
        if not todo:
            return
        names = sorted({n for p in todo for n in p.readings})
        columns = {n: np.array([p.readings.get(n, base[n]) for p in todo]) for n in names}
        rates = self.guard.rates(columns)
        worst = int(np.argmax(rates))
        if rates[worst] > self.guard.limit:
            p = todo[worst]
            where = ", ".join(f"{k} {v:.4g} deg" for k, v in p.readings.items())
            raise GuardTrip(
                f"detector guard: point {p.index} ({where}) is predicted at "
                f"{rates[worst]:.3g} counts/s, above the limit "
                f"{self.guard.limit:.3g} ({self.guard.headroom:g} x safe_rate "
                f"{self.guard.safe_rate:.3g}); choose a schedule nearer the null"
            )

    def pause(self, message: str, reason: str) -> SweepResult:
        for name, mount in self.devices.mounts.items():
            if "stop" in mount.capabilities:
                try:
                    mount.stop()
                except DeviceError as exc:
                    self.pending.append(Event("fault", f"stopping {name}: {exc}"))
        shutter = self.devices.shutter
        if shutter is not None:
            try:
                self.attempt("shutting the shutter", None, shutter.shut)
            except DeviceError as exc:
                message += (
                    f"; the shutter did not confirm it is shut ({exc}): block the beam by hand"
                )
        kind = "guard" if reason == "guard" else "pause"
        self.pending.append(Event(kind, message))
        self.log.add_events(self.run_id, self.pending)
        self.pending = []
        self.log.set_status(self.run_id, "interrupted", message)
        return SweepResult(self.run_id, "interrupted", self.done, len(self.plan), message, reason)

    def run(self) -> SweepResult:
        finished = self.log.done_indices(self.run_id)
        todo = [p for p in self.plan if p.index not in finished]
        self.done = len(self.plan) - len(todo)
        try:
            self.check_plan(todo)
        except (InputError, GuardTrip) as exc:
            self.log.set_status(self.run_id, "interrupted", f"refused before any move: {exc}")
            raise
        if finished:
            self.log.add_events(
                self.run_id,
                [Event("resume", f"resumed with {len(todo)} of {len(self.plan)} points left")],
            )
        self.log.set_status(self.run_id, "running")
        try:
            self.set_shutter(False, None)
            for p in todo:
                if self.stop is not None and self.stop():
                    return self.pause("paused by the operator", "operator")
                point = self.point(p)
                self.log.add_point(self.run_id, point, self.pending)
                self.pending = []
                self.done += 1
                if self.on_point is not None:
                    self.on_point(point, self.done, len(self.plan))
            self.set_shutter(False, None)
        except KeyboardInterrupt:
            return self.pause("interrupted by the operator (Ctrl-C)", "interrupt")
        except GuardTrip as exc:
            return self.pause(str(exc), "guard")
        except DeviceError as exc:
            return self.pause(str(exc), "device")
        self.log.add_events(self.run_id, self.pending)
        self.log.set_status(self.run_id, "complete")
        return SweepResult(self.run_id, "complete", self.done, len(self.plan))


def run_sweep(
    bench: Bench,
    devices: DeviceSet,
    log: RunLog,
    run_id: int,
    plan: Sequence[PlannedPoint],
    *,
    dwell_s: float,
    settle_s: float = 0.0,
    options: SweepOptions | None = None,
    on_point: PointCallback | None = None,
    stop: Callable[[], bool] | None = None,
) -> SweepResult:
    """Measure every planned point of run ``run_id`` not yet in the log (so the same call
    resumes an interrupted run). ``dwell_s`` and ``settle_s`` in s. ``on_point(point, done,
    total)`` is called after each point is committed; ``stop()`` is asked before each point and
    True pauses the sweep there. Returns how the sweep ended; a pause leaves the mounts
    stopped, the shutter shut and the run ``interrupted``."""
    sweep = _Sweep(
        bench,
        devices,
        log,
        run_id,
        plan,
        dwell_s,
        settle_s,
        options or SweepOptions(),
        on_point,
        stop,
    )
    return sweep.run()


def plan_rows(plan: Sequence[PlannedPoint]) -> list[Mapping[str, Any]]:
    """Planned points as plain rows (for JSON output)."""
    return [
        {"index": p.index, "pass": p.pass_index, "target": p.target, "readings": dict(p.readings)}
        for p in plan
    ]
