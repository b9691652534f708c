"""The alignment meter's widgets: one channel's live rate, and a mount turned from the keys.

A :class:`ChannelMeter` shows the latest rate in large digits, a bar on a log scale (with the
detector's safe rate and the guard's limit marked), the trend over the last minute, the
minimum and maximum held until reset, and the predicted rate beside the measured one.
"""

from __future__ import annotations

import math
from collections import deque
from typing import Any, ClassVar

from rich.text import Text
from textual.app import ComposeResult, RenderResult
from textual.binding import BindingType
from textual.containers import Vertical
from textual.message import Message
from textual.widget import Widget
from textual.widgets import Digits, Sparkline, Static

from ..format import literal, rate
from .readings import STEP_BINDINGS

__all__ = ["TREND_S", "ChannelMeter", "LogBar", "MountStepper", "digits"]

#: The trend covers this many seconds.
TREND_S = 60.0
#: Decade labels of the log bar.
_DECADES = {0: "1", 1: "10", 2: "100", 3: "1k", 4: "10k", 5: "100k", 6: "1M", 7: "10M", 8: "100M"}


def digits(value: float) -> str:
    """A rate (counts/s) for large digits: whole counts, thousands apart (``1 234 567``)."""
    return f"{round(value):,}".replace(",", " ") if math.isfinite(value) else "-"


class LogBar(Widget):
    """A bar from 1 count/s to ``top`` counts/s on a log scale, with marks: ``┃`` the safe
    rate, ``╎`` the guard's limit for exposing, ``▼`` the prediction (second line: decades)."""

    DEFAULT_CSS = "LogBar { height: 2; }"

    def __init__(self, safe_rate: float, **kwargs: Any) -> None:
        super().__init__(**kwargs)
        self.safe_rate = safe_rate
        self.top = 10 ** math.ceil(math.log10(max(safe_rate, 10.0)) + 0.3)
        self.value = 0.0
        self.predicted: float | None = None
        self.limit: float | None = None

    def place(self, value: float, width: int) -> int:
        """The column (0 .. width-1) of ``value`` counts/s."""
        x = math.log10(max(value, 1.0)) / math.log10(self.top)
        return min(width - 1, max(0, round(x * (width - 1))))

    def show(self, value: float, predicted: float | None, limit: float | None) -> None:
        """Set the rate, the prediction and the guard's limit (counts/s)."""
        self.value, self.predicted, self.limit = value, predicted, limit
        self.refresh()

    def render(self) -> RenderResult:
        width = max(self.size.width, 10)
        filled = self.place(self.value, width) + (1 if self.value >= 1 else 0)
        over = self.value > self.safe_rate
        cells = ["█"] * filled + ["░"] * (width - filled)
        for value, mark in ((self.limit, "╎"), (self.safe_rate, "┃")):
            if value is not None:
                cells[self.place(value, width)] = mark
        bar = Text("".join(cells), style="bold red" if over else "green")
        if self.predicted is not None and self.predicted > 0:
            column = self.place(self.predicted, width)
            bar.stylize("bold magenta reverse", column, column + 1)
        scale = [" "] * width
        for exponent in range(round(math.log10(self.top)) + 1):
            label = _DECADES.get(exponent, f"1e{exponent}")
            at = min(self.place(10.0**exponent, width), width - len(label))  # never cut
            for k, ch in enumerate(label):
                scale[max(at, 0) + k] = ch
        return Text.assemble(bar, "\n", Text("".join(scale), style="dim"))


class ChannelMeter(Vertical):
    """One channel (``title``): live rate, log bar, trend over :data:`TREND_S` and the held
    minimum and maximum, with the predicted (or expected) rate beside them."""

    def __init__(self, title: str, safe_rate: float, **kwargs: Any) -> None:
        super().__init__(**kwargs)
        self.border_title = f"{title} · counts/s"
        self.safe_rate = safe_rate
        self.history: deque[tuple[float, float]] = deque()
        self.low: float | None = None
        self.high: float | None = None
        self.last: float | None = None
        self.predicted: float | None = None

    def compose(self) -> ComposeResult:
        yield Digits("-", classes="meter-digits")
        yield LogBar(self.safe_rate, classes="meter-bar")
        yield Sparkline([], classes="meter-trend")
        yield Static("", classes="meter-numbers")

    def add(self, t_s: float, value: float, predicted: float | None, limit: float | None) -> None:
        """A new rate (counts/s) at time ``t_s`` (s) with the prediction there (counts/s)."""
        self.last, self.predicted = value, predicted
        self.low = value if self.low is None else min(self.low, value)
        self.high = value if self.high is None else max(self.high, value)
        self.history.append((t_s, value))
        while self.history and self.history[0][0] < t_s - TREND_S:
            self.history.popleft()
        self.query_one(Digits).update(digits(value))
        self.query_one(LogBar).show(value, predicted, limit)
        self.query_one(Sparkline).data = [math.log10(max(v, 1.0)) for _, v in self.history]
        self._numbers()

    def reset_hold(self) -> None:
        """Forget the held minimum and maximum (they restart from the next rate)."""
        self.low = self.high = None
        self._numbers()

    def _numbers(self) -> None:
        text = Text()
        text.append("predicted ", style="bold")
        text.append(rate(self.predicted))
        if self.predicted and self.last is not None:
            text.append(f"  (measured/predicted {self.last / self.predicted:.3g})")
        text.append("\nmin ", style="bold")
        text.append(rate(self.low))
        text.append("  max ", style="bold")
        text.append(rate(self.high))
        span = self.history[-1][0] - self.history[0][0] if self.history else 0.0
        text.append(f"  · trend over {span:.0f} s (log scale)", style="dim")
        self.query_one(".meter-numbers", Static).update(text)


class MountStepper(Static, can_focus=True):
    """A mount the meter turns: ↑/↓ one step of its resolution, PgUp/PgDn 100 steps (each
    step goes to the meter loop, which moves the mount through the detector guard)."""

    BINDINGS: ClassVar[list[BindingType]] = STEP_BINDINGS

    class Step(Message):
        """Turn ``mount`` by ``steps`` of its resolution."""

        def __init__(self, mount: str, steps: int) -> None:
            super().__init__()
            self.mount = mount
            self.steps = steps

    def __init__(self, mount: Any, **kwargs: Any) -> None:
        super().__init__("", classes="mount-stepper", **kwargs)
        self.bench_mount = mount
        self.reading: float | None = None

    def on_mount(self) -> None:
        self.show(None)

    def show(self, reading: float | None) -> None:
        """The mount's read-back (deg), None while unknown."""
        self.reading = reading
        shown = "not read yet" if reading is None else f"{reading:.4f}°"
        text = literal(self.bench_mount.name, "bold")
        text.append(f"  {shown}  (step {self.bench_mount.resolution_deg:g}°)")
        self.update(text)

    def action_step(self, steps: int) -> None:
        self.post_message(self.Step(self.bench_mount.name, steps))
