"""The runs in the run log: id, start time, status, what the numbers are, points, schedule.

A schedule longer than the room the other columns leave is folded onto more lines of its row
(a table row is never wider than the panel, so nothing is cut off)."""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING, Any, ClassVar

from rich.text import Text
from textual.widgets import DataTable

from ...text import clean
from ..format import literal, stamp

if TYPE_CHECKING:
    from ...run.log import RunRecord

__all__ = ["RunList"]

COLUMNS = ("id", "started", "status", "data", "points", "schedule")


class RunList(DataTable[Any]):
    """One row per run (:class:`aligner.run.log.RunRecord`); row keys are the run ids. The
    start time is shown in full with its zone; schedules are shown as written."""

    HELP_KEYS: ClassVar = (("↑ / ↓", "choose a run (its points, plot and events follow)"),)

    def __init__(self, **kwargs: Any) -> None:
        super().__init__(zebra_stripes=True, cursor_type="row", **kwargs)
        self.border_title = "Runs"
        self.runs: Sequence[RunRecord] = ()

    def on_mount(self) -> None:
        self.add_columns(*COLUMNS)

    def on_resize(self) -> None:
        if self.runs:
            self.show(self.runs)

    def _cells(self, r: RunRecord) -> tuple[str, str, str, str, str]:
        """Every cell of run ``r`` but its schedule, as shown."""
        return str(r.id), stamp(r.started_utc), r.status, r.data_label, f"{r.points}/{r.planned}"

    def _schedule_room(self, runs: Sequence[RunRecord]) -> int:
        """Characters the schedule column can have beside the others (at least 8)."""
        rows = [self._cells(r) for r in runs]
        used = sum(
            max(len(name), *(len(row[i]) for row in rows)) + 2 * self.cell_padding
            for i, name in enumerate(COLUMNS[:-1])
        )
        bar = self.styles.scrollbar_size_vertical  # whether or not it shows yet
        return max(8, self.content_region.width - bar - used - 2 * self.cell_padding - 1)

    def show(self, runs: Sequence[RunRecord]) -> None:
        """Show ``runs``, keeping the cursor on the same run when it is still there (else on
        the newest)."""
        keep = self.selected_run()
        self.clear()
        self.runs = runs
        room = self._schedule_room(runs) if runs else 0
        for r in runs:
            run_id, started, status, label, points = self._cells(r)
            schedule = clean(r.schedule)
            folded = "\n".join(schedule[i : i + room] for i in range(0, len(schedule), room))
            self.add_row(
                run_id,
                literal(started),
                literal(status),
                literal(label, "" if label == "measured" else "bold yellow"),
                points,
                Text(folded or ""),
                key=str(r.id),
                height=None,
            )
        if keep is not None and str(keep) in self.rows:
            self.move_cursor(row=self.get_row_index(str(keep)))
        elif runs:
            self.move_cursor(row=len(runs) - 1)

    def selected_run(self) -> int | None:
        """The id of the run under the cursor, if any."""
        if not self.row_count:
            return None
        key = self.coordinate_to_cell_key(self.cursor_coordinate).row_key
        return int(key.value) if key.value is not None else None
