"""Plan screen: a target amplification in; the planned readings, the branches to choose
from, sensitivity, the tolerance budget and the working-point plots out. Infeasible targets
show the planner's own explanation; a target beyond the bench's combined limit is warned
about, naming the mechanism.

Two actions, named for what they do: copy the planned readings to the bench screen (nothing
moves), and move the mounts to the plan (through the detector guard, after a question).
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, ClassVar

from textual import on, work
from textual.app import ComposeResult
from textual.binding import BindingType
from textual.containers import Container, Horizontal, Vertical
from textual.timer import Timer
from textual.widgets import Checkbox, DataTable, Input, Label, Select, Static
from textual.worker import get_current_worker

from ...errors import AlignerError, InfeasibleTarget
from .. import keys
from ..messages import ApplyReadings, MountsMoved, PlanReady, PlanRequest
from ..widgets.plan_result import BranchTable, PlanResult
from ..widgets.scroll_area import ScrollArea
from ..widgets.working_point import Curve, Spot, WorkingPoint, curve_readings
from .base import DeskScreen
from .confirm import Confirm

if TYPE_CHECKING:
    from ...planning import Plan
    from ...prediction import Limits

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
    return f"exact response: {'on' if on else 'off'}"


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
        f"along {seen}, so there it will be small."
    )


def beyond_limit(target: float, axis: str, lim: Limits | None) -> str:
    """A warning when ``target`` lies beyond the bench's combined limit (an
    :class:`aligner.prediction.Limits` for the readout's axis), naming the mechanism."""
    if lim is None or axis != lim.axis or abs(target) <= lim.max_amplification:
        return ""
    return (
        f"⚠ {abs(target):g} is beyond this bench's combined limit of "
        f"{lim.max_amplification:.4g} (at {lim.at_imbalance_deg:+.4f}°), set by "
        f"{lim.limited_by}: the pointer shift stops growing there, whatever the planner solves."
    )


class PlanScreen(DeskScreen):
    """Plan on Enter (and after each change); choose a branch; copy the readings to the bench
    screen or move the mounts there."""

    MODE = "plan"
    STATUS = "#plan-status"
    BINDINGS: ClassVar[list[BindingType]] = [keys.COPY_TO_BENCH, keys.MOVE_TO_PLAN, keys.AXIS]

    def __init__(self) -> None:
        super().__init__()
        self.result: Plan | None = None
        self.branch: int | None = None
        self.moving = False
        self._axis_note = ""
        self._debounce: Timer | None = None

    def compose_body(self) -> ComposeResult:
        with Horizontal(id="plan-form"):
            yield Label("amplification", classes="form-label")
            yield Input("40", id="target", type="number")
            yield Select(AXES, value="re", allow_blank=False, id="axis")
            yield Checkbox(exact_label(False), id="exact")
        yield Static("", id="plan-status")
        yield Static("", id="plan-warning", markup=False)
        yield Static("", id="plan-moved")
        with ScrollArea(id="plan-body"), Container(id="plan-top"):
            with Vertical(id="plan-left"):
                yield BranchTable(id="branches")
                yield PlanResult(self.backend.bench, id="plan-result")
            yield WorkingPoint(self.backend.bench.detector.safe_rate, id="plan-plots")

    def on_screen_resume(self) -> None:
        """Plan again each time the screen is shown (the readings may have changed)."""
        self.request_plan()

    # -- the request ---------------------------------------------------------------------------

    def target(self) -> PlanRequest | None:
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
        return PlanRequest(
            amplification=value,
            axis=str(self.query_one("#axis", Select).value),
            exact=self.query_one("#exact", Checkbox).value,
            branch=self.branch,
        )

    @on(Input.Changed, "#target")
    def target_typed(self) -> None:
        """Plan a moment after the operator stops typing."""
        self.branch = None
        if self._debounce is not None:
            self._debounce.stop()
        self._debounce = self.set_timer(TYPING_PAUSE_S, self.request_plan)

    @on(Checkbox.Changed, "#exact")
    def exact_changed(self, event: Checkbox.Changed) -> None:
        event.checkbox.label = exact_label(event.value)
        self.branch = None
        self.request_plan()

    @on(Select.Changed, "#axis")
    def axis_changed(self) -> None:
        self.branch = None
        self.request_plan()

    @on(DataTable.RowSelected, "#branches")
    def branch_chosen(self, event: DataTable.RowSelected) -> None:
        """Enter on a branch plans that branch."""
        if event.row_key.value is not None and self.result is not None:
            self.branch = int(event.row_key.value)
            if self.branch != self.result.chosen:
                self.request_plan()

    @on(Input.Submitted, "#target")
    def request_plan(self) -> None:
        """Plan the current target in a worker thread."""
        request = self.target()
        if request is None:
            return
        bench = self.backend.bench
        readings = dict(self.desk.readings)
        self._axis_note = axis_note(
            bench.coupling.readout, self.backend.predict(readings).axis, request.axis
        )
        self.query_one("#plan-warning", Static).update(self._axis_note)
        which = f" (branch {request.branch})" if request.branch is not None else ""
        self.status(
            f"planning amplification {request.amplification:g} on axis "
            f"{request.axis}{' (exact)' if request.exact else ''}{which}…"
        )
        self.plan_worker(request, readings)

    @work(thread=True, exclusive=True, group="plan")
    def plan_worker(self, request: PlanRequest, readings: dict[str, float]) -> None:
        """The plan, the bench's limits at the desk's readings and the curve through the
        planned point (in a thread)."""
        try:
            lim = self.backend.limits(readings)
        except AlignerError:
            lim = None  # the plan says what is wrong
        try:
            found = self.backend.plan(readings, request)
            planned = {**readings, **found.quantized.settings}
            grid = curve_readings(
                self.backend.bench.mounts[self.backend.bench.imbalance_mount],
                found.branch.null_deg.get(self.backend.bench.imbalance_mount, 0.0),
                2 * abs(found.branch.imbalance_deg) + (lim.at_imbalance_deg if lim else 0.0),
            )
            curve = Curve.of(self.backend.predict_curve(planned, grid))
            message = PlanReady(request, plan=found, limits=lim, curve=curve)
        except InfeasibleTarget as exc:
            message = PlanReady(request, limits=lim, error=str(exc), limit=exc.limit)
        except AlignerError as exc:
            message = PlanReady(request, limits=lim, error=str(exc))
        if not get_current_worker().is_cancelled:
            self.post_message(message)

    @on(PlanReady)
    def plan_ready(self, event: PlanReady) -> None:
        if event.request != self.target():
            return  # stale: the form changed while it was planned
        panel = self.query_one(PlanResult)
        plots = self.query_one(WorkingPoint)
        plots.show_points(current=Spot.of(self.backend.predict(self.desk.readings)))
        warning = beyond_limit(event.request.amplification, event.request.axis, event.limits)
        self.query_one("#plan-warning", Static).update(
            "\n".join(w for w in (warning, self._axis_note) if w)
        )
        if event.error or event.plan is None:
            self.result = None
            title = (
                f"cannot plan this target (limited by {event.limit})"
                if event.limit
                else "cannot plan this target"
            )
            self.status(title, error=True)
            panel.failed(event.error)
            self.query_one(BranchTable).failed()
            plots.show_curve(None, event.limits)
            return
        self.result = event.plan
        self.status(
            f"planned: branch {event.plan.chosen} of {len(event.plan.branches)} · Ctrl+O "
            "readings to bench screen · Ctrl+Y move mounts"
        )
        panel.show(event.plan)
        self.query_one(BranchTable).show(event.plan)
        planned = {**self.desk.readings, **event.plan.quantized.settings}
        plots.show_points(planned=Spot.of(self.backend.predict(planned)))
        plots.show_curve(event.curve, event.limits)

    # -- actions -------------------------------------------------------------------------------

    def planned_readings(self) -> dict[str, float] | None:
        """The plan's readings (deg, rounded to the mounts' steps), or None (said why)."""
        if self.result is None:
            self.status("no feasible plan yet", error=True)
            return None
        return {k: float(v) for k, v in self.result.quantized.settings.items()}

    def action_copy_to_bench(self) -> None:
        """Copy the planned readings to the bench screen; nothing moves."""
        settings = self.planned_readings()
        if settings is not None:
            self.post_message(ApplyReadings(settings, origin="the plan"))

    def action_move_to_plan(self) -> None:
        """Turn the mounts to the planned readings through the detector guard, after a
        question that lists every move."""
        targets = self.planned_readings()
        if targets is None or self.result is None or self.moving:
            return
        moves = "; ".join(f"{name} → {value:.4f}°" for name, value in targets.items())
        kinds = "real" if self.backend.hardware_mounts() else "simulated"
        question = f"Move the mounts ({kinds}) to branch {self.result.chosen} of the plan?"
        detail = (
            f"{moves}. Each move goes through the detector guard (the shutter is shut for a "
            "path that passes bright light) and the shutter is shut afterwards. Beam blocks in "
            "place? Follow your local laser-safety rules and your laser safety officer."
        )

        def answered(yes: bool | None) -> None:
            if yes:
                self.moving = True
                self.moved("moving the mounts…")
                self.move_worker(targets, dict(self.desk.readings))
            else:
                self.moved("not moved (cancelled)")

        self.app.push_screen(Confirm(question, detail, yes="Move"), answered)

    @work(thread=True, exclusive=True, group="plan-move")
    def move_worker(self, targets: dict[str, float], readings: dict[str, float]) -> None:
        try:
            message = MountsMoved(self.backend.move_mounts(targets, readings))
        except AlignerError as exc:
            message = MountsMoved(error=str(exc))
        self.post_message(message)

    @on(MountsMoved)
    def mounts_moved(self, event: MountsMoved) -> None:
        self.moving = False
        if event.error or event.result is None:
            self.moved(f"the move stopped: {event.error}", error=True)
            return
        from ...run.station import shutter_words

        r = event.result
        self.desk.readings = {**self.desk.readings, **r.readings}
        done = ", ".join(f"{m.mount} reads {m.readback_deg:.4f}°" for m in r.moves)
        notes = "".join(f" ({m.note})" for m in r.moves if m.note)
        stopped = f"STOPPED: {r.error}. " if r.error else ""
        self.moved(
            f"{stopped}moved: {done or 'nothing'}{notes}; {shutter_words(r.shutter)}. The bench "
            "screen now shows these read-backs.",
            error=bool(r.error) or r.shutter in ("failed", "none"),
        )

    def moved(self, text: str, *, error: bool = False) -> None:
        """The line saying what the last move to the plan did."""
        self.status_line("#plan-moved", text, error=error)

    def action_toggle_axis(self) -> None:
        axis = self.query_one("#axis", Select)
        axis.value = "im" if axis.value == "re" else "re"
