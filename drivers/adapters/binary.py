"""Rotation mounts and shutters that speak the framed binary protocol (:mod:`.framed`).

Open them from a bench file or the command line with a plug-in spec (any pyserial port or URL)::

    py:aligner_drivers.adapters.binary:BinaryMount?port=/dev/ttyUSB0&channel=1&counts_per_deg=4000
    py:aligner_drivers.adapters.binary:BinaryShutter?port=/dev/ttyUSB0&channel=2&kind=solenoid

Caution: a mount that turns a polarizer or a shutter that opens can send light onto a detector;
bring a new controller up with the beam blocked and follow your local laser-safety rules.

How the adapters use the protocol:

- One :class:`BinaryLink` per port, shared by every device opened on it (counted; the last
  ``close()`` closes the port). Its reader thread cuts the byte stream into frames, keeps the
  latest ``STATUS`` of each channel and answers every ``STATUS`` with ``STATUS_ACK`` (the
  keep-alive the controller expects); updates are turned on when the port opens and again
  after the controller reports a lost keep-alive.
- A move sends ``MOVE_TO`` and waits up to ``move_timeout_s`` for the unsolicited
  ``MOVE_DONE``, whose position must be the target within one count; ``HALTED`` instead (from
  ``stop()`` in another thread) raises ``DeviceError``, ``FAULT`` raises ``DeviceRefused`` with
  the controller's reason (a lost keep-alive: ``DeviceError``). A move that outlasts the timeout
  is halted and raises ``DeviceTimeout``. Homing waits for ``HOMED`` the same way and then
  checks that the position reads 0.
- Readings: ``counts = round(reading_deg * counts_per_deg)`` (a negative ``counts_per_deg``
  turns the sense round).
- A lost port raises ``Disconnected`` at once, also in a move already waiting.
"""

from __future__ import annotations

import contextlib
import math
import threading
import time
from collections import deque
from collections.abc import Collection
from typing import ClassVar, Literal

import serial

from aligner.errors import (
    BadReply,
    DeviceError,
    DeviceRefused,
    DeviceTimeout,
    Disconnected,
    InputError,
)

from .._checks import check_reading
from .framed import OPEN, SHUT, FaultCode, Flag, Frame, FrameReader, Msg

__all__ = ["BinaryLink", "BinaryMount", "BinaryShutter"]

_INT32 = 2**31 - 1


class BinaryLink:
    """One open port of the framed protocol and its reader thread (module docstring).

    Get one with :meth:`acquire` (shared per port) and give it back with :meth:`release`.
    """

    _open_links: ClassVar[dict[str, BinaryLink]] = {}
    _registry_lock: ClassVar[threading.Lock] = threading.Lock()

    def __init__(self, port: str, *, baud: int = 115200) -> None:
        try:
            self._port = serial.serial_for_url(port, baudrate=baud, timeout=0.02, write_timeout=1.0)
        except (serial.SerialException, OSError, ValueError) as exc:
            raise Disconnected(
                f"cannot open {port} ({exc}); check that the controller is plugged in and "
                "powered, the port name, and that you may use the port"
            ) from None
        self.name = port
        self.baud = baud
        self.users = 0
        self._cond = threading.Condition()
        self._inbox: deque[tuple[float, Frame]] = deque(maxlen=256)
        self._status: dict[int, tuple[float, Frame]] = {}
        self._write_lock = threading.Lock()
        self._dead: str | None = None
        self._updates_lost = False
        self._closing = threading.Event()
        self._thread = threading.Thread(target=self._read_loop, name=f"link {port}", daemon=True)
        self._thread.start()
        self.send(Frame(Msg.UPDATES_ON))

    @classmethod
    def acquire(cls, port: str, *, baud: int = 115200) -> BinaryLink:
        """The open link of ``port``, opened now if no device uses it yet."""
        with cls._registry_lock:
            link = cls._open_links.get(port)
            if link is None or link._dead is not None:
                link = cls._open_links[port] = cls(port, baud=baud)
            elif link.baud != baud:
                raise InputError(
                    f"{port} is already open at {link.baud} baud; every device on one port "
                    f"needs the same baud (got {baud})"
                )
            link.users += 1
            return link

    def release(self) -> None:
        """Give the link back; the last user closes the port."""
        with self._registry_lock:
            self.users -= 1
            if self.users > 0:
                return
            if self._open_links.get(self.name) is self:
                del self._open_links[self.name]
        self._closing.set()
        self._thread.join(timeout=2.0)
        with contextlib.suppress(Exception):  # the port may be gone already
            self._port.close()
        with self._cond:
            self._dead = self._dead or "the link was closed"
            self._cond.notify_all()

    # -- sending and receiving ---------------------------------------------------------------

    def send(self, frame: Frame) -> float:
        """Write one frame; return the time (``time.monotonic()``) just before it went out."""
        if self._dead is not None:
            raise Disconnected(f"{self.name}: {self._dead}; check the cable and open it again")
        sent = time.monotonic()
        try:
            with self._write_lock:
                self._port.write(frame.pack())
        except Exception as exc:  # pyserial, OS and termios errors of a failing port
            self._fail(f"the port failed while sending ({exc})")
            raise Disconnected(f"{self.name}: {self._dead}; check the cable") from None
        return sent

    def acknowledge(self, channel: int) -> None:
        """Send the keep-alive for a received ``STATUS``."""
        self.send(Frame(Msg.STATUS_ACK, channel))

    def ensure_updates(self) -> None:
        """Turn status updates on again after the controller dropped them (lost keep-alive)."""
        if self._updates_lost:
            self._updates_lost = False
            self.send(Frame(Msg.UPDATES_ON))

    def _fail(self, reason: str) -> None:
        with self._cond:
            self._dead = self._dead or reason
            self._cond.notify_all()

    def _read_loop(self) -> None:
        reader = FrameReader()
        while not self._closing.is_set():
            try:
                chunk = self._port.read(self._port.in_waiting or 1)
            except Exception as exc:  # the port vanished (pyserial, OS or termios error)
                self._fail(f"the port failed ({exc})")
                return
            now = time.monotonic()
            for frame in reader.feed(chunk):
                if frame.msg == Msg.STATUS:
                    try:
                        self.acknowledge(frame.channel)
                    except Disconnected:
                        return
                with self._cond:
                    if frame.msg == Msg.STATUS:
                        self._status[frame.channel] = (now, frame)
                    else:
                        self._inbox.append((now, frame))
                        lost = frame.msg == Msg.FAULT and (
                            frame.fault_reason()[0] == FaultCode.KEEPALIVE_LOST
                        )
                        self._updates_lost = self._updates_lost or lost
                    self._cond.notify_all()

    def _take(self, channel: int, msgs: Collection[int], since: float) -> Frame | None:
        for i, (t, frame) in enumerate(self._inbox):
            if (
                t >= since
                and frame.channel == channel
                and (frame.msg in msgs or frame.msg == Msg.FAULT)
            ):
                del self._inbox[i]
                return frame
        return None

    def wait(
        self, channel: int, msgs: Collection[int], *, since: float, timeout_s: float, what: str
    ) -> Frame:
        """The first frame of ``channel`` among ``msgs`` received after ``since``; a ``FAULT``
        of that channel raises (``DeviceRefused``, or ``DeviceError`` for a lost keep-alive)."""
        deadline = time.monotonic() + timeout_s
        with self._cond:
            while True:
                frame = self._take(channel, msgs, since)
                if frame is not None and frame.msg == Msg.FAULT:
                    raise self._fault(frame, what)
                if frame is not None:
                    return frame
                self._check_alive(what)
                left = deadline - time.monotonic()
                if left <= 0.0:
                    raise DeviceTimeout(
                        f"{self.name} channel {channel}: no answer to {what} within "
                        f"{timeout_s:g} s; check that the controller is on and the channel exists"
                    )
                self._cond.wait(left)

    def status(self, channel: int, *, timeout_s: float, what: str) -> Frame:
        """A ``STATUS`` of ``channel`` newer than this call (asked for with ``STATUS_REQ``)."""
        since = self.send(Frame(Msg.STATUS_REQ, channel))
        deadline = since + timeout_s
        with self._cond:
            while True:
                fault = self._take(channel, (), since)
                if fault is not None:
                    raise self._fault(fault, what)
                t, frame = self._status.get(channel, (-math.inf, None))
                if frame is not None and t >= since:
                    return frame
                self._check_alive(what)
                left = deadline - time.monotonic()
                if left <= 0.0:
                    raise DeviceTimeout(
                        f"{self.name} channel {channel}: no status for {what} within "
                        f"{timeout_s:g} s; check that the controller is on"
                    )
                self._cond.wait(left)

    def _check_alive(self, what: str) -> None:
        if self._dead is not None:
            raise Disconnected(
                f"{self.name}: {self._dead} during {what}; check the cable and the controller's "
                "power, then open the device again"
            )

    def _fault(self, frame: Frame, what: str) -> DeviceError:
        code, reason = frame.fault_reason()
        where = f"{self.name} channel {frame.channel}"
        if code == FaultCode.KEEPALIVE_LOST:
            return DeviceError(
                f"{where}: the controller stopped {what}: its status updates were not "
                f"acknowledged in time (fault {code}, {reason!r}); the host stalled or the "
                "link is overloaded; move again to continue"
            )
        return DeviceRefused(f"{where}: the controller refused {what}: {reason!r} (fault {code})")


class _OnLink:
    """A device on one channel of a shared :class:`BinaryLink`."""

    def __init__(
        self, port: str, channel: int, name: str, baud: int, reply_timeout_s: float
    ) -> None:
        if not 1 <= channel <= 255:
            raise InputError(f"{name}: channel must be 1 to 255, got {channel!r}")
        if not (math.isfinite(reply_timeout_s) and reply_timeout_s > 0.0):
            raise InputError(f"{name}: reply_timeout_s must be > 0 s, got {reply_timeout_s!r}")
        self.name = name
        self.channel = channel
        self.reply_timeout_s = reply_timeout_s
        self._link: BinaryLink | None = BinaryLink.acquire(port, baud=baud)

    @property
    def link(self) -> BinaryLink:
        """The open link (``Disconnected`` once this device is closed)."""
        if self._link is None:
            raise Disconnected(f"{self.name}: the device was closed; open it again")
        return self._link

    def _request(
        self, frame: Frame, replies: Collection[int], what: str, timeout_s: float
    ) -> Frame:
        since = self.link.send(frame)
        return self.link.wait(self.channel, replies, since=since, timeout_s=timeout_s, what=what)

    def identify(self) -> str:
        """Model, serial number and firmware the controller reports."""
        since = self.link.send(Frame(Msg.IDENTIFY_REQ))
        reply = self.link.wait(
            0, (Msg.IDENTIFY,), since=since, timeout_s=self.reply_timeout_s, what="identify"
        )
        return reply.identity_text()

    def close(self) -> None:
        """Release the channel (the port closes with its last device)."""
        if self._link is not None:
            self._link.release()
            self._link = None


class BinaryMount(_OnLink):
    """A ``RotationMount`` on a motor channel of the framed binary protocol.

    ``port``: a serial port or pyserial URL; ``channel``: the motor channel; ``counts_per_deg``:
    encoder counts per degree of the mount's reading (negative: counts fall as the reading
    grows); ``move_timeout_s``: longest move or homing (s).
    """

    capabilities = frozenset({"home", "stop", "readback", "status", "needs_home"})

    def __init__(
        self,
        port: str,
        *,
        channel: int = 1,
        counts_per_deg: float = 4000.0,
        name: str = "binary-mount",
        baud: int = 115200,
        reply_timeout_s: float = 0.5,
        move_timeout_s: float = 60.0,
    ) -> None:
        if not (math.isfinite(counts_per_deg) and counts_per_deg != 0.0):
            raise InputError(
                f"{name}: counts_per_deg must be a non-zero number, got {counts_per_deg!r}"
            )
        if not (math.isfinite(move_timeout_s) and move_timeout_s > 0.0):
            raise InputError(f"{name}: move_timeout_s must be > 0 s, got {move_timeout_s!r}")
        self.counts_per_deg = float(counts_per_deg)
        self.move_timeout_s = float(move_timeout_s)
        super().__init__(port, channel, name, baud, reply_timeout_s)

    def _counts(self, reading_deg: float) -> int:
        counts = round(check_reading(reading_deg) * self.counts_per_deg)
        if abs(counts) > _INT32:
            raise InputError(
                f"{self.name}: {reading_deg:g} deg is {counts} counts, beyond the int32 range of "
                "the protocol; choose a smaller reading"
            )
        return counts

    def _motion(self, frame: Frame, done: int, what: str) -> Frame:
        """Start a motion and wait for its end (``done``); raise if halted or refused."""
        link = self.link
        link.ensure_updates()
        try:
            reply = self._request(frame, (done, Msg.HALTED), what, self.move_timeout_s)
        except DeviceTimeout:
            link.send(Frame(Msg.HALT, self.channel))
            raise DeviceTimeout(
                f"{self.name}: {what} did not finish within {self.move_timeout_s:g} s "
                "(move_timeout_s) and was halted; check for an obstruction and the speed setting"
            ) from None
        if reply.msg == Msg.HALTED:
            at = reply.position()[0] / self.counts_per_deg
            raise DeviceError(f"{self.name}: {what} was stopped by stop() at {at:.6g} deg")
        return reply

    def move_to(self, reading_deg: float) -> None:
        """Move to ``reading_deg`` (deg) and check the position the controller reports."""
        target = self._counts(reading_deg)
        what = f"the move to {reading_deg:g} deg"
        reply = self._motion(Frame.motion(Msg.MOVE_TO, self.channel, target), Msg.MOVE_DONE, what)
        reached = reply.position()[0]
        if abs(reached - target) > 1:
            raise BadReply(
                f"{self.name}: after {what} the controller reports {reached} counts, "
                f"{reached - target:+d} from the target {target}; check for an obstruction"
            )

    def position(self) -> float:
        """The reading (deg) from a fresh status of the channel."""
        status = self.link.status(self.channel, timeout_s=self.reply_timeout_s, what="position")
        return status.position()[0] / self.counts_per_deg

    def home(self) -> None:
        """Home the axis (needed after power-up) and check it reads 0 deg."""
        self._motion(Frame(Msg.HOME, self.channel), Msg.HOMED, "homing")
        at = self.position()
        if abs(at * self.counts_per_deg) > 1:
            raise BadReply(f"{self.name}: after homing the position reads {at:.6g} deg, not 0")

    def stop(self) -> None:
        """Halt at once (safe from another thread: the waiting move raises ``DeviceError``)."""
        self.link.send(Frame(Msg.HALT, self.channel))

    def is_moving(self) -> bool:
        """True while the channel reports a move or a homing."""
        status = self.link.status(self.channel, timeout_s=self.reply_timeout_s, what="status")
        return bool(status.position()[1] & (Flag.MOVING | Flag.HOMING))


class BinaryShutter(_OnLink):
    """A ``Shutter`` on a solenoid or flip-mount channel of the framed binary protocol.

    ``kind="solenoid"``: ``BEAM_SET`` and ``BEAM_REQ``; ``kind="flip"``: a two-position flip
    mount whose ``open_position`` (1 or 2) clears the beam. Every change is read back.
    """

    capabilities = frozenset({"readback"})

    def __init__(
        self,
        port: str,
        *,
        channel: int = 2,
        kind: Literal["solenoid", "flip"] = "solenoid",
        open_position: Literal[1, 2] = 1,
        name: str = "binary-shutter",
        baud: int = 115200,
        reply_timeout_s: float = 0.5,
        move_timeout_s: float = 5.0,
    ) -> None:
        if kind not in ("solenoid", "flip"):
            raise InputError(f"{name}: kind must be solenoid or flip, got {kind!r}")
        if open_position not in (1, 2):
            raise InputError(f"{name}: open_position must be 1 or 2, got {open_position!r}")
        self.kind = kind
        self.open_position = open_position
        self.move_timeout_s = move_timeout_s
        super().__init__(port, channel, name, baud, reply_timeout_s)

    def _set(self, want_open: bool) -> None:
        word = "open" if want_open else "shut"
        if self.kind == "solenoid":
            self.link.send(Frame(Msg.BEAM_SET, self.channel, OPEN if want_open else SHUT))
        else:
            target = self.open_position if want_open else 3 - self.open_position
            done = self._request(
                Frame(Msg.FLIP_TO, self.channel, target),
                (Msg.FLIP_DONE,),
                f"flipping {word}",
                self.move_timeout_s,
            )
            if done.p2 != target:
                raise BadReply(f"{self.name}: flipped to position {done.p2}, not {target}")
        if self.is_open() != want_open:
            raise BadReply(
                f"{self.name}: asked to {word}, the controller reports it is not; check the "
                "shutter's power and cable, and block the beam by hand"
            )

    def open(self) -> None:
        """Open the beam path and confirm it from the controller."""
        self._set(True)

    def shut(self) -> None:
        """Block the beam path and confirm it from the controller."""
        self._set(False)

    def is_open(self) -> bool:
        """The state the controller reports (a flip mount between positions counts as open)."""
        if self.kind == "solenoid":
            reply = self._request(
                Frame(Msg.BEAM_REQ, self.channel), (Msg.BEAM_STATE,), "state", self.reply_timeout_s
            )
            return reply.p2 != SHUT
        reply = self._request(
            Frame(Msg.FLIP_REQ, self.channel), (Msg.FLIP_STATE,), "state", self.reply_timeout_s
        )
        return reply.p2 != 3 - self.open_position
