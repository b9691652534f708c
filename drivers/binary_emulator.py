"""An emulated controller of the framed binary protocol, served on a pseudo-terminal.

``BinaryEmulator`` speaks :mod:`aligner_drivers.adapters.framed` (see there for the messages)
behind a pty (POSIX only), so the binary adapters run through pyserial and a real tty. It has
rotation-motor channels (``motors``), solenoid shutter channels (``beams``) and two-position flip
mount channels (``flips``):

- motors move at ``speed_deg_s`` (``counts_per_deg`` encoder counts per degree) and report the
  end of a move (``MOVE_DONE``) or of a homing (``HOMED``) unsolicited; a motor refuses moves
  (``FAULT`` ``NOT_HOMED``) until it has been homed after power-up (unless ``homed=True``), and
  targets outside ``travel_deg`` (``OUT_OF_RANGE``);
- with updates on, every ``update_period_s`` it sends each motor's ``STATUS``; when no
  ``STATUS_ACK`` has come for ``watchdog_s``, it halts every motor, sends ``FAULT``
  ``KEEPALIVE_LOST`` for each and turns updates off;
- a flip mount takes ``flip_time_s`` to change position.

Test back doors: ``received`` (every frame in order), ``acks`` (keep-alives received),
``disconnect()`` (the port vanishes), ``position_counts(channel)``, ``beam_open(channel)``.
"""

from __future__ import annotations

import os
import select
import time
import tty
from dataclasses import dataclass, replace

from aligner.errors import InputError

from .adapters.framed import (
    CONTROLLER,
    HOST,
    OPEN,
    SHUT,
    FaultCode,
    Flag,
    Frame,
    FrameReader,
    Msg,
)
from .emulator import Served

__all__ = ["BinaryEmulator"]


@dataclass
class _Axis:
    """One motor: a motion from ``start`` to ``target`` (counts) that began at ``t0``."""

    start: float = 0.0
    target: int = 0
    t0: float = 0.0
    duration: float = 0.0
    kind: str | None = None  # "move", "home" or None (at rest)
    homed: bool = False

    def at(self, now: float) -> int:
        if self.kind is None or self.duration <= 0.0:
            return self.target if self.kind is None else round(self.start)
        done = min(1.0, (now - self.t0) / self.duration)
        return round(self.start + (self.target - self.start) * done)

    def flags(self) -> int:
        moving = Flag.MOVING if self.kind == "move" else 0
        homing = Flag.HOMING if self.kind == "home" else 0
        return int(moving | homing | (Flag.HOMED if self.homed else 0))


@dataclass
class _Flip:
    """A flip mount at ``position`` (1 or 2), flipping to ``to`` until ``until`` (0: at rest)."""

    position: int = 1
    until: float = 0.0
    to: int = 1


class BinaryEmulator(Served):
    """A pty-served controller (module docstring); use it as a context manager."""

    def __init__(
        self,
        *,
        motors: tuple[int, ...] = (1,),
        beams: tuple[int, ...] = (2,),
        flips: tuple[int, ...] = (3,),
        counts_per_deg: float = 4000.0,
        speed_deg_s: float = 400.0,
        travel_deg: tuple[float, float] = (-360.0, 360.0),
        homed: bool = False,
        update_period_s: float = 0.05,
        watchdog_s: float = 0.5,
        flip_time_s: float = 0.05,
    ) -> None:
        if set(motors) & set(beams) | set(motors) & set(flips) | set(beams) & set(flips):
            raise InputError("BinaryEmulator: motors, beams and flips need different channels")
        self.counts_per_deg = counts_per_deg
        self.speed_counts_s = speed_deg_s * counts_per_deg
        self.travel = (travel_deg[0] * counts_per_deg, travel_deg[1] * counts_per_deg)
        self.update_period_s = update_period_s
        self.watchdog_s = watchdog_s
        self.flip_time_s = flip_time_s
        self.axes = {c: _Axis(homed=homed) for c in motors}
        self.beams = dict.fromkeys(beams, SHUT)
        self.flips = {c: _Flip() for c in flips}
        self.received: list[Frame] = []
        self.acks = 0
        self.updates = False
        self._last_ack = self._last_update = 0.0
        self._reader = FrameReader()
        self._master, self._slave = os.openpty()
        tty.setraw(self._slave)
        self.port = os.ttyname(self._slave)
        super().__init__("binary-emulator")

    def release(self) -> None:
        """Close both ends of the pty."""
        self.disconnect()
        if self._slave >= 0:
            os.close(self._slave)
            self._slave = -1

    def disconnect(self) -> None:
        """Close the controller's end: the port vanishes under the host."""
        if self._master >= 0:
            os.close(self._master)
            self._master = -1

    # -- back doors --------------------------------------------------------------------------

    def position_counts(self, channel: int) -> int:
        """Where motor ``channel`` is now (counts)."""
        return self.axes[channel].at(time.monotonic())

    def beam_open(self, channel: int) -> bool:
        """True when solenoid ``channel`` is open, or flip ``channel`` is at position 1."""
        if channel in self.flips:
            return self.flips[channel].position == 1
        return self.beams[channel] == OPEN

    # -- protocol ----------------------------------------------------------------------------

    def _send(self, frame: Frame) -> None:
        if self._master < 0:
            return
        try:
            os.write(self._master, replace(frame, dest=HOST, src=CONTROLLER).pack())
        except OSError:
            self._stop.set()

    def _motion(self, msg: int, channel: int, axis: _Axis, now: float) -> Frame:
        return Frame.motion(msg, channel, axis.at(now), axis.flags())

    def _start(self, axis: _Axis, target: int, kind: str, now: float) -> None:
        start = axis.at(now)
        axis.start, axis.target, axis.t0, axis.kind = start, target, now, kind
        axis.duration = abs(target - start) / self.speed_counts_s

    def _halt(self, axis: _Axis, now: float) -> None:
        axis.target, axis.kind = axis.at(now), None

    def _motor(self, frame: Frame, now: float) -> None:
        channel = frame.channel
        axis = self.axes[channel]
        if frame.msg == Msg.STATUS_REQ:
            self._send(self._motion(Msg.STATUS, channel, axis, now))
        elif frame.msg == Msg.HOME:
            self._start(axis, 0, "home", now)
        elif frame.msg == Msg.HALT:
            self._halt(axis, now)
            self._send(self._motion(Msg.HALTED, channel, axis, now))
        elif frame.msg == Msg.MOVE_TO:
            target = frame.position()[0]
            if not axis.homed:
                self._send(Frame.fault(channel, FaultCode.NOT_HOMED, "axis not homed"))
            elif not self.travel[0] <= target <= self.travel[1]:
                self._send(Frame.fault(channel, FaultCode.OUT_OF_RANGE, "target beyond travel"))
            else:
                self._start(axis, target, "move", now)
        else:
            self._send(Frame.fault(channel, FaultCode.UNKNOWN_MESSAGE, f"message {frame.msg:#06x}"))

    def _beam(self, frame: Frame, now: float) -> None:
        channel = frame.channel
        if frame.msg == Msg.BEAM_SET and frame.p2 in (OPEN, SHUT):
            self.beams[channel] = frame.p2
        elif frame.msg == Msg.BEAM_REQ:
            self._send(Frame(Msg.BEAM_STATE, channel, self.beams[channel]))
        else:
            self._send(Frame.fault(channel, FaultCode.OUT_OF_RANGE, "bad beam request"))

    def _flip(self, frame: Frame, now: float) -> None:
        channel = frame.channel
        flip = self.flips[channel]
        if frame.msg == Msg.FLIP_TO and frame.p2 in (1, 2):
            flip.until, flip.to = now + self.flip_time_s, frame.p2
        elif frame.msg == Msg.FLIP_REQ:
            self._send(Frame(Msg.FLIP_STATE, channel, 0 if flip.until else flip.position))
        else:
            self._send(Frame.fault(channel, FaultCode.OUT_OF_RANGE, "bad flip request"))

    def _handle(self, frame: Frame, now: float) -> None:
        self.received.append(frame)
        if frame.msg == Msg.IDENTIFY_REQ:
            self._send(Frame.identity(40713, "ROT-EMU", (2, 1)))
        elif frame.msg in (Msg.UPDATES_ON, Msg.UPDATES_OFF):
            self.updates = frame.msg == Msg.UPDATES_ON
            self._last_ack = now
        elif frame.msg == Msg.STATUS_ACK:
            self.acks += 1
            self._last_ack = now
        elif frame.channel in self.axes:
            self._motor(frame, now)
        elif frame.channel in self.beams:
            self._beam(frame, now)
        elif frame.channel in self.flips:
            self._flip(frame, now)
        else:
            self._send(Frame.fault(frame.channel, FaultCode.BAD_CHANNEL, "no such channel"))

    def _tick(self, now: float) -> None:
        """Finish motions, send periodic status, watch the keep-alive."""
        for channel, axis in self.axes.items():
            if axis.kind is not None and now >= axis.t0 + axis.duration:
                kind = axis.kind
                axis.kind = None
                if kind == "home":
                    axis.homed = True
                    self._send(Frame(Msg.HOMED, channel))
                else:
                    self._send(self._motion(Msg.MOVE_DONE, channel, axis, now))
        for channel, flip in self.flips.items():
            if flip.until and now >= flip.until:
                flip.position, flip.until = flip.to, 0.0
                self._send(Frame(Msg.FLIP_DONE, channel, flip.position))
        if not self.updates:
            return
        if now - self._last_ack > self.watchdog_s:
            self.updates = False
            for channel, axis in self.axes.items():
                self._halt(axis, now)
                self._send(
                    Frame.fault(channel, FaultCode.KEEPALIVE_LOST, "status not acknowledged")
                )
        elif now - self._last_update >= self.update_period_s:
            self._last_update = now
            for channel, axis in self.axes.items():
                self._send(self._motion(Msg.STATUS, channel, axis, now))

    def _serve(self) -> None:
        while not self._stop.is_set() and self._master >= 0:
            ready, _, _ = select.select([self._master], [], [], 0.005)
            now = time.monotonic()
            if ready:
                try:
                    chunk = os.read(self._master, 4096)
                except OSError:
                    time.sleep(0.01)  # no reader on the slave side yet
                    continue
                for frame in self._reader.feed(chunk):
                    self._handle(frame, now)
            self._tick(now)
