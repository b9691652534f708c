"""Logged points of a run: target, readings, counts, measured and predicted leak rate."""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

from textual.widgets import DataTable

from ..format import interval, literal, num, sci

if TYPE_CHECKING:
    from ...run.log import LoggedPoint

__all__ = ["PointsTable"]


class PointsTable(DataTable):
    """One row per logged point (:class:`aligner.run.log.LoggedPoint`), newest kept in view;
    numbered as the run log numbers them (``#0`` first). Reading and imbalance in degrees,
    leak rates per source photon (``pred.``: the prediction at the read-back). Narrow enough
    for an 80-column terminal."""

    def __init__(self, **kwargs: Any) -> None:
        super().__init__(zebra_stripes=True, cursor_type="row", **kwargs)
        self.border_title = "Points"
        self._shown = 0

    def on_mount(self) -> None:
        for label, key in (
            ("#", "idx"),
            ("target", "target"),
            ("reading", "reading"),
            ("imbal.", "imbalance"),
            ("counts", "counts"),
            ("leak", "leak"),
            ("68 % interval", "interval"),
            ("pred.", "predicted"),
        ):
            self.add_column(label, key=key)

    def show(self, points: Sequence[LoggedPoint]) -> None:
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
                sci(p.leak) if p.leak is not None else literal(p.flag or "—", "yellow"),
                interval(p.leak_lo, p.leak_hi),
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
