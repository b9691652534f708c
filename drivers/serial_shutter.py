"""``LineShutter``: a beam shutter spoken to through a device profile."""

from __future__ import annotations

from .lineproto import LineChannel

__all__ = ["LineShutter"]


class LineShutter:
    """A ``Shutter`` over a ``LineChannel`` (commands ``shutter_open`` and ``shutter_shut``).

    Profiles have no shutter query, so the driver shuts the shutter when it is created (the
    safe state) and ``is_open()`` reports the last state the device acknowledged.
    """

    #: profiles have no shutter state query yet: ``is_open`` repeats the last acknowledged state
    capabilities: frozenset[str] = frozenset()

    def __init__(self, channel: LineChannel, *, name: str | None = None) -> None:
        channel.profile.require("shutter_open", "shutter_shut", role="shutter")
        self.channel = channel
        self.name = name or channel.name
        self._open = True
        self.shut()

    def open(self) -> None:
        """Open the beam path (returns once the device acknowledged)."""
        self.channel.transact("shutter_open")
        self._open = True

    def shut(self) -> None:
        """Block the beam path (returns once the device acknowledged)."""
        self._open = True  # until acknowledged, assume the unsafe state
        self.channel.transact("shutter_shut")
        self._open = False

    def is_open(self) -> bool:
        """The last acknowledged state; True if a shut was not acknowledged."""
        return self._open

    def close(self) -> None:
        """Close the port (the shutter stays as it is)."""
        self.channel.close()
