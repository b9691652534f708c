"""Log screen: the runs in the run log, and the devices, points, plot and events of the
selected run (read only; notes, exports and reports are ``aligner log``)."""

from __future__ import annotations

from typing import TYPE_CHECKING, ClassVar

from rich.text import Text
from textual import on
from textual.app import ComposeResult
from textual.binding import BindingType
from textual.containers import Container, Vertical
from textual.widgets import DataTable, Static

from ...errors import AlignerError
from .. import keys
from ..format import literal, stamp
from ..widgets.event_list import EventList
from ..widgets.leak_plot import LeakPlot
from ..widgets.points_table import PointsTable
from ..widgets.run_list import RunList
from ..widgets.scroll_area import ScrollArea
from .base import DeskScreen

if TYPE_CHECKING:
    from ...run.log import Event, LoggedPoint, RunRecord

__all__ = ["LogScreen"]


def run_details(record: RunRecord) -> Text:
    """What the selected run is: its data label, times with their zone, status and message,
    and what every device was (:func:`aligner.run.report.device_lines`)."""
    from ...run.report import device_lines

    label = record.data_label
    text = Text()
    text.append(f"run {record.id}: ", style="bold")
    text.append_text(literal(label, "" if label == "measured" else "bold yellow"))
    text.append_text(literal(f" · {record.status} · started {stamp(record.started_utc)}"))
    if record.ended_utc:
        text.append_text(literal(f" · ended {stamp(record.ended_utc)}"))
    if record.message:
        text.append_text(literal(f"\n{record.message}", "italic"))
    for line in device_lines(record):
        text.append_text(literal(f"\n{line}", "dim"))
    return text


class LogScreen(DeskScreen):
    """Browse the run log."""

    MODE = "log"
    BINDINGS: ClassVar[list[BindingType]] = [keys.READ_AGAIN]

    def compose_body(self) -> ComposeResult:
        yield Static("", id="log-file")
        with ScrollArea(id="log-body"):
            with Container(id="log-top"):
                with Vertical(id="log-left"):
                    yield RunList(id="runs")
                    yield Static("", id="run-details")
                yield LeakPlot(id="log-plot")
            yield EventList(limit=4, id="log-events")
            yield PointsTable(id="log-points")

    def on_mount(self) -> None:
        self.query_one(RunList).focus()

    def on_screen_resume(self) -> None:
        """Read the run log each time the screen is shown."""
        self.action_read_again()

    def action_read_again(self) -> None:
        """Read the run list again (new runs appear, statuses change)."""
        try:
            with self.backend.run_log() as log:
                runs = log.runs()
        except AlignerError as exc:
            self.status_line("#log-file", str(exc), error=True)
            return
        self.status_line(
            "#log-file", f"run log {self.backend.db_path} · {len(runs)} runs · ↑/↓ choose a run"
        )
        table = self.query_one(RunList)
        table.show(runs)
        self.show_run(table.selected_run())

    @on(DataTable.RowHighlighted, "#runs")
    def run_highlighted(self, event: DataTable.RowHighlighted) -> None:
        if event.row_key.value is not None:
            self.show_run(int(event.row_key.value))

    def show_run(self, run_id: int | None) -> None:
        """Show the devices, points, plot and events of run ``run_id`` (nothing when None)."""
        points: list[LoggedPoint] = []
        events: list[Event] = []
        title: Text = Text("Points")
        details = Text("no runs yet: sweeps started here or with 'aligner sweep' appear here")
        if run_id is not None:
            try:
                with self.backend.run_log() as log:
                    record = log.run(run_id)
                    points, events = log.points(run_id), log.events(run_id)
            except AlignerError as exc:
                self.query_one(EventList).show((), extra=str(exc))
                return
            title = literal(f"Points of run {run_id} · {record.schedule} · {record.status}")
            details = run_details(record)
        table = self.query_one(PointsTable)
        table.reset()
        table.show(points)
        table.border_title = title
        self.query_one("#run-details", Static).update(details)
        self.query_one(LeakPlot).show(points)
        self.query_one(EventList).show(events)
