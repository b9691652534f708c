"""What every desk screen has: the top bar, the safety line and the footer of key bindings."""

from __future__ import annotations

from typing import TYPE_CHECKING, ClassVar

from textual.app import ComposeResult
from textual.screen import Screen
from textual.widgets import Footer

from ..widgets.desk_bar import DeskBar
from ..widgets.safety import SafetyLine

if TYPE_CHECKING:
    from ..app import DeskApp
    from ..backend import DeskBackend

__all__ = ["DeskScreen"]


class DeskScreen(Screen):
    """A screen of the desk: subclasses give ``MODE`` and ``compose_body``."""

    MODE: ClassVar[str] = ""

    @property
    def desk(self) -> DeskApp:
        """The app, typed."""
        return self.app  # type: ignore[return-value]

    @property
    def backend(self) -> DeskBackend:
        """The bench and engine calls."""
        return self.desk.backend

    def compose(self) -> ComposeResult:
        yield DeskBar(self.backend.bench.name, self.MODE)
        yield from self.compose_body()
        yield SafetyLine()
        yield Footer()

    def compose_body(self) -> ComposeResult:
        """The screen's own widgets."""
        raise NotImplementedError
