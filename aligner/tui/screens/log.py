"""Log screen: the runs in the run log and the points, plot and events of the selected run."""

from __future__ import annotations

from typing import ClassVar

from textual import on
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Horizontal, Vertical
from textual.widgets import DataTable, Static

from ...errors import AlignerError
from ..widgets.event_list import EventList
from ..widgets.leak_plot import LeakPlot
from ..widgets.points_table import PointsTable
from ..widgets.run_list import RunList
from .base import DeskScreen

__all__ = ["LogScreen"]


class LogScreen(DeskScreen):
    """Browse the run log (read only; notes, exports and reports are ``aligner log``)."""

    MODE = "log"
    BINDINGS: ClassVar[list[BindingType]] = [Binding("r", "reload", "Reload")]

    def compose_body(self) -> ComposeResult:
        yield Static("", id="log-file")
        with Horizontal(id="log-top"):
            with Vertical(id="log-left"):
                yield RunList(id="runs")
                yield EventList(limit=4, id="log-events")
            yield LeakPlot(id="log-plot")
        yield PointsTable(id="log-points")

    def on_mount(self) -> None:
        self.action_reload()

    def on_screen_resume(self) -> None:
        self.action_reload()

    def action_reload(self) -> None:
        """Read the run list again (new runs appear, statuses change)."""
        label = self.query_one("#log-file", Static)
        try:
            with self.backend.run_log() as log:
                runs = log.runs()
        except AlignerError as exc:
            label.update(str(exc))
            label.add_class("problem")
            return
        label.update(f"run log {self.backend.db_path} · {len(runs)} runs · ↑/↓ choose a run")
        table = self.query_one(RunList)
        table.show(runs)
        self.show_run(table.selected_run())

    @on(DataTable.RowHighlighted, "#runs")
    def run_highlighted(self, event: DataTable.RowHighlighted) -> None:
        if event.row_key.value is not None:
            self.show_run(int(event.row_key.value))

    def show_run(self, run_id: int | None) -> None:
        """Show the points, plot and events of run ``run_id`` (nothing when None)."""
        points, events, title = [], [], "Points"
        if run_id is not None:
            try:
                with self.backend.run_log() as log:
                    record = log.run(run_id)
                    points, events = log.points(run_id), log.events(run_id)
            except AlignerError as exc:
                self.query_one(EventList).show((), extra=str(exc))
                return
            title = f"Points of run {run_id} · {record.schedule} · {record.status}" + (
                f" · {record.message}" if record.message else ""
            )
        table = self.query_one(PointsTable)
        table.reset()
        table.show(points)
        table.border_title = title
        self.query_one(LeakPlot).show(points)
        self.query_one(EventList).show(events)
