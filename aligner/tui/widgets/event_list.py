"""A run's events, faults and guard trips in plain words and plain colours."""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

from rich.text import Text
from textual.widgets import Static

from ...text import clean

if TYPE_CHECKING:
    from ...run.log import Event

__all__ = ["EventList"]

_STYLE = {
    "fault": "bold red",
    "guard": "bold red",
    "pause": "yellow",
    "resume": "green",
    "note": "",
}
_LABEL = {
    "fault": "DEVICE FAULT",
    "guard": "DETECTOR GUARD",
    "pause": "paused",
    "resume": "resumed",
    "note": "note",
}


class EventList(Static):
    """The latest events of a run (:class:`aligner.run.log.Event`), newest last."""

    def __init__(self, limit: int = 6, **kwargs: Any) -> None:
        super().__init__("", **kwargs)
        self.limit = limit
        self.border_title = "Events"

    def show(self, events: Sequence[Event], extra: str = "") -> None:
        """Show the last ``limit`` events, then ``extra`` (an error to state plainly)."""
        text = Text()
        for e in list(events)[-self.limit :]:
            where = f" (point {e.idx})" if e.idx is not None else ""
            label, style = _LABEL.get(e.kind, e.kind), _STYLE.get(e.kind, "")
            message = clean(e.message)
            if message.lower().startswith(label.lower()):
                # "paused by the operator" says it already: no "paused: " in front
                text.append(message, style=style)
                text.append(f"{where}\n")
            else:
                text.append(f"{label}{where}: ", style=style)
                text.append(f"{message}\n")
        if extra:
            text.append(clean(extra), style="bold red")
        if not text.plain:
            text.append("none", style="dim")
        self.update(text)
