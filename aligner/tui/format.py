"""Number formatting shared by the desk's widgets (display only)."""

from __future__ import annotations

import math
from typing import Any

__all__ = ["deg", "num", "rate", "sci"]


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
