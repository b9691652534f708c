"""The desk app: four screens over one bench, switched with F1-F4.

The app holds the backend (bench, engine calls, devices) and the current readings; the screens
do the rest. Build it with :func:`make_app` (the command line and the tests both do).
"""

from __future__ import annotations

from pathlib import Path
from typing import ClassVar

from textual import on
from textual.app import App
from textual.binding import Binding, BindingType

from .backend import DeskBackend
from .messages import ApplyReadings, ReadingsChanged, RecipeEnded, SweepEnded
from .screens.bench import BenchScreen
from .screens.log import LogScreen
from .screens.plan import PlanScreen
from .screens.recipe import RecipeScreen
from .screens.sweep import SweepScreen

__all__ = ["DeskApp", "make_app"]


class DeskApp(App[int]):
    """The operator's desk for one bench."""

    CSS_PATH: ClassVar = ["desk.tcss"]
    TITLE = "aligner desk"
    ENABLE_COMMAND_PALETTE = False
    MODES: ClassVar = {
        "bench": BenchScreen,
        "plan": PlanScreen,
        "sweep": SweepScreen,
        "log": LogScreen,
        "recipe": RecipeScreen,
    }
    DEFAULT_MODE = "bench"
    BINDINGS: ClassVar[list[BindingType]] = [
        Binding("f1", "switch_mode('bench')", "Bench", priority=True),
        Binding("f2", "switch_mode('plan')", "Plan", priority=True),
        Binding("f3", "switch_mode('sweep')", "Sweep", priority=True),
        Binding("f4", "switch_mode('log')", "Log", priority=True),
        Binding("f5", "switch_mode('recipe')", "Recipes", priority=True),
        Binding("ctrl+q", "quit", "Quit", priority=True),
    ]

    def __init__(self, backend: DeskBackend) -> None:
        super().__init__()
        self.backend = backend
        #: The readings (deg) the bench screen shows and the plan and sweep start from.
        self.readings: dict[str, float] = dict(backend.bench.readings())
        self._quit_after_sweep = False

    @on(ReadingsChanged)
    def readings_changed(self, event: ReadingsChanged) -> None:
        self.readings = dict(event.readings)

    @on(ApplyReadings)
    def apply_readings(self, event: ApplyReadings) -> None:
        self.readings = {**self.readings, **event.readings}
        self.switch_mode("bench")
        self.notify(f"readings from {event.origin} put on the bench screen (nothing moved)")

    async def action_quit(self) -> None:
        """Quit; a running sweep is paused first (mounts stopped, shutter shut)."""
        if self.backend.sweeping:
            self._quit_after_sweep = True
            self.backend.request_stop()
            self.notify("pausing the sweep before quitting…")
            return
        self.exit(0)

    @on(SweepEnded)
    @on(RecipeEnded)
    def sweep_ended(self) -> None:
        if self._quit_after_sweep:
            self.exit(0)

    def on_unmount(self) -> None:
        self.backend.close()


def make_app(
    bench: str | Path = "demo", *, db: str | Path | None = None, realtime: bool = False
) -> DeskApp:
    """The desk for a bench file (or ``"demo"``) with its run log ``db`` (default: the user
    data folder). ``realtime`` makes simulated devices take real time to move and count."""
    from ..bench import load_bench

    backend = DeskBackend(load_bench(bench), db_path=db, realtime=realtime)
    backend.run_log().close()  # a run log that cannot be opened is refused before the UI starts
    return DeskApp(backend)
