"""A small yes/no question before the desk does something that cannot be taken back."""

from __future__ import annotations

from typing import ClassVar

from textual import on
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Horizontal, VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import Button, Static

from ..format import literal

__all__ = ["Confirm"]


class Confirm(ModalScreen[bool]):
    """Ask first: True for ``yes``, False for ``no`` (Escape, N, or Enter while the ``no``
    button has the focus, which it has first). Texts are shown as written."""

    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("escape,n", "answer(False)", "No"),
        Binding("y", "answer(True)", "Yes"),
    ]

    def __init__(self, question: str, detail: str = "", *, yes: str = "Start", no: str = "Cancel"):
        super().__init__()
        self.question = question
        self.detail = detail
        self.yes = yes
        self.no = no

    def compose(self) -> ComposeResult:
        with VerticalScroll(id="confirm-box"):
            yield Static(literal(self.question), id="confirm-question")
            if self.detail:
                yield Static(literal(self.detail), id="confirm-detail")
            with Horizontal(id="confirm-buttons"):
                yield Button(f"{self.no} (N)", id="confirm-no", variant="primary")
                yield Button(f"{self.yes} (Y)", id="confirm-yes", variant="warning")

    def on_mount(self) -> None:
        self.query_one("#confirm-no", Button).focus()

    @on(Button.Pressed)
    def pressed(self, event: Button.Pressed) -> None:
        self.dismiss(event.button.id == "confirm-yes")

    def action_answer(self, yes: bool) -> None:
        self.dismiss(yes)
