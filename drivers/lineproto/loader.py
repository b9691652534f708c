"""Reading device profiles: TOML in, a checked :class:`~.profile.DeviceProfile` out.

Every error is an ``InputError`` that names the file, the device and the key, and says what is
allowed.
"""

from __future__ import annotations

import codecs as _codecs
import math
import re
import tomllib
from collections.abc import Mapping
from pathlib import Path
from types import MappingProxyType
from typing import Any, NoReturn

from aligner.errors import InputError

from .profile import AxisSettings, CounterSettings, DeviceProfile, Entry, Link
from .template import CONTEXT_FIELDS, VALUE_FIELDS, Template

__all__ = ["FORMAT", "PROFILE_DIR", "load_profile", "parse_profile", "shipped_profiles"]

#: The profile format this version reads; a file declaring a newer one is refused.
FORMAT = 1
#: Folder of the example profiles shipped with the package.
PROFILE_DIR = Path(__file__).resolve().parent.parent / "profiles"

_TABLES: dict[str, frozenset[str]] = {
    "device": frozenset({"name", "description", "address", "axis", "init"}),
    "link": frozenset(
        {
            "baud",
            "encoding",
            "send_end",
            "reply_end",
            "echo",
            "prompt",
            "chain",
            "gap_s",
            "reply_timeout_s",
            "late_reply_s",
            "retries",
            "error_reply",
        }
    ),
    "axis": frozenset(
        {"needs_home", "tolerance_deg", "move_timeout_s", "poll_s", "settle_s", "home_deg"}
    ),
    "counter": frozenset({"channels", "channel_ids", "window_s", "poll_s"}),
    "pointer": frozenset({"samples"}),
}
_ENTRY_KEYS = frozenset(
    {
        "read",
        "reply",
        "write",
        "write_reply",
        "scale",
        "offset",
        "limits",
        "states",
        "default_state",
        "masks",
        "done",
        "timeout_s",
        "send_end",
        "reply_len",
        "ok",
    }
)
#: entry name -> the meanings its ``states`` / ``masks`` may name
_MEANINGS: dict[str, frozenset[str]] = {
    "status": frozenset({"ready", "moving", "not_referenced", "fault"}),
    "counting": frozenset({"counting", "idle"}),
    "shutter": frozenset({"open", "shut"}),
}
_MASK_MEANINGS: dict[str, frozenset[str]] = {
    "status": frozenset({"moving", "stopped", "not_referenced", "referenced", "fault"}),
    "counting": frozenset({"counting", "idle"}),
}
#: which entries make which role
_ROLE_ENTRIES = {
    "mount": ("position",),
    "counter": ("count", "gate", "stream"),
    "shutter": ("shutter",),
    "pointer": ("pointer",),
}
_MOTION = ("position", "home")


class _Reader:
    """Typed access to a parsed profile; every complaint names file, device and key."""

    def __init__(self, source: str, data: Mapping[str, Any]) -> None:
        self.source = source
        self.data = data
        name = data.get("device", {}).get("name") if isinstance(data.get("device"), dict) else None
        self.name = name if isinstance(name, str) and name else Path(source).stem or "device"

    def fail(self, key: str, problem: str) -> NoReturn:
        raise InputError(f"{self.source}: device {self.name!r}: {key}: {problem}")

    # -- typed getters ---------------------------------------------------------------------

    def table(self, key: str) -> Mapping[str, Any]:
        value = self.data.get(key, {})
        if not isinstance(value, Mapping):
            self.fail(key, f"must be a table ([{key}])")
        return value

    def text(self, table: str, key: str, default: str | None, *, empty: bool = True) -> str:
        value = self.table(table).get(key, default)
        if value is None:
            self.fail(f"{table}.{key}", "is required (a string)")
        if not isinstance(value, str) or (not empty and not value):
            kind = "a string" if empty else "a non-empty string"
            self.fail(f"{table}.{key}", f"must be {kind}, got {value!r}")
        return value

    def flag(self, table: str, key: str, default: bool) -> bool:
        value = self.table(table).get(key, default)
        if not isinstance(value, bool):
            self.fail(f"{table}.{key}", f"must be true or false, got {value!r}")
        return value

    def number(
        self,
        where: str,
        value: Any,
        *,
        low: float | None = None,
        above: float | None = None,
        integer: bool = False,
    ) -> float:
        kind = "a whole number" if integer else "a number"
        ok_type = isinstance(value, int) if integer else isinstance(value, int | float)
        if isinstance(value, bool) or not ok_type or not math.isfinite(value):
            self.fail(where, f"must be {kind}, got {value!r}")
        if low is not None and value < low:
            self.fail(where, f"must be {kind} >= {low:g}, got {value!r}")
        if above is not None and value <= above:
            self.fail(where, f"must be {kind} > {above:g}, got {value!r}")
        return value

    def get_number(self, table: str, key: str, default: float, **limits: Any) -> float:
        return self.number(f"{table}.{key}", self.table(table).get(key, default), **limits)

    def template(self, key: str, text: Any, *, allowed: frozenset[str], replies: bool) -> Template:
        if not isinstance(text, str) or not text:
            self.fail(key, f"must be a non-empty string (a template), got {text!r}")
        try:
            return Template(text, allowed=allowed, replies=replies)
        except ValueError as exc:
            self.fail(key, str(exc))

    # -- the whole profile -----------------------------------------------------------------

    def profile(self) -> DeviceProfile:
        self._check_format()
        link = self._link()
        entries = {name: self._entry(name, raw) for name, raw in self.table("entry").items()}
        counter = self._counter()
        profile = DeviceProfile(
            source=self.source,
            name=self.name,
            description=self.text("device", "description", ""),
            address=self._context("address"),
            axis_id=self._context("axis"),
            init=self._init(entries),
            link=link,
            entries=MappingProxyType(entries),
            error_codes=MappingProxyType(self._error_codes()),
            axis=self._axis(entries),
            counter=counter,
            samples=int(self.get_number("pointer", "samples", 10, low=2, integer=True)),
            roles=frozenset(
                role for role, names in _ROLE_ENTRIES.items() if any(n in entries for n in names)
            ),
        )
        _Checks(self, profile).run()
        return profile

    def _check_format(self) -> None:
        version = self.data.get("format")
        if version is None:
            hint = (
                " (this looks like the earlier layout with [commands] and [replies]; "
                "rewrite it as [entry.NAME] tables)"
                if "commands" in self.data or "replies" in self.data
                else ""
            )
            self.fail("format", f"is required: add format = {FORMAT} at the top{hint}")
        if isinstance(version, bool) or not isinstance(version, int) or version < 1:
            self.fail("format", f"must be a whole number >= 1, got {version!r}")
        if version > FORMAT:
            self.fail(
                "format",
                f"{version} is newer than this aligner reads (format {FORMAT}); "
                "update aligner or use a profile written for this version",
            )
        known = {"format", "entry", "error_codes", *_TABLES}
        unknown = sorted(set(self.data) - known)
        if unknown:
            self.fail(unknown[0], f"unknown table or key; allowed: {', '.join(sorted(known))}")
        for table, keys in _TABLES.items():
            extra = sorted(set(self.table(table)) - keys)
            if extra:
                self.fail(f"{table}.{extra[0]}", f"unknown key; allowed: {', '.join(sorted(keys))}")

    def _context(self, key: str) -> str | None:
        value = self.table("device").get(key)
        if value is None:
            return None
        if isinstance(value, bool) or not isinstance(value, str | int):
            self.fail(f"device.{key}", f"must be a string or a whole number, got {value!r}")
        return str(value)

    def _link(self) -> Link:
        encoding = self.text("link", "encoding", "ascii", empty=False)
        try:
            _codecs.lookup(encoding)
        except LookupError:
            self.fail(
                "link.encoding", f"unknown codec {encoding!r}; use e.g. ascii, latin-1, utf-8"
            )
        reply_end = self.text("link", "reply_end", "\r\n", empty=False)
        late = self.table("link").get("late_reply_s")
        error = self.table("link").get("error_reply")
        return Link(
            baud=int(self.get_number("link", "baud", 9600, low=1, integer=True)),
            encoding=encoding,
            send_end=self.text("link", "send_end", reply_end),
            reply_end=reply_end,
            echo=self.flag("link", "echo", False),
            prompt=self.text("link", "prompt", ""),
            chain=self.text("link", "chain", ""),
            gap_s=self.get_number("link", "gap_s", 0.0, low=0.0),
            reply_timeout_s=self.get_number("link", "reply_timeout_s", 1.0, above=0.0),
            late_reply_s=None if late is None else self.number("link.late_reply_s", late, low=0),
            retries=int(self.get_number("link", "retries", 2, low=0, integer=True)),
            error_reply=None
            if error is None
            else self.template(
                "link.error_reply",
                error,
                allowed=frozenset({"error", "message", "state", "bits"}),
                replies=True,
            ),
        )

    def _entry(self, name: str, raw: Any) -> Entry:
        key = f"entry.{name}"
        if not re.fullmatch(r"[a-z][a-z0-9_]*", name):
            self.fail(key, "entry names are lower-case words (letters, digits, _)")
        if not isinstance(raw, Mapping):
            self.fail(key, f"must be a table ([{key}])")
        extra = sorted(set(raw) - _ENTRY_KEYS)
        if extra:
            self.fail(
                f"{key}.{extra[0]}", f"unknown key; allowed: {', '.join(sorted(_ENTRY_KEYS))}"
            )
        replies = frozenset(VALUE_FIELDS)
        commands = frozenset({"value", "state"})
        templates = {
            k: self.template(
                f"{key}.{k}", raw[k], allowed=replies if "reply" in k else commands, replies=True
            )
            for k in ("read", "reply", "write", "write_reply")
            if k in raw
        }
        for k in ("read", "write"):
            if k in templates and templates[k].fields - commands - CONTEXT_FIELDS:
                self.fail(f"{key}.{k}", "commands take only {value}, {state} and context fields")
        if "read" in templates and "reply" not in templates:
            self.fail(f"{key}.reply", "is missing: a read needs the template of its reply")
        if "reply" in templates and "read" not in templates and name != "stream":
            self.fail(f"{key}.read", "is missing: a reply template needs the command it answers")
        if "write_reply" in templates and "write" not in templates:
            self.fail(f"{key}.write", "is missing: write_reply needs the command it answers")
        if name == "stream" and set(templates) != {"reply"}:
            self.fail(key, "a stream has only a reply template (the line the device sends)")
        scale = self.number(f"{key}.scale", raw.get("scale", 1.0))
        if scale == 0:
            self.fail(f"{key}.scale", "must not be 0 (device units per unit of the value)")
        timeout = raw.get("timeout_s")
        reply_len = raw.get("reply_len")
        send_end = raw.get("send_end")
        if send_end is not None and not isinstance(send_end, str):
            self.fail(f"{key}.send_end", f"must be a string, got {send_end!r}")
        return Entry(
            name=name,
            scale=float(scale),
            offset=float(self.number(f"{key}.offset", raw.get("offset", 0.0))),
            limits=self._pair(f"{key}.limits", raw.get("limits")),
            states=MappingProxyType(self._states(name, raw)),
            default_state=self._meaning(name, f"{key}.default_state", raw.get("default_state")),
            masks=MappingProxyType(self._masks(name, raw)),
            done=self._done(name, raw.get("done")),
            timeout_s=None
            if timeout is None
            else self.number(f"{key}.timeout_s", timeout, above=0),
            send_end=send_end,
            reply_len=None
            if reply_len is None
            else int(self.number(f"{key}.reply_len", reply_len, low=1, integer=True)),
            ok=self._ok(f"{key}.ok", raw.get("ok", [0])),
            **templates,
        )

    def _pair(self, key: str, value: Any) -> tuple[float, float] | None:
        if value is None:
            return None
        if (
            not isinstance(value, list)
            or len(value) != 2
            or not all(isinstance(v, int | float) and not isinstance(v, bool) for v in value)
            or not value[0] < value[1]
        ):
            self.fail(key, f"must be [low, high] with low < high, got {value!r}")
        return float(value[0]), float(value[1])

    def _meaning(self, entry: str, key: str, value: Any) -> str | None:
        if value is None:
            return None
        allowed = _MEANINGS.get(entry)
        if allowed is None:
            self.fail(key, f"only entries {', '.join(sorted(_MEANINGS))} have states")
        if value not in allowed:
            self.fail(key, f"unknown meaning {value!r}; allowed: {', '.join(sorted(allowed))}")
        return str(value)

    def _states(self, entry: str, raw: Mapping[str, Any]) -> dict[str, str]:
        states = raw.get("states", {})
        if not isinstance(states, Mapping):
            self.fail(f"entry.{entry}.states", "must be a table of code = meaning")
        return {
            str(code): self._meaning(entry, f"entry.{entry}.states.{code}", meaning) or ""
            for code, meaning in states.items()
        }

    def _masks(self, entry: str, raw: Mapping[str, Any]) -> dict[str, int]:
        masks = raw.get("masks", {})
        key = f"entry.{entry}.masks"
        if not isinstance(masks, Mapping):
            self.fail(key, "must be a table of meaning = bit mask")
        allowed = _MASK_MEANINGS.get(entry)
        if masks and allowed is None:
            self.fail(key, f"only entries {', '.join(sorted(_MASK_MEANINGS))} have masks")
        out = {}
        for meaning, mask in masks.items():
            if allowed is not None and meaning not in allowed:
                self.fail(
                    f"{key}.{meaning}", f"unknown meaning; allowed: {', '.join(sorted(allowed))}"
                )
            out[meaning] = int(self.number(f"{key}.{meaning}", mask, above=0, integer=True))
        return out

    def _done(self, entry: str, value: Any) -> str | None:
        if value is None:
            return None
        if entry not in _MOTION:
            self.fail(f"entry.{entry}.done", "only motions (entry.position, entry.home) have it")
        if value not in ("reply", "status"):
            self.fail(f"entry.{entry}.done", f"must be 'reply' or 'status', got {value!r}")
        return str(value)

    def _ok(self, key: str, value: Any) -> frozenset[str]:
        if not isinstance(value, list) or not all(
            isinstance(v, str | int) and not isinstance(v, bool) for v in value
        ):
            self.fail(key, f"must be a list of error codes that mean 'no error', got {value!r}")
        return frozenset(str(v) for v in value)

    def _error_codes(self) -> dict[str, str]:
        codes = self.table("error_codes")
        for code, text in codes.items():
            if not isinstance(text, str):
                self.fail(f"error_codes.{code}", f"must be the text of the error, got {text!r}")
        return {str(k): v for k, v in codes.items()}

    def _init(self, entries: Mapping[str, Entry]) -> tuple[str, ...]:
        init = self.table("device").get("init", [])
        if not isinstance(init, list) or not all(isinstance(n, str) for n in init):
            self.fail("device.init", f"must be a list of entry names, got {init!r}")
        for name in init:
            entry = entries.get(name)
            if entry is None or entry.write is None:
                self.fail("device.init", f"{name!r} is not an entry with a write template")
            if name in _MOTION:
                self.fail(
                    "device.init",
                    f"{name!r} moves the axis; set axis.needs_home = true instead, so that the "
                    "engine homes it with the shutter shut",
                )
            if entry.write.fields - CONTEXT_FIELDS:
                self.fail("device.init", f"{name!r} needs a value; init entries take none")
        return tuple(init)

    def _axis(self, entries: Mapping[str, Entry]) -> AxisSettings:
        position = entries.get("position")
        step = position.step() if position is not None else 0.0
        table = self.table("axis")
        if position is not None and "tolerance_deg" not in table and step == 0:
            self.fail(
                "axis.tolerance_deg",
                "is required when entry.position's codec has no fixed step (e.g. num): the "
                "allowed |read back - commanded| in deg",
            )
        return AxisSettings(
            needs_home=self.flag("axis", "needs_home", False),
            tolerance_deg=self.get_number("axis", "tolerance_deg", 1.5 * step, low=0.0),
            move_timeout_s=self.get_number("axis", "move_timeout_s", 60.0, above=0.0),
            poll_s=self.get_number("axis", "poll_s", 0.05, low=0.0),
            settle_s=self.get_number("axis", "settle_s", 0.0, low=0.0),
            home_deg=self.get_number("axis", "home_deg", 0.0),
        )

    def _counter(self) -> CounterSettings:
        table = self.table("counter")
        channels = table.get("channels", 1)
        if channels not in (1, 2, 3, 4) or isinstance(channels, bool):
            self.fail("counter.channels", f"must be 1 to 4, got {channels!r}")
        ids = table.get("channel_ids", [str(i) for i in range(1, channels + 1)])
        if (
            not isinstance(ids, list)
            or len(ids) != channels
            or not all(isinstance(i, str | int) and not isinstance(i, bool) for i in ids)
        ):
            self.fail(
                "counter.channel_ids",
                f"must list {channels} channel names (one per channel), got {ids!r}",
            )
        window = table.get("window_s")
        return CounterSettings(
            channels=channels,
            channel_ids=tuple(str(i) for i in ids),
            window_s=None if window is None else self.number("counter.window_s", window, above=0),
            poll_s=self.get_number("counter", "poll_s", 0.02, low=0.0),
        )


class _Checks:
    """Checks across entries and tables, once every piece has been read."""

    def __init__(self, reader: _Reader, profile: DeviceProfile) -> None:
        self.r = reader
        self.p = profile

    def run(self) -> None:
        e = self.p.entries
        self._context_fields()
        if "position" in e:
            self._motion()
        if "status" in e or "counting" in e:
            for name in ("status", "counting"):
                if name in e:
                    self._state_reply(e[name], ("state", "bits"))
        if "shutter" in e:
            self._shutter(e["shutter"])
        if self.p.roles & {"counter"}:
            self._counter()
        for name, fields in (("identity", ("value",)), ("pointer", ("value",))):
            if name in e:
                self._reply_has(e[name], "read", fields)
        if "error" in e:
            self._reply_has(e["error"], "read", ("error",))
        for name in ("home", "stop", "start", *self.p.init):
            if name in e:
                self._no_value(e[name])

    def _context_fields(self) -> None:
        for entry in self.p.entries.values():
            for kind in ("read", "reply", "write", "write_reply"):
                template = getattr(entry, kind)
                if template is None:
                    continue
                for fld, setting in (("addr", self.p.address), ("axis", self.p.axis_id)):
                    if fld in template.fields and setting is None:
                        self.r.fail(
                            f"device.{'address' if fld == 'addr' else 'axis'}",
                            f"is required: {entry.key}.{kind} uses {{{fld}}}",
                        )
                if "channel" in template.fields and entry.name != "counts":
                    self.r.fail(f"{entry.key}.{kind}", "only entry.counts may use {channel}")

    def _reply_has(self, entry: Entry, side: str, fields: tuple[str, ...]) -> Template:
        """Check that ``side`` (read or write) has a reply with ``fields``; return the command."""
        command = getattr(entry, side)
        reply = entry.reply if side == "read" else entry.write_reply
        if command is None or reply is None:
            self.r.fail(f"{entry.key}.{side}", "is required, with its reply template")
        missing = [f for f in fields if f not in reply.fields]
        if missing:
            which = "reply" if side == "read" else "write_reply"
            self.r.fail(f"{entry.key}.{which}", f"must contain {{{missing[0]}}}")
        return command

    def _no_value(self, entry: Entry) -> None:
        if entry.write is None or entry.write.fields - CONTEXT_FIELDS:
            self.r.fail(f"{entry.key}.write", "is required and takes no {value}")

    def _motion(self) -> None:
        e = self.p.entries
        position = e["position"]
        self._reply_has(position, "read", ("value",))
        if position.write is None or "value" not in position.write.fields:
            self.r.fail("entry.position.write", "is required and must contain {value}")
        for name in _MOTION:
            if name not in e:
                continue
            entry = e[name]
            done = entry.done or ("status" if "status" in e else "reply")
            if done == "status" and "status" not in e:
                self.r.fail(f"{entry.key}.done", "is 'status' but there is no entry.status")
            if done == "reply" and entry.write_reply is None:
                self.r.fail(
                    f"{entry.key}.write_reply",
                    "is required: without entry.status the end of the motion is its reply",
                )
        if self.p.axis.needs_home and "home" not in e:
            self.r.fail("axis.needs_home", "is true but there is no entry.home")

    def _state_reply(self, entry: Entry, fields: tuple[str, ...]) -> None:
        if entry.reply is None or not set(fields) & entry.reply.fields:
            self.r.fail(f"{entry.key}.reply", "must contain {state} or {bits}")
        if "state" in entry.reply.fields:
            codec = entry.reply.codec_of("state")
            if codec is None or codec.kind != "str":
                self.r.fail(f"{entry.key}.reply", "{state} needs a text codec (word, text or aN)")
            if not entry.states and entry.default_state is None:
                self.r.fail(f"{entry.key}.states", "is required: what each state code means")
        if "bits" in entry.reply.fields and not entry.masks:
            self.r.fail(f"{entry.key}.masks", "is required: which bits mean what")

    def _shutter(self, entry: Entry) -> None:
        """Issue 9's rules: open and shut must differ, or the shutter toggles and then needs a
        state query; the codes must be writable."""
        if entry.write is None:
            self.r.fail("entry.shutter.write", "is required (the command that opens or shuts)")
        if not {"open", "shut"} <= set(entry.states.values()):
            self.r.fail("entry.shutter.states", "must give the code for open and for shut")
        if entry.read is not None:
            self._state_reply(entry, ("state",))
        if "state" not in entry.write.fields:
            if entry.read is None:
                self.r.fail(
                    "entry.shutter.read",
                    f"is required: open and shut send the same command {entry.write.text!r}, so "
                    "it toggles, and a toggle is accepted only with a state query (read back "
                    "after every command)",
                )
            return
        context = {"addr": self.p.address or "", "axis": self.p.axis_id or ""}
        for meaning in ("open", "shut"):
            try:
                entry.write.render(context, {"state": entry.code(meaning)})
            except ValueError as exc:
                self.r.fail("entry.shutter.states", f"the code for {meaning} cannot be sent: {exc}")

    def _counter(self) -> None:
        e, c = self.p.entries, self.p.counter
        modes = [n for n in ("count", "gate", "stream") if n in e]
        if len(modes) > 1:
            self.r.fail(
                f"entry.{modes[1]}",
                f"a counter uses one of count, gate, stream, not both {modes[0]} and {modes[1]}",
            )
        mode = modes[0]
        channels = tuple(f"ch{i}" for i in range(1, c.channels + 1))
        if mode == "count":
            if e["count"].write is None or "value" not in e["count"].write.fields:
                self.r.fail("entry.count.write", "is required and must contain {value} (the gate)")
            self._reply_has(e["count"], "write", channels)
        elif mode == "stream":
            if c.window_s is None:
                self.r.fail("counter.window_s", "is required for a stream (s per line)")
            missing = [
                f
                for f in channels
                if f not in (e["stream"].reply.fields if e["stream"].reply else ())
            ]
            if missing:
                self.r.fail("entry.stream.reply", f"must contain {{{missing[0]}}}")
        else:
            for name in ("start", "counting", "counts"):
                if name not in e:
                    self.r.fail(
                        f"entry.{name}",
                        "is required for a counter that sets a gate, starts it and reads the "
                        "counts (entry.counting tells when the gate has ended, so that the "
                        "previous gate's counts are never read)",
                    )
            if e["gate"].write is None or "value" not in e["gate"].write.fields:
                self.r.fail("entry.gate.write", "is required and must contain {value} (the gate)")
            counts = self._reply_has(e["counts"], "read", ("value",))
            if c.channels > 1 and "channel" not in counts.fields:
                self.r.fail("entry.counts.read", "must contain {channel} with several channels")


def parse_profile(data: Mapping[str, Any], source: str = "<profile>") -> DeviceProfile:
    """Check parsed TOML ``data``; ``source`` (a file name) prefixes every error."""
    return _Reader(source, data).profile()


def shipped_profiles() -> list[str]:
    """Names of the profiles shipped with the package, sorted."""
    return sorted(p.stem for p in PROFILE_DIR.glob("*.toml"))


def load_profile(profile: str | Path) -> DeviceProfile:
    """Load a profile file, or a shipped one by name (``"example-mount"``)."""
    path = Path(profile)
    if not path.suffix and not path.exists() and (PROFILE_DIR / f"{path.name}.toml").exists():
        path = PROFILE_DIR / f"{path.name}.toml"
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        shipped = ", ".join(shipped_profiles())
        raise InputError(
            f"{path}: no such profile file; give a path or a shipped profile: {shipped}"
        ) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: cannot read the profile ({exc})") from None
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{path}: not valid TOML ({exc})") from None
    return parse_profile(data, str(path))
