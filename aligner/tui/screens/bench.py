"""Bench screen: the readings, the live prediction, the limits, the working-point plots and
the beam path. Nothing moves from here: the readings are a what-if for the model.

Each keystroke predicts at once (well under a millisecond); a burst of keystrokes is handled
as one change. The limits and the curves of the plots are worked out in a thread a moment
after the readings stop changing.
"""

from __future__ import annotations

import time
from collections.abc import Mapping
from typing import TYPE_CHECKING, ClassVar

from textual import on, work
from textual.app import ComposeResult
from textual.binding import BindingType
from textual.containers import Container, Vertical
from textual.widgets import Static
from textual.worker import get_current_worker

from ...errors import AlignerError
from .. import keys
from ..messages import LimitsReady, ReadingsChanged
from ..widgets.beam_path import BeamPath
from ..widgets.limits import LimitsPanel
from ..widgets.prediction import PredictionPanel
from ..widgets.readings import ReadingsEditor
from ..widgets.scroll_area import ScrollArea
from ..widgets.working_point import Curve, Spot, WorkingPoint, curve_readings
from .base import DeskScreen

if TYPE_CHECKING:
    from ...prediction import Prediction

__all__ = ["BenchScreen"]

WHAT_IF = (
    "These readings are a what-if for the model: nothing moves from this screen. Sweeps (F4) "
    "and the planner (F3) start from them; the meter (F5) turns the mounts themselves."
)
#: Seconds without a change before the limits and curves are worked out again.
SETTLE_S = 0.25
#: Seconds without a change before the beam path (every element's angle) and the plots'
#: current point are redrawn: the weak value's frame does not wait for them.
BEAM_PATH_S = 0.08
#: How often the screen looks whether the readings have settled (s).
TICK_S = 0.04


class BenchScreen(DeskScreen):
    """Edit readings and see at once what the bench does there."""

    MODE = "bench"
    BINDINGS: ClassVar[list[BindingType]] = [keys.FILE_READINGS, keys.NULL_READING]

    def __init__(self) -> None:
        super().__init__()
        self._pending: dict[str, float] | None = None
        self._latest: tuple[dict[str, float], Prediction] | None = None
        self._changed_at = 0.0
        self._caught_up: set[str] = set()

    def compose_body(self) -> ComposeResult:
        bench = self.backend.bench
        with ScrollArea(id="bench-body"):
            with Container(id="bench-top"):
                with Vertical(id="bench-left"):
                    editor = ReadingsEditor(bench.mounts, self.desk.readings, id="readings")
                    editor.border_title = "Readings (deg) · ↑/↓ one step · PgUp/PgDn 100 steps"
                    yield editor
                    yield PredictionPanel(bench, id="prediction")
                with Vertical(id="bench-right"):
                    yield LimitsPanel(bench.imbalance_mount, id="limits")
                    yield BeamPath(bench, id="beam-path")
            yield WorkingPoint(bench.detector.safe_rate, id="bench-plots")
            yield Static(WHAT_IF, id="what-if", markup=False)

    @property
    def editor(self) -> ReadingsEditor:
        """The readings editor."""
        return self.query_one(ReadingsEditor)

    def on_mount(self) -> None:
        self.set_interval(TICK_S, self.catch_up)
        self.refresh_prediction(self.desk.readings)
        self.editor.input_for(self.backend.bench.imbalance_mount).focus()

    def on_screen_resume(self) -> None:
        if dict(self.editor.readings) != dict(self.desk.readings):
            self.editor.set_readings(self.desk.readings)
            self.refresh_prediction(self.desk.readings)
        self.query_one(WorkingPoint).show_points(measured=self.desk.sweep_points)

    @on(ReadingsChanged)
    def readings_changed(self, event: ReadingsChanged) -> None:
        """Keystrokes queue up changes; only the latest is predicted."""
        first = self._pending is None
        self._pending = dict(event.readings)
        if first:
            self.call_later(self._predict_pending)

    def _predict_pending(self) -> None:
        readings, self._pending = self._pending, None
        if readings is not None:
            self.refresh_prediction(readings)

    def refresh_prediction(self, readings: Mapping[str, float]) -> None:
        """Predict at ``readings`` (deg) now; the rest follows once they settle."""
        try:
            p = self.backend.predict(readings)
        except AlignerError as exc:
            self.say(str(exc), severity="error")
            return
        self.query_one(PredictionPanel).show(p)
        self.query_one(LimitsPanel).pending()
        self._latest = (dict(readings), p)
        self._changed_at = time.monotonic()
        self._caught_up = set()

    def catch_up(self) -> None:
        """Once the readings have not changed for a moment: the beam path and the plots'
        current point; a moment later the limits and curves (in a thread)."""
        if self._latest is None:
            return
        readings, p = self._latest
        quiet = time.monotonic() - self._changed_at
        if "beam" not in self._caught_up and quiet >= BEAM_PATH_S:
            self._caught_up.add("beam")
            self.query_one(BeamPath).show(readings, p.angles_deg)
            self.query_one(WorkingPoint).show_points(current=Spot.of(p))
        if "limits" not in self._caught_up and quiet >= SETTLE_S:
            self._caught_up.add("limits")
            self.work_out_limits(readings)

    @work(thread=True, exclusive=True, group="limits")
    def work_out_limits(self, readings: dict[str, float]) -> None:
        """The limits and the curve along the imbalance mount (in a thread)."""
        try:
            lim = self.backend.limits(readings)
            here = self.backend.predict(readings)
            grid = curve_readings(
                self.backend.bench.mounts[self.backend.bench.imbalance_mount],
                lim.null_reading_deg,
                max(3 * abs(lim.at_imbalance_deg), 1.5 * abs(float(here.imbalance_deg))),
            )
            curve = Curve.of(self.backend.predict_curve(readings, grid))
            message = LimitsReady(readings, limits=lim, curve=curve)
        except AlignerError as exc:
            message = LimitsReady(readings, error=str(exc))
        if not get_current_worker().is_cancelled:
            self.post_message(message)

    @on(LimitsReady)
    def limits_ready(self, event: LimitsReady) -> None:
        if dict(event.readings) != dict(self.editor.readings):
            return  # stale: the readings moved on while they were worked out
        panel = self.query_one(LimitsPanel)
        if event.error or event.limits is None:
            panel.failed(event.error or "no limits were worked out")
            return
        panel.show(event.limits)
        self.query_one(WorkingPoint).show_curve(event.curve, event.limits)

    def action_file_readings(self) -> None:
        """Back to the readings in the bench file."""
        self.apply(self.backend.bench.readings())

    def action_null_reading(self) -> None:
        """Put the model's null on the imbalance mount's reading (nothing moves)."""
        readings = dict(self.editor.readings)
        try:
            null = self.backend.find_null(readings)
        except AlignerError as exc:
            self.say(str(exc), severity="error")
            return
        readings[self.backend.bench.imbalance_mount] = null
        self.apply(readings)

    def apply(self, readings: Mapping[str, float]) -> None:
        """Show ``readings`` and tell the app."""
        self.editor.set_readings(readings)
        self.post_message(ReadingsChanged(dict(self.editor.readings)))
