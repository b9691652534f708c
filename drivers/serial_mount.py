"""``LineMount``: a rotation mount spoken to through a device profile (any byte port)."""

from __future__ import annotations

import threading
import time

from aligner.errors import BadReply, DeviceError, DeviceTimeout, InputError

from ._checks import check_reading
from .lineproto import LineChannel

__all__ = ["LineMount"]


class LineMount:
    """A ``RotationMount`` over a ``LineChannel``.

    Readings (deg) become steps with the profile's ``steps_per_degree`` and ``sense``. Every
    move and homing is checked by reading the position back. With a ``status`` command in the
    profile, moves are polled and ``stop()`` from another thread interrupts them (the
    interrupted ``move_to`` raises ``DeviceError``); without one, the ``move`` reply means
    "arrived" and ``stop()`` waits for the move to end.
    """

    def __init__(self, channel: LineChannel, *, name: str | None = None) -> None:
        self.profile = channel.profile
        self.profile.require("move", "query", role="rotation mount")
        self.channel = channel
        self.name = name or channel.name
        optional = {c for c in ("home", "stop", "status") if self.profile.has(c)}
        self.capabilities = frozenset({"readback"} | optional)
        self._stopped = threading.Event()

    def _check_travel(self, reading: float) -> None:
        travel = self.profile.travel_deg
        if travel is not None and not travel[0] <= reading <= travel[1]:
            raise InputError(
                f"{self.name}: {reading:g} deg is outside the travel limits {travel[0]:g} to "
                f"{travel[1]:g} deg (axis.travel_deg in {self.profile.source})"
            )

    def _need(self, capability: str) -> None:
        if capability not in self.capabilities:
            raise InputError(
                f"{self.name}: this mount cannot {capability}: {self.profile.source} has no "
                f"commands.{capability}; it can: {', '.join(sorted(self.capabilities))}"
            )

    def _run(self, command: str, what: str, expected_deg: float, **fields: int) -> None:
        """Send a motion command, wait for the end of the motion, check the position."""
        p = self.profile
        self._stopped.clear()
        polled = p.has("status")
        self.channel.transact(command, timeout_s=None if polled else p.move_timeout_s, **fields)
        if polled:
            deadline = time.monotonic() + p.move_timeout_s
            while self.is_moving():
                if time.monotonic() > deadline:
                    if p.has("stop"):
                        self.channel.transact("stop")
                    raise DeviceTimeout(
                        f"{self.name}: {what} did not finish within {p.move_timeout_s:g} s "
                        f"(link.move_timeout_s in {p.source}) and was stopped; check for an "
                        "obstruction, the travel range and the controller's speed setting"
                    )
                time.sleep(p.poll_interval_s)
        reached = self.position()
        if self._stopped.is_set():
            raise DeviceError(f"{self.name}: {what} was stopped by stop() at {reached:g} deg")
        if abs(reached - expected_deg) > p.position_tolerance_deg:
            raise BadReply(
                f"{self.name}: after {what} the position reads {reached:.6g} deg, "
                f"{reached - expected_deg:+.3g} deg off (position_tolerance_deg = "
                f"{p.position_tolerance_deg:g} in {p.source}); check for an obstruction or a "
                "slipping coupling, and axis.steps_per_degree and axis.sense"
            )

    def move_to(self, reading_deg: float) -> None:
        """Move to ``reading_deg`` (deg, on the step grid) and check the position reached."""
        target = check_reading(reading_deg)
        self._check_travel(target)
        steps = self.profile.to_steps(target)
        self._run(
            "move", f"the move to {target:g} deg", self.profile.to_degrees(steps), steps=steps
        )

    def position(self) -> float:
        """Read the position back (deg)."""
        groups = self.channel.transact("query")
        return self.profile.to_degrees(self.channel.group(groups, "query", "steps", int))

    def home(self) -> None:
        """Drive to the controller's reference and check that it reads 0 deg there."""
        self._need("home")
        self._run("home", "homing", 0.0)

    def stop(self) -> None:
        """Stop at once (between status polls of a move running in another thread)."""
        self._need("stop")
        self._stopped.set()
        self.channel.transact("stop")

    def is_moving(self) -> bool:
        """Ask the controller (``status`` command); False without one, as moves block."""
        if not self.profile.has("status"):
            return False
        groups = self.channel.transact("status")
        return self.channel.group(groups, "status", "moving", int) != 0

    def close(self) -> None:
        """Close the port."""
        self.channel.close()
