"""The top bar: the bench's name and the four screens, the current one marked."""

from __future__ import annotations

from rich.text import Text
from textual.widgets import Static

__all__ = ["SCREENS", "DeskBar"]

#: (mode name, key, label) in the order the bar shows them.
SCREENS = (
    ("bench", "F1", "Bench"),
    ("plan", "F2", "Plan"),
    ("sweep", "F3", "Sweep"),
    ("log", "F4", "Log"),
    ("recipe", "F5", "Recipes"),
)


class DeskBar(Static):
    """``aligner desk · <bench> ·  F1 Bench  F2 Plan ...`` with the current screen marked."""

    def __init__(self, bench_name: str, current: str) -> None:
        super().__init__(classes="desk-bar")
        self.bench_name = bench_name
        self.current = current

    def on_mount(self) -> None:
        text = Text.assemble(("aligner desk", "bold"), " · ", (self.bench_name, "italic"), "   ")
        for mode, key, label in SCREENS:
            style = "reverse bold" if mode == self.current else "dim"
            text.append(f" {key} {label} ", style=style)
            text.append(" ")
        self.update(text)
