"""Devices screen: every device the bench declares, its kind, its state and its last error.

The kind comes from the bench file's declaration (real: a port or URL; simulated: ``sim``;
typed in: ``manual``, the operator types what another instrument shows) and, once the
devices are open, from the devices actually opened: a device declared real that was opened as
anything else is an alarm (it never should be: a real bench refuses undeclared devices).
Ctrl+R opens the devices (asking first on a bench with real ones: mounts that need homing
turn) and reads every state again.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING, ClassVar

from rich.table import Table
from rich.text import Text
from textual import on, work
from textual.app import ComposeResult
from textual.binding import BindingType
from textual.widgets import Static

from ...errors import AlignerError
from .. import keys
from ..format import literal
from ..messages import DevicesRead
from ..widgets.scroll_area import ScrollArea
from .base import DeskScreen
from .confirm import Confirm

if TYPE_CHECKING:
    from ..backend import DeviceLine

__all__ = ["KIND_WORDS", "DevicesScreen", "device_table"]

#: How each kind reads on screen, and its style.
KIND_WORDS = {
    "real": ("REAL", "bold green"),
    "simulated": ("SIMULATED", "bold yellow"),
    "typed": ("TYPED IN", "bold cyan"),
    "absent": ("none", "dim"),
}
NOTE = (
    "REAL devices answer from the hardware; SIMULATED ones count from the physics model "
    "(never measurements); TYPED IN ones are numbers the operator reads off another instrument."
)


def device_table(lines: Sequence[DeviceLine]) -> Table:
    """One row per :class:`aligner.tui.backend.DeviceLine`: the device, then its kind, spec,
    state, last error, profile and identity in words that wrap (every text shown as
    written)."""
    table = Table(expand=True, header_style="bold", box=None, padding=(0, 1), show_header=False)
    table.add_column("device", no_wrap=True)
    table.add_column("what it is", ratio=1, overflow="fold")
    for d in lines:
        word, style = KIND_WORDS.get(d.kind, (d.kind, ""))
        about = literal(word, style)
        if d.replaced:
            about = literal(f"declared REAL, opened {word}!", "bold white on red")
        about.append_text(literal(f" · {d.spec} (from {d.source})"))
        about.append_text(literal("\nstate: ", "bold"))
        about.append_text(literal(d.state, "bold red" if d.state.isupper() else ""))
        about.append_text(literal(" · last error: ", "bold"))
        about.append_text(literal(d.error or "none", "bold red" if d.error else "dim"))
        for label, value in (("profile", d.profile), ("identity", d.identity)):
            if value:
                about.append_text(literal(f"\n{label}: {value}", "dim"))
        name = f"{d.role} {d.name}" if d.role != d.name else d.role
        table.add_row(literal(name, "bold"), about)
    return table


class DevicesScreen(DeskScreen):
    """The bench's devices (see the module docstring)."""

    MODE = "devices"
    STATUS = "#devices-status"
    BINDINGS: ClassVar[list[BindingType]] = [keys.READ_AGAIN]

    def __init__(self) -> None:
        super().__init__()
        #: What the operator last decided, said with the next listing.
        self.note = ""
        self.open_asked = False

    def compose_body(self) -> ComposeResult:
        yield Static("", id="devices-status")
        with ScrollArea(id="devices-body"):
            yield Static("", id="devices")
            yield Static(NOTE, id="devices-note", markup=False)

    def on_screen_resume(self) -> None:
        """List the devices each time the screen is shown (read them if they are open, or
        when the operator just agreed to open them)."""
        poll = self.backend.opened or self.open_asked
        self.open_asked = False
        self.status("reading the devices…" if poll else "reading the bench…")
        self.list_worker(poll=poll)

    def action_read_again(self) -> None:
        """Open the devices if needed (asking first when some are real) and read them."""
        self.note = ""
        if self.backend.opened or not self._real():
            self.status("reading the devices…")
            self.list_worker(poll=True)
            return

        def answered(yes: bool | None) -> None:
            self.note = "" if yes else "not opened (cancelled)"
            self.open_asked = bool(yes)  # the listing when the screen shows again reads them
            if yes:
                self.status("opening and reading the devices…")
                self.list_worker(poll=True)

        self.app.push_screen(
            Confirm(
                "Open the bench's devices?",
                "The shutter is shut first; mounts whose driver needs homing turn to their "
                "reference. Follow your local laser-safety rules and your laser safety officer.",
                yes="Open",
            ),
            answered,
        )

    def _real(self) -> bool:
        try:
            return any(c.kind == "real" for c in self.backend.declared())
        except AlignerError:
            return False

    @work(thread=True, exclusive=True, group="devices")
    def list_worker(self, *, poll: bool) -> None:
        try:
            message = DevicesRead(self.backend.device_lines(self.desk.readings, poll=poll))
        except AlignerError as exc:
            message = DevicesRead(error=str(exc))
        self.post_message(message)

    @on(DevicesRead)
    def devices_read(self, event: DevicesRead) -> None:
        if event.error:
            self.status(f"the devices cannot be used: {event.error}", error=True)
            self.query_one("#devices", Static).update("")
            return
        self.query_one("#devices", Static).update(device_table(event.lines))
        replaced = [d for d in event.lines if d.replaced]
        kinds = sorted({d.kind for d in event.lines} - {"absent"})
        if replaced:
            names = ", ".join(d.name for d in replaced)
            self.status(f"ALARM: declared real but not opened as real: {names}", error=True)
        elif self.backend.opened:
            self.status(f"devices open ({', '.join(kinds)}) · Ctrl+R reads them again")
        else:
            note = f"{self.note} · " if self.note else ""
            self.status(f"{note}declared ({', '.join(kinds)}); not opened yet · Ctrl+R opens them")
        problem = self.backend.errors.get("devices")
        if problem:
            self.query_one("#devices-note", Static).update(
                Text.assemble(literal(f"opening failed: {problem}\n", "bold red"), NOTE)
            )
