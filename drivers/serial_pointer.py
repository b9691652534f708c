"""``LinePointer``: a pointer (meter) reader spoken to through a device profile."""

from __future__ import annotations

import math
import statistics
import time

from aligner.errors import BadReply

from ._checks import check_dwell
from .lineproto import LineChannel
from .serial_common import LineDevice

__all__ = ["LinePointer"]


class LinePointer(LineDevice):
    """A ``PointerReader`` over a ``LineChannel``: a reader that answers one value per query
    (``entry.pointer``) and gives no error estimate.

    ``read(dwell_s)`` spreads ``pointer.samples`` queries evenly over the dwell and returns
    their mean and its standard error, ``stdev / sqrt(N)`` (sample standard deviation; common
    practice, no source), in pointer units (the entry's scale and offset applied).
    """

    def __init__(self, channel: LineChannel, *, name: str | None = None) -> None:
        super().__init__(channel, name=name)
        self.profile.require("pointer", role="pointer reader")

    def read(self, dwell_s: float) -> tuple[float, float]:
        """Average for ``dwell_s`` s; return (mean, standard error) in pointer units."""
        dwell = check_dwell(dwell_s)
        samples = self.profile.samples
        start = time.monotonic()
        values: list[float] = []
        for i in range(samples):
            time.sleep(max(0.0, start + i * dwell / samples - time.monotonic()))
            value = self.channel.read("pointer").get("value")
            if not isinstance(value, float) or not math.isfinite(value):
                raise BadReply(
                    f"{self.name}: the reading {value!r} is not a finite number "
                    f"({self.profile.source}: entry.pointer.reply)"
                )
            values.append(value)
        return statistics.fmean(values), statistics.stdev(values) / math.sqrt(samples)
