"""F1: every key of the current screen, in one list.

The list is read from the bindings themselves (the app's, the screen's and those of the
desk's widgets on the screen, plus the keys the screen or a widget documents in
``HELP_KEYS``), so it cannot drift from what the keys do. A binding's tooltip says what it does
on its screen (:func:`aligner.tui.keys.on_screen`).
"""

from __future__ import annotations

from collections.abc import Iterable
from typing import Any, ClassVar

from rich.table import Table
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import VerticalScroll
from textual.screen import ModalScreen, Screen
from textual.widgets import Static

from ..format import literal

__all__ = ["HelpScreen", "key_name", "screen_keys"]

_NAMES = {
    "up": "↑",
    "down": "↓",
    "left": "←",
    "right": "→",
    "pageup": "PgUp",
    "pagedown": "PgDn",
    "escape": "Esc",
    "enter": "Enter",
    "tab": "Tab",
}


def key_name(key: str) -> str:
    """``ctrl+s`` -> ``Ctrl+S``, ``f1`` -> ``F1``, ``pageup`` -> ``PgUp``."""
    names = []
    for one in key.split(","):
        *mods, last = one.split("+")
        shown = _NAMES.get(last, last.upper() if len(last) <= 3 else last.title())
        names.append("+".join([*(m.title() for m in mods), shown]))
    return " / ".join(names)


def _bindings(owner: Any) -> Iterable[Binding]:
    for b in vars(type(owner)).get("BINDINGS", ()):
        if isinstance(b, Binding):
            yield b


def screen_keys(screen: Screen[Any]) -> list[tuple[str, str]]:
    """(keys, what they do) for every binding that works on ``screen``: the app's first,
    then the screen's, then its widgets' (the desk's own widgets only; text fields keep their
    usual editing keys)."""
    app: Any = screen.app
    rows: list[tuple[str, str]] = []
    for b in _bindings(app):
        if b.action.startswith("switch_mode"):
            rows.append((key_name(b.key), f"the {b.description} screen"))
        else:
            rows.append((key_name(b.key), b.tooltip or b.description))
    rows += [(key_name(b.key), b.tooltip or b.description) for b in _bindings(screen)]
    rows += list(vars(type(screen)).get("HELP_KEYS", ()))
    seen: set[type] = set()
    for widget in screen.query("*"):
        cls = type(widget)
        if cls in seen or not cls.__module__.startswith("aligner.tui"):
            continue
        seen.add(cls)
        rows += [(key_name(b.key), b.description) for b in _bindings(widget)]
        rows += list(vars(cls).get("HELP_KEYS", ()))
    rows.append(("Tab / Shift+Tab", "next / previous field"))
    return rows


class HelpScreen(ModalScreen[None]):
    """The keys of ``screen``; Escape or F1 closes it."""

    BINDINGS: ClassVar[list[BindingType]] = [Binding("escape,f1,q", "dismiss", "Close")]

    def __init__(self, screen: Screen[Any]) -> None:
        super().__init__()
        self.rows = screen_keys(screen)
        self.title_text = f"Keys of the {getattr(screen, 'MODE', '') or 'current'} screen"

    def compose(self) -> ComposeResult:
        table = Table(box=None, show_edge=False, header_style="bold", expand=True)
        table.add_column("key", no_wrap=True)
        table.add_column("does")
        for key, does in self.rows:
            table.add_row(literal(key), literal(does))
        with VerticalScroll(id="help-box") as box:
            box.border_title = self.title_text
            box.border_subtitle = "Esc or F1 closes"
            yield Static(table, id="help-keys")
