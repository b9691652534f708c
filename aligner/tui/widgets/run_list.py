"""The runs in the run log: id, start time, status, what the numbers are, points, schedule."""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING, Any, ClassVar

from textual.widgets import DataTable

from ..format import literal, stamp

if TYPE_CHECKING:
    from ...run.log import RunRecord

__all__ = ["RunList"]


class RunList(DataTable[Any]):
    """One row per run (:class:`aligner.run.log.RunRecord`); row keys are the run ids. The
    start time is shown in full with its zone; schedules are shown as written."""

    HELP_KEYS: ClassVar = (("↑ / ↓", "choose a run (its points, plot and events follow)"),)

    def __init__(self, **kwargs: Any) -> None:
        super().__init__(zebra_stripes=True, cursor_type="row", **kwargs)
        self.border_title = "Runs"

    def on_mount(self) -> None:
        self.add_columns("id", "started", "status", "data", "points", "schedule")

    def show(self, runs: Sequence[RunRecord]) -> None:
        """Show ``runs``, keeping the cursor on the same run when it is still there (else on
        the newest)."""
        keep = self.selected_run()
        self.clear()
        for r in runs:
            label = r.data_label
            self.add_row(
                str(r.id),
                literal(stamp(r.started_utc)),
                literal(r.status),
                literal(label, "" if label == "measured" else "bold yellow"),
                f"{r.points}/{r.planned}",
                literal(r.schedule),
                key=str(r.id),
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
