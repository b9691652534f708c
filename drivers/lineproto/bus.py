"""The bus: one open port shared by every device on it, one lock, replies attributed to commands.

Several devices at different addresses may share one port (one ``Bus``); an exchange holds the
bus lock from the command to its reply, so no device reads another's reply. A motion whose
reply comes only when it ends (a *pending* reply) does not hold the lock while it runs: any
exchange that reads the pending reply hands it over, and the waiting thread reads in short
turns, so a ``stop`` from another thread gets through.

Attribution. A reply must belong to its command:

- before each command, whatever has arrived is drained: a pending reply is handed over, any
  other message is a *late* reply (or unsolicited), discarded and reported through the
  caller's ``note`` hook;
- after a command whose reply did not come (timeout, cut short), its reply may still come: the
  next command first waits until it does, or until ``late_s`` has passed;
- a reply that matches the expected form but comes earlier than the command's
  ``not_before_s`` (a gate's counts before the gate can have ended) is a late one;
- two replies to one command raise :class:`~aligner.errors.Unattributable`.

pyserial and OS errors never leave this module: they become ``Disconnected`` or
``DeviceTimeout``.
"""

from __future__ import annotations

import threading
import time
from collections.abc import Callable, Iterator, Mapping
from contextlib import contextmanager, suppress
from dataclasses import dataclass, field

import serial

from aligner.errors import DeviceTimeout, Disconnected, InputError, Unattributable

from .framing import PROMPT, Framer, Framing, SerialLike, WireLog
from .profile import Link
from .template import Template

__all__ = ["PORT_ERRORS", "Bus", "Expect", "Outcome", "Pending", "attach", "detach"]

#: what a failing port raises (pyserial lets termios errors through, e.g. on a hung-up tty)
try:
    from termios import error as _TermiosError

    PORT_ERRORS: tuple[type[Exception], ...] = (serial.SerialException, OSError, _TermiosError)
except ImportError:  # not a POSIX system
    PORT_ERRORS = (serial.SerialException, OSError)

Note = Callable[[str], None]
_TURN_S = 0.005


def _show(data: bytes | str) -> str:
    """Bytes or text for a message: control characters escaped."""
    text = data.decode("latin-1") if isinstance(data, bytes) else data
    return repr(text)


@dataclass(frozen=True)
class Expect:
    """What one exchange waits for.

    ``reply``: the template of the reply (None for a command without one); ``error``: the
    device's error template; ``not_before_s``: the earliest a true reply can come after the
    command (s); ``length``: a fixed reply length in bytes (no end marker).
    """

    reply: Template | None
    error: Template | None
    context: Mapping[str, str]
    encoding: str
    not_before_s: float = 0.0
    length: int | None = None

    def classify(self, text: str) -> tuple[Mapping[str, object] | None, str | None]:
        """(fields, "reply" | "error") when ``text`` is the expected reply or the error form
        (the reply is tried first), else (None, None)."""
        for kind, template in (("reply", self.reply), ("error", self.error)):
            if template is not None and (fields := template.match(text, self.context)) is not None:
                return fields, kind
        return None, None


@dataclass(frozen=True)
class Outcome:
    """How an exchange ended: ``reply`` or ``error`` (with the decoded ``fields``), ``done`` (a
    command without a reply went through), or a failure: ``silent``, ``partial``,
    ``garbage`` (with ``raw``, the bytes that did not fit)."""

    kind: str
    fields: Mapping[str, object] = field(default_factory=dict)
    text: str = ""
    raw: bytes = b""


@dataclass(eq=False)
class Pending:
    """A reply that comes later (the end of a motion), with the error form that may replace it."""

    expect: Expect
    outcome: Outcome | None = None
    arrived: threading.Event = field(default_factory=threading.Event)


class Bus:
    """One open port: a lock, a framer, pending replies and the late-reply bookkeeping."""

    def __init__(self, port: SerialLike, link: Link, *, where: str = "", key: str = "") -> None:
        self.link = link
        self.where = where or getattr(port, "port", None) or "port"
        self.key = key
        self.lock = threading.Lock()
        self.framer = Framer(
            port,
            Framing(
                send_end=link.send_end.encode(link.encoding),
                reply_end=link.reply_end.encode(link.encoding),
                echo=link.echo,
                prompt=link.prompt.encode(link.encoding),
            ),
        )
        self.pending: list[Pending] = []
        self.users = 0
        self._outstanding = 0
        self._late_until = 0.0
        self._last_io = 0.0
        self._broken: str | None = None

    @property
    def port(self) -> SerialLike:
        """The port this bus owns."""
        return self.framer.port

    def set_wire_log(self, log: WireLog | None) -> None:
        """Report every byte sent and received to ``log`` (None: stop)."""
        self.framer.wire_log = log

    # -- errors ----------------------------------------------------------------------------

    @contextmanager
    def _port_errors(self, what: str) -> Iterator[None]:
        """Map pyserial and OS errors, once, into the aligner error tree."""
        if self._broken is not None:
            raise Disconnected(f"{self.where}: {self._broken}; open the device again")
        try:
            yield
        except serial.SerialTimeoutException as exc:
            raise DeviceTimeout(
                f"{self.where}: sending {what} timed out ({exc}); check the cable and the "
                "flow-control settings"
            ) from exc
        except PORT_ERRORS as exc:
            self._broken = "the port failed earlier"
            raise Disconnected(
                f"{self.where}: the port failed during {what} ({exc}); check the cable and the "
                "power, that the port still exists, and that no other program uses it"
            ) from exc

    # -- one exchange ----------------------------------------------------------------------

    def exchange(
        self, wire: bytes, end: bytes | None, expect: Expect, timeout_s: float, note: Note
    ) -> Outcome:
        """Send one command and read its reply (see the module docstring)."""
        with self.lock, self._port_errors(_show(wire)):
            self._settle(expect, note)
            sent = self._send(wire, end)
            outcome = self._receive(wire, expect, sent, sent + timeout_s, note)
            self._last_io = time.monotonic()
            if outcome.kind in ("silent", "partial"):
                self._outstanding += 1
                self._late_until = self._last_io + self.link.late_s
            return outcome

    def send_pending(self, wire: bytes, end: bytes | None, pending: Pending, note: Note) -> None:
        """Send a command whose reply comes later; :meth:`wait` collects it."""
        with self.lock, self._port_errors(_show(wire)):
            self._settle(pending.expect, note)
            self._send(wire, end)
            self.pending.append(pending)

    def wait(self, pending: Pending, deadline: float, note: Note) -> Outcome | None:
        """Wait for a pending reply until ``deadline``; None when it did not come (it is then
        no longer expected: a late one is drained as such)."""
        while not pending.arrived.is_set():
            with self.lock, self._port_errors("a wait for a pending reply"):
                self.framer.poll()
                self._route_complete(pending.expect, note)
                if not pending.arrived.is_set() and time.monotonic() > deadline:
                    self.pending.remove(pending)
                    self._outstanding += 1
                    self._late_until = time.monotonic() + self.link.late_s
                    return None
            pending.arrived.wait(_TURN_S)
        return pending.outcome

    @contextmanager
    def listen(self, what: str) -> Iterator[Framer]:
        """Hold the bus and hand out its framer, for a device that talks without being asked
        (a free-running counter); port errors are mapped as for an exchange."""
        with self.lock, self._port_errors(what):
            yield self.framer

    def _send(self, wire: bytes, end: bytes | None) -> float:
        """Send after the link's gap; return the time just before the write (no reply to this
        command can be older)."""
        wait = self._last_io + self.link.gap_s - time.monotonic()
        if wait > 0:
            time.sleep(wait)
        started = time.monotonic()
        self.framer.send(wire, end)
        return started

    def _settle(self, expect: Expect, note: Note) -> None:
        """Drain what arrived before this command; wait out a reply still owed."""
        self.framer.poll()
        self._route_complete(expect, note)
        while self._outstanding > 0 and time.monotonic() < self._late_until:
            item = self.framer.next(self._late_until)
            if item is None:
                break
            self._route(item, expect, note, late=True)
        self._outstanding = 0
        rest = self.framer.clear() if not self.pending else b""
        if rest and rest != self.framer.framing.prompt:
            note(f"discarded an incomplete message {_show(rest)} received before the command")

    def _route_complete(self, expect: Expect, note: Note) -> None:
        while (item := self.framer.take()) is not None:
            self._route(item, expect, note, late=True)

    def _route(self, item: bytes, expect: Expect, note: Note, *, late: bool) -> bool:
        """Hand a message to a pending reply; else report it as late (True when handed on)."""
        if item is PROMPT:
            return True
        text = item.decode(expect.encoding, errors="replace")
        for pending in list(self.pending):
            fields, kind = pending.expect.classify(text)
            if kind is not None:
                pending.outcome = Outcome(kind, fields or {}, text)
                self.pending.remove(pending)
                pending.arrived.set()
                return True
        if late:
            self._outstanding = max(0, self._outstanding - 1)
            note(f"discarded a late or unsolicited reply {_show(text)}")
        return False

    def _receive(
        self, wire: bytes, expect: Expect, sent: float, deadline: float, note: Note
    ) -> Outcome:
        framer = self.framer
        wants_reply = expect.reply is not None
        if framer.framing.echo:
            echoed = self._echo(wire, expect, deadline, note)
            if echoed is not None:
                return echoed
        if not wants_reply and not framer.framing.prompt:
            return Outcome("done")
        got: Outcome | None = None
        while True:
            item = framer.next(deadline, expect.length)
            if item is None:
                if got is not None:  # the reply came, the prompt did not: wait no longer
                    return got
                return Outcome("partial" if framer.buffer else "silent", raw=bytes(framer.buffer))
            if item is PROMPT:
                if got is not None or not wants_reply:
                    return got or Outcome("done")
                return Outcome("garbage", raw=PROMPT)
            text = item.decode(expect.encoding, errors="replace")
            fields, kind = expect.classify(text)
            if kind == "reply" and time.monotonic() - sent < expect.not_before_s:
                note(f"discarded a reply {_show(text)} that came before its command could end")
                continue
            if kind is not None:
                if got is not None and got.kind == "reply" and kind == "reply":
                    raise Unattributable(
                        f"{self.where}: two replies ({got.text!r}, {text!r}) to one command "
                        f"{_show(wire)}; cannot tell which belongs to it"
                    )
                got = Outcome(kind, fields or {}, text)
                if not framer.framing.prompt:
                    self._look_ahead(wire, got, expect)
                    return got
                continue
            if self._route(item, expect, note, late=False):
                continue
            return Outcome("garbage", raw=item)

    def _echo(self, wire: bytes, expect: Expect, deadline: float, note: Note) -> Outcome | None:
        """Read the echo of the command; an Outcome when it failed."""
        sent = wire.decode(expect.encoding, errors="replace").strip(" \t\r\n")
        while True:
            item = self.framer.next(deadline)
            if item is None:
                return Outcome("partial" if self.framer.buffer else "silent")
            if item is PROMPT:
                continue
            text = item.decode(expect.encoding, errors="replace").strip(" \t\r\n")
            if text == sent:
                return None
            if not self._route(item, expect, note, late=False):
                return Outcome("garbage", raw=item)

    def _look_ahead(self, wire: bytes, got: Outcome, expect: Expect) -> None:
        """A second reply of the same form already waiting means the first may not be ours."""
        if expect.reply is None or expect.length is not None:
            return
        self.framer.poll()
        for item in self.framer.complete():
            text = item.decode(expect.encoding, errors="replace")
            if expect.reply.match(text, expect.context) is not None:
                raise Unattributable(
                    f"{self.where}: two replies ({got.text!r}, {text!r}) to one command "
                    f"{_show(wire)}; cannot tell which belongs to it"
                )

    def close(self) -> None:
        """Close the port; a port already gone is not an error here."""
        with self.lock:
            self._broken = "the port was closed"
            # the device is gone either way; closing must not raise
            with suppress(*PORT_ERRORS):
                self.port.close()


_BUSES: dict[str, Bus] = {}
_REGISTRY = threading.Lock()


def attach(key: str, link: Link, opener: Callable[[], SerialLike], *, who: str) -> Bus:
    """The bus for port ``key``: the open one (its link settings must agree) or a new one
    from ``opener()``. Every :func:`attach` needs one :func:`detach`."""
    with _REGISTRY:
        bus = _BUSES.get(key)
        if bus is None:
            bus = Bus(opener(), link, where=key, key=key)
            _BUSES[key] = bus
        elif bus.link.framing_key() != link.framing_key():
            raise InputError(
                f"{who}: {key} is already open with other link settings (baud, encoding, "
                "end markers, echo, prompt); devices sharing a port need the same [link]"
            )
        bus.users += 1
        return bus


def detach(bus: Bus) -> None:
    """Release one user of ``bus``; the last one closes the port."""
    with _REGISTRY:
        bus.users -= 1
        if bus.users > 0:
            return
        if _BUSES.get(bus.key) is bus:
            del _BUSES[bus.key]
    bus.close()
