"""Sweeps: step the mounts through a planned schedule on a station, count, log every point.

Each point: every mount of the point is moved through :meth:`Station.move` (guarded path,
retries, read-back check), the settle time passes, the positions are read back, the detector
is exposed only if the prediction at the read-back allows it, the counter counts (each gate's
exposure checked against ``safe_rate``), the pointer is read when there is one, the measured
leak rate with its interval (:func:`measured_leak`) and the prediction at the read-back are
computed, and the point and the events raised while taking it are written in one transaction.

Every way a sweep can end leaves the mounts stopped, the shutter shut and the run resumable
with its reason recorded (:class:`SweepResult` ``reason``): ``""`` complete, ``operator`` a
stop asked for, ``interrupt`` Ctrl-C or a signal, ``guard`` the detector guard, ``device`` a
device fault, ``input`` bad input found only while measuring, ``storage`` the run log could
not be written (a full disk), ``error`` an internal error (raised again after securing).
Bad input seen in the plan (a reading outside travel, a point above the safe rate) is refused
before the run is created. One process at a time drives a run (:meth:`RunLog.claim`).
"""

from __future__ import annotations

import sqlite3
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING, Any

from ..bench import Bench, parse_bench, snapshot_text
from ..errors import (
    AlignerError,
    DeviceError,
    GuardTrip,
    InputError,
    SignalInterrupt,
    StopRequested,
    StorageError,
    exit_status,
)
from .log import Event, LoggedPoint, RunLog, RunRecord, utc_now
from .schedule import PlannedPoint, Schedule

if TYPE_CHECKING:
    from .station import Station

__all__ = [
    "MeasuredLeak",
    "SweepResult",
    "check_plan",
    "measured_leak",
    "plan_rows",
    "plan_warnings",
    "resume_bench",
    "resume_plan",
    "run_sweep",
    "start_run",
]


@dataclass(frozen=True)
class SweepResult:
    """How a sweep ended (see the module docstring for ``reason``). ``shutter`` is the
    shutter's state at the end (:data:`aligner.run.station.SHUTTER_STATES`); ``signal`` the
    signal number of an ``interrupt`` (2 for Ctrl-C); ``notes`` what the operator should know
    about how the run was continued."""

    run_id: int
    status: str
    points_done: int
    points_total: int
    message: str = ""
    reason: str = ""
    shutter: str = "none"
    signal: int = 0
    notes: tuple[str, ...] = ()

    @property
    def shutter_shut(self) -> bool:
        """True when the shutter confirmed it is shut."""
        return self.shutter == "confirmed"

    @property
    def exit_code(self) -> int:
        """The command's exit status for this ending (:data:`aligner.errors.EXIT_STATUS`)."""
        return exit_status(self.reason, self.signal)

    def to_json(self) -> dict[str, Any]:
        """The result as JSON (without the points)."""
        return {
            "run": self.run_id,
            "status": self.status,
            "points_done": self.points_done,
            "points_total": self.points_total,
            "reason": self.reason,
            "message": self.message,
            "shutter": self.shutter,
            "notes": list(self.notes),
        }


@dataclass(frozen=True)
class MeasuredLeak:
    """Leak rate per source photon from one point's counts, with its 68.3 % interval (same
    units); all None, with ``flag`` saying why, when the counts give no leak rate."""

    leak: float | None
    low: float | None
    high: float | None
    flag: str = ""


def measured_leak(
    bench: Bench,
    counts: int,
    dwell_s: float,
    reference: int | None = None,
    readings: Mapping[str, float] | None = None,
) -> MeasuredLeak:
    """Leak rate per source photon from ``counts`` of the post-selected port in ``dwell_s`` s,
    by :func:`aligner.fit.counts.measure_leak` (the one computation ``aligner leak`` does too).

    With the bench's reference channel (``[reference]``) and its counts (continuous wave): the
    ratio of the two channels' light over their own dark rates and dead times, by profile
    likelihood -- source drift cancels. A ``monitor`` gives the leak per source photon through
    its ``fraction``; the analyzer's other ``port`` gives ``S / (S + R)``, the leak per photon
    leaving the analyzer, which times :func:`aligner.fit.scanmodel.analyzer_input` at
    ``readings`` (deg; default the file's) is the leak per source photon. A reference at or
    below its dark level, or counts that leave no live time, give no leak rate (flagged).
    Otherwise (or in pulsed mode) the nominal ``photon_rate`` times the efficiency is the
    denominator, with the exact interval.
    """
    from ..errors import ParameterError
    from ..fit.counts import Channel, CountedReference, Gating, RateReference, measure_leak

    d, ref = bench.detector, bench.reference
    gating = Gating.of_detector(d)
    denominator: CountedReference | RateReference = (
        CountedReference(ref.kind, reference, dwell_s, Channel.of_reference(ref))
        if reference is not None and ref.kind != "none" and gating is None
        else RateReference(bench.source.photon_rate * d.efficiency, measured=False)
    )
    try:
        m = measure_leak(
            counts,
            dwell_s,
            detector=Channel.of_detector(d),
            gating=gating,
            reference=denominator,
        )
    except ParameterError as exc:
        return MeasuredLeak(None, None, None, f"no leak rate ({exc.parameter}): {exc.problem}")
    if m.leak is None or m.leak_low is None or m.leak_high is None:
        return MeasuredLeak(None, None, None, m.flag)
    scale = 1.0
    if isinstance(denominator, CountedReference) and ref.kind == "port":
        from ..fit.scanmodel import analyzer_input

        scale = float(analyzer_input(bench, dict(readings or {})))
    return MeasuredLeak(m.leak * scale, m.leak_low * scale, m.leak_high * scale)


def _bench_text(bench: Bench) -> str:
    if bench.path is None:
        raise InputError(
            "the bench has no file; a run log keeps the bench file's text, so load "
            "the bench with load_bench(path)"
        )
    return snapshot_text(bench)


def start_run(
    log: RunLog, station: Station, schedule: Schedule, plan: Sequence[PlannedPoint]
) -> int:
    """Create the run (status ``running``) with the bench snapshot, the plan and the station's
    provenance; return its id. Check the plan first (:func:`check_plan`)."""
    bench = station.bench
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
        software_version=station.provenance.software_version,
        provenance=station.provenance.to_json(),
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


def resume_bench(logged: Bench, given: Bench, record: RunRecord) -> tuple[Bench, str]:
    """The bench a resumed run continues with: the one logged at its start (so predictions stay
    comparable), but never with a laxer detector limit than the bench file given now; and a
    note when the two differ ("" when they do not)."""
    if snapshot_text(given) == record.bench_toml:
        return logged, ""
    safe = min(logged.detector.safe_rate, given.detector.safe_rate)
    note = (
        f"{given.path} differs from the bench logged with run {record.id}; the run continues "
        f"with the logged bench, and the detector guard uses the lower safe_rate of the two "
        f"({safe:.3g} counts/s)"
    )
    return replace(logged, detector=replace(logged.detector, safe_rate=safe)), note


PointCallback = Callable[[LoggedPoint, int, int], None]


def check_plan(station: Station, todo: Sequence[PlannedPoint]) -> None:
    """Refuse, before anything moves, readings outside travel and points whose predicted
    exposure is above the guard's limit."""
    import numpy as np

    bench, guard = station.bench, station.guard
    base = bench.readings()
    for p in todo:
        for name, reading in p.readings.items():
            if name not in bench.mounts:
                raise InputError(f"point {p.index}: unknown mount {name!r}")
            guard.route(name, reading, reading)
    if not todo:
        return
    names = sorted({n for p in todo for n in p.readings})
    columns = {n: np.array([p.readings.get(n, base[n]) for p in todo]) for n in names}
    rates = guard.rates(columns)
    worst = int(np.argmax(rates))
    if rates[worst] > guard.limit:
        p = todo[worst]
        where = ", ".join(f"{k} {v:.4g} deg" for k, v in p.readings.items())
        raise GuardTrip(
            f"detector guard: point {p.index} ({where}) is {guard.basis} at "
            f"{rates[worst]:.3g} counts/s, above the limit {guard.limit:.3g} ({guard.headroom:g}"
            f" x safe_rate {guard.safe_rate:.3g}); choose a schedule nearer the null"
        )


def plan_warnings(bench: Bench, schedule: Schedule) -> tuple[str, ...]:
    """What to tell the operator before a sweep of ``schedule`` starts (nothing is refused):
    amplification targets beyond the bench's combined limit at the file's readings, with the
    mechanism that eats the gain (:func:`aligner.prediction.beyond_limit`)."""
    if schedule.quantity != "amplification":
        return ()
    from ..prediction import beyond_limit, limits

    lim = limits(bench, axis="re")  # the axis the schedule plans on
    beyond = sorted({t for t in schedule.targets if t > lim.max_amplification})
    if not beyond:
        return ()
    why = beyond_limit(bench, lim, beyond[-1]).rstrip().rstrip(".")
    others = ", ".join(f"{t:.4g}" for t in beyond[:-1])
    also = f" So {'does' if len(beyond) == 2 else 'do'} {others}." if others else ""
    them = "them" if others else "it"
    return (
        f"{schedule.spec}: {why}.{also} The sweep measures {them}, but the shift per unit "
        "coupling stays below the limit.",
    )


class _Sweep:
    """State of one sweep (see :func:`run_sweep`)."""

    def __init__(
        self,
        station: Station,
        log: RunLog,
        run_id: int,
        plan: Sequence[PlannedPoint],
        dwell_s: float,
        settle_s: float,
        on_point: PointCallback | None,
        notes: tuple[str, ...],
    ) -> None:
        self.station, self.log, self.run_id = station, log, run_id
        self.plan, self.dwell_s, self.settle_s = plan, dwell_s, settle_s
        self.on_point, self.notes = on_point, notes
        self.done = 0

    def point(self, p: PlannedPoint) -> LoggedPoint:
        from ..prediction import predict

        st, bench = self.station, self.station.bench
        started = utc_now()
        moves = [st.move(name, target, p.index) for name, target in p.readings.items()]
        st.devices.wait(self.settle_s)
        readback = st.readings(p.index, fresh=True)
        pred = predict(bench, readback)
        st.expose(readback, p.index)
        post, ref = st.count(self.dwell_s, p.index)
        pointer, pointer_err = st.read_pointer(self.dwell_s, p.index)
        leak = measured_leak(bench, post, self.dwell_s, ref, readback)
        return LoggedPoint(
            idx=p.index,
            target=p.target,
            commanded={m.mount: m.commanded_deg for m in moves},
            readback=readback,
            reading_deg=readback[bench.imbalance_mount],
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
            flag=leak.flag,
        )

    def pause(self, message: str, reason: str, signal: int = 0) -> SweepResult:
        """Secure the bench, then record why the sweep stopped (best effort: a run log that
        cannot be written does not stop the securing)."""
        st = self.station
        from .station import shutter_words

        shut = st.secure()
        st.clear_stop()  # the request, if one stopped the sweep, is answered
        kind = "guard" if reason == "guard" else "pause"
        # every point logged (the stop came while the last one was being reported): the run
        # is complete, and still says what stopped the command
        status = "complete" if self.done == len(self.plan) else "interrupted"
        events = [*st.take_events(), Event(kind, f"{message}; {shutter_words(shut)}")]
        try:
            self.log.add_events(self.run_id, events)
            self.log.set_status(self.run_id, status, f"{message}; {shutter_words(shut)}")
        except (StorageError, sqlite3.Error, OSError) as exc:
            message += f" (the run log could not record this: {exc})"
        return SweepResult(
            self.run_id,
            status,
            self.done,
            len(self.plan),
            message,
            reason,
            shut,
            signal,
            self.notes,
        )

    def run(self) -> SweepResult:
        finished = self.log.done_indices(self.run_id)
        todo = [p for p in self.plan if p.index not in finished]
        self.done = len(self.plan) - len(todo)
        st = self.station
        try:
            self.log.set_status(self.run_id, "running")
            st.shut()
            for p in todo:
                st.check_stop()
                point = self.point(p)
                self.log.add_point(self.run_id, point, st.take_events())
                self.done += 1
                if self.on_point is not None:
                    self.on_point(point, self.done, len(self.plan))
            shut = st.secure()
        except StopRequested:
            return self.pause("paused by the operator", "operator")
        except SignalInterrupt as exc:
            return self.pause(f"stopped by {exc.cause}", "interrupt", exc.signum)
        except KeyboardInterrupt:
            return self.pause("interrupted by the operator (Ctrl-C)", "interrupt", 2)
        except GuardTrip as exc:
            return self.pause(str(exc), "guard")
        except DeviceError as exc:
            return self.pause(str(exc), "device")
        except StorageError as exc:
            return self.pause(str(exc), "storage")
        except AlignerError as exc:
            return self.pause(f"stopped by bad input while measuring: {exc}", "input")
        except BaseException as exc:
            self.pause(f"internal error: {type(exc).__name__}: {exc}", "error")
            raise
        self.log.add_events(self.run_id, st.take_events())
        self.log.set_status(self.run_id, "complete")
        return SweepResult(
            self.run_id, "complete", self.done, len(self.plan), shutter=shut, notes=self.notes
        )


def run_sweep(
    station: Station,
    log: RunLog,
    run_id: int,
    plan: Sequence[PlannedPoint],
    *,
    dwell_s: float,
    settle_s: float = 0.0,
    on_point: PointCallback | None = None,
    notes: tuple[str, ...] = (),
) -> SweepResult:
    """Measure every planned point of run ``run_id`` not yet in the log (so the same call
    resumes an interrupted run), holding the run for this process. ``dwell_s`` and ``settle_s``
    in s. ``on_point(point, done, total)`` is called after each point is committed;
    :meth:`Station.request_stop` pauses the sweep before the next point, or within one gate
    when it comes while a point is counted (that point is discarded). Returns how the
    sweep ended (see the module docstring); ``notes`` are carried into the result."""
    with log.claim(run_id):
        return _Sweep(station, log, run_id, plan, dwell_s, settle_s, on_point, notes).run()


def plan_rows(plan: Sequence[PlannedPoint]) -> list[Mapping[str, Any]]:
    """Planned points as plain rows (for JSON output and the run log)."""
    return [
        {"index": p.index, "pass": p.pass_index, "target": p.target, "readings": dict(p.readings)}
        for p in plan
    ]
