r"""Line protocol: device profiles (TOML) and a command/reply channel over any byte port.

A *device profile* tells the generic drivers how to talk to one kind of controller that
speaks a text protocol of one command line and one reply line. It says nothing about the
port: the same profile works over a serial port, a USB adapter, ``rfc2217://`` or
``socket://``. Two commented examples ship in ``drivers/profiles/``.

Safety first: a mount that turns a polarizer or a shutter that opens can send light onto a
single-photon detector or out of the bench. Try a new profile with the beam blocked and the
detectors off, and follow your local laser-safety rules and your laser safety officer.

Writing a profile
=================

Tables and keys (anything else is refused, with the list of allowed keys)::

    [device]
    name        = "bench-rotator"   # shown in every message (default: the file name)
    description = "..."             # free text, optional

    [link]
    baud            = 115200        # serial bit rate; ignored by socket:// ports
    terminator      = "\r\n"        # ends every reply line (TOML escapes: \r, \n, \t)
    send_terminator = "\r"          # ends every command; default: same as terminator
    encoding        = "ascii"       # any Python codec name
    reply_timeout_s = 0.5           # s to wait for one reply line (counts add the gate time)
    move_timeout_s  = 60.0          # s a move or a homing may take before it is stopped
    poll_interval_s = 0.05          # s between status polls while a move runs
    retries         = 2             # extra attempts after a timeout, a partial or garbled line

    [axis]                          # rotation mounts only
    steps_per_degree       = 1000.0 # controller steps (or encoder counts) per degree, > 0
    sense                  = 1      # +1: steps grow with the reading; -1: they fall
    position_tolerance_deg = 0.002  # allowed |read back - commanded| after a move
                                    # (default: 1.5 steps)
    travel_deg             = [-170.0, 170.0]  # optional; moves outside are refused

    [counter]                       # counters only
    channels = 2                    # 1: post-selected; 2: post-selected, reference

    [commands]                      # what to send; {field} is filled in, {{ }} is a brace
    move         = "GO {steps}"     # required for a mount; {steps} is a whole number
    query        = "AT?"            # required for a mount: asks for the position
    home         = "REF"            # optional: drive to the reference position
    stop         = "HALT"           # optional: stop at once
    status       = "BUSY?"          # optional: is a move still running?
    count        = "GATE {dwell_ms}"  # counters: {dwell_ms} (whole ms) or {dwell_s} (s)
    shutter_open = "BEAM ON"        # shutters
    shutter_shut = "BEAM OFF"
    pointer_read = "MEAN? {dwell_ms}" # pointer readers, same fields as count

    [replies]                       # Python regular expressions, one per command above
    move   = 'OK'                   # must match the WHOLE reply line (outer spaces ignored)
    query  = 'AT (?P<steps>-?\d+)'  # named group "steps" required
    status = 'BUSY (?P<moving>[01])'# group "moving": a whole number, non-zero = moving
    count  = 'COUNTS (?P<ch1>\d+) (?P<ch2>\d+)'  # groups ch1 (and ch2 with 2 channels)
    pointer_read = 'MEAN (?P<mean>\S+) (?P<sem>\S+)'  # groups mean and sem (pointer units)
    error  = 'ERR (?P<code>\d+) ?(?P<message>.*)'  # optional: an error reply, any command

Write regular expressions in TOML *literal* strings ('...') so that backslashes stay as they
are. Every command needs a reply pattern of the same name and every pattern (but ``error``) a
command.

Opening a device with a profile
===============================

``open_mount("/dev/ttyUSB0", profile="my-rotator.toml")`` (also ``COM3``, ``rfc2217://host:port``,
``socket://host:port``); a shipped profile can be named without its path
(``profile="example-mount"``); ``timeout=``, ``retries=`` and ``baud=`` override the file.
``open_counter``, ``open_shutter`` and ``open_pointer`` work the same way.

How the drivers use it
======================

- A move sends ``move`` and waits up to ``move_timeout_s`` for its reply. With a ``status``
  command the reply is only an acknowledgement, and the driver polls ``status`` until the
  move is over; without one, the ``move`` reply itself must mean "arrived". Then ``query``
  reads the position back; a disagreement beyond ``position_tolerance_deg`` is an error.
- Readings and steps: ``steps = round(sense * reading_deg * steps_per_degree)``.
- Before each attempt the input buffer is emptied. A silent device, a line cut short (no
  terminator in time) or a line that matches neither the reply nor the error pattern is
  retried ``retries`` times, then raised as ``DeviceTimeout`` (nothing came) or ``BadReply``.
  Commands are therefore sent more than once: keep them idempotent (absolute moves, not
  relative ones). An error reply is never retried: it raises ``DeviceRefused`` with the
  device's text. A port that fails raises ``Disconnected``.
"""

from __future__ import annotations

import codecs
import math
import re
import string
import threading
import tomllib
from collections.abc import Callable, Iterator, Mapping
from contextlib import contextmanager, suppress
from dataclasses import dataclass
from pathlib import Path
from types import MappingProxyType
from typing import Any, NoReturn, Protocol, TypeVar

import serial

from aligner.errors import BadReply, DeviceRefused, DeviceTimeout, Disconnected, InputError

__all__ = [
    "PROFILE_DIR",
    "DeviceProfile",
    "LineChannel",
    "SerialLike",
    "load_profile",
]

T = TypeVar("T")

#: what a failing port raises (pyserial lets termios errors through, e.g. on a hung-up tty)
try:
    from termios import error as _TermiosError

    PORT_ERRORS: tuple[type[Exception], ...] = (serial.SerialException, OSError, _TermiosError)
except ImportError:  # not a POSIX system
    PORT_ERRORS = (serial.SerialException, OSError)

#: Folder of the example profiles shipped with the package.
PROFILE_DIR = Path(__file__).with_name("profiles")

#: command -> template fields it may use
_COMMAND_FIELDS: dict[str, frozenset[str]] = {
    "move": frozenset({"steps"}),
    "query": frozenset(),
    "home": frozenset(),
    "stop": frozenset(),
    "status": frozenset(),
    "count": frozenset({"dwell_ms", "dwell_s"}),
    "shutter_open": frozenset(),
    "shutter_shut": frozenset(),
    "pointer_read": frozenset({"dwell_ms", "dwell_s"}),
}
_TABLE_KEYS: dict[str, frozenset[str]] = {
    "device": frozenset({"name", "description"}),
    "link": frozenset(
        {
            "baud",
            "terminator",
            "send_terminator",
            "encoding",
            "reply_timeout_s",
            "move_timeout_s",
            "poll_interval_s",
            "retries",
        }
    ),
    "axis": frozenset({"steps_per_degree", "sense", "position_tolerance_deg", "travel_deg"}),
    "counter": frozenset({"channels"}),
    "commands": frozenset(_COMMAND_FIELDS),
    "replies": frozenset(_COMMAND_FIELDS) | {"error"},
}
#: reply -> named groups it must have
_REPLY_GROUPS: dict[str, frozenset[str]] = {
    "query": frozenset({"steps"}),
    "status": frozenset({"moving"}),
    "count": frozenset({"ch1"}),
    "pointer_read": frozenset({"mean", "sem"}),
}


def _allowed(names: frozenset[str]) -> str:
    return ", ".join(sorted(names))


class _ProfileReader:
    """Typed access to a parsed profile; every complaint names the file and the key."""

    def __init__(self, source: str, data: Mapping[str, Any]) -> None:
        self.source = source
        self.data = data
        unknown = set(data) - set(_TABLE_KEYS)
        if unknown:
            self.fail(
                sorted(unknown)[0], f"unknown table; allowed: {_allowed(frozenset(_TABLE_KEYS))}"
            )
        for table, keys in _TABLE_KEYS.items():
            section = data.get(table, {})
            if not isinstance(section, Mapping):
                self.fail(table, "must be a table ([" + table + "])")
            extra = set(section) - keys
            if extra:
                self.fail(f"{table}.{sorted(extra)[0]}", f"unknown key; allowed: {_allowed(keys)}")

    def fail(self, key: str, problem: str) -> NoReturn:
        raise InputError(f"{self.source}: {key}: {problem}")

    def get(self, table: str, key: str, default: Any) -> Any:
        return self.data.get(table, {}).get(key, default)

    def text(self, table: str, key: str, default: str | None) -> str:
        value = self.get(table, key, default)
        if value is None:
            self.fail(f"{table}.{key}", "is required (a string)")
        if not isinstance(value, str) or not value:
            self.fail(f"{table}.{key}", f"must be a non-empty string, got {value!r}")
        return value

    def number(
        self, table: str, key: str, default: float | None, *, low: float, integer: bool = False
    ) -> float:
        value = self.get(table, key, default)
        kind = "a whole number" if integer else "a number"
        ok_type = isinstance(value, int) if integer else isinstance(value, int | float)
        if isinstance(value, bool) or not ok_type or not math.isfinite(value) or value < low:
            self.fail(f"{table}.{key}", f"must be {kind} >= {low:g}, got {value!r}")
        return value


@dataclass(frozen=True, eq=False)
class DeviceProfile:
    """A validated device profile (see the module docstring for the file format).

    ``commands`` maps command names to templates, ``replies`` command names to compiled
    patterns; ``error`` is the compiled error pattern or None. Times in s, angles in deg.
    """

    name: str
    source: str
    baud: int
    terminator: str
    send_terminator: str
    encoding: str
    reply_timeout_s: float
    move_timeout_s: float
    poll_interval_s: float
    retries: int
    steps_per_degree: float
    sense: int
    position_tolerance_deg: float
    travel_deg: tuple[float, float] | None
    channels: int
    commands: Mapping[str, str]
    replies: Mapping[str, re.Pattern[str]]
    error: re.Pattern[str] | None

    @classmethod
    def from_mapping(cls, data: Mapping[str, Any], source: str = "<profile>") -> DeviceProfile:
        """Validate parsed TOML ``data``; ``source`` (a file name) prefixes every error."""
        r = _ProfileReader(source, data)
        encoding = r.text("link", "encoding", "ascii")
        try:
            codecs.lookup(encoding)
        except LookupError:
            r.fail("link.encoding", f"unknown codec {encoding!r}; use e.g. ascii, latin-1, utf-8")
        terminator = r.text("link", "terminator", None)
        steps_per_degree = r.number("axis", "steps_per_degree", 1.0, low=0.0)
        if steps_per_degree == 0:
            r.fail("axis.steps_per_degree", "must be > 0")
        sense = r.get("axis", "sense", 1)
        if sense not in (1, -1) or isinstance(sense, bool):
            r.fail("axis.sense", f"must be 1 or -1, got {sense!r}")
        channels = r.get("counter", "channels", 1)
        if channels not in (1, 2) or isinstance(channels, bool):
            r.fail("counter.channels", f"must be 1 or 2, got {channels!r}")
        commands = cls._read_commands(r)
        replies, error = cls._read_replies(r, commands, channels)
        return cls(
            name=r.text("device", "name", Path(source).stem or "device"),
            source=source,
            baud=int(r.number("link", "baud", 9600, low=1, integer=True)),
            terminator=terminator,
            send_terminator=r.text("link", "send_terminator", terminator),
            encoding=encoding,
            reply_timeout_s=r.number("link", "reply_timeout_s", 1.0, low=0.001),
            move_timeout_s=r.number("link", "move_timeout_s", 60.0, low=0.001),
            poll_interval_s=r.number("link", "poll_interval_s", 0.05, low=0.0),
            retries=int(r.number("link", "retries", 2, low=0, integer=True)),
            steps_per_degree=float(steps_per_degree),
            sense=sense,
            position_tolerance_deg=r.number(
                "axis", "position_tolerance_deg", 1.5 / steps_per_degree, low=0.0
            ),
            travel_deg=cls._read_travel(r),
            channels=channels,
            commands=MappingProxyType(commands),
            replies=MappingProxyType(replies),
            error=error,
        )

    @staticmethod
    def _read_commands(r: _ProfileReader) -> dict[str, str]:
        commands: dict[str, str] = {}
        for key in r.data.get("commands", {}):
            template = r.text("commands", key, None)
            try:
                fields = {f for _, f, _, _ in string.Formatter().parse(template) if f is not None}
            except ValueError as exc:
                r.fail(f"commands.{key}", f"bad template {template!r} ({exc}); write {{{{ for {{")
            allowed = _COMMAND_FIELDS[key]
            if fields - allowed:
                r.fail(
                    f"commands.{key}",
                    f"unknown field {{{sorted(fields - allowed)[0]}}}; "
                    f"allowed: {_allowed(allowed) or 'none'}",
                )
            try:
                template.format(steps=0, dwell_ms=1, dwell_s=0.001)
            except (ValueError, KeyError, IndexError) as exc:
                r.fail(f"commands.{key}", f"bad template {template!r} ({exc})")
            if key == "move" and "steps" not in fields:
                r.fail("commands.move", "must contain {steps}")
            commands[key] = template
        return commands

    @staticmethod
    def _read_replies(
        r: _ProfileReader, commands: Mapping[str, str], channels: int
    ) -> tuple[dict[str, re.Pattern[str]], re.Pattern[str] | None]:
        compiled: dict[str, re.Pattern[str]] = {}
        for key in r.data.get("replies", {}):
            text = r.text("replies", key, None)
            try:
                compiled[key] = re.compile(text)
            except re.error as exc:
                r.fail(f"replies.{key}", f"is not a valid regular expression ({exc})")
            needed = set(_REPLY_GROUPS.get(key, frozenset()))
            if key == "count" and channels == 2:
                needed.add("ch2")
            missing = needed - set(compiled[key].groupindex)
            if missing:
                r.fail(
                    f"replies.{key}",
                    f"needs the named group(s) {_allowed(frozenset(missing))}, "
                    "e.g. (?P<" + sorted(missing)[0] + r">-?\d+)",
                )
        for key in commands:
            if key not in compiled:
                r.fail(f"replies.{key}", f"is missing: commands.{key} needs a reply pattern")
        for key in compiled:
            if key != "error" and key not in commands:
                r.fail(f"commands.{key}", f"is missing: replies.{key} has no command")
        error = compiled.pop("error", None)
        return compiled, error

    @staticmethod
    def _read_travel(r: _ProfileReader) -> tuple[float, float] | None:
        travel = r.get("axis", "travel_deg", None)
        if travel is None:
            return None
        if (
            not isinstance(travel, list)
            or len(travel) != 2
            or not all(isinstance(v, int | float) and not isinstance(v, bool) for v in travel)
            or not travel[0] < travel[1]
        ):
            r.fail("axis.travel_deg", f"must be [low, high] in deg with low < high, got {travel!r}")
        return float(travel[0]), float(travel[1])

    def has(self, command: str) -> bool:
        """True when the profile defines ``command`` (e.g. ``"home"``)."""
        return command in self.commands

    def require(self, *commands: str, role: str) -> None:
        """Raise ``InputError`` unless every command needed for ``role`` is defined."""
        for command in commands:
            if command not in self.commands:
                raise InputError(
                    f"{self.source}: commands.{command}: is required for a {role}; "
                    f"the profile defines: {_allowed(frozenset(self.commands)) or 'nothing'}"
                )

    def to_steps(self, reading_deg: float) -> int:
        """Controller steps for a reading (deg): ``round(sense * reading * steps_per_degree)``."""
        return round(self.sense * reading_deg * self.steps_per_degree)

    def to_degrees(self, steps: int) -> float:
        """Reading (deg) for controller steps, the inverse of ``to_steps``."""
        return self.sense * steps / self.steps_per_degree


def load_profile(profile: str | Path) -> DeviceProfile:
    """Load a profile file, or a shipped one by name (``"example-mount"``)."""
    path = Path(profile)
    if not path.suffix and not path.exists() and (PROFILE_DIR / f"{path.name}.toml").exists():
        path = PROFILE_DIR / f"{path.name}.toml"
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        shipped = _allowed(frozenset(p.stem for p in PROFILE_DIR.glob("*.toml")))
        raise InputError(
            f"{path}: no such profile file; give a path or a shipped profile: {shipped}"
        ) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: cannot read the profile ({exc})") from None
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{path}: not valid TOML ({exc})") from None
    return DeviceProfile.from_mapping(data, str(path))


class SerialLike(Protocol):
    """The part of ``serial.Serial`` a ``LineChannel`` uses (any byte port will do)."""

    timeout: float | None

    def write(self, data: bytes, /) -> int | None: ...

    def read_until(self, expected: bytes = ..., size: int | None = ...) -> bytes: ...

    def reset_input_buffer(self) -> None: ...

    def close(self) -> None: ...


class LineChannel:
    """Sends one command line and reads one reply line, with the profile's retries.

    ``transact`` is thread-safe (one exchange at a time). pyserial and OS errors never leave
    this class: they become ``Disconnected`` or ``DeviceTimeout``.
    """

    def __init__(
        self, port: SerialLike, profile: DeviceProfile, *, name: str | None = None
    ) -> None:
        self.port = port
        self.profile = profile
        self.name = name or profile.name
        self._lock = threading.Lock()
        self._closed = False
        self._reply_end = profile.terminator.encode(profile.encoding)

    def _where(self) -> str:
        port = getattr(self.port, "port", None) or getattr(self.port, "name", None)
        return f"{self.name} on {port}" if port else self.name

    @contextmanager
    def _port_errors(self, command: str) -> Iterator[None]:
        """Map pyserial and OS errors, once, into the aligner error tree."""
        try:
            yield
        except serial.SerialTimeoutException as exc:
            raise DeviceTimeout(
                f"{self._where()}: sending {command!r} timed out ({exc}); "
                "check the cable and the flow-control settings"
            ) from exc
        except PORT_ERRORS as exc:
            raise Disconnected(
                f"{self._where()}: the port failed during {command!r} ({exc}); check the cable "
                "and the power, that the port still exists, and that no other program uses it"
            ) from exc

    def transact(
        self, command: str, *, timeout_s: float | None = None, **fields: Any
    ) -> dict[str, str]:
        """Send profile command ``command`` with template ``fields``; return the reply's groups.

        ``timeout_s`` (s) replaces the profile's ``reply_timeout_s`` for this exchange.
        """
        p = self.profile
        text = p.commands[command].format(**fields)
        try:
            wire = (text + p.send_terminator).encode(p.encoding)
        except UnicodeEncodeError as exc:
            raise InputError(f"{p.source}: link.encoding: cannot send {text!r} ({exc})") from None
        timeout = p.reply_timeout_s if timeout_s is None else timeout_s
        failures: list[tuple[str, bytes]] = []
        with self._lock, self._port_errors(text):
            if self._closed:
                raise Disconnected(
                    f"{self._where()}: the channel was closed; open the device again"
                )
            for _ in range(p.retries + 1):
                self.port.reset_input_buffer()
                self.port.timeout = timeout
                self.port.write(wire)
                raw = self.port.read_until(self._reply_end)
                kind, line = self._classify(raw)
                if kind == "line":
                    if p.error is not None and (bad := p.error.fullmatch(line)):
                        detail = bad.groupdict().get("message") or line
                        raise DeviceRefused(
                            f"{self._where()}: the device refused {text!r}: {detail} "
                            f"(reply {line!r})"
                        )
                    if match := p.replies[command].fullmatch(line):
                        return match.groupdict()
                    kind = "garbage"
                failures.append((kind, raw))
        raise self._give_up(command, text, timeout, failures)

    def transact_gated(self, command: str, dwell_s: float) -> dict[str, str]:
        """``transact`` for a gated command: fills {dwell_ms}/{dwell_s} and waits the gate too."""
        dwell_ms = round(dwell_s * 1000.0)
        if dwell_ms < 1 and "{dwell_ms" in self.profile.commands[command]:
            raise InputError(
                f"dwell_s = {dwell_s:g} s is below the 1 ms step of commands.{command} in "
                f"{self.profile.source}; use at least 0.001 s"
            )
        return self.transact(
            command,
            timeout_s=dwell_s + self.profile.reply_timeout_s,
            dwell_ms=dwell_ms,
            dwell_s=dwell_s,
        )

    def group(
        self, groups: Mapping[str, str], command: str, key: str, convert: Callable[[str], T]
    ) -> T:
        """Convert the named group ``key`` of a ``command`` reply, or raise ``BadReply``."""
        value = groups.get(key)
        try:
            return convert(value)  # type: ignore[arg-type]
        except (TypeError, ValueError):
            raise BadReply(
                f"{self._where()}: group {key!r} of the {command!r} reply is {value!r}, not "
                f"a {getattr(convert, '__name__', 'value')}; check replies.{command} in "
                f"{self.profile.source}"
            ) from None

    def _classify(self, raw: bytes) -> tuple[str, str]:
        if not raw:
            return "silent", ""
        if not raw.endswith(self._reply_end):
            return "partial", ""
        try:
            return "line", raw[: -len(self._reply_end)].decode(self.profile.encoding).strip()
        except UnicodeDecodeError:
            return "garbage", ""

    def _give_up(
        self, command: str, text: str, timeout: float, failures: list[tuple[str, bytes]]
    ) -> Exception:
        p = self.profile
        tries = f"{len(failures)} attempt(s)"
        heard = [(kind, raw) for kind, raw in failures if kind != "silent"]
        if not heard:
            return DeviceTimeout(
                f"{self._where()}: no reply to {text!r} within {timeout:g} s ({tries}); check "
                f"the cable, the power, the port and the baud rate (profile: {p.baud})"
            )
        kind, raw = heard[-1]
        if kind == "partial":
            return BadReply(
                f"{self._where()}: the reply to {text!r} was cut short ({raw!r}, {tries}); "
                f"check that link.terminator ({p.terminator!r}) in {p.source} is the device's "
                "line ending, and the baud rate"
            )
        return BadReply(
            f"{self._where()}: the reply {raw!r} to {text!r} does not match replies.{command} "
            f"({p.replies[command].pattern!r}) in {p.source} ({tries}); check the baud rate "
            f"({p.baud}), link.encoding and the reply pattern"
        )

    def close(self) -> None:
        """Close the port; a port already gone is not an error here."""
        with self._lock:
            self._closed = True
            # the device is gone either way; closing must not raise
            with suppress(*PORT_ERRORS):
                self.port.close()
