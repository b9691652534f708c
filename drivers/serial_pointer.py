"""``LinePointer``: a pointer (meter) reader spoken to through a device profile."""

from __future__ import annotations

import math

from aligner.errors import BadReply

from ._checks import check_dwell
from .lineproto import LineChannel

__all__ = ["LinePointer"]


class LinePointer:
    """A ``PointerReader`` over a ``LineChannel``: command ``pointer_read``, groups mean and sem."""

    def __init__(self, channel: LineChannel, *, name: str | None = None) -> None:
        channel.profile.require("pointer_read", role="pointer reader")
        self.channel = channel
        self.name = name or channel.name

    def read(self, dwell_s: float) -> tuple[float, float]:
        """Average for ``dwell_s`` s; return (mean, standard error) in pointer units."""
        groups = self.channel.transact_gated("pointer_read", check_dwell(dwell_s))
        mean = self.channel.group(groups, "pointer_read", "mean", float)
        sem = self.channel.group(groups, "pointer_read", "sem", float)
        if not (math.isfinite(mean) and math.isfinite(sem) and sem >= 0.0):
            raise BadReply(
                f"{self.name}: pointer reply mean={mean!r}, sem={sem!r}: expected a finite mean "
                "and a finite standard error >= 0; check replies.pointer_read"
            )
        return mean, sem

    def close(self) -> None:
        """Close the port."""
        self.channel.close()
