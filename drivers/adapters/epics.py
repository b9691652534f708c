"""Mounts from motor records and counters from scaler records of an EPICS control system.

Needs the optional extra ``pip install "aligner[epics]"`` (caproto, a pure-Python Channel
Access client). The control system's usual environment settings apply (``EPICS_CA_ADDR_LIST``,
``EPICS_CA_AUTO_ADDR_LIST``, ``EPICS_CA_SERVER_PORT``), so a lab reaches devices served by
IOCs on other machines. Specs::

    py:aligner_drivers.adapters.epics:MotorRecordMount?record=LAB:rot1
    py:aligner_drivers.adapters.epics:ScalerRecordCounter?record=LAB:scaler1&post=2&ref=3

Caution: the mount moves whatever the record drives; check the record name and its soft limits
before a sweep and follow your local laser-safety rules.

Fields used (standard fields of the motor and scaler records):

- motor record: ``VAL`` (target, user units) written with completion (the put returns when the
  move is over), then ``DMOV`` (1 = done) polled; ``RBV`` (read-back), ``MOVN`` (moving),
  ``STOP`` (1 stops), ``HOMF`` (home forward), ``LVIO`` (1 = the target broke the soft limits
  ``LLM``/``HLM`` and the record did not move), ``DESC`` and ``EGU`` (for ``identify()``).
  Readings in degrees are ``user value / units_per_deg``; a move must end within
  ``tolerance_deg`` of its target.
- scaler record: ``TP`` (preset time, s) and ``CNT`` (1 = count, 0 when done; written with
  completion, then polled), counts from ``S1`` ... ``S32``: ``post`` and ``ref`` name the
  channels (S1 is usually the record's clock).

Errors: an unreachable record raises ``Disconnected`` (check the record name and the
Channel Access address list); a move the record refuses, ``DeviceRefused``; a client timeout,
``DeviceTimeout``; every other client error, ``DeviceError`` with the original chained.
"""

from __future__ import annotations

import math
import threading
import time
from collections.abc import Callable
from typing import Any

from aligner.errors import (
    BadReply,
    DeviceError,
    DeviceRefused,
    DeviceTimeout,
    Disconnected,
    InputError,
)

from .._checks import check_dwell, check_reading
from ..plugins import foreign_error

__all__ = ["MotorRecordMount", "ScalerRecordCounter"]

_POLL_S = 0.02


def _client() -> Any:
    """caproto's threading client module, or ``InputError`` saying how to install it."""
    try:
        from caproto.threading import client
    except ImportError as exc:
        raise InputError('the EPICS adapters need caproto: pip install "aligner[epics]"') from exc
    return client


class _Record:
    """The fields of one record over a private Channel Access context."""

    def __init__(self, record: str, fields: tuple[str, ...], name: str, timeout_s: float) -> None:
        if not record or any(c.isspace() for c in record):
            raise InputError(f"{name}: record must be a record name without spaces, got {record!r}")
        if not (math.isfinite(timeout_s) and timeout_s > 0.0):
            raise InputError(f"{name}: timeout_s must be > 0 s, got {timeout_s!r}")
        client = _client()
        self.record, self.name, self.timeout_s = record, name, timeout_s
        self._context: Any = client.Context()
        try:
            pvs = self._context.get_pvs(*(f"{record}.{f}" for f in fields), timeout=timeout_s)
            self._pvs = dict(zip(fields, pvs, strict=True))
            for field, pv in self._pvs.items():
                try:
                    pv.wait_for_connection(timeout=timeout_s)
                except TimeoutError:
                    raise Disconnected(
                        f"{name}: cannot reach {record}.{field} within {timeout_s:g} s; check "
                        "the record name, that its IOC is running, and EPICS_CA_ADDR_LIST"
                    ) from None
        except BaseException:
            self.close()
            raise

    def _guard(self, what: str, call: Callable[[], Any]) -> Any:
        from caproto import ErrorResponseReceived

        if self._context is None:
            raise Disconnected(f"{self.name}: the device was closed; open it again")
        try:
            return call()
        except ErrorResponseReceived as exc:
            raise DeviceRefused(f"{self.name}: the IOC refused {what} ({exc})") from exc
        except Exception as exc:
            raise foreign_error(f"{self.name} ({self.record})", what, exc) from exc

    def _read(self, field: str) -> Any:
        pv = self._pvs[field]
        return self._guard(f"reading {field}", lambda: pv.read(timeout=self.timeout_s)).data

    def get(self, field: str) -> float:
        """The numeric value of a field."""
        return float(self._read(field)[0])

    def text(self, field: str) -> str:
        """A text field (a string, or a character array), printable characters only."""
        data = self._read(field)
        raw = data[0] if isinstance(data[0], bytes) else bytes(int(c) & 0xFF for c in data)
        text = raw.split(b"\0")[0].decode("ascii", errors="replace")
        return "".join(c for c in text if c.isprintable())

    def put(self, field: str, value: float, *, wait_s: float | None = None) -> None:
        """Write a field; with ``wait_s``, wait up to that long for the record to finish."""
        pv = self._pvs[field]
        timeout = self.timeout_s if wait_s is None else wait_s
        self._guard(
            f"writing {field} = {value:g}",
            lambda: pv.write([value], wait=wait_s is not None, timeout=timeout),
        )

    def poll(self, field: str, done: int, deadline: float, what: str) -> None:
        """Poll ``field`` until it reads ``done``, or raise ``DeviceTimeout`` at ``deadline``."""
        while int(self.get(field)) != done:
            if time.monotonic() > deadline:
                raise DeviceTimeout(
                    f"{self.name}: {what} did not finish in time ({self.record}.{field} still "
                    f"reads {self.get(field)}); check the IOC and the device it drives"
                )
            time.sleep(_POLL_S)

    def close(self) -> None:
        """Disconnect this record's context."""
        context, self._context = self._context, None
        if context is not None:
            context.disconnect()


class MotorRecordMount:
    """A ``RotationMount`` on an EPICS motor record (module docstring for the fields).

    ``record``: record name (no field); ``units_per_deg``: the record's user units per degree
    of reading (1 for a record in degrees); ``tolerance_deg``: largest accepted
    ``|read-back - target|``; ``move_timeout_s``: longest move or homing (s).
    """

    capabilities = frozenset({"home", "stop", "readback", "status"})
    FIELDS = ("VAL", "RBV", "DMOV", "MOVN", "STOP", "HOMF", "LVIO", "LLM", "HLM", "DESC", "EGU")

    def __init__(
        self,
        record: str,
        *,
        name: str = "epics-mount",
        units_per_deg: float = 1.0,
        tolerance_deg: float = 0.01,
        move_timeout_s: float = 60.0,
        timeout_s: float = 2.0,
    ) -> None:
        if not (math.isfinite(units_per_deg) and units_per_deg != 0.0):
            raise InputError(f"{name}: units_per_deg must be non-zero, got {units_per_deg!r}")
        if not (tolerance_deg > 0.0 and move_timeout_s > 0.0):
            raise InputError(f"{name}: tolerance_deg and move_timeout_s must be > 0")
        self.name = name
        self.units_per_deg = float(units_per_deg)
        self.tolerance_deg = float(tolerance_deg)
        self.move_timeout_s = float(move_timeout_s)
        self._stopped = threading.Event()
        self.record = _Record(record, self.FIELDS, name, timeout_s)

    def _motion(self, field: str, value: float, what: str) -> None:
        """Write ``field`` with completion, wait for DMOV = 1, check refusal and stop."""
        r = self.record
        self._stopped.clear()
        deadline = time.monotonic() + self.move_timeout_s
        try:
            r.put(field, value, wait_s=self.move_timeout_s)
            r.poll("DMOV", 1, deadline, what)
        except DeviceTimeout:
            r.put("STOP", 1)
            raise
        if int(r.get("LVIO")):
            low, high = r.get("LLM") / self.units_per_deg, r.get("HLM") / self.units_per_deg
            raise DeviceRefused(
                f"{self.name}: the motor record {r.record} refused {what}: outside its soft "
                f"limits {low:g} to {high:g} deg (LLM, HLM)"
            )
        if self._stopped.is_set():
            raise DeviceError(
                f"{self.name}: {what} was stopped by stop() at {self.position():.6g} deg"
            )

    def move_to(self, reading_deg: float) -> None:
        """Move to ``reading_deg`` (deg) and check the read-back."""
        target = check_reading(reading_deg)
        what = f"the move to {target:g} deg"
        self._motion("VAL", target * self.units_per_deg, what)
        reached = self.position()
        if abs(reached - target) > self.tolerance_deg:
            raise BadReply(
                f"{self.name}: after {what} the read-back is {reached:.6g} deg, "
                f"{reached - target:+.3g} deg off (tolerance_deg = {self.tolerance_deg:g}); "
                "check the motor record's retry deadband and the drive"
            )

    def position(self) -> float:
        """The read-back (``RBV``) in degrees."""
        return float(self.record.get("RBV")) / self.units_per_deg

    def home(self) -> None:
        """Home forward (``HOMF``) and wait until done."""
        self._motion("HOMF", 1, "homing")

    def stop(self) -> None:
        """Stop at once (``STOP``); a move waiting in another thread raises ``DeviceError``."""
        self._stopped.set()
        self.record.put("STOP", 1)

    def is_moving(self) -> bool:
        """True while the record reports motion (``MOVN`` = 1 or ``DMOV`` = 0)."""
        return bool(int(self.record.get("MOVN"))) or not int(self.record.get("DMOV"))

    def identify(self) -> str:
        """The record's name, description and units."""
        r = self.record
        return f"motor record {r.record}: {r.text('DESC')} ({r.text('EGU')})"

    def close(self) -> None:
        """Disconnect (the motor is left where it is)."""
        self.record.close()


class ScalerRecordCounter:
    """A ``Counter`` on an EPICS scaler record: ``post`` (and ``ref``) are the numbers of the
    ``S<n>`` count fields (1 to 32; S1 is usually the clock)."""

    def __init__(
        self,
        record: str,
        *,
        post: int = 2,
        ref: int | None = None,
        name: str = "epics-scaler",
        timeout_s: float = 2.0,
    ) -> None:
        chosen = [post] if ref is None else [post, ref]
        if any(not 1 <= c <= 32 for c in chosen) or len(set(chosen)) != len(chosen):
            raise InputError(f"{name}: post and ref must be different channels 1 to 32")
        self.name = name
        self.channels = len(chosen)
        self.timeout_s = timeout_s
        self._fields = tuple(f"S{c}" for c in chosen)
        self.record = _Record(record, ("TP", "CNT", *self._fields), name, timeout_s)

    def count(self, dwell_s: float) -> tuple[int, ...]:
        """Set the preset time, count, wait for the end, read the chosen channels."""
        dwell = check_dwell(dwell_s)
        r = self.record
        limit = dwell + self.timeout_s
        r.put("TP", dwell)
        r.put("CNT", 1, wait_s=limit)
        r.poll("CNT", 0, time.monotonic() + self.timeout_s, f"a gate of {dwell:g} s")
        counts = tuple(r.get(f) for f in self._fields)
        if any(not (c >= 0 and c == int(c)) for c in counts):
            raise BadReply(f"{self.name}: {r.record} gave counts {counts}; expected whole counts")
        return tuple(int(c) for c in counts)

    def close(self) -> None:
        """Disconnect."""
        self.record.close()
