"""A framed binary message protocol for motion controllers: the message layout, ids and codec.

One definition for both sides: the adapters in :mod:`aligner_drivers.adapters.binary` and the
emulator in :mod:`aligner_drivers.binary_emulator` pack and parse messages with this module.
The protocol is our own description of a common shape (message ids invented here).

Layout (every integer little-endian)::

    offset  size  field
    0       2     message id (uint16); bit 15 set = a data block follows the header
    2       1     parameter 1   } short message: two parameter bytes
    3       1     parameter 2   } long message: uint16 length of the data block
    4       1     destination address
    5       1     source address
    6       n     data block (long messages only); it starts with the uint16 channel

Short messages carry the channel in parameter 1. Positions are int32 encoder counts. The host
is address ``HOST`` (0x01), the controller ``CONTROLLER`` (0x22).

Exchanges (host -> controller, then what comes back):

- ``IDENTIFY_REQ`` -> ``IDENTIFY`` (serial uint32, model 8 bytes of text, firmware major,
  minor uint8);
- ``UPDATES_ON`` / ``UPDATES_OFF``: the controller sends ``STATUS`` of every motor channel
  each update period; it expects a ``STATUS_ACK`` (keep-alive) within its watchdog time, or it
  halts every motor and sends ``FAULT`` with code ``KEEPALIVE_LOST``;
- ``STATUS_REQ`` -> ``STATUS`` (position int32, flags uint32: ``MOVING``, ``HOMING``,
  ``HOMED``);
- ``HOME`` -> later, unsolicited: ``HOMED``; ``MOVE_TO`` (position int32) -> later:
  ``MOVE_DONE`` (position, flags); ``HALT`` -> ``HALTED`` (position, flags);
- ``BEAM_SET`` (parameter 2: ``OPEN`` 1 or ``SHUT`` 2) and ``BEAM_REQ`` -> ``BEAM_STATE``:
  a solenoid shutter; ``FLIP_TO`` (parameter 2: position 1 or 2) -> later ``FLIP_DONE``,
  ``FLIP_REQ`` -> ``FLIP_STATE``: a two-position flip mount;
- anything refused or failed: ``FAULT`` (code uint16, reason 24 bytes of text).
"""

from __future__ import annotations

import enum
import struct
from dataclasses import dataclass

__all__ = [
    "CONTROLLER",
    "HEADER",
    "HOST",
    "MAX_DATA",
    "OPEN",
    "SHUT",
    "FaultCode",
    "Flag",
    "Frame",
    "FrameReader",
    "Msg",
]

HEADER = struct.Struct("<HBBBB")
HOST = 0x01
CONTROLLER = 0x22
#: longest data block a frame may carry (bytes); a longer length means the stream is out of step
MAX_DATA = 64
_ADDRESSES = {HOST, CONTROLLER}
_LONG = 0x8000


class Msg(enum.IntEnum):
    """Message ids (bit 15 marks a message with a data block)."""

    IDENTIFY_REQ = 0x1001
    IDENTIFY = 0x9002
    UPDATES_ON = 0x1101
    UPDATES_OFF = 0x1102
    STATUS_REQ = 0x1110
    STATUS = 0x9111
    STATUS_ACK = 0x1112
    HOME = 0x2001
    HOMED = 0x2002
    MOVE_TO = 0xA011
    MOVE_DONE = 0xA012
    HALT = 0x2021
    HALTED = 0xA022
    BEAM_SET = 0x3001
    BEAM_REQ = 0x3002
    BEAM_STATE = 0x3003
    FLIP_TO = 0x3011
    FLIP_DONE = 0x3012
    FLIP_REQ = 0x3013
    FLIP_STATE = 0x3014
    FAULT = 0xFF01


class Flag(enum.IntFlag):
    """Status flags of a motor channel."""

    MOVING = 0x1
    HOMING = 0x2
    HOMED = 0x4


class FaultCode(enum.IntEnum):
    """``FAULT`` codes; the reason text says more."""

    NOT_HOMED = 1
    OUT_OF_RANGE = 2
    KEEPALIVE_LOST = 3
    UNKNOWN_MESSAGE = 4
    BAD_CHANNEL = 5


#: beam states of ``BEAM_SET`` / ``BEAM_STATE``
OPEN, SHUT = 1, 2
_POSITION = struct.Struct("<Hi")  # channel, position
_MOTION = struct.Struct("<HiI")  # channel, position, flags
_FAULT = struct.Struct("<HH24s")  # channel, code, reason
_IDENTITY = struct.Struct("<HI8sBB")  # channel, serial, model, firmware major, minor


@dataclass(frozen=True)
class Frame:
    """One message. Short messages use ``p1`` (channel) and ``p2``; long ones ``data``."""

    msg: int
    p1: int = 0
    p2: int = 0
    data: bytes = b""
    dest: int = CONTROLLER
    src: int = HOST

    @property
    def long(self) -> bool:
        """True when the message carries a data block."""
        return bool(self.msg & _LONG)

    @property
    def channel(self) -> int:
        """The channel the message is about."""
        if self.long:
            return int.from_bytes(self.data[:2], "little") if len(self.data) >= 2 else 0
        return self.p1

    def pack(self) -> bytes:
        """The bytes on the wire."""
        if self.long:
            return HEADER.pack(
                self.msg, *len(self.data).to_bytes(2, "little"), self.dest, self.src
            ) + (self.data)
        return HEADER.pack(self.msg, self.p1, self.p2, self.dest, self.src)

    # -- builders and readers of the long messages ------------------------------------------

    @classmethod
    def motion(cls, msg: int, channel: int, position: int, flags: int = 0, **kw: int) -> Frame:
        """``MOVE_TO`` (no flags), ``MOVE_DONE``, ``HALTED`` or ``STATUS``."""
        if msg == Msg.MOVE_TO:
            return cls(msg, data=_POSITION.pack(channel, position), **kw)
        return cls(msg, data=_MOTION.pack(channel, position, flags), **kw)

    def position(self) -> tuple[int, int]:
        """(position in counts, flags) of a motion or status message (flags 0 for MOVE_TO)."""
        if self.msg == Msg.MOVE_TO:
            return _POSITION.unpack(self.data)[1], 0
        _, position, flags = _MOTION.unpack(self.data)
        return position, flags

    @classmethod
    def fault(cls, channel: int, code: int, reason: str, **kw: int) -> Frame:
        """A ``FAULT`` message."""
        text = reason.encode("ascii", errors="replace")[:24]
        return cls(Msg.FAULT, data=_FAULT.pack(channel, code, text), **kw)

    def fault_reason(self) -> tuple[int, str]:
        """(code, reason text) of a ``FAULT`` message."""
        _, code, text = _FAULT.unpack(self.data)
        return code, text.rstrip(b"\0").decode("ascii", errors="replace")

    @classmethod
    def identity(cls, serial: int, model: str, firmware: tuple[int, int], **kw: int) -> Frame:
        """An ``IDENTIFY`` message."""
        data = _IDENTITY.pack(0, serial, model.encode("ascii")[:8], *firmware)
        return cls(Msg.IDENTIFY, data=data, **kw)

    def identity_text(self) -> str:
        """The identity of an ``IDENTIFY`` message as one line of printable text."""
        _, serial, model, major, minor = _IDENTITY.unpack(self.data)
        name = "".join(c for c in model.rstrip(b"\0").decode("ascii", "replace") if c.isprintable())
        return f"{name} serial {serial} firmware {major}.{minor}"


class FrameReader:
    """Cuts a byte stream into frames. ``feed(chunk)`` returns the frames completed so far.
    A header whose addresses are not ``HOST`` and ``CONTROLLER`` or whose data length is above
    ``MAX_DATA`` means the stream is out of step: one byte is dropped (counted in
    ``skipped``) and parsing resumes at the next."""

    def __init__(self) -> None:
        self._buffer = bytearray()
        self.skipped = 0

    def feed(self, chunk: bytes) -> list[Frame]:
        """Add received bytes; return every frame now complete, in order."""
        self._buffer += chunk
        frames: list[Frame] = []
        while len(self._buffer) >= HEADER.size:
            msg, p1, p2, dest, src = HEADER.unpack_from(self._buffer)
            length = p1 | p2 << 8 if msg & _LONG else 0
            if {dest, src} != _ADDRESSES or length > MAX_DATA:
                del self._buffer[:1]
                self.skipped += 1
                continue
            if not msg & _LONG:
                frames.append(Frame(msg, p1, p2, b"", dest, src))
                del self._buffer[: HEADER.size]
                continue
            end = HEADER.size + length
            if len(self._buffer) < end:
                break
            frames.append(Frame(msg, 0, 0, bytes(self._buffer[HEADER.size : end]), dest, src))
            del self._buffer[:end]
        return frames
