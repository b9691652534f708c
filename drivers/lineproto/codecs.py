"""Named codecs: how one field of a message is written and read.

A codec turns a value into the text a device expects and back, and gives the regular
expression that finds the field inside a reply. Profiles name codecs (``{value:hex8s}``);
they never hold code. The names:

========  ===========================================  ===================================
name      written as                                   read
========  ===========================================  ===================================
``int``   a whole number in decimal (``-1200``)        ``[-+]?`` digits
``num``   a decimal number, 10 significant digits      any decimal or exponent notation
``fN``    a decimal number with N places (``f3``)      any decimal or exponent notation
``hexN``  N hex digits, unsigned (``hex2``: ``0A``)    exactly N hex digits, either case
``hexNs`` N hex digits, two's complement of 4N bits    exactly N hex digits, either case
          (``hex8s``: -1 is ``FFFFFFFF``)
``word``  text without spaces                          a run of non-space characters
``text``  any text                                     anything (the shortest that fits)
``aN``    exactly N characters (``a2``: ``0A``)        exactly N characters
========  ===========================================  ===================================

Integer codecs (``int``, ``hexN``, ``hexNs``) refuse a value that is not whole (the caller
rounds device units first) or that does not fit the width.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from functools import cache

__all__ = ["CODEC_NAMES", "Codec", "codec"]

_NUMBER = r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?"
#: The codec names a profile may use (N stands for a width or a number of places).
CODEC_NAMES = ("int", "num", "fN", "hexN", "hexNs", "word", "text", "aN")
_MAX_WIDTH = 16


@dataclass(frozen=True)
class Codec:
    """One named codec (see the module docstring).

    ``kind`` is ``int``, ``num`` or ``str`` (what ``decode`` returns); ``step`` is the
    smallest difference the written form can show (1 for integers, 10**-N for ``fN``, 0 when
    unlimited or not a number).
    """

    name: str
    pattern: str
    kind: str
    step: float = 0.0
    width: int = 0
    places: int = -1
    signed: bool = True

    @property
    def integer(self) -> bool:
        """True when values are whole numbers (device units must be rounded first)."""
        return self.kind == "int"

    def encode(self, value: object) -> str:
        """The text for ``value``; ``ValueError`` when it does not fit."""
        if self.kind == "str":
            text = str(value)
            if self.width and len(text) != self.width:
                raise ValueError(f"{text!r} is not {self.width} characters long")
            return text
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise ValueError(f"{value!r} is not a number")
        if not math.isfinite(value):
            raise ValueError(f"{value!r} is not finite")
        if self.kind == "num":
            return f"{value:.{self.places}f}" if self.places >= 0 else f"{value:.10g}"
        if value != int(value):
            raise ValueError(f"{value!r} is not a whole number")
        number = int(value)
        if self.width == 0:
            return str(number)
        span = 16**self.width
        low, high = (-span // 2, span // 2) if self.signed else (0, span)
        if not low <= number < high:
            raise ValueError(f"{number} does not fit {self.width} hex digits ({low} to {high - 1})")
        return f"{number % span:0{self.width}X}"

    def decode(self, text: str) -> int | float | str:
        """The value of ``text`` (already matched by ``pattern``); ``ValueError`` otherwise."""
        if self.kind == "str":
            return text
        if self.kind == "num":
            return float(text)
        if self.width == 0:
            return int(text)
        number = int(text, 16)
        span = 16**self.width
        return number - span if self.signed and number >= span // 2 else number


_FIXED = {
    "int": Codec("int", r"[-+]?\d+", "int", step=1.0),
    "num": Codec("num", _NUMBER, "num"),
    "word": Codec("word", r"\S+", "str"),
    "text": Codec("text", r".*?", "str"),
}


@cache
def codec(name: str) -> Codec:
    """The codec called ``name``; ``ValueError`` naming the allowed names otherwise."""
    if name in _FIXED:
        return _FIXED[name]
    if m := re.fullmatch(r"hex(\d+)(s?)", name):
        width = int(m[1])
        if 1 <= width <= _MAX_WIDTH:
            return Codec(
                name, f"[0-9A-Fa-f]{{{width}}}", "int", step=1.0, width=width, signed=bool(m[2])
            )
    elif m := re.fullmatch(r"f(\d+)", name):
        places = int(m[1])
        if places <= 12:
            return Codec(name, _NUMBER, "num", step=10.0**-places, places=places)
    elif m := re.fullmatch(r"a(\d+)", name):
        width = int(m[1])
        if 1 <= width <= 64:
            return Codec(name, f".{{{width}}}", "str", width=width)
    raise ValueError(
        f"unknown codec {name!r}; allowed: {', '.join(CODEC_NAMES)} "
        f"(hexN: N = 1..{_MAX_WIDTH}; fN: N = 0..12; aN: N = 1..64)"
    )
