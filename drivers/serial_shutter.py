"""``LineShutter``: a beam shutter spoken to through a device profile."""

from __future__ import annotations

from aligner.errors import DeviceError

from .lineproto import LineChannel
from .serial_common import LineDevice

__all__ = ["LineShutter"]


class LineShutter(LineDevice):
    """A ``Shutter`` over a ``LineChannel`` (profile entry ``shutter``).

    The write template either carries ``{state}`` (its code for open and for shut must differ)
    or not, and then toggles: a toggle is accepted only with a state query (``read``), is never
    re-sent, and is followed by a read-back. With a state query the shutter declares capability
    ``readback``; its state is read back after every command and ``is_open()`` asks the
    device. Without one, ``is_open()`` repeats the last command that went through, True until
    a shut did. The driver shuts the shutter when it is created (the safe state).
    """

    def __init__(self, channel: LineChannel, *, name: str | None = None) -> None:
        super().__init__(channel, name=name)
        self.profile.require("shutter", role="shutter")
        entry = channel.entry("shutter")
        self.toggles = entry.write is not None and "state" not in entry.write.fields
        self.capabilities = frozenset({"readback"}) if entry.read is not None else frozenset()
        self._open = True
        self.shut()

    def _read_open(self) -> bool:
        meanings = self.channel.meanings("shutter", self.channel.read("shutter"))
        return "open" in meanings

    def _set(self, want_open: bool) -> None:
        self._open = True  # until the device confirms, assume the unsafe state
        word = "open" if want_open else "shut"
        if self.toggles:
            if self._read_open() != want_open:
                self.channel.write("shutter", retries=0)
        else:
            self.channel.write("shutter", state=word)
        if "readback" in self.capabilities and self._read_open() != want_open:
            raise DeviceError(
                f"{self.name}: the shutter did not {word}: its state query still says "
                f"{'shut' if want_open else 'open'} ({self.profile.source}: entry.shutter); "
                "check the interlock and the shutter's power"
            )
        self._open = want_open

    def open(self) -> None:
        """Open the beam path (returns once done, and confirmed where the device can say)."""
        self._set(True)

    def shut(self) -> None:
        """Block the beam path (returns once done, and confirmed where the device can say)."""
        self._set(False)

    def is_open(self) -> bool:
        """The device's state (``readback``), else the last command that went through."""
        if "readback" in self.capabilities:
            return self._read_open()
        return self._open
