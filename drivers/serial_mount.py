"""``LineMount``: a rotation mount spoken to through a device profile (any byte port)."""

from __future__ import annotations

import threading
import time

from aligner.errors import BadReply, DeviceError, DeviceRefused, DeviceTimeout, InputError

from ._checks import check_reading
from .lineproto import LineChannel
from .serial_common import LineDevice

__all__ = ["LineMount"]


class LineMount(LineDevice):
    """A ``RotationMount`` over a ``LineChannel`` (profile entry ``position``).

    Readings (deg) become device units through ``entry.position`` (scale, offset, codec); the
    entry's ``limits`` are the travel. The profile's ``device.init`` entries are sent when the
    mount is created. A motion (move or homing) ends with its reply (``done = "reply"``, the
    reply of a blocking move) or when ``entry.status`` stops saying ``moving``; then the
    position is read back and must agree with the target within ``axis.tolerance_deg``:
    otherwise ``BadReply`` names the likely causes (a wrong scale, number format or sense).
    ``stop()`` from another thread ends a running motion; the interrupted call raises
    ``DeviceError``. With ``axis.needs_home`` the mount declares capability ``needs_home``: the
    engine homes it (shutter shut) before the first move.
    """

    def __init__(self, channel: LineChannel, *, name: str | None = None) -> None:
        super().__init__(channel, name=name)
        self.profile.require("position", role="rotation mount")
        optional = {c for c in ("home", "stop", "status") if self.profile.has(c)}
        needs_home = {"needs_home"} if self.profile.axis.needs_home else set()
        self.capabilities = frozenset({"readback"} | optional | needs_home)
        self._stopped = threading.Event()
        for entry in self.profile.init:
            channel.write(entry)

    def _need(self, capability: str) -> None:
        if capability not in self.capabilities:
            raise InputError(
                f"{self.name}: this mount cannot {capability}: {self.profile.source} has no "
                f"entry.{capability}; it can: {', '.join(sorted(self.capabilities))}"
            )

    def _run(self, entry: str, what: str, expected_deg: float, value: float | None) -> None:
        """Start a motion, wait for its end, check the position reached."""
        axis = self.profile.axis
        self._stopped.clear()
        deadline = time.monotonic() + axis.move_timeout_s
        done = self.channel.entry(entry).done or (
            "status" if self.profile.has("status") else "reply"
        )
        if done == "reply":
            pending = self.channel.start_motion(entry, value)
            if self.channel.finish(entry, pending, deadline) is None:
                self._timed_out(what)
        else:
            self.channel.write(entry, value=value)
            self._wait_status(what, deadline, homing=entry == "home")
        if axis.settle_s > 0:
            time.sleep(axis.settle_s)
        reached = self.position()
        if self._stopped.is_set():
            raise DeviceError(f"{self.name}: {what} was stopped by stop() at {reached:g} deg")
        if abs(reached - expected_deg) > axis.tolerance_deg:
            raise BadReply(
                f"{self.name}: after {what} the position reads {reached:.6g} deg, "
                f"{reached - expected_deg:+.3g} deg off (axis.tolerance_deg = "
                f"{axis.tolerance_deg:g} in {self.profile.source}); check for an obstruction or "
                "a slipping coupling, and entry.position's scale (device units per degree), "
                "number format (codec) and sign (sense)"
            )

    def _wait_status(self, what: str, deadline: float, *, homing: bool) -> None:
        """Poll until the axis stops; an axis that says it is not referenced refused a move
        (before a homing it may say so until the homing starts)."""
        while True:
            meanings = self._status()
            if "not_referenced" in meanings and "moving" not in meanings and not homing:
                raise DeviceRefused(
                    f"{self.name}: the controller refused {what}: the axis is not referenced; "
                    "home it first (axis.needs_home in " + self.profile.source + ")"
                )
            if "moving" not in meanings:
                return
            if time.monotonic() > deadline:
                self._timed_out(what)
            time.sleep(self.profile.axis.poll_s)

    def _timed_out(self, what: str) -> None:
        stopped = ""
        if self.profile.has("stop"):
            self.channel.write("stop")
            stopped = " and was stopped"
        raise DeviceTimeout(
            f"{self.name}: {what} did not finish within {self.profile.axis.move_timeout_s:g} s "
            f"(axis.move_timeout_s in {self.profile.source}){stopped}; check for an "
            "obstruction, the travel range and the controller's speed setting"
        )

    def _status(self) -> frozenset[str]:
        meanings = self.channel.meanings("status", self.channel.read("status"))
        if "fault" in meanings:
            raise DeviceRefused(
                f"{self.name}: the controller reports a fault in its status "
                f"({self.profile.source}: entry.status)"
            )
        return meanings

    def move_to(self, reading_deg: float) -> None:
        """Move to ``reading_deg`` (deg, on the device's grid) and check the position reached."""
        target = check_reading(reading_deg)
        expected = self.channel.expected("position", target)
        self._run("position", f"the move to {target:g} deg", expected, target)

    def position(self) -> float:
        """Read the position back (deg)."""
        value = self.channel.read("position").get("value")
        if not isinstance(value, float):
            raise BadReply(f"{self.name}: the position reply has no number ({self.profile.source})")
        return value

    def home(self) -> None:
        """Drive to the reference and check that the position reads ``axis.home_deg`` there."""
        self._need("home")
        self._run("home", "homing", self.profile.axis.home_deg, None)

    def stop(self) -> None:
        """Stop at once; safe to call from another thread while a motion runs."""
        self._need("stop")
        self._stopped.set()
        self.channel.write("stop")

    def is_moving(self) -> bool:
        """Ask the controller (``entry.status``); False without one, as its moves block."""
        if not self.profile.has("status"):
            return False
        return "moving" in self._status()
