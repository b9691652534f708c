"""Argument checks shared by every driver (one wording for one mistake)."""

from __future__ import annotations

import math

from aligner.errors import InputError

__all__ = ["check_channels", "check_dwell", "check_reading"]


def check_reading(reading_deg: float, what: str = "reading_deg") -> float:
    """Return ``reading_deg`` as a float, or raise ``InputError`` if it is not a finite number."""
    try:
        value = float(reading_deg)
    except (TypeError, ValueError):
        raise InputError(f"{what} must be a number of degrees, got {reading_deg!r}") from None
    if not math.isfinite(value):
        raise InputError(f"{what} must be a finite number of degrees, got {reading_deg!r}")
    return value


def check_dwell(dwell_s: float) -> float:
    """Return ``dwell_s`` as a float, or raise ``InputError`` unless it is finite and > 0 s."""
    try:
        value = float(dwell_s)
    except (TypeError, ValueError):
        raise InputError(f"dwell_s must be a number of seconds, got {dwell_s!r}") from None
    if not (math.isfinite(value) and value > 0.0):
        raise InputError(f"dwell_s must be a finite time > 0 s, got {dwell_s!r}")
    return value


def check_channels(channels: object, where: str = "channels") -> int:
    """Return the channel count, or raise ``InputError`` unless it is 1 or 2."""
    if channels not in (1, 2) or isinstance(channels, bool):
        raise InputError(
            f"{where} must be 1 (post-selected) or 2 (post-selected, reference), got {channels!r}"
        )
    return int(channels)
