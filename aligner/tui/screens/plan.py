"""Plan screen: a target amplification in, planned readings, branches, sensitivity and the
tolerance budget out; infeasible targets show the planner's own explanation."""

from __future__ import annotations

import math
from typing import Any, ClassVar

from textual import on, work
from textual.app import ComposeResult
from textual.binding import Binding, BindingType
from textual.containers import Horizontal, VerticalScroll
from textual.timer import Timer
from textual.widgets import Checkbox, Input, Label, Select, Static
from textual.worker import get_current_worker

from ...errors import AlignerError, InfeasibleTarget
from ..messages import ApplyReadings, PlanReady
from ..widgets.plan_result import PlanResult
from .base import DeskScreen

__all__ = ["PlanScreen"]

#: Seconds without a keystroke before the typed target is planned.
TYPING_PAUSE_S = 0.4
#: The axis choices, each stated in words (the choice reads the same without colour).
AXES = (("axis: re (position)", "re"), ("axis: im (momentum)", "im"))
#: Which readouts see which part of A_w, and where the other part shows up instead.
SEEN_BY = {
    "re": ("Re A_w", "a real weak value", "a position or phase readout"),
    "im": ("Im A_w", "an imaginary weak value", "a momentum readout"),
}


def exact_label(on: bool) -> str:
    """The exact checkbox's label, stating its state in words."""
    return f"exact pointer response: {'on' if on else 'off'}"


def axis_note(readout: str, readout_axis: str, planned_axis: str) -> str:
    """What to tell the operator when the plan targets the part of A_w the bench's readout
    does not see (Jozsa, Phys. Rev. A 76, 044103 (2007)); ``""`` when it does."""
    if planned_axis == readout_axis:
        return ""
    seen, _, _ = SEEN_BY[readout_axis]
    wanted, what, where = SEEN_BY[planned_axis]
    return (
        f"This bench has a {readout} readout, which measures {seen}; {what} "
        f"({wanted}) shows up in {where}. The Bench screen keeps showing the amplification "
        f"along {seen}, so after Ctrl+A it will be small there."
    )


class PlanScreen(DeskScreen):
    """Plan on Enter (and after each change); apply the planned readings to the bench screen."""

    MODE = "plan"
    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("ctrl+a", "apply", "Apply to bench", priority=True),
        Binding("ctrl+t", "toggle_axis", "Axis re/im", priority=True),
        Binding("ctrl+e", "toggle_exact", "Exact", priority=True),
    ]

    def __init__(self) -> None:
        super().__init__()
        self.result: Any = None
        self._debounce: Timer | None = None

    def compose_body(self) -> ComposeResult:
        with Horizontal(id="plan-form"):
            yield Label("target amplification", classes="form-label")
            yield Input("40", id="target", type="number")
            yield Select(AXES, value="re", allow_blank=False, id="axis")
            yield Checkbox(exact_label(False), id="exact")
        yield Static("", id="plan-status")
        yield Static("", id="plan-axis-note")
        with VerticalScroll(id="plan-scroll"):
            yield PlanResult(self.backend.bench, id="plan-result")

    def on_mount(self) -> None:
        self.request_plan()

    def on_screen_resume(self) -> None:
        self.request_plan()

    # -- the request ---------------------------------------------------------------------------

    def target(self) -> dict[str, Any] | None:
        """The planner request from the form, or None (with a message) when it is not valid."""
        text = self.query_one("#target", Input).value.strip()
        try:
            value = float(text)
        except ValueError:
            self.status(f"target amplification: {text!r} is not a number", error=True)
            return None
        if not math.isfinite(value) or value == 0:
            self.status("target amplification: give a finite number other than 0", error=True)
            return None
        axis = str(self.query_one("#axis", Select).value)
        return {
            "amplification": value,
            "axis": axis,
            "exact": self.query_one("#exact", Checkbox).value,
        }

    @on(Input.Changed, "#target")
    def target_typed(self) -> None:
        """Plan a moment after the operator stops typing."""
        if self._debounce is not None:
            self._debounce.stop()
        self._debounce = self.set_timer(TYPING_PAUSE_S, self.request_plan)

    @on(Checkbox.Changed, "#exact")
    def exact_changed(self, event: Checkbox.Changed) -> None:
        event.checkbox.label = exact_label(event.value)
        self.request_plan()

    @on(Input.Submitted, "#target")
    @on(Select.Changed, "#axis")
    def request_plan(self) -> None:
        """Plan the current target in a worker thread."""
        request = self.target()
        if request is None:
            return
        from ...prediction import readout_axis

        bench = self.backend.bench
        self.query_one("#plan-axis-note", Static).update(
            axis_note(bench.coupling.readout, readout_axis(bench), request["axis"])
        )
        self.status(
            f"planning amplification {request['amplification']:g} on axis "
            f"{request['axis']}{' (exact)' if request['exact'] else ''}…"
        )
        self.plan_worker(request, dict(self.desk.readings))

    @work(thread=True, exclusive=True, group="plan")
    def plan_worker(self, request: dict[str, Any], readings: dict[str, float]) -> None:
        try:
            message = PlanReady(request, plan=self.backend.plan(readings, **request))
        except InfeasibleTarget as exc:
            message = PlanReady(request, error=str(exc), limit=exc.limit)
        except AlignerError as exc:
            message = PlanReady(request, error=str(exc))
        if not get_current_worker().is_cancelled:
            self.post_message(message)

    @on(PlanReady)
    def plan_ready(self, event: PlanReady) -> None:
        if event.request != self.target():
            return  # stale: the form changed while it was planned
        panel = self.query_one(PlanResult)
        if event.error:
            self.result = None
            title = (
                f"cannot plan this target (limited by {event.limit})"
                if event.limit
                else "cannot plan this target"
            )
            self.status(title, error=True)
            panel.failed(event.error)
            return
        self.result = event.plan
        self.status("planned · Ctrl+A puts these readings on the bench screen (nothing moves)")
        panel.show(event.plan)

    # -- actions -------------------------------------------------------------------------------

    def action_apply(self) -> None:
        if self.result is None:
            self.status("no feasible plan to apply", error=True)
            return
        settings = {k: float(v) for k, v in self.result.quantized.settings.items()}
        self.post_message(ApplyReadings(settings, origin="the plan"))

    def action_toggle_axis(self) -> None:
        axis = self.query_one("#axis", Select)
        axis.value = "im" if axis.value == "re" else "re"

    def action_toggle_exact(self) -> None:
        self.query_one("#exact", Checkbox).toggle()

    def status(self, text: str, *, error: bool = False) -> None:
        """One line saying what the planner did."""
        line = self.query_one("#plan-status", Static)
        line.update(text)
        line.set_class(error, "problem")
