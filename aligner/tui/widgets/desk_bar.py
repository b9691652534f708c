"""The top bar: the screens with their keys (the current one marked), then the bench's name."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from rich.text import Text
from textual.widgets import Static

from ..format import literal

__all__ = ["DeskBar"]


class DeskBar(Static):
    """``F2 Bench  F3 Plan … · <bench>`` with the current screen marked; the screens come
    first so that none falls off a narrow terminal (the name wraps to a second line)."""

    def __init__(self, screens: Sequence[Any], bench_name: str, current: str) -> None:
        super().__init__(classes="desk-bar")
        self.screens = tuple(screens)
        self.bench_name = bench_name
        self.current = current

    def on_mount(self) -> None:
        text = Text()
        for s in self.screens:
            style = "reverse bold" if s.mode == self.current else ""
            text.append(f"{s.key.upper()} {s.label}", style=style)
            text.append(" ")
        text.append("· F1 Help · ", style="dim")
        text.append_text(literal(self.bench_name or "(unnamed bench)", "italic"))
        self.update(text)
