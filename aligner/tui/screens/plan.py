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
from textual.widgets import Checkbox, Input, Label, RadioButton, RadioSet, Static
from textual.worker import get_current_worker

from ...errors import AlignerError, InfeasibleTarget
from ..messages import ApplyReadings, PlanReady
from ..widgets.plan_result import PlanResult
from .base import DeskScreen

__all__ = ["PlanScreen"]

#: Seconds without a keystroke before the typed target is planned.
TYPING_PAUSE_S = 0.4


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
            with RadioSet(id="axis"):
                yield RadioButton("re (position)", value=True, id="axis-re")
                yield RadioButton("im (momentum)", id="axis-im")
            yield Checkbox("exact pointer response", id="exact")
        yield Static("", id="plan-status")
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
        axis = "im" if self.query_one("#axis-im", RadioButton).value else "re"
        return {"amplification": value, "axis": axis,
                "exact": self.query_one("#exact", Checkbox).value}

    @on(Input.Changed, "#target")
    def target_typed(self) -> None:
        """Plan a moment after the operator stops typing."""
        if self._debounce is not None:
            self._debounce.stop()
        self._debounce = self.set_timer(TYPING_PAUSE_S, self.request_plan)

    @on(Input.Submitted, "#target")
    @on(RadioSet.Changed)
    @on(Checkbox.Changed)
    def request_plan(self) -> None:
        """Plan the current target in a worker thread."""
        request = self.target()
        if request is None:
            return
        self.status(f"planning amplification {request['amplification']:g} on axis "
                    f"{request['axis']}{' (exact)' if request['exact'] else ''}…")
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
            title = f"cannot plan this target (limited by {event.limit})" if event.limit \
                else "cannot plan this target"
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
        button = self.query_one("#axis-im" if self.query_one("#axis-re", RadioButton).value
                                else "#axis-re", RadioButton)
        button.value = True

    def action_toggle_exact(self) -> None:
        self.query_one("#exact", Checkbox).toggle()

    def status(self, text: str, *, error: bool = False) -> None:
        """One line saying what the planner did."""
        line = self.query_one("#plan-status", Static)
        line.update(text)
        line.set_class(error, "problem")
