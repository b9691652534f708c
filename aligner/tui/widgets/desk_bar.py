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
        super().__init__(_bar_text(screens, bench_name, current), classes="desk-bar")
        self.screens = tuple(screens)
        self.bench_name = bench_name
        self.current = current


def _bar_text(screens: Sequence[Any], bench_name: str, current: str) -> Text:
    """The bar's text (made with the widget, so the first frame already has it)."""
    text = Text()
    for s in screens:
        text.append(f"{s.key.upper()} {s.label}", style="reverse bold" if s.mode == current else "")
        text.append(" ")
    text.append("· F1 Help · ", style="dim")
    text.append_text(literal(bench_name or "(unnamed bench)", "italic"))
    return text
