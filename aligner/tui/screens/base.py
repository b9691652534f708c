"""What every desk screen has: the top bar, the safety line and the footer of key bindings."""

from __future__ import annotations

from typing import TYPE_CHECKING, ClassVar

from textual.app import ComposeResult
from textual.screen import Screen
from textual.widgets import Footer, Static

from ...text import clean
from ..widgets.desk_bar import DeskBar
from ..widgets.safety import SafetyLine

if TYPE_CHECKING:
    from textual.notifications import SeverityLevel

    from ..app import DeskApp
    from ..backend import DeskBackend

__all__ = ["DeskScreen"]


class DeskScreen(Screen[None]):
    """A screen of the desk: subclasses give ``MODE`` and ``compose_body``."""

    MODE: ClassVar[str] = ""
    #: The selector of the screen's one-line status (see :meth:`status`).
    STATUS: ClassVar[str] = ""

    @property
    def desk(self) -> DeskApp:
        """The app, typed."""
        return self.app  # type: ignore[return-value]

    @property
    def backend(self) -> DeskBackend:
        """The bench and engine calls."""
        return self.desk.backend

    def compose(self) -> ComposeResult:
        yield DeskBar(self.desk.screens, self.backend.bench.name, self.MODE)
        yield from self.compose_body()
        yield SafetyLine()
        yield Footer()

    def compose_body(self) -> ComposeResult:
        """The screen's own widgets."""
        raise NotImplementedError

    def say(
        self, text: str, *, severity: SeverityLevel = "information", timeout: float = 5
    ) -> None:
        """A notification with ``text`` shown as written (it may quote files and devices)."""
        self.notify(clean(text), severity=severity, timeout=timeout, markup=False)

    def status_line(self, selector: str, text: str, *, error: bool = False) -> None:
        """Put ``text`` (shown as written) in the one-line status ``selector``; errors in the
        warning style."""
        from ..format import literal

        line = self.query_one(selector, Static)
        line.update(literal(text))
        line.set_class(error, "problem")

    def status(self, text: str, *, error: bool = False) -> None:
        """Say in the screen's status line what it is doing (errors in the warning style)."""
        self.status_line(self.STATUS, text, error=error)
