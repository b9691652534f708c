"""The safety line shown at the foot of every screen."""

from __future__ import annotations

from textual.widgets import Static

__all__ = ["SAFETY_TEXT", "SafetyLine"]

SAFETY_TEXT = (
    "⚠ LASER  Protect your eyes, keep beam blocks in place, never let a bright beam "
    "reach the detector.\n         Local laser-safety rules and your laser safety "
    "officer come first."
)


class SafetyLine(Static):
    """Laser and detector safety in two short lines, always visible."""

    def __init__(self) -> None:
        super().__init__(SAFETY_TEXT, classes="safety-line", markup=False)
