"""The safety line shown at the foot of every screen."""

from __future__ import annotations

from textual.widgets import Static

__all__ = ["SAFETY_TEXT", "SafetyLine"]

#: Two lines at 80 columns, one at 160.
SAFETY_TEXT = (
    "⚠ LASER  Protect your eyes, keep beam blocks in place, no bright beam on the detector. "
    "Local laser-safety rules and your laser safety officer come first."
)


class SafetyLine(Static):
    """Laser and detector safety, always visible (wrapped, never cut)."""

    def __init__(self) -> None:
        super().__init__(SAFETY_TEXT, classes="safety-line", markup=False)
