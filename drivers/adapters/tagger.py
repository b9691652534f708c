"""A photon counter reached through a time-tagger library object, with coincidence counting.

The adapter takes any object ("source") with one of these methods (duck typing; nothing else
is called on it, except ``close()`` when it has one):

- ``time_tags(gate_s: float) -> (channels, times_s)``: record for ``gate_s`` seconds (block
  until done) and return two equal-length 1-D arrays (or sequences), one entry per detection:
  the integer input channel and the arrival time in seconds (any origin, any order; only
  differences within one gate are used). Singles and coincidences are counted here.
- ``counts(channels: Sequence[int], gate_s: float) -> Sequence[int]``: count for ``gate_s``
  seconds and return one whole count per requested channel. Singles only.

When a source has both, ``time_tags`` is used. Each counter channel of the ``Counter``
protocol (1 = post-selected, 2 = reference) is either one tagger input (its singles) or two
inputs ``a,b`` (their coincidences): the number of pairs of an ``a`` event and a ``b`` event
with ``|t_b - delay_s - t_a| <= window_s / 2``, so ``window_s`` is the full coincidence
window. For uncorrelated streams of rates ``R_a``, ``R_b`` the expected accidental rate is
``R_a R_b window_s``.

Open it from Python (``TaggerCounter(source, post=(1, 2), ref=(1,))``) or from a spec with the
source given as a keyword::

    open_counter("py:aligner_drivers.adapters.tagger:TaggerCounter?post=1,2&ref=1&window_s=2e-9",
                 source=my_tagger)

or from a lab factory that builds the library object and returns a ``TaggerCounter``
(``docs/plugins.md`` shows one).
"""

from __future__ import annotations

import math
import operator
from collections.abc import Sequence
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from aligner.errors import BadReply, Disconnected, InputError

from .._checks import check_dwell
from ..plugins import guarded_call

__all__ = ["TaggerCounter", "coincidences"]


def coincidences(
    times_a: ArrayLike, times_b: ArrayLike, window_s: float, delay_s: float = 0.0
) -> int:
    """Pairs ``(i, j)`` with ``|times_b[j] - delay_s - times_a[i]| <= window_s / 2`` (times in
    s, any order); every pair counts, so one ``a`` event may pair with several ``b`` events."""
    a = np.sort(np.asarray(times_a, dtype=float))
    b = np.sort(np.asarray(times_b, dtype=float)) - delay_s
    half = window_s / 2.0
    return int(
        np.sum(np.searchsorted(b, a + half, side="right") - np.searchsorted(b, a - half, "left"))
    )


def _inputs(value: Sequence[int] | int, what: str, name: str) -> tuple[int, ...]:
    items = (value,) if isinstance(value, int) else tuple(value)
    try:
        inputs = tuple(operator.index(v) for v in items)
    except TypeError:
        inputs = ()
    if len(inputs) not in (1, 2) or len(set(inputs)) != len(inputs):
        raise InputError(
            f"{name}: {what} must be one tagger input (singles) or two different inputs a,b "
            f"(coincidences), got {value!r}"
        )
    return inputs


class TaggerCounter:
    """A ``Counter`` over a time-tagger ``source`` (module docstring for the duck type).

    ``post``: the input, or the two inputs whose coincidences make the post-selected count;
    ``ref``: the same for the reference channel, or None for a one-channel counter;
    ``window_s``: full coincidence window (s); ``delay_s``: delay of the second input of a pair
    relative to the first (s), e.g. the difference of cable delays.
    """

    def __init__(
        self,
        source: Any,
        *,
        post: tuple[int, ...] = (1,),
        ref: tuple[int, ...] | None = None,
        window_s: float = 2e-9,
        delay_s: float = 0.0,
        name: str = "time-tagger",
    ) -> None:
        self.name = name
        self.post = _inputs(post, "post", name)
        self.ref = None if ref is None else _inputs(ref, "ref", name)
        if not (math.isfinite(window_s) and window_s > 0.0) or not math.isfinite(delay_s):
            raise InputError(
                f"{name}: window_s must be > 0 s and delay_s finite, got {window_s!r}, {delay_s!r}"
            )
        self.window_s = float(window_s)
        self.delay_s = float(delay_s)
        self.channels = 1 if self.ref is None else 2
        self._tags = callable(getattr(source, "time_tags", None))
        if not self._tags and not callable(getattr(source, "counts", None)):
            raise InputError(
                f"{name}: the source ({type(source).__name__}) has neither time_tags(gate_s) "
                "nor counts(channels, gate_s); see aligner_drivers.adapters.tagger"
            )
        if not self._tags and any(len(s) == 2 for s in self._specs()):
            raise InputError(
                f"{name}: coincidences need time tags; the source "
                f"({type(source).__name__}) only offers counts(channels, gate_s)"
            )
        self._source: Any = source

    def _specs(self) -> list[tuple[int, ...]]:
        return [self.post] if self.ref is None else [self.post, self.ref]

    def _call(self, method: str, *args: Any) -> Any:
        if self._source is None:
            raise Disconnected(f"{self.name}: the counter was closed; open it again")
        return guarded_call(self.name, f"{method}()", getattr(self._source, method), *args)

    def _from_tags(self, gate_s: float) -> tuple[int, ...]:
        raw = self._call("time_tags", gate_s)
        try:
            channels, times = (np.asarray(v) for v in raw)
            ok = channels.shape == times.shape and channels.ndim == 1
            times = times.astype(float)
            ok = ok and bool(np.all(np.isfinite(times)))
        except (TypeError, ValueError):
            ok = False
        if not ok:
            raise BadReply(
                f"{self.name}: time_tags() must return two equal-length 1-D arrays "
                f"(channels, finite times in s); got {type(raw).__name__}"
            )
        per_input: dict[int, NDArray[np.float64]] = {
            c: times[channels == c] for spec in self._specs() for c in spec
        }
        return tuple(
            len(per_input[s[0]])
            if len(s) == 1
            else coincidences(per_input[s[0]], per_input[s[1]], self.window_s, self.delay_s)
            for s in self._specs()
        )

    def _from_counts(self, gate_s: float) -> tuple[int, ...]:
        wanted = [s[0] for s in self._specs()]
        raw = self._call("counts", wanted, gate_s)
        try:
            counts = tuple(operator.index(c) for c in raw)
        except TypeError:
            counts = ()
        if len(counts) != len(wanted) or min(counts) < 0:
            raise BadReply(
                f"{self.name}: counts({wanted}, {gate_s:g}) must return {len(wanted)} whole "
                f"counts >= 0, got {raw!r}"
            )
        return counts

    def count(self, dwell_s: float) -> tuple[int, ...]:
        """One gate of ``dwell_s`` s: post-selected (and reference) counts."""
        gate = check_dwell(dwell_s)
        return self._from_tags(gate) if self._tags else self._from_counts(gate)

    def close(self) -> None:
        """Close the source (when it has ``close()``); later counts raise ``Disconnected``."""
        source, self._source = self._source, None
        if source is not None and callable(getattr(source, "close", None)):
            guarded_call(self.name, "close()", source.close)
