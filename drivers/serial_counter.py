"""``LineCounter``: a gated photon counter spoken to through a device profile."""

from __future__ import annotations

from aligner.errors import BadReply

from ._checks import check_dwell
from .lineproto import LineChannel

__all__ = ["LineCounter"]


class LineCounter:
    """A ``Counter`` over a ``LineChannel``: one ``count`` command, one reply line per gate.

    The reply's groups ``ch1`` (post-selected) and, with ``counter.channels = 2``, ``ch2``
    (reference) are the counts of that gate.
    """

    def __init__(self, channel: LineChannel, *, name: str | None = None) -> None:
        channel.profile.require("count", role="counter")
        self.channel = channel
        self.channels = channel.profile.channels
        self.name = name or channel.name

    def count(self, dwell_s: float) -> tuple[int, ...]:
        """Gate for ``dwell_s`` s; return whole counts >= 0, channel 1 first."""
        groups = self.channel.transact_gated("count", check_dwell(dwell_s))
        counts = tuple(
            self.channel.group(groups, "count", f"ch{i}", int) for i in range(1, self.channels + 1)
        )
        if min(counts) < 0:
            raise BadReply(
                f"{self.name}: negative counts {counts} in the reply; check replies.count"
            )
        return counts

    def close(self) -> None:
        """Close the port."""
        self.channel.close()
