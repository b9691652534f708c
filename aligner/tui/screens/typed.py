"""The question a typed-in device asks: the operator reads a display and types the number."""

from __future__ import annotations

from typing import ClassVar

from textual import on
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import Input, Static

from ..format import literal

__all__ = ["TypedValue"]


class TypedValue(ModalScreen[str]):
    """One prompt of a typed-in counter or pointer reader; Enter answers with the text typed
    (the device checks it and asks again when it is not a number), Escape cancels (the device
    then stops the operation: ``q``)."""

    BINDINGS: ClassVar[list[BindingType]] = [Binding("escape", "cancel", "Cancel")]

    def __init__(self, prompt: str) -> None:
        super().__init__()
        self.prompt = prompt

    def compose(self) -> ComposeResult:
        with Vertical(id="typed-box"):
            yield Static(literal(self.prompt), id="typed-prompt")
            yield Input(id="typed-value", placeholder="type the number, then Enter")
            yield Static("Escape cancels (the sweep pauses, nothing is lost)", classes="dim")

    def on_mount(self) -> None:
        self.query_one(Input).focus()

    @on(Input.Submitted)
    def submitted(self, event: Input.Submitted) -> None:
        self.dismiss(event.value)

    def action_cancel(self) -> None:
        self.dismiss("q")
