"""Mount readings the operator edits: one input per mount, arrow keys step by the resolution."""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any, ClassVar

from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Horizontal, Vertical
from textual.validation import ValidationResult, Validator
from textual.widgets import Input, Label, Static

from ...bench import Mount
from ..format import literal
from ..messages import ReadingsChanged

__all__ = ["STEP_BINDINGS", "ReadingInput", "ReadingsEditor"]


#: Widest mount-name column (characters).
NAME_WIDTH_MAX = 24


def _decimals(step: float) -> int:
    return max(0, -math.floor(math.log10(step))) if step > 0 else 3


class _InTravel(Validator):
    """A finite number of degrees inside the mount's travel."""

    def __init__(self, mount: Mount) -> None:
        super().__init__()
        self.bench_mount = mount

    def validate(self, value: str) -> ValidationResult:
        try:
            x = float(value)
        except ValueError:
            return self.failure(f"{self.bench_mount.name}: {value!r} is not a number of degrees")
        low, high = self.bench_mount.travel_deg
        if not math.isfinite(x):
            return self.failure(f"{self.bench_mount.name}: the reading must be finite")
        if not low <= x <= high:
            return self.failure(
                f"{self.bench_mount.name}: {x:g} deg is outside its travel [{low:g}, {high:g}] deg"
            )
        return self.success()


#: The keys that step a reading or a mount (the meter's mount steppers use the same).
STEP_BINDINGS: list[BindingType] = [
    Binding("up", "step(1)", "+1 step", show=False),
    Binding("down", "step(-1)", "−1 step", show=False),
    Binding("pageup", "step(100)", "+100 steps", show=False),
    Binding("pagedown", "step(-100)", "−100 steps", show=False),
]


class ReadingInput(Input):
    """A reading in degrees; ↑/↓ step by the mount's resolution, PgUp/PgDn by 100 steps.
    Its id is ``reading-<n>`` with ``n`` the mount's place in the bench (mount names are
    the bench file's text, not identifiers)."""

    BINDINGS: ClassVar[list[BindingType]] = STEP_BINDINGS

    def __init__(self, mount: Mount, reading: float, index: int) -> None:
        self.bench_mount = mount
        self.decimals = _decimals(mount.resolution_deg)
        super().__init__(
            self.format(reading),
            id=f"reading-{index}",
            validators=[_InTravel(mount)],
            classes="reading-input",
        )

    def format(self, reading: float) -> str:
        """The reading with as many decimals as the mount resolves."""
        return f"{reading:.{self.decimals}f}"

    def action_step(self, steps: int) -> None:
        try:
            current = float(self.value)
        except ValueError:
            return
        low, high = self.bench_mount.travel_deg
        target = min(max(current + steps * self.bench_mount.resolution_deg, low), high)
        self.value = self.format(target)
        self.cursor_position = len(self.value)


class ReadingsEditor(Vertical):
    """One row per mount: name, reading input, step and travel. Posts ``ReadingsChanged``
    with every mount's reading whenever a valid reading changes."""

    def __init__(
        self, mounts: Mapping[str, Mount], readings: Mapping[str, float], **kwargs: Any
    ) -> None:
        super().__init__(**kwargs)
        self.mounts = dict(mounts)
        self.readings = {k: float(v) for k, v in readings.items()}

    def compose(self) -> ComposeResult:
        width = min(max(len(name) for name in self.mounts) + 1, NAME_WIDTH_MAX)
        for index, (name, mount) in enumerate(self.mounts.items()):
            with Horizontal(classes="reading-row"):
                label = Label(literal(name), classes="reading-name")
                label.styles.width = width  # a longer name wraps; none is cut
                yield label
                yield ReadingInput(mount, self.readings[name], index)
                low, high = mount.travel_deg
                yield Label(
                    f"step {mount.resolution_deg:g}°, travel {low:g}…{high:g}°",
                    classes="reading-step",
                )
        yield Static("", id="reading-problem", classes="problem -empty")

    def input_for(self, name: str) -> ReadingInput:
        """The input of mount ``name``."""
        return next(box for box in self.query(ReadingInput) if box.bench_mount.name == name)

    def set_readings(self, readings: Mapping[str, float]) -> None:
        """Show ``readings`` (deg) in the inputs without posting a change."""
        for name, value in readings.items():
            box = self.input_for(name)
            with box.prevent(Input.Changed):
                box.value = box.format(float(value))
            self.readings[name] = float(box.value)
        self.problem("")

    def problem(self, text: str) -> None:
        """Say what is wrong with a typed reading ("" when nothing is)."""
        line = self.query_one("#reading-problem", Static)
        if text or not line.has_class("-empty"):
            line.update(literal(text))
            line.set_class(not text, "-empty")

    def on_input_changed(self, event: Input.Changed) -> None:
        if not isinstance(event.input, ReadingInput):
            return
        event.stop()
        if event.validation_result is not None and not event.validation_result.is_valid:
            self.problem("; ".join(event.validation_result.failure_descriptions))
            return
        self.problem("")
        self.readings[event.input.bench_mount.name] = float(event.value)
        self.post_message(ReadingsChanged(dict(self.readings)))
