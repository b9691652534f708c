"""Sweep screen: schedule and dwell, start / pause / go on, the live plot, points and events.

Points are numbered as the run log numbers them (``#0`` first) in the status line and the
table alike; the status line adds how many of the planned points are done.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING, Any, ClassVar

import numpy as np
from textual import on, work
from textual.app import ComposeResult
from textual.binding import BindingType
from textual.containers import Container, Horizontal, VerticalScroll
from textual.widgets import Input, Label, ProgressBar, Static

from ...errors import AlignerError, ParameterError
from ...run.station import shutter_words
from .. import keys
from ..messages import SweepChecked, SweepEnded, SweepProgress, SweepStarted
from ..widgets.event_list import EventList
from ..widgets.leak_plot import LeakPlot
from ..widgets.points_table import PointsTable
from .base import DeskScreen
from .confirm import Confirm

if TYPE_CHECKING:
    from ...run.log import LoggedPoint, RunLog
    from ...run.schedule import PlannedPoint
    from ..backend import SweepPreview

__all__ = ["SweepScreen"]

DEFAULT_SCHEDULE = "amplification:5:60:8"
IDLE = "idle: Ctrl+S starts a new run; Enter in a field only checks it"
#: How each kind of pause reads in the status line, and whether it is a problem.
PAUSED = {
    "operator": ("paused as you asked", False),
    "interrupt": ("stopped by a signal", False),
    "guard": ("STOPPED BY THE DETECTOR GUARD", True),
    "device": ("STOPPED BY A DEVICE FAULT", True),
}
#: The engine's parameters -> this screen's fields (errors name the field the operator typed).
FIELDS = {"schedule": "schedule", "dwell_s": "dwell"}
#: Readings of the prediction curve, and the margin (share of the span) added either side.
CURVE_POINTS, CURVE_MARGIN = 240, 0.1


class SweepScreen(DeskScreen):
    """Run a sweep in a worker thread; the engine moves, counts, guards and logs."""

    MODE = "sweep"
    STATUS = "#sweep-status"
    BINDINGS: ClassVar[list[BindingType]] = [keys.START, keys.PAUSE, keys.GO_ON]

    def __init__(self) -> None:
        super().__init__()
        self.running = False
        self.run_id: int | None = None
        self.label = ""
        self.paused_run: int | None = None
        self.curve: tuple[Any, Any] | None = None

    def compose_body(self) -> ComposeResult:
        with Horizontal(id="sweep-form"):
            yield Label("schedule", classes="form-label")
            yield Input(DEFAULT_SCHEDULE, id="schedule", placeholder="linear:-1:1:11")
            yield Label("dwell (s)", classes="form-label")
            yield Input("1", id="dwell", type="number")
            yield ProgressBar(id="progress", show_eta=False)
        yield Static(IDLE, id="sweep-status")
        with VerticalScroll(id="sweep-scroll"):
            with Container(id="sweep-body"):
                yield LeakPlot(id="sweep-plot")
                yield EventList(id="sweep-events")
            yield PointsTable(id="sweep-points")

    def on_mount(self) -> None:
        self.query_one(ProgressBar).update(total=1, progress=0)
        self.query_one(EventList).show(())

    # -- actions -------------------------------------------------------------------------------

    def action_start(self) -> None:
        """Check the form and start a new run (after a question when real mounts move)."""
        if self.running:
            self.status("a sweep is running; Ctrl+P pauses it first", error=True)
            return
        self.check(start=True)

    @on(Input.Submitted)
    def submitted(self) -> None:
        """Enter checks the form; it never starts a run."""
        self.check(start=False)

    def check(self, *, start: bool) -> None:
        """Plan the sweep in the form in a worker (nothing moves); ``start`` it when asked."""
        spec = self.query_one("#schedule", Input).value.strip()
        text = self.query_one("#dwell", Input).value.strip()
        try:
            dwell = float(text)
        except ValueError:
            self.status(
                f"dwell: {text!r} is not a number; give the count time per point in "
                "seconds, e.g. 1",
                error=True,
            )
            return
        self.status(f"checking {spec}…")
        self.check_worker(spec, dwell, dict(self.desk.readings), start)

    @work(thread=True, exclusive=True, group="sweep-check")
    def check_worker(
        self, spec: str, dwell: float, readings: dict[str, float], start: bool
    ) -> None:
        try:
            message = SweepChecked(start, preview=self.backend.preview(spec, dwell, readings))
        except ParameterError as exc:
            field = FIELDS.get(exc.parameter, exc.parameter)
            message = SweepChecked(start, error=f"{field} {exc.problem}")
        except AlignerError as exc:
            message = SweepChecked(start, error=str(exc))
        self.post_message(message)

    @on(SweepChecked)
    def checked(self, event: SweepChecked) -> None:
        if self.running:
            return
        preview = event.preview
        if event.error or preview is None:
            verdict = "not started" if event.start else "not valid"
            self.status(f"{verdict}: {event.error}", error=True)
            self.query_one(EventList).show((), extra=event.error)
            return
        moves = ", ".join(preview.moves) or "none"
        warned = self.warn(preview.warnings)
        if not event.start:
            self.status(
                f"checked: {len(preview.points)} points, mounts that move: {moves}.{warned} "
                "Ctrl+S starts the run.",
                error=bool(warned),
            )
            return
        hardware = self.backend.hardware_mounts()
        if not hardware:
            self.begin(preview)
            return
        question = (
            f"Start sweep: {len(preview.points)} points, mounts {moves} will move; "
            "beam blocks in place?"
        )
        detail = (
            f"Real devices on this bench: {', '.join(hardware)}. Follow your local "
            "laser-safety rules and your laser safety officer."
        )

        def answered(start: bool | None) -> None:
            if start:
                self.begin(preview)
            else:
                self.status("not started (cancelled); nothing moved")

        self.app.push_screen(Confirm(question, detail), answered)

    def warn(self, warnings: Sequence[str]) -> str:
        """Show the plan's ``warnings`` below the form and as a notice (nothing is refused);
        return a short mention for the status line ("" when there are none)."""
        self.query_one(EventList).show((), extra="\n".join(f"warning: {w}" for w in warnings))
        for warning in warnings:
            self.say(f"warning: {warning}", severity="warning", timeout=10)
        return " WARNING: targets beyond the bench's limit (below)." if warnings else ""

    def action_go_on(self) -> None:
        """Resume the run paused on this screen."""
        if self.running:
            return
        if self.paused_run is None:
            self.status(
                "nothing to resume here: no run was paused on this screen "
                "(resume older runs with 'aligner sweep --resume RUN')",
                error=True,
            )
            return
        self.begin(None, self.paused_run)

    def action_pause(self) -> None:
        """Pause the running sweep: a point being counted stops before its next gate and is
        discarded (mounts stopped, shutter shut, the run resumable)."""
        if not self.running:
            self.status("no sweep is running", error=True)
            return
        self.backend.request_stop()
        self.status("pausing: the count in progress stops, its point is discarded…")

    def begin(self, preview: SweepPreview | None, resume_run: int | None = None) -> None:
        """Run a checked ``preview`` (or resume run ``resume_run``) in a worker thread."""
        self.running = True
        self.paused_run = None
        self.query_one(PointsTable).reset()
        self.query_one(EventList).show(())
        self.status("resuming run…" if resume_run else "starting the run…")
        self.sweep_worker(preview, dict(self.desk.readings), resume_run)

    @work(thread=True, exclusive=True, group="sweep")
    def sweep_worker(
        self, preview: SweepPreview | None, readings: dict[str, float], resume_run: int | None
    ) -> None:
        points: list[LoggedPoint] = []
        started: dict[str, int] = {}

        def on_start(run_id: int, plan: Sequence[PlannedPoint], log: RunLog) -> None:
            started["run"] = run_id
            points.extend(log.points(run_id))
            target = [
                p.readings[self.backend.bench.imbalance_mount]
                for p in plan
                if self.backend.bench.imbalance_mount in p.readings
            ]
            label = log.run(run_id).data_label
            self.post_message(SweepStarted(run_id, len(plan), tuple(target), tuple(points), label))
            moved = {name for p in plan for name in p.readings}
            for name, (here, wanted) in self.backend.unmoved_differences(readings, moved).items():
                self.app.call_from_thread(
                    self.say,
                    f"{name} reads {here:.4f}° on the bench but {wanted:.4f}° on "
                    "the bench screen; this sweep does not move it",
                    severity="warning",
                    timeout=10,
                )

        def on_point(point: LoggedPoint, done: int, total: int, log: RunLog) -> None:
            points.append(point)
            self.post_message(
                SweepProgress(
                    started["run"], done, total, tuple(points), tuple(log.events(started["run"]))
                )
            )

        try:
            result = self.backend.sweep(
                "",
                0.0,
                readings,
                on_point=on_point,
                on_start=on_start,
                resume_run=resume_run,
                planned=preview,
            )
        except AlignerError as exc:
            self.post_message(SweepEnded(error=str(exc)))
            return
        self.post_message(SweepEnded(result=result))

    # -- messages from the worker ------------------------------------------------------------

    @on(SweepStarted)
    def sweep_started(self, event: SweepStarted) -> None:
        self.run_id = event.run_id
        self.label = event.label
        bar = self.query_one(ProgressBar)
        bar.update(total=event.total, progress=len(event.points))
        self.curve = self.prediction_curve(event.imbalance_readings)
        self.query_one(LeakPlot).show(event.points, self.curve)
        self.query_one(PointsTable).show(event.points)
        self.desk.sweep_points = tuple(event.points)
        self.status(
            f"run {event.run_id} ({event.label}): {len(event.points)} of {event.total} points "
            "done; Ctrl+P pauses"
        )

    @on(SweepProgress)
    def sweep_progress(self, event: SweepProgress) -> None:
        self.query_one(ProgressBar).update(total=event.total, progress=event.done)
        self.query_one(LeakPlot).show(event.points, self.curve)
        self.query_one(PointsTable).show(event.points)
        self.query_one(EventList).show(event.events)
        self.desk.sweep_points = tuple(event.points)
        last = event.points[-1]
        self.status(
            f"run {event.run_id} ({self.label}): point #{last.idx} logged ({event.done} of "
            f"{event.total} done), imbalance {last.imbalance_deg:+.4f}°, {last.counts} counts; "
            "Ctrl+P pauses"
        )

    @on(SweepEnded)
    def sweep_ended(self, event: SweepEnded) -> None:
        self.running = False
        r = event.result
        if event.error or r is None:
            self.status(f"not started: {event.error}", error=True)
            self.query_one(EventList).show((), extra=event.error)
            return
        with self.backend.run_log() as log:
            events = log.events(r.run_id)
        self.query_one(EventList).show(events)
        if r.status == "complete":
            self.status(
                f"run {r.run_id} complete: {r.points_done} of {r.points_total} points "
                f"logged; {shutter_words(r.shutter)}"
            )
            return
        self.paused_run = r.run_id
        why, problem = PAUSED.get(r.reason, (f"stopped ({r.reason})", True))
        detail = f": {r.message}" if problem or r.reason == "interrupt" else ""
        unsafe = r.shutter in ("failed", "none")
        self.status(
            f"run {r.run_id} {why}{detail}. Mounts stopped; {shutter_words(r.shutter)}; "
            f"{r.points_done} of {r.points_total} points logged. Ctrl+G goes on.",
            error=problem or unsafe,
        )

    # -- helpers -------------------------------------------------------------------------------

    def prediction_curve(self, readings: tuple[float, ...]) -> tuple[Any, Any] | None:
        """The predicted leak rate along the planned readings of the imbalance mount."""
        if not readings:
            return None
        low, high = min(readings), max(readings)
        margin = CURVE_MARGIN * (high - low)
        grid = np.linspace(low - margin, high + margin, CURVE_POINTS)
        try:
            p = self.backend.predict_curve(self.desk.readings, grid)
        except AlignerError:
            return None
        order = np.argsort(p.imbalance_deg)
        return p.imbalance_deg[order].tolist(), p.leak_rate[order].tolist()
