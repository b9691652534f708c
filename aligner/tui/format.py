"""Number and text formatting shared by the desk's widgets (display only).

Text from files, devices and users reaches the screen only through :func:`literal` (or
:func:`aligner.text.safe_text` where a string with markup is built): control characters
removed, markup and emoji codes shown as written.
"""

from __future__ import annotations

import math
from datetime import datetime
from typing import Any

from rich.text import Text

__all__ = ["deg", "interval", "literal", "num", "rate", "sci", "stamp"]


def _finite(value: Any) -> float | None:
    try:
        x = float(value)
    except (TypeError, ValueError):
        return None
    return x if math.isfinite(x) else None


def num(value: Any, digits: int = 4) -> str:
    """A number with ``digits`` significant digits; a dash when missing or not finite."""
    x = _finite(value)
    return "—" if x is None else f"{x:.{digits}g}"


def sci(value: Any, digits: int = 3) -> str:
    """Scientific notation (leak rates, probabilities)."""
    x = _finite(value)
    return "—" if x is None else f"{x:.{digits - 1}e}"


def deg(value: Any, decimals: int = 3) -> str:
    """An angle in degrees, fixed decimals."""
    x = _finite(value)
    return "—" if x is None else f"{x:.{decimals}f}°"


def rate(value: Any) -> str:
    """A count rate in counts/s, with a k/M prefix."""
    x = _finite(value)
    if x is None:
        return "—"
    for scale, prefix in ((1e6, "M"), (1e3, "k")):
        if abs(x) >= scale:
            return f"{x / scale:.3g} {prefix}counts/s"
    return f"{x:.3g} counts/s"


def interval(low: Any, high: Any) -> str:
    """A range of small numbers with the upper end's exponent written once
    (``2.24–2.77e-04``, ``0.97–1.11e-03``); a dash when either end is missing."""
    lo, hi = _finite(low), _finite(high)
    if lo is None or hi is None:
        return "—"
    mantissa, exponent = sci(hi).split("e")
    scaled = lo / 10.0 ** int(exponent)
    return f"{scaled:.3g}–{mantissa}e{exponent}"


def literal(text: object, style: str = "") -> Text:
    """``text`` as it was written (control characters removed; no markup, no emoji codes)."""
    from ..text import clean

    return Text(clean(text), style=style)


def stamp(iso: str | None) -> str:
    """An ISO 8601 time as ``YYYY-MM-DD HH:MM:SS`` and its zone (``UTC`` or ``UTC+hh:mm``)."""
    if not iso:
        return "—"
    try:
        t = datetime.fromisoformat(iso)
    except ValueError:
        return iso
    when = t.strftime("%Y-%m-%d %H:%M:%S")
    if t.tzinfo is None:
        return f"{when} (zone not recorded)"
    return f"{when} UTC" if not t.utcoffset() else f"{when} UTC{t.isoformat()[-6:]}"
