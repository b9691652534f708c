"""What every line driver shares: its channel, its name, identity, notices and close."""

from __future__ import annotations

from .lineproto import LineChannel

__all__ = ["LineDevice", "printable"]


def printable(text: str) -> str:
    """``text`` without control characters (device text is data, never terminal input)."""
    return "".join(ch if ch.isprintable() else " " for ch in text).strip()


class LineDevice:
    """Base of the line drivers: a :class:`LineChannel` and a name (default: the profile's)."""

    def __init__(self, channel: LineChannel, *, name: str | None = None) -> None:
        self.channel = channel
        self.profile = channel.profile
        self.name = name or channel.name
        channel.name = self.name

    def identify(self) -> str:
        """The identity the device reports (``entry.identity``), or "" without that entry."""
        if not self.profile.has("identity"):
            return ""
        return printable(str(self.channel.read("identity").get("value", "")))

    def take_notices(self) -> list[str]:
        """Late or unsolicited replies discarded since the last call (for the engine's log)."""
        return self.channel.take_notices()

    def close(self) -> None:
        """Release the device (the port closes with its last device)."""
        self.channel.close()
