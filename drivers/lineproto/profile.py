"""Device profiles: the validated model the line drivers use (format: docs/device-profiles.md).

A profile is a TOML file of our own format that tells the generic line drivers how to speak with
one kind of controller: how messages are framed (``[link]``), one entry per quantity or action
(``[entry.NAME]``: read and write templates, codec, scale, limits, state map), and the settings
of the role it plays (``[axis]``, ``[counter]``, ``[pointer]``). It says nothing about the
port: the same profile works over a serial port, ``rfc2217://`` or ``socket://``.
:mod:`.loader` reads and checks the files.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field, replace

from aligner.errors import InputError

from .codecs import Codec
from .template import Template

__all__ = ["AxisSettings", "CounterSettings", "DeviceProfile", "Entry", "Link"]

#: mask meanings that are inverted: the bit set means the opposite
_INVERTED_MASKS = {"stopped": "moving", "referenced": "not_referenced", "idle": "counting"}


@dataclass(frozen=True)
class Link:
    """Framing and timing of the link (``[link]``); times in s, strings as sent."""

    baud: int = 9600
    encoding: str = "ascii"
    send_end: str = "\r\n"
    reply_end: str = "\r\n"
    echo: bool = False
    prompt: str = ""
    chain: str = ""
    gap_s: float = 0.0
    reply_timeout_s: float = 1.0
    late_reply_s: float | None = None
    retries: int = 2
    error_reply: Template | None = field(default=None, compare=False)

    @property
    def late_s(self) -> float:
        """How long after its timeout a reply may still come (default: one reply timeout)."""
        return self.reply_timeout_s if self.late_reply_s is None else self.late_reply_s

    def framing_key(self) -> tuple[object, ...]:
        """What devices sharing one port must agree on."""
        return (self.baud, self.encoding, self.send_end, self.reply_end, self.echo, self.prompt)


@dataclass(frozen=True)
class AxisSettings:
    """``[axis]`` of a rotation mount; angles in deg, times in s."""

    needs_home: bool = False
    tolerance_deg: float = 0.0
    move_timeout_s: float = 60.0
    poll_s: float = 0.05
    settle_s: float = 0.0
    home_deg: float = 0.0


@dataclass(frozen=True)
class CounterSettings:
    """``[counter]``: channel count, the text of each channel for ``{channel}``, the window of
    a free-running counter (s) and the poll period of a gate's state (s)."""

    channels: int = 1
    channel_ids: tuple[str, ...] = ("1",)
    window_s: float | None = None
    poll_s: float = 0.02


@dataclass(frozen=True, eq=False)
class Entry:
    """One quantity or action (``[entry.NAME]``); see docs/device-profiles.md.

    Values pass through ``device = value * scale + offset`` (rounded when the codec is whole
    numbers) on the way out and the inverse on the way in. ``states`` maps codes to meanings,
    ``masks`` meanings to bit masks.
    """

    name: str
    read: Template | None = None
    reply: Template | None = None
    write: Template | None = None
    write_reply: Template | None = None
    scale: float = 1.0
    offset: float = 0.0
    limits: tuple[float, float] | None = None
    states: Mapping[str, str] = field(default_factory=dict)
    default_state: str | None = None
    masks: Mapping[str, int] = field(default_factory=dict)
    done: str | None = None
    timeout_s: float | None = None
    send_end: str | None = None
    reply_len: int | None = None
    ok: frozenset[str] = frozenset({"0"})

    @property
    def key(self) -> str:
        """The entry's key in the profile (``entry.position``)."""
        return f"entry.{self.name}"

    def value_codec(self) -> Codec | None:
        """The codec of ``{value}`` in the write template, else in the reply."""
        for template in (self.write, self.reply, self.write_reply):
            if template is not None and (found := template.codec_of("value")) is not None:
                return found
        return None

    def to_device(self, value: float) -> float | int:
        """Device units for ``value`` (rounded to a whole number for integer codecs)."""
        raw = value * self.scale + self.offset
        found = self.value_codec()
        return round(raw) if found is not None and found.integer else raw

    def from_device(self, raw: float) -> float:
        """The value for ``raw`` device units (inverse of :meth:`to_device`)."""
        return (float(raw) - self.offset) / self.scale

    def step(self) -> float:
        """Smallest change of the value the device can show (0 when unlimited)."""
        found = self.value_codec()
        return found.step / abs(self.scale) if found is not None else 0.0

    def code(self, meaning: str) -> str:
        """The code written for ``meaning`` (the first listed in ``states``)."""
        return next(code for code, m in self.states.items() if m == meaning)

    def meanings(self, fields: Mapping[str, object]) -> frozenset[str]:
        """What a reply says: the meaning of its ``state`` and the masks set in ``bits``.

        Raises ``ValueError`` for a state code the entry does not know.
        """
        found: set[str] = set()
        if "state" in fields:
            code = str(fields["state"])
            meaning = self.states.get(code, self.default_state)
            if meaning is None:
                known = ", ".join(repr(c) for c in self.states)
                raise ValueError(f"unknown state code {code!r} (known: {known})")
            found.add(meaning)
        bits = fields.get("bits")
        if isinstance(bits, int):
            for meaning, mask in self.masks.items():
                if meaning in _INVERTED_MASKS:
                    if not bits & mask:
                        found.add(_INVERTED_MASKS[meaning])
                elif bits & mask:
                    found.add(meaning)
        return frozenset(found)


@dataclass(frozen=True, eq=False)
class DeviceProfile:
    """A validated device profile. ``roles`` says which drivers it can make
    (``mount``, ``counter``, ``shutter``, ``pointer``)."""

    source: str
    name: str
    description: str
    address: str | None
    axis_id: str | None
    init: tuple[str, ...]
    link: Link
    entries: Mapping[str, Entry]
    error_codes: Mapping[str, str]
    axis: AxisSettings
    counter: CounterSettings
    samples: int
    roles: frozenset[str]

    def where(self, key: str = "") -> str:
        """The prefix of every message about this profile: file, device and key."""
        return f"{self.source}: device {self.name!r}" + (f": {key}" if key else "")

    def has(self, entry: str) -> bool:
        """True when the profile defines ``entry`` (e.g. ``"home"``)."""
        return entry in self.entries

    def require(self, *entries: str, role: str) -> None:
        """Raise ``InputError`` unless every entry needed for ``role`` is defined."""
        for name in entries:
            if name not in self.entries:
                have = ", ".join(sorted(self.entries)) or "nothing"
                raise InputError(
                    f"{self.where('entry.' + name)}: is required for a {role}; "
                    f"the profile defines: {have}"
                )

    def with_options(
        self,
        *,
        baud: int | None = None,
        reply_timeout_s: float | None = None,
        retries: int | None = None,
        address: str | None = None,
        axis: str | None = None,
    ) -> DeviceProfile:
        """A copy with link and context settings replaced (options of a device spec)."""
        link = replace(
            self.link,
            baud=self.link.baud if baud is None else baud,
            reply_timeout_s=(
                self.link.reply_timeout_s if reply_timeout_s is None else reply_timeout_s
            ),
            retries=self.link.retries if retries is None else retries,
        )
        if link.baud < 1 or link.reply_timeout_s <= 0.0 or link.retries < 0:
            raise InputError(
                f"{self.where()}: options need baud >= 1, timeout > 0 s and retries >= 0"
            )
        return replace(
            self,
            link=link,
            address=self.address if address is None else address,
            axis_id=self.axis_id if axis is None else axis,
        )
