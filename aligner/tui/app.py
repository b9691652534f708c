"""The desk app: the screens over one bench, switched with F2 and up; F1 lists the keys.

The app holds the backend (bench, engine calls, devices), the current readings and the points
of the latest sweep; the screens do the rest. Each screen is imported the first time it is
shown, so the desk starts with only what the bench screen needs. Build the app with
:func:`make_app` (the command line and the tests both do).
"""

from __future__ import annotations

import contextlib
import importlib
import os
import threading
from collections.abc import Callable
from concurrent.futures import Future
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any, ClassVar

from textual import on
from textual.app import App
from textual.binding import Binding, BindingType
from textual.screen import Screen

from . import keys
from .backend import DeskBackend
from .messages import ApplyReadings, ReadingsChanged, RecipeEnded, SweepEnded

if TYPE_CHECKING:
    from ..run.log import LoggedPoint

__all__ = ["SCREENS", "DeskApp", "ScreenEntry", "make_app"]


@dataclass(frozen=True)
class ScreenEntry:
    """One screen of the desk: its mode name, the key that shows it, its label in the top bar
    and where its class lives (``"module:Class"``, imported when first shown)."""

    mode: str
    key: str
    label: str
    target: str

    def make(self) -> Screen[Any]:
        """A new instance of the screen."""
        module, name = self.target.split(":")
        screen: Screen[Any] = getattr(importlib.import_module(module), name)()
        return screen


#: The desk's screens in the order the top bar lists them; add a screen with one entry here.
SCREENS = (
    ScreenEntry("bench", "f2", "Bench", "aligner.tui.screens.bench:BenchScreen"),
    ScreenEntry("plan", "f3", "Plan", "aligner.tui.screens.plan:PlanScreen"),
    ScreenEntry("sweep", "f4", "Sweep", "aligner.tui.screens.sweep:SweepScreen"),
    ScreenEntry("meter", "f5", "Meter", "aligner.tui.screens.meter:MeterScreen"),
    ScreenEntry("devices", "f6", "Devices", "aligner.tui.screens.devices:DevicesScreen"),
    ScreenEntry("log", "f7", "Log", "aligner.tui.screens.log:LogScreen"),
    ScreenEntry("recipe", "f8", "Recipes", "aligner.tui.screens.recipe:RecipeScreen"),
)


class DeskApp(App[int]):
    """The operator's desk for one bench.

    ``catch_signals`` (the command line sets it) makes SIGTERM, SIGHUP and SIGINT end the desk
    the way quitting does: a running sweep or recipe pauses, a count in progress stopping
    before its next gate (mounts stopped, shutter shut, the run resumable) and the meter
    stops; the app then exits with 128 + the signal number.
    """

    CSS_PATH: ClassVar = ["desk.tcss"]
    TITLE = "aligner desk"
    ENABLE_COMMAND_PALETTE = False
    HORIZONTAL_BREAKPOINTS = [(0, "-narrow"), (120, "-wide")]  # noqa: RUF012
    MODES: ClassVar = {s.mode: s.make for s in SCREENS}
    DEFAULT_MODE = "bench"
    BINDINGS: ClassVar[list[BindingType]] = [
        keys.HELP,
        *(
            Binding(s.key, f"switch_mode('{s.mode}')", s.label, priority=True, show=False)
            for s in SCREENS
        ),
        keys.QUIT,
    ]

    def __init__(self, backend: DeskBackend, *, catch_signals: bool = False) -> None:
        super().__init__()
        self.backend = backend
        self.screens = SCREENS
        #: The readings (deg) the bench screen shows and the plan and sweep start from.
        self.readings: dict[str, float] = dict(backend.bench.readings())
        #: The points of the latest sweep (for the working-point plots).
        self.sweep_points: tuple[LoggedPoint, ...] = ()
        #: The signal that ended the desk, if one did.
        self.signalled: int | None = None
        self._catch_signals = catch_signals
        self._previous_handlers: dict[int, Any] = {}
        self._quit_after_sweep = False
        self._quit_question: Screen[Any] | None = None
        self._asks: set[Future[str | None]] = set()
        self._exit_code = 0
        backend.ask = self.ask_operator
        backend.tell = self.tell_operator

    # -- readings ------------------------------------------------------------------------------

    @on(ReadingsChanged)
    def readings_changed(self, event: ReadingsChanged) -> None:
        self.readings = dict(event.readings)

    @on(ApplyReadings)
    def apply_readings(self, event: ApplyReadings) -> None:
        self.readings = {**self.readings, **event.readings}
        self.switch_mode("bench")
        self.notify(f"readings from {event.origin} put on the bench screen (nothing moved)")

    # -- help and quitting ---------------------------------------------------------------------

    def action_help(self) -> None:
        """List every key of the current screen."""
        from .screens.help import HelpScreen

        if isinstance(self.screen, HelpScreen):
            self.screen.dismiss()
        else:
            self.push_screen(HelpScreen(self.screen))

    async def action_quit(self) -> None:
        """Quit; while a sweep runs, ask first, then pause it (mounts stopped, shutter shut)."""
        from .screens.confirm import Confirm

        if not self.backend.sweeping:
            self.backend.stop_meter()
            self.exit()
            return
        if isinstance(self.screen, Confirm):
            return  # already asking

        def answered(yes: bool | None) -> None:
            self._quit_question = None
            if yes:
                self.end_after_sweep(0)  # quits at once if the run has ended meanwhile

        self._quit_question = Confirm(
            "A run is going (a sweep or a recipe). Pause it at its next safe point and quit?",
            "The mounts stop and the shutter shuts; the run stays resumable.",
            yes="Pause and quit",
            no="Keep running",
        )
        self.push_screen(self._quit_question, answered)

    def end_after_sweep(self, code: int) -> None:
        """Ask a running sweep to pause and exit with ``code`` once it has (at once if none)."""
        self.backend.stop_meter()
        if not self.backend.sweeping:
            self._leave(code)
            return
        self._quit_after_sweep = True
        self._exit_code = code
        self.backend.request_stop(self.signalled or 0)
        self.notify("pausing the run before quitting: the count in progress stops…")

    @on(SweepEnded)
    @on(RecipeEnded)
    def sweep_ended(self) -> None:
        if self._quit_after_sweep:
            self._leave(self._exit_code)
            return
        question = self._quit_question
        if question is not None and self.screen is question:
            self.ask_quit_after_run(question)

    def ask_quit_after_run(self, question: Screen[Any]) -> None:
        """The run ended while the quit question asked about pausing it: ask again, about
        quitting only, so the answer is given to the state as it is now."""
        from .screens.confirm import Confirm

        self._quit_question = None
        question.dismiss(None)

        def answered(yes: bool | None) -> None:
            if yes:
                self.end_after_sweep(0)

        self.push_screen(
            Confirm(
                "The run has ended (see the status line); nothing is running now. Quit?",
                yes="Quit",
                no="Stay",
            ),
            answered,
        )

    def _leave(self, code: int) -> None:
        """Exit with ``code``. After a hang-up the terminal is gone: the bench is secured and
        the process ends without the UI's own shutdown, whose writes to a terminal that no
        longer exists can block for ever."""
        import signal

        if self.signalled == getattr(signal, "SIGHUP", None):
            self.backend.shutdown()  # waits for the meter to stop; shuts the shutter
            os._exit(code)
        self.exit(return_code=code)

    # -- signals -------------------------------------------------------------------------------

    def on_mount(self) -> None:
        if self._catch_signals and threading.current_thread() is threading.main_thread():
            import asyncio
            import signal

            loop = asyncio.get_running_loop()
            for name in ("SIGTERM", "SIGHUP", "SIGINT"):
                signum = getattr(signal, name, None)
                if signum is not None:
                    self._previous_handlers[signum] = signal.getsignal(signum)
                    loop.add_signal_handler(signum, self.stop_for_signal, int(signum))

    def stop_for_signal(self, signum: int) -> None:
        """End the desk for signal ``signum``: pause a sweep, stop the meter, then exit with
        128 + ``signum``."""
        self.signalled = signum
        self.backend.signalled = signum
        self.end_after_sweep(128 + signum)

    def on_unmount(self) -> None:
        for future in list(self._asks):  # a worker waiting for an answer gets none
            if not future.done():
                future.set_result(None)
        if self._previous_handlers:
            import asyncio
            import signal

            loop = asyncio.get_running_loop()
            for signum, handler in self._previous_handlers.items():
                loop.remove_signal_handler(signum)
                signal.signal(signum, handler)  # the command line's handler, for the clean-up
        self.backend.stop_meter()

    # -- questions from worker threads ---------------------------------------------------------

    def ask_operator(self, prompt: str) -> str | None:
        """Ask the operator for one typed value (from a worker thread: a typed-in counter or
        pointer reader); None when the desk ends before an answer."""
        from .screens.typed import TypedValue

        answer: Future[str | None] = Future()
        self._asks.add(answer)
        try:
            self.call_from_thread(
                self.push_screen, TypedValue(prompt), lambda value: answer.set_result(value)
            )
            return answer.result()
        except RuntimeError:  # the app is no longer running
            return None
        finally:
            self._asks.discard(answer)

    def tell_operator(self, text: str) -> None:
        """Show a typed-in device's note (from a worker thread)."""
        from ..text import clean

        with contextlib.suppress(RuntimeError):  # the app is no longer running
            self.call_from_thread(self.notify, clean(text), markup=False, timeout=10)


def make_app(
    bench: str | Path = "demo",
    *,
    db: str | Path | None = None,
    realtime: bool = False,
    catch_signals: bool = False,
    station_factory: Callable[..., Any] | None = None,
) -> DeskApp:
    """The desk for a bench file (or ``"demo"``) with its run log ``db`` (default: the user
    data folder). ``realtime`` makes simulated devices take real time to move and count;
    ``catch_signals`` see :class:`DeskApp`; ``station_factory`` opens the devices (tests)."""
    from ..bench import load_bench

    backend = DeskBackend(
        load_bench(bench), db_path=db, realtime=realtime, station_factory=station_factory
    )
    backend.run_log().close()  # a run log that cannot be opened is refused before the UI starts
    return DeskApp(backend, catch_signals=catch_signals)
