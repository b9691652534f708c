"""A small yes/no question before the desk moves real mounts."""

from __future__ import annotations

from typing import ClassVar

from textual import on
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Horizontal, Vertical
from textual.screen import ModalScreen
from textual.widgets import Button, Static

__all__ = ["ConfirmStart"]


class ConfirmStart(ModalScreen[bool]):
    """Ask before a sweep starts: True for "start", False for "cancel" (Escape, N, or Enter
    while Cancel has the focus, which it has first)."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("escape,n", "answer(False)", "Cancel"),
        Binding("y", "answer(True)", "Start"),
    ]

    def __init__(self, question: str, detail: str = "") -> None:
        super().__init__()
        self.question = question
        self.detail = detail

    def compose(self) -> ComposeResult:
        with Vertical(id="confirm-box"):
            yield Static(self.question, id="confirm-question")
            if self.detail:
                yield Static(self.detail, id="confirm-detail")
            with Horizontal(id="confirm-buttons"):
                yield Button("Cancel (N)", id="confirm-no", variant="primary")
                yield Button("Start (Y)", id="confirm-yes", variant="warning")

    def on_mount(self) -> None:
        self.query_one("#confirm-no", Button).focus()

    @on(Button.Pressed)
    def pressed(self, event: Button.Pressed) -> None:
        self.dismiss(event.button.id == "confirm-yes")

    def action_answer(self, start: bool) -> None:
        self.dismiss(start)
