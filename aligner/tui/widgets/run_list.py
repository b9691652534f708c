"""The runs in the run log: id, status, schedule, points."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from textual.widgets import DataTable

__all__ = ["RunList"]


class RunList(DataTable):
    """One row per run (:class:`aligner.run.log.RunRecord`); row keys are the run ids."""

    def __init__(self, **kwargs: Any) -> None:
        super().__init__(zebra_stripes=True, cursor_type="row", **kwargs)
        self.border_title = "Runs"

    def on_mount(self) -> None:
        self.add_columns("id", "status", "points", "schedule", "started UTC")

    def show(self, runs: Sequence[Any]) -> None:
        """Show ``runs``, keeping the cursor on the same run when it is still there (else on
        the newest)."""
        keep = self.selected_run()
        self.clear()
        for r in runs:
            self.add_row(
                str(r.id),
                r.status,
                f"{r.points}/{r.planned}",
                r.schedule,
                r.started_utc[5:16].replace("T", " "),
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
