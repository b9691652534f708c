"""Manual devices: the operator reads a display and types the numbers in.

``input_fn`` (default ``input``) asks for one line; ``output_fn`` (default ``print``) shows
notes. Tests pass their own. A non-numeric answer is asked again with a note saying what is
expected; ``q`` cancels with ``InputError`` (nothing taken before is lost: the caller keeps
it). End of input (no operator) raises ``Disconnected``.
"""

from __future__ import annotations

import math
from collections.abc import Callable

from aligner.errors import Disconnected, InputError

from ._checks import check_channels, check_dwell

__all__ = ["ManualCounter", "ManualPointer"]

_SAFETY = (
    "Manual readings: shield the detectors from room light, and follow your local "
    "laser-safety rules and your laser safety officer."
)
_CHANNEL_NAMES = ("post-selected", "reference")


class _Operator:
    """Asks the operator for numbers until one parses."""

    def __init__(
        self, name: str, input_fn: Callable[[str], str], output_fn: Callable[[str], object]
    ) -> None:
        self.name = name
        self.input_fn = input_fn
        self.output_fn = output_fn
        self._greeted = False

    def ask(self, prompt: str, convert: Callable[[str], float], expected: str) -> float:
        if not self._greeted:
            self.output_fn(_SAFETY)
            self._greeted = True
        while True:
            try:
                answer = self.input_fn(f"{prompt}: ").strip()
            except EOFError:
                raise Disconnected(f"{self.name}: no operator input (end of input)") from None
            if answer.lower() == "q":
                raise InputError(f"{self.name}: cancelled by the operator at '{prompt}'")
            try:
                return convert(answer)
            except ValueError:
                self.output_fn(f"  {answer!r} is not {expected}; type it again (q cancels)")


def _whole_count(text: str) -> int:
    value = int(text.replace("_", "").replace(",", ""))
    if value < 0:
        raise ValueError(text)
    return value


def _finite(text: str) -> float:
    value = float(text)
    if not math.isfinite(value):
        raise ValueError(text)
    return value


def _spread(text: str) -> float:
    value = _finite(text)
    if value < 0.0:
        raise ValueError(text)
    return value


class ManualCounter:
    """A ``Counter`` whose counts the operator types after each gate."""

    def __init__(
        self,
        channels: int = 1,
        *,
        name: str = "manual-counter",
        input_fn: Callable[[str], str] = input,
        output_fn: Callable[[str], object] = print,
    ) -> None:
        self.channels = check_channels(channels)
        self.name = name
        self._operator = _Operator(name, input_fn, output_fn)

    def count(self, dwell_s: float) -> tuple[int, ...]:
        """Ask for one whole count >= 0 per channel, gated for ``dwell_s`` s."""
        dwell = check_dwell(dwell_s)
        return tuple(
            int(
                self._operator.ask(
                    f"{_CHANNEL_NAMES[i]} counts in {dwell:g} s", _whole_count, "a whole count >= 0"
                )
            )
            for i in range(self.channels)
        )

    def close(self) -> None:
        """Nothing to release."""


class ManualPointer:
    """A ``PointerReader`` whose mean and standard error the operator types."""

    def __init__(
        self,
        *,
        name: str = "manual-pointer",
        input_fn: Callable[[str], str] = input,
        output_fn: Callable[[str], object] = print,
    ) -> None:
        self.name = name
        self._operator = _Operator(name, input_fn, output_fn)

    def read(self, dwell_s: float) -> tuple[float, float]:
        """Ask for the mean pointer reading over ``dwell_s`` s and its standard error."""
        dwell = check_dwell(dwell_s)
        mean = self._operator.ask(f"mean pointer reading over {dwell:g} s", _finite, "a number")
        sem = self._operator.ask("its standard error", _spread, "a number >= 0")
        return mean, sem

    def close(self) -> None:
        """Nothing to release."""
