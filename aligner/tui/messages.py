"""App-wide messages of the desk, as small dataclasses.

Messages posted from worker threads carry complete, immutable snapshots, so a newer one of
the same kind may replace an older one still waiting in the queue (``can_replace``): a fast
sweep cannot flood the UI.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

from textual.message import Message

if TYPE_CHECKING:
    from ..planning import Plan
    from ..prediction import Limits
    from ..recipe.runner import RecipeRunResult
    from ..run.log import Event, LoggedPoint
    from ..run.sweep import SweepResult
    from .backend import DeviceLine, MoveResult, SweepPreview
    from .metering import MeterSample, MeterState
    from .widgets.working_point import Curve

__all__ = [
    "ApplyReadings",
    "DevicesRead",
    "LimitsReady",
    "MeterChanged",
    "MeterRead",
    "MountsMoved",
    "PlanReady",
    "PlanRequest",
    "ReadingsChanged",
    "RecipeAsks",
    "RecipeEnded",
    "RecipeSaid",
    "RecipeStepState",
    "SweepChecked",
    "SweepEnded",
    "SweepProgress",
    "SweepStarted",
]


@dataclass
class ReadingsChanged(Message):
    """The operator changed mount readings (deg) on the bench screen."""

    readings: Mapping[str, float]


@dataclass
class ApplyReadings(Message):
    """Put these readings (deg) on the bench screen; ``origin`` says where they came from."""

    readings: Mapping[str, float]
    origin: str


@dataclass
class LimitsReady(Message):
    """The limits of amplification for ``readings`` and the prediction curve along the
    imbalance mount there; ``error`` instead when they failed."""

    readings: Mapping[str, float]
    limits: Limits | None = None
    curve: Curve | None = None
    error: str = ""


@dataclass(frozen=True)
class PlanRequest:
    """What the plan screen asks the planner for: ``amplification`` on ``axis`` (``re`` or
    ``im``), the exact pointer response when ``exact``, a chosen ``branch`` or the planner's."""

    amplification: float
    axis: str
    exact: bool
    branch: int | None


@dataclass
class PlanReady(Message):
    """A planner result for ``request`` (the target) with the bench's limits and the curve
    through the planned point, or the engine's message when the target is infeasible or the
    input bad (``error``, with ``limit`` naming what limits it)."""

    request: PlanRequest
    plan: Plan | None = None
    limits: Limits | None = None
    curve: Curve | None = None
    error: str = ""
    limit: str = ""


@dataclass
class MountsMoved(Message):
    """The desk moved mounts (``result``), or ``error`` says why it stopped."""

    result: MoveResult | None = None
    error: str = ""


@dataclass
class SweepChecked(Message):
    """The sweep form checked: a ``SweepPreview`` (or the engine's ``error``); ``start`` when
    the operator asked to start it (Ctrl+S) rather than only to check it (Enter)."""

    start: bool
    preview: SweepPreview | None = None
    error: str = ""


@dataclass
class SweepStarted(Message):
    """A sweep created (or resumed) run ``run_id`` of ``total`` points: the planned readings
    of the imbalance mount (deg), the points already logged (on a resume) and what the run's
    numbers are (:attr:`aligner.run.log.RunRecord.data_label`)."""

    run_id: int
    total: int
    imbalance_readings: tuple[float, ...] = ()
    points: tuple[LoggedPoint, ...] = ()
    label: str = ""


@dataclass
class SweepProgress(Message):
    """Everything measured so far in run ``run_id``: points and events (snapshots)."""

    run_id: int
    done: int
    total: int
    points: tuple[LoggedPoint, ...]
    events: tuple[Event, ...] = field(default=())

    def can_replace(self, message: Message) -> bool:
        return isinstance(message, SweepProgress) and message.run_id == self.run_id


@dataclass
class SweepEnded(Message):
    """The sweep ended: the engine's ``SweepResult``, or ``error`` when it could not start
    or stopped on an error before a result."""

    result: SweepResult | None = None
    error: str = ""


@dataclass
class MeterRead(Message):
    """One gate of the meter (or one typed line)."""

    sample: MeterSample


@dataclass
class MeterChanged(Message):
    """The meter started counting, was refused by the guard, or stopped."""

    state: MeterState


@dataclass
class DevicesRead(Message):
    """The bench's devices and their states, or why they could not be listed (``error``)."""

    lines: tuple[DeviceLine, ...] = ()
    error: str = ""


# -- recipes (posted from the recipe worker) -----------------------------------------------------


@dataclass
class RecipeSaid(Message):
    """A line the running recipe says (cleaned and escaped by the screen)."""

    text: str


@dataclass
class RecipeStepState(Message):
    """Step ``number`` is now ``state`` (``running`` or a state of
    :data:`aligner.recipe.results.STEP_STATES`), with the outcome's ``message``."""

    number: int
    state: str
    message: str = ""


@dataclass
class RecipeAsks(Message):
    """The recipe waits for the operator: ``kind`` ``confirm`` (yes/no) or ``prompt`` (a
    value), with the question's ``text``."""

    kind: str
    text: str


@dataclass
class RecipeEnded(Message):
    """The recipe run ended: the engine's ``RecipeRunResult``, or ``error`` when it could not
    start."""

    result: RecipeRunResult | None = None
    error: str = ""
