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
            "↑ / ↓ / PgUp / PgDn",
            "in a scroll area (Tab or Shift+Tab until its scroll bar turns bright): scroll to "
            "what lies below the fold; Home / End go to its top / bottom",
        ),
    )
