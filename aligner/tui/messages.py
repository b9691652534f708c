"""App-wide messages of the desk, as small dataclasses.

Messages posted from worker threads carry complete, immutable snapshots, so a newer one of
the same kind may replace an older one still waiting in the queue (``can_replace``): a fast
sweep cannot flood the UI.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

from textual.message import Message

__all__ = [
    "ApplyReadings",
    "LimitsReady",
    "PlanReady",
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
    """The limits of amplification for ``readings``; ``error`` instead when they failed."""

    readings: Mapping[str, float]
    limits: Any = None
    error: str = ""


@dataclass
class PlanReady(Message):
    """A planner result for ``request`` (the target), or the engine's message when the target
    is infeasible or the input bad (``error``, with ``limit`` naming what limits it)."""

    request: Mapping[str, Any]
    plan: Any = None
    error: str = ""
    limit: str = ""


@dataclass
class SweepChecked(Message):
    """The sweep form checked: a ``SweepPreview`` (or the engine's ``error``); ``start`` when
    the operator asked to start it (Ctrl+S) rather than only to check it (Enter)."""

    start: bool
    preview: Any = None
    error: str = ""


@dataclass
class SweepStarted(Message):
    """A sweep created (or resumed) run ``run_id`` of ``total`` points: the planned readings
    of the imbalance mount (deg) and the points already logged (on a resume)."""

    run_id: int
    total: int
    imbalance_readings: tuple[float, ...] = ()
    points: tuple[Any, ...] = ()


@dataclass
class SweepProgress(Message):
    """Everything measured so far in run ``run_id``: points and events (snapshots)."""

    run_id: int
    done: int
    total: int
    points: tuple[Any, ...]
    events: tuple[Any, ...] = field(default=())

    def can_replace(self, message: Message) -> bool:
        return isinstance(message, SweepProgress) and message.run_id == self.run_id


@dataclass
class SweepEnded(Message):
    """The sweep ended: the engine's ``SweepResult``, or ``error`` when it could not start
    or stopped on an error before a result."""

    result: Any = None
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

    result: Any = None
    error: str = ""
