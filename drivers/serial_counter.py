"""``LineCounter``: a photon counter spoken to through a device profile."""

from __future__ import annotations

import time

from aligner.errors import BadReply, DeviceTimeout, InputError, Unattributable

from ._checks import check_dwell
from .lineproto import LineChannel
from .serial_common import LineDevice

__all__ = ["LineCounter"]

#: a gate's counts cannot be known before this fraction of the gate has passed (clock rates of
#: the host and the device differ by far less; common practice, no source)
_GATE_FRACTION = 0.98
#: a gate may differ from the dwell asked for by this fraction when rounded to the device's
#: step (below the Poisson spread of any count under 10**6; common practice, no source)
_ROUNDING = 1e-3


class LineCounter(LineDevice):
    """A ``Counter`` over a ``LineChannel``, in one of three ways (by the profile's entries):

    - ``count``: one command with the gate (``{value}``, s) answered by the counts
      (``{ch1}`` .. ``{chN}``) when the gate has ended; a reply sooner than the gate is a late
      reply to an earlier command and is discarded;
    - ``gate`` + ``start`` + ``counting`` + ``counts``: set the gate, start it, check that it
      runs, wait until ``counting`` says it has ended, then read each channel
      (``{channel}`` from ``counter.channel_ids``), so the previous gate's counts are never
      read;
    - ``stream``: a free-running counter that sends one line per ``counter.window_s``; a dwell
      sums whole windows that began after it started (``last_windows`` says how many).

    A dwell is rounded to the device's gate step (``gate_step_s``: a window, or the gate
    entry's resolution); a rounding of more than 0.1 % is refused with ``InputError``.
    ``last_gate_s`` is the gate the device used.

    Channel 1 is the post-selected port, channel 2 the reference.
    """

    def __init__(self, channel: LineChannel, *, name: str | None = None) -> None:
        super().__init__(channel, name=name)
        if "counter" not in self.profile.roles:
            raise InputError(
                f"{self.profile.where('entry.count')}: a counter needs entry.count, entry.gate "
                f"or entry.stream; the profile defines: {', '.join(sorted(self.profile.entries))}"
            )
        self.channels = self.profile.counter.channels
        #: windows summed by the last count of a free-running counter (0 for the others)
        self.last_windows = 0
        #: the gate (s) the device used for the last count (the dwell on the device's step)
        self.last_gate_s = 0.0
        #: the device's gate step (s): a window, or the gate entry's resolution (0: any)
        self.gate_step_s = (
            self.profile.counter.window_s
            or self.channel.entry("gate" if self.profile.has("gate") else "count").step()
        )

    def count(self, dwell_s: float) -> tuple[int, ...]:
        """Gate for ``dwell_s`` s; return whole counts >= 0, channel 1 first."""
        gate = self.last_gate_s = self._on_step(check_dwell(dwell_s))
        if self.profile.has("stream"):
            return self._stream(gate)
        return self._gated(gate) if self.profile.has("gate") else self._one_shot(gate)

    def _ids(self) -> range:
        return range(1, self.channels + 1)

    def _whole(self, value: object) -> int:
        """A count read through a codec (an int, or a float of a whole number) >= 0."""
        if isinstance(value, float) and value.is_integer():
            value = int(value)
        if not isinstance(value, int) or value < 0:
            raise BadReply(
                f"{self.name}: a count reads {value!r}, not a whole number >= 0; check the "
                f"reply template and scale in {self.profile.source}"
            )
        return value

    def _on_step(self, dwell: float) -> float:
        """The gate the device will use for ``dwell``; ``InputError`` when it is off by more
        than 0.1 %."""
        step = self.gate_step_s
        gate = max(1, round(dwell / step)) * step if step > 0 else dwell
        if abs(gate - dwell) > _ROUNDING * dwell:
            what = "counter.window_s" if self.profile.has("stream") else "the gate entry"
            raise InputError(
                f"{self.name}: dwell_s = {dwell:g} s is not on the {step:g} s step of the counter "
                f"({what} in {self.profile.source}); use a multiple of {step:g} s"
            )
        return gate

    def _one_shot(self, dwell: float) -> tuple[int, ...]:
        fields = self.channel.write(
            "count",
            value=dwell,
            timeout_s=dwell + self.profile.link.reply_timeout_s,
            not_before_s=_GATE_FRACTION * dwell,
        )
        return tuple(self._whole(fields.get(f"ch{i}")) for i in self._ids())

    def _counting(self) -> bool:
        return "counting" in self.channel.meanings("counting", self.channel.read("counting"))

    def _gated(self, dwell: float) -> tuple[int, ...]:
        ch, link = self.channel, self.profile.link
        ch.write("gate", value=dwell)
        ch.write("start")
        started = time.monotonic()
        if not self._counting() and time.monotonic() - started < _GATE_FRACTION * dwell:
            raise Unattributable(
                f"{self.name}: the gate did not start (entry.counting says it is not counting "
                f"before {dwell:g} s have passed); its counts would be the previous gate's"
            )
        deadline = started + dwell + link.reply_timeout_s
        time.sleep(max(0.0, started + dwell - time.monotonic()))
        while self._counting():
            if time.monotonic() > deadline:
                raise DeviceTimeout(
                    f"{self.name}: the {dwell:g} s gate had not ended after "
                    f"{time.monotonic() - started:.3g} s ({self.profile.source}: entry.counting)"
                )
            time.sleep(self.profile.counter.poll_s)
        return tuple(
            self._whole(ch.read("counts", channel=cid).get("value"))
            for cid in self.profile.counter.channel_ids
        )

    def _stream(self, dwell: float) -> tuple[int, ...]:
        window = self.gate_step_s
        n = max(1, round(dwell / window))
        deadline = time.monotonic() + (n + 2) * window + self.profile.link.reply_timeout_s
        lines = self.channel.stream(n, deadline)
        seqs = [seq for line in lines if isinstance(seq := line.get("seq"), int)]
        if seqs and seqs != list(range(seqs[0], seqs[0] + n)):
            raise Unattributable(
                f"{self.name}: the window numbers {seqs} are not consecutive: a window was "
                "lost or repeated, so the sum would not be this dwell's counts"
            )
        self.last_windows = n
        return tuple(
            sum(self._whole(line.get(f"ch{i}")) for line in lines)
            for i in range(1, self.channels + 1)
        )
