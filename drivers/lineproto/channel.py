"""A device on a bus: profile entries in, decoded values out, with retries and error checks.

``LineChannel`` is what the line drivers (``serial_mount`` and friends) use. It renders an
entry's template, sends it through the :class:`~.bus.Bus`, and returns the reply's fields
decoded (``value`` back in the entry's own units). It applies the profile's error rules:

- a reply in the device's error form raises ``DeviceRefused`` with the reason (the
  ``message`` field, or the ``[error_codes]`` text for the ``error`` code);
- a command without a reply is followed by ``entry.error`` (the error query) when the profile
  has one, chained into the same message when ``link.chain`` is set;
- a silent device, a reply cut short or a garbled reply is retried ``link.retries`` times, then
  raised as ``DeviceTimeout`` or ``BadReply``.

Late replies discarded on the way are reported as notices (:meth:`take_notices`).
"""

from __future__ import annotations

import math
import threading
from collections.abc import Mapping

from aligner.errors import BadReply, DeviceRefused, DeviceTimeout, Disconnected, InputError

from .bus import Bus, Expect, Outcome, Pending, detach
from .profile import DeviceProfile, Entry

__all__ = ["LineChannel"]

_MAX_NOTICES = 200


class LineChannel:
    """One device (profile + address) on a bus; thread-safe (the bus serialises exchanges)."""

    def __init__(self, bus: Bus, profile: DeviceProfile, *, name: str | None = None) -> None:
        self.bus = bus
        self.profile = profile
        self.name = name or profile.name
        self.context = {"addr": profile.address or "", "axis": profile.axis_id or ""}
        self._notices: list[str] = []
        self._notice_lock = threading.Lock()
        self._closed = False

    # -- notices ---------------------------------------------------------------------------

    def note(self, text: str) -> None:
        """Record a notice (a discarded late reply, an unsolicited message)."""
        with self._notice_lock:
            if len(self._notices) < _MAX_NOTICES:
                self._notices.append(f"{self.name}: {text}")

    def take_notices(self) -> list[str]:
        """The notices since the last call (oldest first), for the engine's log."""
        with self._notice_lock:
            out, self._notices = self._notices, []
        return out

    # -- messages --------------------------------------------------------------------------

    def where(self, key: str = "") -> str:
        """Prefix of messages: the device (and port) and the profile key."""
        base = f"{self.name} on {self.bus.where}"
        return f"{base} ({self.profile.source}: {key})" if key else base

    def entry(self, name: str) -> Entry:
        """The profile entry ``name`` (a ``KeyError`` is a programming error)."""
        return self.profile.entries[name]

    def _expect(
        self,
        entry: Entry,
        reply: Entry | None = None,
        *,
        side: str = "write",
        not_before_s: float = 0.0,
        context: Mapping[str, str] | None = None,
    ) -> Expect:
        source = reply or entry
        return Expect(
            reply=source.reply if side == "read" else source.write_reply,
            error=self.profile.link.error_reply,
            context=context or self.context,
            encoding=self.profile.link.encoding,
            not_before_s=not_before_s,
            length=source.reply_len if side == "read" else None,
        )

    def _wire(self, entry: Entry, text: str) -> tuple[bytes, bytes | None]:
        link = self.profile.link
        try:
            payload = text.encode(link.encoding)
            end = None if entry.send_end is None else entry.send_end.encode(link.encoding)
        except UnicodeEncodeError as exc:
            raise InputError(
                f"{self.profile.where('link.encoding')}: cannot send {text!r} ({exc})"
            ) from None
        return payload, end

    def _render(
        self, entry: Entry, side: str, values: Mapping[str, object], ctx: Mapping[str, str]
    ) -> str:
        template = entry.write if side == "write" else entry.read
        assert template is not None  # the profile checks were made at load time
        try:
            return template.render(ctx, values)
        except ValueError as exc:
            raise InputError(
                f"{self.profile.where(f'{entry.key}.{side}')}: cannot write {dict(values)} ({exc})"
            ) from None

    # -- operations ------------------------------------------------------------------------

    def read(self, name: str, *, channel: str | None = None) -> dict[str, object]:
        """Send ``entry.NAME.read``; return the reply's fields (``value`` in the entry's units);
        ``channel`` fills ``{channel}``."""
        entry = self.entry(name)
        ctx = self.context if channel is None else {**self.context, "channel": channel}
        text = self._render(entry, "read", {}, ctx)
        expect = self._expect(entry, side="read", context=ctx)
        return self._decoded(entry, self._transact(entry, text, expect, None, None))

    def write(
        self,
        name: str,
        *,
        value: float | None = None,
        state: str | None = None,
        timeout_s: float | None = None,
        not_before_s: float = 0.0,
        retries: int | None = None,
    ) -> dict[str, object]:
        """Send ``entry.NAME.write`` with ``value`` (entry units) or ``state`` (a meaning);
        return the reply's fields, or {} for a command without a reply (then checked with the
        error query when the profile has one)."""
        entry = self.entry(name)
        text = self._render(entry, "write", self.values(entry, value, state), self.context)
        if entry.write_reply is None:
            self._silent(entry, text, timeout_s, retries)
            return {}
        expect = self._expect(entry, not_before_s=not_before_s)
        return self._decoded(entry, self._transact(entry, text, expect, timeout_s, retries))

    def values(self, entry: Entry, value: float | None, state: str | None) -> dict[str, object]:
        """Template values for a write: ``value`` checked against the limits and turned into
        device units, ``state`` into its code."""
        out: dict[str, object] = {}
        if value is not None:
            if entry.limits is not None and not entry.limits[0] <= value <= entry.limits[1]:
                low, high = entry.limits
                raise InputError(
                    f"{self.name}: {value:g} is outside {low:g} to {high:g} "
                    f"({self.profile.where(entry.key + '.limits')})"
                )
            out["value"] = entry.to_device(value)
        if state is not None:
            out["state"] = entry.code(state)
        return out

    def expected(self, name: str, value: float) -> float:
        """What a read-back of ``value`` should give: the value on the device's grid."""
        entry = self.entry(name)
        return entry.from_device(entry.to_device(value))

    def start_motion(self, name: str, value: float | None = None) -> Pending:
        """Send a write whose reply comes when the motion ends; :meth:`finish` collects it."""
        entry = self.entry(name)
        text = self._render(entry, "write", self.values(entry, value, None), self.context)
        self._check_open()
        pending = Pending(self._expect(entry))
        self.bus.send_pending(*self._wire(entry, text), pending, self.note)
        return pending

    def finish(self, name: str, pending: Pending, deadline: float) -> dict[str, object] | None:
        """The fields of a pending reply, or None if it did not come by ``deadline``."""
        outcome = self.bus.wait(pending, deadline, self.note)
        if outcome is None:
            return None
        entry = self.entry(name)
        if outcome.kind == "error":
            raise self._refused(entry.key, outcome)
        return self._decoded(entry, outcome.fields)

    def meanings(self, name: str, fields: Mapping[str, object]) -> frozenset[str]:
        """The meanings of a state reply (``BadReply`` for an unknown code)."""
        entry = self.entry(name)
        try:
            return entry.meanings(fields)
        except ValueError as exc:
            raise BadReply(
                f"{self.where(entry.key + '.states')}: {exc}; add the code to the states table"
            ) from None

    def check_errors(self, after: str) -> None:
        """Ask the error query (``entry.error``); raise ``DeviceRefused`` for an error."""
        entry = self.entry("error")
        text = self._render(entry, "read", {}, self.context)
        fields = self._transact(entry, text, self._expect(entry, side="read"), None, None)
        self._raise_error(entry, fields, after)

    def _raise_error(self, entry: Entry, fields: Mapping[str, object], after: str) -> None:
        code = str(fields.get("error"))
        if code not in entry.ok:
            reason = fields.get("message") or self.profile.error_codes.get(code) or f"code {code}"
            raise DeviceRefused(
                f"{self.where()}: the device refused {after!r}: {reason} (error {code}; "
                f"{self.profile.source}: entry.error)"
            )

    def _silent(
        self, entry: Entry, text: str, timeout_s: float | None, retries: int | None
    ) -> None:
        link = self.profile.link
        errors = self.profile.entries.get("error")
        if errors is not None and link.chain:
            query = self._render(errors, "read", {}, self.context)
            expect = self._expect(entry, errors, side="read")
            fields = self._transact(entry, text + link.chain + query, expect, timeout_s, retries)
            self._raise_error(errors, fields, text)
            return
        self._transact(entry, text, self._expect(entry), timeout_s, retries)
        if errors is not None:
            self.check_errors(after=text)

    def stream(self, count: int, deadline: float) -> list[dict[str, object]]:
        """The next ``count`` lines of ``entry.stream`` that began after this call.

        What has arrived is dropped, then the rest of a line being received and the line of the
        window in progress, so every line returned covers a window that began after the call.
        """
        entry = self.entry("stream")
        expect = self._expect(entry, side="read")
        self._check_open()
        lines: list[dict[str, object]] = []
        with self.bus.listen("a free-running count") as framer:
            framer.poll()
            dropped = framer.clear()
            skip = 2 if dropped and not dropped.endswith(framer.framing.reply_end) else 1
            while len(lines) < count:
                item = framer.next(deadline)
                if item is None:
                    raise DeviceTimeout(
                        f"{self.where('counter.window_s')}: {len(lines)} of {count} lines came "
                        "in time; check the cable and that the counter is running"
                    )
                text = item.decode(expect.encoding, errors="replace")
                fields, kind = expect.classify(text)
                if kind == "error":  # even in a window begun before: it overlaps this dwell
                    raise self._refused(entry.key, Outcome(kind, fields or {}, text))
                if skip:
                    skip -= 1
                    continue
                if fields is None:
                    raise BadReply(
                        f"{self.where(entry.key + '.reply')}: the line {text!r} does not have "
                        f"the form {entry.reply.text if entry.reply else ''!r}"
                    )
                lines.append(dict(fields))
        return lines

    def _check_open(self) -> None:
        if self._closed:
            raise Disconnected(f"{self.where()}: the device was closed; open it again")

    def _transact(
        self,
        entry: Entry,
        text: str,
        expect: Expect,
        timeout_s: float | None,
        retries: int | None,
    ) -> Mapping[str, object]:
        self._check_open()
        link = self.profile.link
        timeout = timeout_s or entry.timeout_s or link.reply_timeout_s
        wire, end = self._wire(entry, text)
        failures: list[Outcome] = []
        for _ in range(1 + (link.retries if retries is None else retries)):
            outcome = self.bus.exchange(wire, end, expect, timeout, self.note)
            if outcome.kind in ("reply", "done"):
                return outcome.fields
            if outcome.kind == "error":
                raise self._refused(entry.key, outcome, text)
            failures.append(outcome)
        raise self._give_up(entry, text, expect, timeout, failures)

    def _refused(self, key: str, outcome: Outcome, text: str = "") -> DeviceRefused:
        code = outcome.fields.get("error")
        reason = (
            outcome.fields.get("message")
            or (self.profile.error_codes.get(str(code)) if code is not None else None)
            or (f"code {code}" if code is not None else outcome.text)
        )
        what = f" {text!r}" if text else ""
        return DeviceRefused(
            f"{self.where()}: the device refused{what}: {reason} (reply {outcome.text!r}; "
            f"{self.profile.source}: {key})"
        )

    def _give_up(
        self, entry: Entry, text: str, expect: Expect, timeout: float, failures: list[Outcome]
    ) -> Exception:
        link = self.profile.link
        tries = f"{len(failures)} attempt(s)"
        heard = [f for f in failures if f.kind != "silent"]
        if not heard:
            return DeviceTimeout(
                f"{self.where()}: no reply to {text!r} within {timeout:g} s ({tries}); check "
                f"the cable, the power, the port and the baud rate (link.baud = {link.baud} in "
                f"{self.profile.source}; the command is {entry.key})"
            )
        last = heard[-1]
        if last.kind == "partial":
            return BadReply(
                f"{self.where()}: the reply to {text!r} was cut short ({last.raw!r}, {tries}); "
                f"check that link.reply_end ({link.reply_end!r}) in {self.profile.source} is "
                "the device's end marker, and the baud rate"
            )
        form = expect.reply.text if expect.reply is not None else "(none: a prompt or nothing)"
        return BadReply(
            f"{self.where()}: the reply {last.raw!r} to {text!r} does not have the form "
            f"{form!r} ({self.profile.source}: {entry.key}; {tries}); check the baud rate "
            f"({link.baud}), link.encoding and the reply template"
        )

    def _decoded(self, entry: Entry, fields: Mapping[str, object]) -> dict[str, object]:
        out = dict(fields)
        if "value" in out and isinstance(out["value"], int | float):
            value = entry.from_device(out["value"])
            if not math.isfinite(value):
                raise BadReply(f"{self.where(entry.key)}: the value {out['value']!r} is not finite")
            out["value"] = value
        return out

    def close(self) -> None:
        """Release the device; the port closes with its last device."""
        if self._closed:
            return
        self._closed = True
        if self.bus.key:
            detach(self.bus)
        else:
            self.bus.close()
