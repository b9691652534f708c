"""Bench screen: the beam path, the readings, the live prediction and the limits."""

from __future__ import annotations

from collections.abc import Mapping
from typing import ClassVar

from textual import on, work
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Horizontal, Vertical
from textual.widgets import Static
from textual.worker import get_current_worker

from ...errors import AlignerError
from ..messages import LimitsReady, ReadingsChanged
from ..widgets.beam_path import BeamPath
from ..widgets.limits import LimitsPanel
from ..widgets.prediction import PredictionPanel
from ..widgets.readings import ReadingsEditor
from .base import DeskScreen

__all__ = ["BenchScreen"]

WHAT_IF = (
    "These readings are a what-if for the model: nothing moves from this screen. "
    "Sweeps start from them (F3); the planner starts from them too (F2)."
)


class BenchScreen(DeskScreen):
    """Edit readings and see at once what the bench does there (limits follow in a worker)."""

    MODE = "bench"
    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("ctrl+r", "file_readings", "File readings", priority=True),
        Binding("ctrl+l", "null", "Go to null", priority=True),
    ]

    def compose_body(self) -> ComposeResult:
        bench = self.backend.bench
        with Horizontal(id="bench-body"):
            with Vertical(id="bench-left"):
                yield BeamPath(bench, id="beam-path")
                editor = ReadingsEditor(bench.mounts, self.desk.readings, id="readings")
                editor.border_title = "Readings (deg) · ↑/↓ one step · PgUp/PgDn 100 steps"
                yield editor
                yield Static(WHAT_IF, id="what-if")
            with Vertical(id="bench-right"):
                yield PredictionPanel(bench, id="prediction")
                yield LimitsPanel(bench.imbalance_mount, id="limits")

    def on_mount(self) -> None:
        self.refresh_prediction(self.desk.readings)
        self.query_one(f"#reading-{self.backend.bench.imbalance_mount}").focus()

    def on_screen_resume(self) -> None:
        editor = self.query_one(ReadingsEditor)
        if dict(editor.readings) != dict(self.desk.readings):
            editor.set_readings(self.desk.readings)
            self.refresh_prediction(self.desk.readings)

    @on(ReadingsChanged)
    def readings_changed(self, event: ReadingsChanged) -> None:
        self.refresh_prediction(event.readings)

    def refresh_prediction(self, readings: Mapping[str, float]) -> None:
        """Predict at ``readings`` (deg) now; start working out the limits in a thread."""
        try:
            p = self.backend.predict(readings)
        except AlignerError as exc:
            self.notify(str(exc), severity="error")
            return
        self.query_one(PredictionPanel).show(p)
        self.query_one(BeamPath).show(readings, p.angles_deg)
        self.query_one(LimitsPanel).pending()
        self.work_out_limits(dict(readings))

    @work(thread=True, exclusive=True, group="limits")
    def work_out_limits(self, readings: dict[str, float]) -> None:
        try:
            message = LimitsReady(readings, limits=self.backend.limits(readings))
        except AlignerError as exc:
            message = LimitsReady(readings, error=str(exc))
        if not get_current_worker().is_cancelled:
            self.post_message(message)

    @on(LimitsReady)
    def limits_ready(self, event: LimitsReady) -> None:
        if dict(event.readings) != dict(self.query_one(ReadingsEditor).readings):
            return  # stale: the readings moved on while they were worked out
        panel = self.query_one(LimitsPanel)
        if event.error:
            panel.failed(event.error)
        else:
            panel.show(event.limits)

    def action_file_readings(self) -> None:
        """Back to the readings in the bench file."""
        self.apply(self.backend.bench.readings())

    def action_null(self) -> None:
        """Put the imbalance mount at the null nearest its reading."""
        readings = dict(self.query_one(ReadingsEditor).readings)
        try:
            null = self.backend.find_null(readings)
        except AlignerError as exc:
            self.notify(str(exc), severity="error")
            return
        readings[self.backend.bench.imbalance_mount] = null
        self.apply(readings)

    def apply(self, readings: Mapping[str, float]) -> None:
        """Show ``readings`` and tell the app."""
        editor = self.query_one(ReadingsEditor)
        editor.set_readings(readings)
        self.post_message(ReadingsChanged(dict(editor.readings)))
