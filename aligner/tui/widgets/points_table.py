"""Logged points of a run: target, readings, counts, measured and predicted leak rate."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from textual.widgets import DataTable

from ..format import num, sci

__all__ = ["PointsTable"]


class PointsTable(DataTable):
    """One row per logged point (:class:`aligner.run.log.LoggedPoint`), newest kept in view."""

    def __init__(self, **kwargs: Any) -> None:
        super().__init__(zebra_stripes=True, cursor_type="row", **kwargs)
        self.border_title = "Points"
        self._shown = 0

    def on_mount(self) -> None:
        self.add_column("#", key="idx")
        self.add_column("target", key="target")
        self.add_column("reading °", key="reading")
        self.add_column("imbal. °", key="imbalance")
        self.add_column("counts", key="counts")
        self.add_column("leak rate", key="leak")
        self.add_column("68 % interval", key="interval")
        self.add_column("predicted", key="predicted")

    def show(self, points: Sequence[Any]) -> None:
        """Show ``points``: rows are appended when the list only grew, else rebuilt."""
        if len(points) < self._shown:
            self.clear()
            self._shown = 0
        for p in points[self._shown :]:
            self.add_row(
                str(p.idx),
                num(p.target, 4),
                f"{p.reading_deg:.4f}",
                f"{p.imbalance_deg:+.4f}",
                str(p.counts),
                sci(p.leak),
                f"{sci(p.leak_lo)} … {sci(p.leak_hi)}",
                sci(p.predicted_leak),
                key=str(p.idx),
            )
        if len(points) > self._shown:
            self.move_cursor(row=len(points) - 1)
        self._shown = len(points)

    def reset(self) -> None:
        """Empty the table."""
        self.clear()
        self._shown = 0
