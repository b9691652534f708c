"""A scripted port for testing a profile without hardware: (sent, reply) pairs.

``DialoguePort(profile, pairs)`` stands in for a serial port. Each pair is what the driver must
send and what the device answers, both written without framing: the port strips the link's
``send_end`` from what it receives and adds the echo, ``reply_end`` and prompt to each reply. A
reply given as ``bytes`` is sent as it is (a fixed-length reply without end marker); ``None``
means no reply; a third element delays the reply by so many seconds (a gate's counts).

The port fails the test (``AssertionError``) on a command that differs from the script, on a
command after the script's end, and, in :meth:`check_done`, on pairs never sent or replies
never read::

    port = DialoguePort(profile, [("1TP", "1TP12.5"), ("1PA10", None), ("1TE", "1TE0")])
    mount = LineMount(LineChannel(Bus(port, profile.link), profile))
    ...
    port.check_done()
"""

from __future__ import annotations

import time
from collections.abc import Sequence

from .lineproto import DeviceProfile

__all__ = ["DialoguePort", "Pair"]

#: (sent, reply) or (sent, reply, delay_s)
Pair = tuple[str | bytes, str | bytes | None] | tuple[str | bytes, str | bytes | None, float]


class DialoguePort:
    """A pyserial-like port that plays a scripted dialogue (see the module docstring)."""

    def __init__(self, profile: DeviceProfile, pairs: Sequence[Pair]) -> None:
        self.link = profile.link
        self.pairs = list(pairs)
        self.sent: list[bytes] = []
        self.timeout: float | None = None
        self.closed = False
        self._queue: list[tuple[float, bytes]] = []

    def _bytes(self, text: str | bytes) -> bytes:
        return text if isinstance(text, bytes) else text.encode(self.link.encoding)

    def write(self, data: bytes, /) -> int:
        self.sent.append(data)
        end = self._bytes(self.link.send_end)
        command = data[: -len(end)] if end and data.endswith(end) else data
        if not self.pairs:
            raise AssertionError(f"the driver sent {data!r} after the end of the dialogue")
        expected, reply, *delay = self.pairs.pop(0)
        if command != self._bytes(expected):
            raise AssertionError(f"the driver sent {command!r}, the dialogue expects {expected!r}")
        framed = self._bytes(expected) + self._bytes(self.link.reply_end) if self.link.echo else b""
        if isinstance(reply, bytes):
            framed += reply
        elif reply is not None:
            framed += self._bytes(reply) + self._bytes(self.link.reply_end)
        framed += self._bytes(self.link.prompt)
        if framed:
            self.later(framed, delay[0] if delay else 0.0)
        return len(data)

    def later(self, data: bytes, delay_s: float = 0.0) -> None:
        """Make ``data`` arrive ``delay_s`` from now, unasked (a late or unsolicited message)."""
        self._queue.append((time.monotonic() + delay_s, data))
        self._queue.sort(key=lambda item: item[0])

    def _ready(self) -> bytes:
        now = time.monotonic()
        data = b"".join(chunk for due, chunk in self._queue if due <= now)
        self._queue = [(due, chunk) for due, chunk in self._queue if due > now]
        return data

    @property
    def in_waiting(self) -> int:
        now = time.monotonic()
        return sum(len(chunk) for due, chunk in self._queue if due <= now)

    def read(self, size: int = 1, /) -> bytes:
        data = self._ready()
        if not data:
            time.sleep(0.001)  # a real port waits; a spinning test would too
            return b""
        head, rest = data[:size], data[size:]
        if rest:
            self._queue.insert(0, (0.0, rest))
        return head

    def close(self) -> None:
        self.closed = True

    def check_done(self) -> None:
        """Fail unless every pair was sent and every reply read."""
        if self.pairs:
            raise AssertionError(f"the driver never sent {[p[0] for p in self.pairs]}")
        if self._queue:
            raise AssertionError(f"replies never read: {[c for _, c in self._queue]}")
