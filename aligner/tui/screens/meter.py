"""Meter screen: watch the count rate while turning a mount, by hand or in motor steps.

Ctrl+S starts the meter (:mod:`aligner.tui.metering`): the detector is exposed only where the
prediction at the mounts' read-back allows it, and every gate is checked against the safe
rate. Each channel shows its live rate, a log-scale bar, the trend over the last minute and the
minimum and maximum held until Ctrl+N; the predicted rate at the current read-back stands
beside the measured one, and the guard's headroom below. ↑/↓ (one step) and PgUp/PgDn (100
steps) on a mount turn it through the detector guard. Ctrl+P (or leaving the screen) stops
the meter and shuts the shutter. With a typed-in counter, type the rates you read instead.
"""

from __future__ import annotations

from typing import ClassVar

from rich.text import Text
from textual import on, work
from textual.app import ComposeResult
from textual.binding import BindingType
from textual.containers import Container, Horizontal, Vertical
from textual.widgets import Input, Label, Static

from ...errors import AlignerError
from .. import keys
from ..format import rate
from ..messages import MeterChanged, MeterRead
from ..metering import MeterSample, MeterSession, MeterState
from ..widgets.meter import ChannelMeter, MountStepper
from ..widgets.scroll_area import ScrollArea
from .base import DeskScreen

__all__ = ["MeterScreen"]

#: Gate length of the meter (s): a new rate about five times a second.
GATE_S = 0.2
IDLE = "meter stopped: Ctrl+S starts it (the shutter opens only where the guard allows)"


class MeterScreen(DeskScreen):
    """The alignment meter (see the module docstring)."""

    MODE = "meter"
    STATUS = "#meter-status"
    BINDINGS: ClassVar[list[BindingType]] = [
        keys.on_screen(
            keys.START,
            "start counting in short gates (the shutter opens only where the guard allows it)",
        ),
        keys.on_screen(keys.PAUSE, "stop counting and shut the shutter"),
        keys.NEW_MIN_MAX,
    ]

    def __init__(self) -> None:
        super().__init__()
        self.gate_s = GATE_S
        self.session: MeterSession | None = None
        #: The counter's kind as declared (``real``, ``simulated``, ``typed``; "" unknown).
        self.counter_kind = self._counter_kind()
        self.typed = self.counter_kind == "typed"
        self.last: MeterSample | None = None

    def _counter_kind(self) -> str:
        try:
            return next(c.kind for c in self.backend.declared() if c.role == "counter")
        except AlignerError:
            return ""  # opening will say what is wrong

    def compose_body(self) -> ComposeResult:
        bench = self.backend.bench
        safe = bench.detector.safe_rate
        # simulated or typed-in numbers never pass as measurements
        kind = {"simulated": " · SIMULATED", "typed": " · TYPED IN"}.get(self.counter_kind, "")
        yield Static(IDLE, id="meter-status")
        with ScrollArea(id="meter-body"):
            if self.typed:
                with Horizontal(id="meter-typed"):
                    yield Label("typed rates (counts/s)", classes="form-label")
                    yield Input(id="typed-post", placeholder="post-selected", type="number")
                    if bench.reference.kind != "none":
                        yield Input(id="typed-ref", placeholder="reference", type="number")
            with Container(id="meter-top"):
                with Vertical(id="meter-left"):
                    yield ChannelMeter(f"post-selected port{kind}", safe, id="meter-post")
                    with Container(id="meter-mounts") as mounts:
                        mounts.border_title = "Mounts · ↑/↓ one step · PgUp/PgDn 100 steps"
                        for index, mount in enumerate(bench.mounts.values()):
                            yield MountStepper(mount, id=f"stepper-{index}")
                with Vertical(id="meter-right"):
                    yield Static("", id="meter-headroom")
                    if bench.reference.kind != "none":
                        yield ChannelMeter(f"reference{kind}", safe, id="meter-ref")

    def on_mount(self) -> None:
        self.headroom(None)
        steppers = list(self.query(MountStepper))
        chosen = [s for s in steppers if s.bench_mount.name == self.backend.bench.imbalance_mount]
        (chosen or steppers)[0].focus()

    def on_screen_suspend(self) -> None:
        """Leaving the screen stops the meter (nobody is watching the rate)."""
        self.action_pause()

    # -- actions -------------------------------------------------------------------------------

    def action_start(self) -> None:
        """Start the meter."""
        if self.session is not None:
            self.status("the meter is running; Ctrl+P stops it")
            return
        self.session = self.backend.meter(self.gate_s)
        self.status("starting the meter…")
        self.meter_worker(self.session, dict(self.desk.readings))

    def action_pause(self) -> None:
        """Stop the meter (mounts stopped, shutter shut)."""
        if self.session is not None:
            self.session.stop()
            self.status("stopping the meter (shutter shuts)…")

    def action_new_min_max(self) -> None:
        """Forget the held minimum and maximum."""
        for meter in self.query(ChannelMeter):
            meter.reset_hold()

    @on(MountStepper.Step)
    def step(self, event: MountStepper.Step) -> None:
        if self.session is None:
            self.status("the meter is stopped: Ctrl+S starts it, then the keys turn the mount")
            return
        self.session.step(event.mount, event.steps)

    @on(Input.Submitted, "#typed-post, #typed-ref")
    def typed_rates(self) -> None:
        """Send the typed rates (post-selected, then reference) to the meter."""
        if self.session is None:
            self.status("the meter is stopped: Ctrl+S starts it", error=True)
            return
        values = []
        for box in self.query("#meter-typed Input").results(Input):
            try:
                value = float(box.value)
            except ValueError:
                self.status(
                    f"{box.placeholder}: {box.value!r} is not a rate in counts/s", error=True
                )
                return
            if value < 0:
                self.status(f"{box.placeholder}: a rate cannot be negative", error=True)
                return
            values.append(value)
        self.session.typed(tuple(values))

    # -- the loop and its messages -------------------------------------------------------------

    @work(thread=True, exclusive=True, group="meter")
    def meter_worker(self, session: MeterSession, readings: dict[str, float]) -> None:
        def sample(read: MeterSample) -> None:
            self.post_message(MeterRead(read))

        def state(changed: MeterState) -> None:
            self.post_message(MeterChanged(changed))

        session.run(readings, on_sample=sample, on_state=state)

    @on(MeterRead)
    def meter_read(self, event: MeterRead) -> None:
        sample = event.sample
        self.last = sample
        limit = self.backend.guard_limit()
        expected = (sample.predicted, self.backend.reference_rate())
        for meter, value, predicted in zip(
            self.query(ChannelMeter), sample.rates, expected, strict=False
        ):
            meter.add(sample.t_s, value, predicted, limit)
        for stepper in self.query(MountStepper):
            stepper.show(sample.readings.get(stepper.bench_mount.name))
        self.headroom(sample)

    @on(MeterChanged)
    def meter_changed(self, event: MeterChanged) -> None:
        state = event.state
        for stepper in self.query(MountStepper):
            if stepper.bench_mount.name in state.readings:
                stepper.show(state.readings[stepper.bench_mount.name])
        if state.phase == "stopped":
            self.session = None
            from ...run.station import shutter_words

            shutter = f"; {shutter_words(state.shutter)}" if state.shutter else ""
            self.status(
                f"meter {state.message}{shutter}. Ctrl+S starts it again.", error=state.problem
            )
            return
        self.status(f"meter: {state.message}", error=state.problem)

    def headroom(self, sample: MeterSample | None) -> None:
        """The detector guard's headroom: measured and predicted rates against the limits."""
        safe = self.backend.bench.detector.safe_rate
        limit = self.backend.guard_limit()
        text = Text()
        text.append("Detector guard  ", style="bold")
        text.append(f"safe rate {rate(safe)}")
        if limit is not None:
            text.append(f" · exposes only where the prediction is below {rate(limit)}")
        if sample is not None and sample.rates:
            share = sample.rates[0] / safe
            text.append(f"\nnow {rate(sample.rates[0])} = {share:.1%} of the safe rate", "bold")
            text.append(f" (headroom {max(0.0, 1 - share):.1%})", "bold")
            text.append(f" · predicted here {rate(sample.predicted)}")
            if sample.typed:
                text.append(" · typed in by the operator", style="yellow")
        self.query_one("#meter-headroom", Static).update(text)
