"""Framing: cut the byte stream of a port into messages, and add the end marker to commands.

Knows nothing about profiles or templates: only bytes. A reply *message* ends with the end
marker (any number of bytes, e.g. ``\\r\\n`` or ``\\r\\nEND\\r\\n``) or, for a fixed-length reply,
after so many bytes. A device with a *prompt* prints it (without an end marker) when it is
ready for the next command; a device with an *echo* sends every command back first. Both are
recognised here and handed to the caller as such.

The port is any object with pyserial's ``read``, ``write``, ``in_waiting``, ``timeout`` and
``close`` (a serial port, ``socket://``, ``rfc2217://``, ``loop://`` or a test double).
Reads wait in short slices, so a deadline is kept to within one slice.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass
from typing import Protocol

__all__ = ["PROMPT", "Framer", "Framing", "SerialLike", "WireLog"]

#: Called with ``"->"`` and the bytes sent, or ``"<-"`` and the bytes received.
WireLog = Callable[[str, bytes], None]
#: What :meth:`Framer.next` returns when the device's prompt arrives.
PROMPT = b"<prompt>"
_SLICE_S = 0.005


class SerialLike(Protocol):
    """The part of ``serial.Serial`` a ``Framer`` uses (any byte port will do)."""

    timeout: float | None

    @property
    def in_waiting(self) -> int: ...

    def write(self, data: bytes, /) -> int | None: ...

    def read(self, size: int = 1, /) -> bytes: ...

    def close(self) -> None: ...


@dataclass(frozen=True)
class Framing:
    """The byte-level rules of one link: end markers, echo and prompt."""

    send_end: bytes
    reply_end: bytes
    echo: bool = False
    prompt: bytes = b""


class Framer:
    """Sends commands and returns received messages one at a time (see the module docstring).

    Not thread-safe: the bus that owns it holds a lock around every use.
    """

    def __init__(self, port: SerialLike, framing: Framing, wire_log: WireLog | None = None) -> None:
        self.port = port
        self.framing = framing
        self.wire_log = wire_log
        self.buffer = bytearray()
        port.timeout = _SLICE_S

    def send(self, payload: bytes, end: bytes | None = None) -> bytes:
        """Write ``payload`` and the end marker (``end`` overrides the link's); return what
        was written."""
        wire = payload + (self.framing.send_end if end is None else end)
        if self.wire_log is not None:
            self.wire_log("->", wire)
        self.port.write(wire)
        return wire

    def _received(self, data: bytes) -> None:
        if data:
            if self.wire_log is not None:
                self.wire_log("<-", data)
            self.buffer += data

    def _waiting(self) -> bytes:
        # some ports (socket://) only say whether anything waits, not how much
        data = b""
        while waiting := self.port.in_waiting:
            data += self.port.read(waiting)
        return data

    def poll(self) -> None:
        """Take in whatever has already arrived, without waiting."""
        self._received(self._waiting())

    def fill(self, deadline: float) -> bool:
        """Wait for more bytes until ``deadline`` (``time.monotonic``); False if none came."""
        while True:
            data = self.port.read(max(1, self.port.in_waiting))
            if data:
                self._received(data + self._waiting())
                return True
            if time.monotonic() >= deadline:
                return False

    def take(self, length: int | None = None) -> bytes | None:
        """A complete message from the buffer (without its end marker), the prompt as
        :data:`PROMPT`, or None when the buffer holds no complete one."""
        prompt = self.framing.prompt
        if prompt and self.buffer.startswith(prompt):
            del self.buffer[: len(prompt)]
            return PROMPT
        if length is not None:
            if len(self.buffer) < length:
                return None
            message = bytes(self.buffer[:length])
            del self.buffer[:length]
            return message
        end = self.framing.reply_end
        cut = self.buffer.find(end)
        if cut < 0:
            return None
        message = bytes(self.buffer[:cut])
        del self.buffer[: cut + len(end)]
        return message

    def next(self, deadline: float, length: int | None = None) -> bytes | None:
        """The next message or prompt, waiting until ``deadline``; None on a timeout (a part
        of a message may then be left in :attr:`buffer`)."""
        while True:
            message = self.take(length)
            if message is not None:
                return message
            if not self.fill(deadline):
                return None

    def complete(self) -> list[bytes]:
        """The complete messages now in the buffer, left in place (for a look ahead)."""
        end = self.framing.reply_end
        return bytes(self.buffer).split(end)[:-1]

    def clear(self) -> bytes:
        """Drop and return everything in the buffer."""
        dropped = bytes(self.buffer)
        self.buffer.clear()
        return dropped
