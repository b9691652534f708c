"""Two-way message templates: the text that formats a command also parses a reply.

A template is literal text with fields in braces: ``"{addr}mv{value:hex8s}"``. A field is
``{name}`` or ``{name:codec}`` (codecs: :mod:`.codecs`); ``{{`` and ``}}`` are literal braces.

- *Context fields* ``{addr}``, ``{axis}`` and ``{channel}`` take no codec: they are filled
  with the device's address, axis or the counter channel, both when a command is written and
  when a reply is read (so a reply for another address does not match).
- *Value fields* carry data. Their default codecs: ``value`` num, ``state`` word, ``bits``
  int, ``error`` int, ``message`` text, ``seq`` int, ``ch1`` .. ``ch4`` int. A field whose
  name starts with ``_`` is read and ignored (default codec word), and may appear more than
  once.
"""

from __future__ import annotations

import re
import string
from collections.abc import Mapping
from dataclasses import dataclass

from .codecs import Codec, codec

__all__ = ["CONTEXT_FIELDS", "VALUE_FIELDS", "Template"]

#: Fields filled from the device's context (never a codec).
CONTEXT_FIELDS = frozenset({"addr", "axis", "channel"})
#: Value fields and their default codecs.
VALUE_FIELDS: dict[str, str] = {
    "value": "num",
    "state": "word",
    "bits": "int",
    "error": "int",
    "message": "text",
    "seq": "int",
    **{f"ch{i}": "int" for i in range(1, 5)},
}


@dataclass(frozen=True)
class _Field:
    name: str
    codec: Codec
    group: str


class Template:
    """One parsed template (see the module docstring).

    ``allowed`` limits the value fields (``ValueError`` names the first one not allowed);
    ``ignored`` fields (``_...``) are always allowed in reply templates.
    """

    def __init__(self, text: str, *, allowed: frozenset[str], replies: bool) -> None:
        self.text = text
        parts: list[str | _Field] = []
        names: set[str] = set()
        try:
            parsed = list(string.Formatter().parse(text))
        except ValueError as exc:
            raise ValueError(
                f"bad template {text!r} ({exc}); write {{{{ for a literal {{"
            ) from None
        for literal, name, spec, conversion in parsed:
            if literal:
                parts.append(literal)
            if name is None:
                continue
            if conversion:
                raise ValueError(f"field {{{name}!{conversion}}}: conversions are not allowed")
            parts.append(self._field(name, spec or "", allowed, replies, len(parts)))
            if not name.startswith("_") and name in names:
                raise ValueError(f"field {{{name}}} appears twice")
            names.add(name)
        self._parts = tuple(parts)
        self.fields = frozenset(p.name for p in parts if isinstance(p, _Field))
        self._regex: dict[tuple[tuple[str, str], ...], re.Pattern[str]] = {}

    @staticmethod
    def _field(name: str, spec: str, allowed: frozenset[str], replies: bool, n: int) -> _Field:
        if name in CONTEXT_FIELDS:
            if spec:
                raise ValueError(f"field {{{name}}} is filled from the device and takes no codec")
            return _Field(name, codec("word"), "")
        ignored = replies and name.startswith("_") and name[1:].isidentifier()
        if not ignored and (name not in VALUE_FIELDS or name not in allowed):
            choices = sorted(allowed | CONTEXT_FIELDS) + (["_name (ignored)"] if replies else [])
            raise ValueError(f"unknown field {{{name}}}; allowed here: {', '.join(choices)}")
        return _Field(name, codec(spec or VALUE_FIELDS.get(name, "word")), f"f{n}")

    def codec_of(self, name: str) -> Codec | None:
        """The codec of field ``name``, or None when the template has no such field."""
        for part in self._parts:
            if isinstance(part, _Field) and part.name == name and part.group:
                return part.codec
        return None

    def render(self, context: Mapping[str, str], values: Mapping[str, object]) -> str:
        """The command text; ``ValueError`` when a value does not fit its codec."""
        out: list[str] = []
        for part in self._parts:
            if isinstance(part, str):
                out.append(part)
            elif not part.group:
                out.append(context[part.name])
            else:
                try:
                    out.append(part.codec.encode(values[part.name]))
                except ValueError as exc:
                    raise ValueError(f"{{{part.name}:{part.codec.name}}}: {exc}") from None
        return "".join(out)

    def _pattern(self, context: Mapping[str, str]) -> re.Pattern[str]:
        key = tuple(sorted((k, context[k]) for k in self.fields & CONTEXT_FIELDS))
        if key not in self._regex:
            pieces = []
            for part in self._parts:
                if isinstance(part, str):
                    pieces.append(re.escape(part))
                elif not part.group:
                    pieces.append(re.escape(context[part.name]))
                else:
                    pieces.append(f"(?P<{part.group}>{part.codec.pattern})")
            self._regex[key] = re.compile("".join(pieces), re.DOTALL)
        return self._regex[key]

    def match(self, message: str, context: Mapping[str, str]) -> dict[str, object] | None:
        """Decoded value fields of ``message`` (outer spaces and line ends ignored), or None
        when it does not have this template's form."""
        found = self._pattern(context).fullmatch(message.strip(" \t\r\n"))
        if found is None:
            return None
        values: dict[str, object] = {}
        for part in self._parts:
            if isinstance(part, _Field) and part.group and not part.name.startswith("_"):
                try:
                    values[part.name] = part.codec.decode(found[part.group])
                except ValueError:
                    return None
        return values
