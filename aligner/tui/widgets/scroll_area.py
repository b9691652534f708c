"""A scrolling part of a screen that the keys reach: Tab focuses it (marked while it has the
focus), then the arrows and page keys scroll it."""

from __future__ import annotations

from typing import ClassVar

from textual.containers import VerticalScroll

__all__ = ["ScrollArea"]


class ScrollArea(VerticalScroll):
    """A vertical scroll area, focusable with Tab and marked while focused (``desk.tcss``);
    its keys are listed by the F1 help."""

    HELP_KEYS: ClassVar = (
        (
            "Tab, then ↑ / ↓ / PgUp / PgDn / Home / End",
            "scroll the part of the screen below the fold (the scroll bar turns bright while "
            "the keys scroll it)",
        ),
    )
