"""The protocol shapes the emulator speaks (our own command words; no real product).

Each shape is a table of command forms (regular expressions over the command text) and the
handlers that answer them, over small device models (:class:`Axis`, a counter's gate, a
shutter). ``Emulator`` (:mod:`.emulator`) serves a shape on a pty or a TCP socket. Each shape
has a commented example profile of the same name in ``drivers/profiles/`` (``basic`` speaks
``example-mount`` and ``example-counter``).

Test-only back door: ``force_refusal(reason)`` makes the next action (a move, a homing, an
opening, a gate, a reading) be refused in the shape's own way; the models (``axis()``,
``beam_open``, ...) can be set directly.
"""

from __future__ import annotations

import math
import re
import time
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, ClassVar

import numpy as np

__all__ = ["SHAPES", "Answer", "Axis", "Shape"]

SendLater = Callable[[bytes, float], None]
Counts = Callable[[float], tuple[int, ...]]
_NUMBER = r"([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)"


@dataclass(frozen=True)
class Answer:
    """A reply: ``data`` (None: no reply line), sent ``after_s`` later, with an echo
    ``prefix`` and a prompt ``suffix``; ``end`` replaces the shape's end marker."""

    data: bytes | None
    after_s: float = 0.0
    prefix: bytes = b""
    suffix: bytes = b""
    end: bytes | None = None


class Axis:
    """A motor axis in device units: moves take ``|distance| / speed`` s (``speed`` None:
    instant); targets outside ``limits`` are for the shape to refuse."""

    def __init__(
        self,
        speed: float | None = None,
        limits: tuple[float, float] = (-math.inf, math.inf),
        *,
        referenced: bool = True,
    ) -> None:
        self.speed = speed
        self.limits = limits
        self.referenced = referenced
        self.move_log: list[float] = []
        self._start = self._target = 0.0
        self._t0 = self._duration = 0.0

    @property
    def position(self) -> float:
        """Where the axis is now."""
        if self._duration <= 0.0:
            return self._target
        done = min(1.0, (time.monotonic() - self._t0) / self._duration)
        return self._start + (self._target - self._start) * done

    @property
    def moving(self) -> bool:
        """True while a move runs."""
        return self._duration > 0.0 and time.monotonic() - self._t0 < self._duration

    def allows(self, target: float) -> bool:
        """True when ``target`` is inside the limits."""
        return self.limits[0] <= target <= self.limits[1]

    def move(self, target: float, offset: float = 0.0) -> None:
        """Start a move to ``target`` (logged); ``offset`` is where it really ends, off by."""
        self.move_log.append(target)
        start = self.position
        self._start, self._target, self._t0 = start, target + offset, time.monotonic()
        self._duration = abs(self._target - start) / self.speed if self.speed else 0.0

    def halt(self) -> None:
        """Stop where it is."""
        self.force(self.position)

    def force(self, position: float) -> None:
        """Be at ``position`` now (back door)."""
        self._start = self._target = position
        self._duration = 0.0


def _poisson(rng: np.random.Generator, channels: int) -> Counts:
    return lambda dwell_s: tuple(int(c) for c in rng.poisson(1000.0 * dwell_s, channels))


class Shape:
    """Base of the shapes: cut commands out of the input, answer them from ``COMMANDS``."""

    transport: ClassVar[str] = "pty"
    reply_end: ClassVar[bytes] = b"\r\n"
    #: (regular expression over the whole command text, name of the handler)
    COMMANDS: ClassVar[tuple[tuple[str, str], ...]] = ()

    def __init__(self, send_later: SendLater, rng: np.random.Generator) -> None:
        self.send_later = send_later
        self.rng = rng
        self.refusal: str | None = None
        self.beam_open = False
        self.axes: dict[str, Axis] = {}
        self._table = [(re.compile(p, re.DOTALL), getattr(self, n)) for p, n in self.COMMANDS]

    # -- back door -------------------------------------------------------------------------

    def force_refusal(self, reason: str = "interlock") -> None:
        """Refuse the next action with ``reason`` (test-only back door)."""
        self.refusal = reason

    def _refusing(self) -> str | None:
        reason, self.refusal = self.refusal, None
        return reason

    def axis(self, key: str | None = None) -> Axis:
        """The axis ``key`` (default: the first)."""
        return self.axes[key] if key is not None else next(iter(self.axes.values()))

    # -- protocol --------------------------------------------------------------------------

    def split(self, buffer: bytes) -> tuple[list[bytes], bytes]:
        """Commands cut out of ``buffer`` (here: lines ending in CR or LF) and the rest."""
        parts = re.split(rb"[\r\n]", buffer)
        return [p for p in parts[:-1] if p.strip()], parts[-1]

    def word(self, command: bytes) -> str:
        """The command word that fault filters (``Faults.only``) compare with."""
        text = command.decode("latin-1").strip()
        return text.split(" ")[0] if text else text

    def handle(self, command: bytes, offset: float) -> Answer | bytes | None:
        """Answer one command; ``offset`` (device units) shifts where a move ends."""
        text = command.decode("latin-1").strip()
        for pattern, handler in self._table:
            if found := pattern.fullmatch(text):
                return handler(found, offset)
        return self.refuse(command, "unknown command")

    def refuse(self, command: bytes, reason: str) -> Answer | bytes | None:
        """The shape's refusal of ``command`` (a reply, or an error kept for its query)."""
        raise NotImplementedError

    def tick(self) -> None:
        """Called between commands: send what a running action owes."""


class Basic(Shape):
    """``GO n`` / ``AT?`` / ``BUSY?`` / ``REF`` / ``HALT``, ``GATE ms`` (counts when the gate
    ends), ``BEAM ON|OFF`` / ``BEAM?``, ``WHO?``; errors ``ERR code text``
    (profiles ``example-mount``, ``example-counter``)."""

    COMMANDS = (
        (r"GO (\S+)", "go"),
        (r"AT\?", "at"),
        (r"BUSY\?", "busy"),
        (r"REF", "ref"),
        (r"HALT", "halt"),
        (r"GATE (\S+)", "gate"),
        (r"BEAM (ON|OFF)", "beam"),
        (r"BEAM\?", "beam_state"),
        (r"WHO\?", "who"),
    )

    def __init__(
        self,
        send_later: SendLater,
        rng: np.random.Generator,
        *,
        speed_steps_s: float | None = None,
        counts_fn: Counts | None = None,
    ) -> None:
        super().__init__(send_later, rng)
        self.axes = {"1": Axis(speed_steps_s)}
        self.counts_fn = counts_fn or _poisson(rng, 2)

    def refuse(self, command: bytes, reason: str) -> bytes:
        code = {"unknown command": 1, "bad argument": 2}.get(reason, 7)
        return f"ERR {code} {reason}".encode()

    def go(self, m: re.Match[str], offset: float) -> bytes:
        if not re.fullmatch(r"-?\d+", m[1]):
            return self.refuse(b"", "bad argument")
        if reason := self._refusing():
            return self.refuse(b"", reason)
        self.axis().move(int(m[1]), offset)
        return b"OK"

    def at(self, m: re.Match[str], offset: float) -> bytes:
        return f"AT {round(self.axis().position)}".encode()

    def busy(self, m: re.Match[str], offset: float) -> bytes:
        return f"BUSY {int(self.axis().moving)}".encode()

    def ref(self, m: re.Match[str], offset: float) -> bytes:
        self.axis().move(0)
        return b"OK"

    def halt(self, m: re.Match[str], offset: float) -> bytes:
        self.axis().halt()
        return b"OK"

    def gate(self, m: re.Match[str], offset: float) -> Answer | bytes:
        if not m[1].isdigit():
            return self.refuse(b"", "bad argument")
        if reason := self._refusing():
            return self.refuse(b"", reason)
        dwell = int(m[1]) / 1000.0
        counts = " ".join(str(c) for c in self.counts_fn(dwell))
        return Answer(f"COUNTS {counts}".encode(), after_s=dwell)

    def beam(self, m: re.Match[str], offset: float) -> bytes:
        if m[1] == "ON" and (reason := self._refusing()):
            return self.refuse(b"", reason)
        self.beam_open = m[1] == "ON"
        return f"BEAM {m[1]}".encode()

    def beam_state(self, m: re.Match[str], offset: float) -> bytes:
        return b"BEAM ON" if self.beam_open else b"BEAM OFF"

    def who(self, m: re.Match[str], offset: float) -> bytes:
        return b"basic line controller 2.1"


# -- shape 1 -------------------------------------------------------------------------------


class HexAddressed(Shape):
    """One-character address + two-letter command + 8 hex digits (32-bit two's complement
    pulses), no command terminator; ``mv`` answers only when the move has ended; ``gs``
    answers a two-hex-digit code (``0B`` = busy); several addresses on one port."""

    PER_DEG = 400
    COMMANDS = (
        (r"(\w)mv([0-9A-Fa-f]{8})", "mv"),
        (r"(\w)gp", "gp"),
        (r"(\w)gs", "gs"),
        (r"(\w)ho", "ho"),
        (r"(\w)st", "st"),
        (r"(\w)in", "ident"),
    )
    _CODES: ClassVar[dict[str, str]] = {
        "unknown command": "01",
        "out of range": "02",
        "interlock": "07",
        "injected fault": "09",
    }

    def __init__(
        self,
        send_later: SendLater,
        rng: np.random.Generator,
        *,
        addresses: tuple[str, ...] = ("1", "2"),
        speed_deg_s: float = 5000.0,
        limit_deg: float = 120.0,
    ) -> None:
        super().__init__(send_later, rng)
        span = (-limit_deg * self.PER_DEG, limit_deg * self.PER_DEG)
        self.axes = {a: Axis(speed_deg_s * self.PER_DEG, span) for a in addresses}
        self.owed: set[str] = set()

    def split(self, buffer: bytes) -> tuple[list[bytes], bytes]:
        out = []
        while len(buffer) >= 3:
            need = 11 if buffer[1:3] == b"mv" else 3
            if len(buffer) < need:
                break
            out.append(buffer[:need])
            buffer = buffer[need:]
        return out, buffer

    def word(self, command: bytes) -> str:
        return command[1:3].decode("latin-1")

    def refuse(self, command: bytes, reason: str) -> bytes | None:
        addr = command[:1].decode("latin-1")
        if addr not in self.axes:
            return None
        return f"{addr}ER{self._CODES.get(reason, '09')}".encode()

    def mv(self, m: re.Match[str], offset: float) -> bytes | None:
        if m[1] not in self.axes:
            return None
        pulses = int(m[2], 16)
        pulses -= 1 << 32 if pulses >= 1 << 31 else 0
        axis = self.axes[m[1]]
        if reason := self._refusing():
            return self.refuse(m[1].encode(), reason)
        if not axis.allows(pulses):
            return self.refuse(m[1].encode(), "out of range")
        axis.move(pulses, offset)
        self.owed.add(m[1])
        return None

    def _hex(self, addr: str) -> str:
        return f"{round(self.axes[addr].position) & 0xFFFFFFFF:08X}"

    def gp(self, m: re.Match[str], offset: float) -> bytes | None:
        return f"{m[1]}PS{self._hex(m[1])}".encode() if m[1] in self.axes else None

    def gs(self, m: re.Match[str], offset: float) -> bytes | None:
        if m[1] not in self.axes:
            return None
        axis = self.axes[m[1]]
        code = "0B" if axis.moving else ("02" if axis.position == 0 else "00")
        return f"{m[1]}GS{code}".encode()

    def ho(self, m: re.Match[str], offset: float) -> bytes | None:
        if m[1] not in self.axes:
            return None
        self.axes[m[1]].move(0)
        self.owed.add(m[1])
        return None

    def st(self, m: re.Match[str], offset: float) -> None:
        if m[1] in self.axes:
            self.axes[m[1]].halt()

    def ident(self, m: re.Match[str], offset: float) -> bytes | None:
        return f"{m[1]}IN hex stepper 1.3".encode() if m[1] in self.axes else None

    def tick(self) -> None:
        for addr in sorted(self.owed):
            if not self.axes[addr].moving:
                self.owed.discard(addr)
                self.send_later(f"{addr}MD{self._hex(addr)}\r\n".encode(), 0.0)


# -- shape 2 -------------------------------------------------------------------------------


class SilentSet(Shape):
    """Numeric address + two-letter command + decimal degrees; set commands are silent, errors
    wait for ``TE``; ``TS`` answers 4 hex digits of error bits + a two-character state; the
    axis refuses moves until it has been homed after power-up."""

    COMMANDS = (
        (rf"(\d+)PA{_NUMBER}", "pa"),
        (r"(\d+)TP", "tp"),
        (r"(\d+)TS", "ts"),
        (r"(\d+)OR", "home"),
        (r"(\d+)ST", "stop"),
        (r"(\d+)TE", "te"),
        (r"(\d+)VE", "ve"),
    )
    _CODES: ClassVar[dict[str, int]] = {
        "unknown command": 1,
        "out of range": 2,
        "not referenced": 3,
        "interlock": 7,
        "injected fault": 9,
    }

    def __init__(
        self,
        send_later: SendLater,
        rng: np.random.Generator,
        *,
        speed_deg_s: float = 5000.0,
        limit_deg: float = 120.0,
    ) -> None:
        super().__init__(send_later, rng)
        self.axes = {"1": Axis(speed_deg_s, (-limit_deg, limit_deg), referenced=False)}
        self.error = 0
        self.fault_bits = 0
        self.homing = False

    def refuse(self, command: bytes, reason: str) -> None:
        self.error = self._CODES.get(reason, 9)

    def pa(self, m: re.Match[str], offset: float) -> None:
        axis = self.axes.get(m[1])
        if axis is None:
            return
        target = float(m[2])
        reason = (
            self._refusing()
            or ("not referenced" if not axis.referenced else None)
            or (None if axis.allows(target) else "out of range")
        )
        if reason:
            self.refuse(b"", reason)
            return
        axis.move(target, offset / 1000.0)

    def tp(self, m: re.Match[str], offset: float) -> bytes | None:
        axis = self.axes.get(m[1])
        return f"{m[1]}TP{axis.position:.5f}".encode() if axis else None

    def ts(self, m: re.Match[str], offset: float) -> bytes | None:
        axis = self.axes.get(m[1])
        if axis is None:
            return None
        if axis.moving:
            state = "1E" if self.homing else "28"
        else:
            state = "33" if axis.referenced else "0A"
        return f"{m[1]}TS{self.fault_bits:04X}{state}".encode()

    def home(self, m: re.Match[str], offset: float) -> None:
        axis = self.axes.get(m[1])
        if axis is None:
            return
        if reason := self._refusing():
            self.refuse(b"", reason)
            return
        axis.move(0.0)
        self.homing = True

    def stop(self, m: re.Match[str], offset: float) -> None:
        if m[1] in self.axes:
            self.axes[m[1]].halt()

    def te(self, m: re.Match[str], offset: float) -> bytes:
        code, self.error = self.error, 0
        return f"{m[1]}TE{code}".encode()

    def ve(self, m: re.Match[str], offset: float) -> bytes:
        return f"{m[1]}VE silent-set stage 4.0".encode()

    def tick(self) -> None:
        axis = self.axis()
        if self.homing and not axis.moving:
            self.homing = False
            axis.referenced = True


# -- shape 3 -------------------------------------------------------------------------------


class SlashRequest(Shape):
    """``/device axis command`` requests; every reply ``@device axis OK|RJ IDLE|BUSY flags
    data``; a refusal is ``RJ`` with the reason in the data field; integer microsteps."""

    PER_DEG = 3200
    COMMANDS = (
        (r"/(\d+) (\d+) move abs (-?\d+)", "move"),
        (r"/(\d+) (\d+) get pos", "pos"),
        (r"/(\d+) (\d+)", "status"),
        (r"/(\d+) (\d+) home", "home"),
        (r"/(\d+) (\d+) stop", "stop"),
        (r"/(\d+) (\d+) get ident", "ident"),
    )

    def __init__(
        self,
        send_later: SendLater,
        rng: np.random.Generator,
        *,
        device: str = "01",
        speed_deg_s: float = 5000.0,
        limit_deg: float = 120.0,
    ) -> None:
        super().__init__(send_later, rng)
        self.device = device
        span = (-limit_deg * self.PER_DEG, limit_deg * self.PER_DEG)
        self.axes = {"1": Axis(speed_deg_s * self.PER_DEG, span)}

    def _reply(self, axis_id: str, flag: str, data: object) -> bytes:
        axis = self.axes.get(axis_id)
        state = "BUSY" if axis is not None and axis.moving else "IDLE"
        return f"@{self.device} {axis_id} {flag} {state} -- {data}".encode()

    def refuse(self, command: bytes, reason: str) -> bytes:
        found = re.match(r"/\d+ (\d+)", command.decode("latin-1"))
        word = reason.upper().replace(" ", "")
        return self._reply(found[1] if found else "0", "RJ", word)

    def _target(self, m: re.Match[str]) -> Axis | None:
        return self.axes.get(m[2]) if m[1] == self.device else None

    def move(self, m: re.Match[str], offset: float) -> bytes | None:
        axis = self._target(m)
        if axis is None:
            return None
        target = int(m[3])
        if reason := self._refusing() or (None if axis.allows(target) else "out of range"):
            return self.refuse(m[0].encode(), reason)
        axis.move(target, offset)
        return self._reply(m[2], "OK", 0)

    def pos(self, m: re.Match[str], offset: float) -> bytes | None:
        axis = self._target(m)
        return self._reply(m[2], "OK", round(axis.position)) if axis else None

    def status(self, m: re.Match[str], offset: float) -> bytes | None:
        return self._reply(m[2], "OK", 0) if self._target(m) else None

    def home(self, m: re.Match[str], offset: float) -> bytes | None:
        axis = self._target(m)
        if axis is None:
            return None
        axis.move(0)
        return self._reply(m[2], "OK", 0)

    def stop(self, m: re.Match[str], offset: float) -> bytes | None:
        axis = self._target(m)
        if axis is None:
            return None
        axis.halt()
        return self._reply(m[2], "OK", 0)

    def ident(self, m: re.Match[str], offset: float) -> bytes | None:
        return self._reply(m[2], "OK", "slash-ctl-2.0") if self._target(m) else None


# -- shape 4 -------------------------------------------------------------------------------


class Mnemonic(Shape):
    """Three-letter mnemonics with axis and value, silent set commands, ``axis=value``
    replies, ``ERR?`` answers an error number; the single byte 0x05 (no terminator) answers
    a motion digit; moves are refused until ``SVO axis 1`` and a reference (``FRF``)."""

    reply_end = b"\n"
    COMMANDS = (
        (r"SVO (\d) ([01])", "svo"),
        (rf"MOV (\d) {_NUMBER}", "mov"),
        (r"POS\? (\d)", "pos"),
        (r"FRF (\d)", "frf"),
        (r"HLT (\d)", "hlt"),
        (r"ERR\?", "err"),
        (r"WHO\?", "who"),
        (r"\x05", "motion"),
    )
    _CODES: ClassVar[dict[str, int]] = {
        "unknown command": 1,
        "servo off": 5,
        "interlock": 7,
        "not referenced": 8,
        "injected fault": 9,
        "out of range": 17,
    }

    def __init__(
        self,
        send_later: SendLater,
        rng: np.random.Generator,
        *,
        speed_deg_s: float = 5000.0,
        limit_deg: float = 120.0,
    ) -> None:
        super().__init__(send_later, rng)
        self.axes = {"1": Axis(speed_deg_s, (-limit_deg, limit_deg), referenced=False)}
        self.servo = False
        self.error = 0

    def split(self, buffer: bytes) -> tuple[list[bytes], bytes]:
        out: list[bytes] = []
        while buffer:
            if buffer[:1] == b"\x05":
                out.append(b"\x05")
                buffer = buffer[1:]
                continue
            cut = buffer.find(b"\n")
            if cut < 0:
                break
            if buffer[:cut].strip():
                out.append(buffer[:cut])
            buffer = buffer[cut + 1 :]
        return out, buffer

    def refuse(self, command: bytes, reason: str) -> None:
        self.error = self._CODES.get(reason, 9)

    def _check(self, axis: Axis, need_reference: bool) -> str | None:
        if reason := self._refusing():
            return reason
        if not self.servo:
            return "servo off"
        if need_reference and not axis.referenced:
            return "not referenced"
        return None

    def svo(self, m: re.Match[str], offset: float) -> None:
        if m[1] in self.axes:
            self.servo = m[2] == "1"

    def mov(self, m: re.Match[str], offset: float) -> None:
        axis = self.axes.get(m[1])
        if axis is None:
            return
        target = float(m[2])
        reason = self._check(axis, True) or (None if axis.allows(target) else "out of range")
        if reason:
            self.refuse(b"", reason)
            return
        axis.move(target, offset / 1000.0)

    def pos(self, m: re.Match[str], offset: float) -> bytes | None:
        axis = self.axes.get(m[1])
        return f"{m[1]}={axis.position:.4f}".encode() if axis else None

    def frf(self, m: re.Match[str], offset: float) -> None:
        axis = self.axes.get(m[1])
        if axis is None:
            return
        if reason := self._check(axis, False):
            self.refuse(b"", reason)
            return
        axis.move(0.0)
        axis.referenced = True

    def hlt(self, m: re.Match[str], offset: float) -> None:
        if m[1] in self.axes:
            self.axes[m[1]].halt()

    def err(self, m: re.Match[str], offset: float) -> bytes:
        code, self.error = self.error, 0
        return str(code).encode()

    def who(self, m: re.Match[str], offset: float) -> bytes:
        return b"mnemonic servo controller 7.2"

    def motion(self, m: re.Match[str], offset: float) -> Answer:
        return Answer(b"1" if self.axis().moving else b"0", end=b"")


# -- shape 5 -------------------------------------------------------------------------------


class BitField(Shape):
    """Integer steps; ``STAT?`` answers a decimal bit field in which other bits are set in
    normal use (power 0x0001, referenced 0x0010, temperature ok 0x2000); moving is 0x0400."""

    PER_DEG = 500
    COMMANDS = (
        (r"X(\d):GOTO (-?\d+)", "goto"),
        (r"X(\d):POS\?", "pos"),
        (r"X(\d):STAT\?", "stat"),
        (r"X(\d):HOME", "home"),
        (r"X(\d):STOP", "stop"),
        (r"X(\d):ID\?", "ident"),
    )

    def __init__(
        self,
        send_later: SendLater,
        rng: np.random.Generator,
        *,
        speed_deg_s: float = 5000.0,
        limit_deg: float = 120.0,
    ) -> None:
        super().__init__(send_later, rng)
        span = (-limit_deg * self.PER_DEG, limit_deg * self.PER_DEG)
        self.axes = {"1": Axis(speed_deg_s * self.PER_DEG, span)}

    def refuse(self, command: bytes, reason: str) -> bytes:
        found = re.match(rb"X(\d)", command)
        axis = found[1].decode() if found else "0"
        code = {"unknown command": 1, "out of range": 2, "interlock": 7}.get(reason, 9)
        return f"X{axis}:ERR {code} {reason}".encode()

    def goto(self, m: re.Match[str], offset: float) -> bytes | None:
        axis = self.axes.get(m[1])
        if axis is None:
            return None
        target = int(m[2])
        if reason := self._refusing() or (None if axis.allows(target) else "out of range"):
            return self.refuse(m[0].encode(), reason)
        axis.move(target, offset)
        return f"X{m[1]}:OK".encode()

    def pos(self, m: re.Match[str], offset: float) -> bytes | None:
        axis = self.axes.get(m[1])
        return f"X{m[1]}:POS {round(axis.position)}".encode() if axis else None

    def stat(self, m: re.Match[str], offset: float) -> bytes | None:
        axis = self.axes.get(m[1])
        if axis is None:
            return None
        bits = 0x0001 | 0x2000 | (0x0010 if axis.referenced else 0) | (0x0400 * axis.moving)
        return f"X{m[1]}:STAT {bits}".encode()

    def home(self, m: re.Match[str], offset: float) -> bytes | None:
        axis = self.axes.get(m[1])
        if axis is None:
            return None
        axis.move(0)
        return f"X{m[1]}:OK".encode()

    def stop(self, m: re.Match[str], offset: float) -> bytes | None:
        axis = self.axes.get(m[1])
        if axis is None:
            return None
        axis.halt()
        return f"X{m[1]}:OK".encode()

    def ident(self, m: re.Match[str], offset: float) -> bytes:
        return f"X{m[1]}:ID bit-field drive 3.3".encode()


# -- shape 6 -------------------------------------------------------------------------------


class EchoPrompt(Shape):
    """A shutter controller that echoes every command, answers, then prints the prompt
    ``"> "``; ``ens`` toggles the output, ``ens?`` answers 1 (open) or 0."""

    PROMPT = b"> "
    COMMANDS = ((r"ens", "toggle"), (r"ens\?", "state"), (r"id\?", "ident"))

    def split(self, buffer: bytes) -> tuple[list[bytes], bytes]:
        parts = buffer.split(b"\r")
        return [p for p in parts[:-1] if p.strip()], parts[-1]

    def _framed(self, command: bytes, data: bytes | None) -> Answer:
        return Answer(data, prefix=command.strip() + self.reply_end, suffix=self.PROMPT)

    def handle(self, command: bytes, offset: float) -> Answer | bytes | None:
        answer = super().handle(command, offset)
        if isinstance(answer, Answer):
            return answer
        return self._framed(command, answer)

    def refuse(self, command: bytes, reason: str) -> Answer:
        return self._framed(command, f"! {reason}".encode())

    def toggle(self, m: re.Match[str], offset: float) -> Answer | None:
        if not self.beam_open and (reason := self._refusing()):
            return self.refuse(m[0].encode(), f"{reason} active")
        self.beam_open = not self.beam_open
        return self._framed(m[0].encode(), None)

    def state(self, m: re.Match[str], offset: float) -> bytes:
        return b"1" if self.beam_open else b"0"

    def ident(self, m: re.Match[str], offset: float) -> bytes:
        return b"echo shutter controller 1.0"


# -- shape 7 -------------------------------------------------------------------------------


class ByteShutter(Shape):
    """A shutter driven by single bytes (0x81 open, 0x80 shut), no terminator, no reply;
    a refusal (an interlock) leaves it shut without a word."""

    def split(self, buffer: bytes) -> tuple[list[bytes], bytes]:
        return [bytes([b]) for b in buffer], b""

    def word(self, command: bytes) -> str:
        return command.hex()

    def handle(self, command: bytes, offset: float) -> None:
        if command == b"\x81":
            self.beam_open = self._refusing() is None
        elif command == b"\x80":
            self.beam_open = False

    def refuse(self, command: bytes, reason: str) -> None:
        return None


# -- shape 8 -------------------------------------------------------------------------------


class Gated(Shape):
    """A gated counter: ``GT n`` sets the gate in 100 ns units, ``GO`` starts it, ``ST?``
    answers RUN or IDLE, ``CT? A|B`` reads one channel. Read during a gate, a channel still
    shows the previous gate's counts (``gate_lag_s`` makes a gate run longer than set)."""

    COMMANDS = (
        (r"GT (\d+)", "gt"),
        (r"GO", "go"),
        (r"ST\?", "st"),
        (r"CT\? ([AB])", "ct"),
        (r"ID\?", "ident"),
    )
    _CODES: ClassVar[dict[str, int]] = {
        "unknown command": 1,
        "gate too long": 4,
        "interlock": 7,
        "injected fault": 9,
    }

    def __init__(
        self, send_later: SendLater, rng: np.random.Generator, *, counts_fn: Counts | None = None
    ) -> None:
        super().__init__(send_later, rng)
        self.counts_fn = counts_fn or _poisson(rng, 2)
        self.gate_s = 0.1
        self.gate_lag_s = 0.0
        self.ends = 0.0
        self.shown: tuple[int, ...] = (0, 0)
        self.next: tuple[int, ...] | None = None
        self.gates: list[tuple[int, ...]] = []

    def refuse(self, command: bytes, reason: str) -> bytes:
        return f"ERR {self._CODES.get(reason, 9)}".encode()

    def gt(self, m: re.Match[str], offset: float) -> bytes:
        if int(m[1]) > 100_000_000:
            return self.refuse(b"", "gate too long")
        self.gate_s = int(m[1]) * 1e-7
        return b"OK"

    def go(self, m: re.Match[str], offset: float) -> bytes:
        if reason := self._refusing():
            return self.refuse(b"", reason)
        self.tick()
        self.next = self.counts_fn(self.gate_s)
        self.gates.append(self.next)
        self.ends = time.monotonic() + self.gate_s + self.gate_lag_s
        return b"OK"

    def st(self, m: re.Match[str], offset: float) -> bytes:
        return b"RUN" if time.monotonic() < self.ends else b"IDLE"

    def ct(self, m: re.Match[str], offset: float) -> bytes:
        self.tick()
        return str(self.shown["AB".index(m[1])]).encode()

    def ident(self, m: re.Match[str], offset: float) -> bytes:
        return b"gated counter 5.1"

    def tick(self) -> None:
        if self.next is not None and time.monotonic() >= self.ends:
            self.shown, self.next = self.next, None


# -- shape 9 -------------------------------------------------------------------------------


class FreeRunning(Shape):
    """A free-running counter: every ``window_s`` one unsolicited line ``C seq a b``; a
    refusal (an overload, which lasts ``refusal_windows``) is the line ``E reason`` instead.
    ``windows`` lists what was sent; ``drop_next`` loses one window (back door)."""

    refusal_windows = 4

    def __init__(
        self,
        send_later: SendLater,
        rng: np.random.Generator,
        *,
        window_s: float = 0.02,
        counts_fn: Counts | None = None,
    ) -> None:
        super().__init__(send_later, rng)
        self.window_s = window_s
        self.counts_fn = counts_fn or _poisson(rng, 2)
        self.seq = 0
        self.drop_next = False
        self.windows: list[tuple[float, tuple[int, ...]]] = []
        self._due = time.monotonic() + window_s
        self._refused = 0

    def handle(self, command: bytes, offset: float) -> None:
        return None

    def refuse(self, command: bytes, reason: str) -> None:
        return None

    def tick(self) -> None:
        now = time.monotonic()
        while now >= self._due:
            counts = self.counts_fn(self.window_s)
            self.windows.append((self._due, counts))
            self._due += self.window_s
            self.seq += 1
            if self.refusal and self._refused < self.refusal_windows:
                self._refused += 1
                self.send_later(f"E {self.refusal}\r\n".encode(), 0.0)
            elif self.drop_next:
                self.drop_next = False
            else:
                text = " ".join(str(c) for c in counts)
                self.send_later(f"C {self.seq} {text}\r\n".encode(), 0.0)


# -- shape 10 ------------------------------------------------------------------------------


class QueryPointer(Shape):
    """A reader that answers ``READ?`` with one value (``+1.234560E-01``) and no error
    estimate; readings are normal around ``value`` with rms ``noise`` (pointer units)."""

    reply_end = b"\n"
    COMMANDS = ((r"READ\?", "read"), (r"ID\?", "ident"))

    def __init__(
        self,
        send_later: SendLater,
        rng: np.random.Generator,
        *,
        value: float = 0.125,
        noise: float = 0.002,
    ) -> None:
        super().__init__(send_later, rng)
        self.value = value
        self.noise = noise
        self.readings: list[float] = []

    def refuse(self, command: bytes, reason: str) -> bytes:
        return f"ERROR {reason}".encode()

    def read(self, m: re.Match[str], offset: float) -> bytes:
        if reason := self._refusing():
            return self.refuse(b"", reason)
        reading = float(self.rng.normal(self.value, self.noise))
        self.readings.append(reading)
        return f"{reading:+.6E}".encode()

    def ident(self, m: re.Match[str], offset: float) -> bytes:
        return b"query meter 0.9"


# -- shape 11 ------------------------------------------------------------------------------


class TcpCall(Shape):
    """Reached over TCP with function-call syntax (``move(1, 45.12345)``); replies end with
    the marker ``\\r\\nEND\\r\\n``; ``move`` and ``home`` answer ``at x`` when the motion ends."""

    transport = "tcp"
    reply_end = b"\r\nEND\r\n"
    COMMANDS = (
        (rf"move\((\d+), *{_NUMBER}\)", "move"),
        (r"where\((\d+)\)", "where"),
        (r"busy\((\d+)\)", "busy"),
        (r"home\((\d+)\)", "home"),
        (r"halt\((\d+)\)", "halt"),
        (r"ident\(\)", "ident"),
    )

    def __init__(
        self,
        send_later: SendLater,
        rng: np.random.Generator,
        *,
        speed_deg_s: float = 5000.0,
        limit_deg: float = 120.0,
    ) -> None:
        super().__init__(send_later, rng)
        self.axes = {"1": Axis(speed_deg_s, (-limit_deg, limit_deg))}
        self.owed: set[str] = set()

    def word(self, command: bytes) -> str:
        return command.decode("latin-1").split("(")[0].strip()

    def refuse(self, command: bytes, reason: str) -> bytes:
        return f"error: {reason}".encode()

    def move(self, m: re.Match[str], offset: float) -> bytes | None:
        axis = self.axes.get(m[1])
        if axis is None:
            return self.refuse(b"", "no such axis")
        target = float(m[2])
        if reason := self._refusing() or (None if axis.allows(target) else "out of range"):
            return self.refuse(b"", reason)
        axis.move(target, offset / 1000.0)
        self.owed.add(m[1])
        return None

    def where(self, m: re.Match[str], offset: float) -> bytes:
        axis = self.axes.get(m[1])
        return f"{axis.position:.5f}".encode() if axis else self.refuse(b"", "no such axis")

    def busy(self, m: re.Match[str], offset: float) -> bytes:
        axis = self.axes.get(m[1])
        return str(int(axis.moving)).encode() if axis else self.refuse(b"", "no such axis")

    def home(self, m: re.Match[str], offset: float) -> bytes | None:
        axis = self.axes.get(m[1])
        if axis is None:
            return self.refuse(b"", "no such axis")
        axis.move(0.0)
        self.owed.add(m[1])
        return None

    def halt(self, m: re.Match[str], offset: float) -> bytes:
        axis = self.axes.get(m[1])
        if axis is None:
            return self.refuse(b"", "no such axis")
        axis.halt()
        return b"ok"

    def ident(self, m: re.Match[str], offset: float) -> bytes:
        return b"call-syntax controller 11.0"

    def tick(self) -> None:
        for key in sorted(self.owed):
            if not self.axes[key].moving:
                self.owed.discard(key)
                position = self.axes[key].position
                self.send_later(f"at {position:.5f}".encode() + self.reply_end, 0.0)


# -- shape 12 ------------------------------------------------------------------------------


class Chained(Shape):
    """Integer open-loop steps, silent set commands, ``MD?`` answers 1 when the motion is
    done (stopped), several commands chained with ``;`` in one line, ``TB?`` answers
    ``number, text`` (0, NO ERROR)."""

    PER_DEG = 200
    COMMANDS = (
        (r"(\d)PA(-?\d+)", "pa"),
        (r"(\d)TP\?", "tp"),
        (r"(\d)MD\?", "md"),
        (r"(\d)OR", "home"),
        (r"(\d)ST", "stop"),
        (r"TB\?", "tb"),
        (r"VE\?", "ve"),
    )
    _CODES: ClassVar[dict[str, tuple[int, str]]] = {
        "unknown command": (6, "COMMAND DOES NOT EXIST"),
        "out of range": (10, "TARGET OUT OF TRAVEL"),
        "interlock": (26, "INTERLOCK OPEN"),
    }

    def __init__(
        self,
        send_later: SendLater,
        rng: np.random.Generator,
        *,
        speed_deg_s: float = 5000.0,
        limit_deg: float = 120.0,
    ) -> None:
        super().__init__(send_later, rng)
        span = (-limit_deg * self.PER_DEG, limit_deg * self.PER_DEG)
        self.axes = {"1": Axis(speed_deg_s * self.PER_DEG, span)}
        self.error: tuple[int, str] = (0, "NO ERROR")

    def split(self, buffer: bytes) -> tuple[list[bytes], bytes]:
        lines = buffer.split(b"\r")
        commands = [c for line in lines[:-1] for c in line.split(b";") if c.strip()]
        return commands, lines[-1]

    def refuse(self, command: bytes, reason: str) -> None:
        self.error = self._CODES.get(reason, (99, reason.upper()))

    def pa(self, m: re.Match[str], offset: float) -> None:
        axis = self.axes.get(m[1])
        if axis is None:
            return
        target = int(m[2])
        if reason := self._refusing() or (None if axis.allows(target) else "out of range"):
            self.refuse(b"", reason)
            return
        axis.move(target, offset)

    def tp(self, m: re.Match[str], offset: float) -> bytes | None:
        axis = self.axes.get(m[1])
        return str(round(axis.position)).encode() if axis else None

    def md(self, m: re.Match[str], offset: float) -> bytes | None:
        axis = self.axes.get(m[1])
        return (b"0" if axis.moving else b"1") if axis else None

    def home(self, m: re.Match[str], offset: float) -> None:
        if m[1] in self.axes:
            self.axes[m[1]].move(0)

    def stop(self, m: re.Match[str], offset: float) -> None:
        if m[1] in self.axes:
            self.axes[m[1]].halt()

    def tb(self, m: re.Match[str], offset: float) -> bytes:
        (code, text), self.error = self.error, (0, "NO ERROR")
        return f"{code}, {text}".encode()

    def ve(self, m: re.Match[str], offset: float) -> bytes:
        return b"chained open-loop driver 12.4"


#: shape name -> class; the names are those of the example profiles in drivers/profiles/
SHAPES: dict[str, Any] = {
    "basic": Basic,
    "hex-addressed-mount": HexAddressed,
    "silent-set-mount": SilentSet,
    "slash-request-mount": SlashRequest,
    "mnemonic-servo-mount": Mnemonic,
    "bitfield-status-mount": BitField,
    "echo-prompt-shutter": EchoPrompt,
    "byte-shutter": ByteShutter,
    "gated-counter": Gated,
    "free-running-counter": FreeRunning,
    "query-pointer": QueryPointer,
    "tcp-call-mount": TcpCall,
    "chained-open-loop-mount": Chained,
}
