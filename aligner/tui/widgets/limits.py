"""Where the amplification stops growing on this bench, and why, in words."""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from rich.console import Group
from rich.table import Table
from textual.widgets import Static

from ..format import literal, num

if TYPE_CHECKING:
    from ...prediction import Limits

__all__ = ["LimitsPanel"]

PENDING = "updating…"


class LimitsPanel(Static):
    """The combined limit (largest amplification, where, what limits it) and each mechanism
    alone, from :func:`aligner.prediction.limits`."""

    def __init__(self, mount: str, **kwargs: Any) -> None:
        super().__init__("working out the limits…", **kwargs)
        self.mount_name = mount
        self.border_title = "Limits of amplification"

    def pending(self) -> None:
        """Say that new limits are being worked out."""
        if self.border_subtitle != PENDING:
            self.border_subtitle = PENDING

    def failed(self, message: str) -> None:
        """Show why the limits could not be worked out."""
        self.border_subtitle = ""
        self.update(literal(message, "bold red"))

    def show(self, lim: Limits) -> None:
        """Show an :class:`aligner.prediction.Limits`."""
        self.border_subtitle = ""
        head = Table.grid(padding=(0, 2))
        head.add_column(style="bold", no_wrap=True)
        head.add_column()
        for label, value in (
            (
                "largest amplification",
                f"{num(lim.max_amplification, 4)} as seen (axis {lim.axis})",
            ),
            ("at imbalance", f"{lim.at_imbalance_deg:+.4f}° (reading {lim.at_reading_deg:.4f}°)"),
            ("null at", f"{lim.null_reading_deg:.4f}° ({self.mount_name})"),
            ("limited by", lim.limited_by),
        ):
            head.add_row(label, literal(value))
        alone = Table(box=None, padding=(0, 1), show_edge=False, header_style="bold")
        alone.add_column("each alone")
        alone.add_column("max", justify="right")
        alone.add_column("at imbalance", justify="right")
        for name, m in lim.mechanisms.items():
            mark = "▶ " if name == lim.limited_by else "  "
            alone.add_row(
                literal(f"{mark}{name}"),
                num(m.max_amplification, 4),
                f"{m.at_imbalance_deg:+.4f}°",
            )
        self.update(Group(head, literal(lim.explanation, "italic"), alone))
