"""The desk's sweep screen while a point is being counted, and what it checks before a run:
Ctrl+P stops a long count at its next gate (the point discarded, shutter shut, the run
resumable), a quit question asked during a run is asked again when the run ends first, the
dwell takes the command line's bounds under the desk's own field name, and targets beyond
the bench's combined limit are warned of with the engine's words.

The counter is the simulated one, slowed to a short real pause per gate so a stop can land
while a point is counted; nothing is timed: the tests count gates."""

from __future__ import annotations

import threading

import pytest
from test_tui_support import desk, settle, text_of
from textual.widgets import Input

from aligner.bench import load_bench
from aligner.run.log import RunLog
from aligner.run.schedule import parse_schedule
from aligner.run.station import Station
from aligner.run.sweep import plan_warnings
from aligner.tui.screens.confirm import Confirm
from aligner.tui.screens.sweep import DEFAULT_SCHEDULE
from aligner_drivers.sim import FunctionCounter

SIZE = (80, 24)
#: Real pause per gate (s): a 600 s dwell (601 gates) would take two minutes unstopped.
GATE_PAUSE_S = 0.2


@pytest.fixture(scope="module")
def bench():
    return load_bench("demo")


class SlowGates:
    """Opens the station with its counter slowed down; counts the gates and says when the
    first one has started."""

    def __init__(self) -> None:
        self.gates = 0
        self.counting = threading.Event()
        self.station: Station | None = None

    def open(self, bench) -> Station:
        station = Station.open(bench)
        inner = station.devices.counter

        def count(gate_s: float) -> tuple[int, ...]:
            self.gates += 1
            self.counting.set()
            threading.Event().wait(GATE_PAUSE_S)
            return inner.count(gate_s)

        station.devices.counter = FunctionCounter(count, channels=inner.channels)
        self.station = station
        return station


async def start(pilot, schedule: str, dwell: str) -> None:
    await pilot.press("f4")
    await pilot.pause()
    pilot.app.screen.query_one("#schedule", Input).value = schedule
    pilot.app.screen.query_one("#dwell", Input).value = dwell
    await pilot.press("ctrl+s")


async def until(pilot, test, what: str, tries: int = 300) -> None:
    for _ in range(tries):
        await pilot.pause(0.05)
        if test():
            return
    raise AssertionError(f"never saw {what}")


async def test_ctrl_p_stops_a_long_count_at_its_next_gate(bench, tmp_path):
    slow = SlowGates()
    app = desk(bench, tmp_path, station_factory=slow.open)
    async with app.run_test(size=SIZE) as pilot:
        await start(pilot, "list:0.5,0.8", "600")
        await until(pilot, slow.counting.is_set, "the count start")
        await pilot.press("ctrl+p")
        asked_at = slow.gates
        await until(pilot, lambda: not app.backend.sweeping, "the pause")
        await settle(pilot)
        assert slow.gates <= asked_at + 1  # the gate under way, and no other
        status = text_of(app, "#sweep-status")
        assert "paused as you asked" in status and "shutter shut" in status
        assert "0 of 2 points logged" in status
        assert "partial count is discarded" in text_of(app, "#sweep-events")
        assert slow.station is not None and not slow.station.devices.shutter.is_open()
    with RunLog(tmp_path / "runs.sqlite") as log:
        (run,) = log.runs()
        assert run.status == "interrupted" and log.points(run.id) == []
        assert run.dwell_s == 600


async def test_the_quit_question_follows_a_run_that_ends_first(bench, tmp_path):
    slow = SlowGates()
    app = desk(bench, tmp_path, station_factory=slow.open)
    async with app.run_test(size=SIZE) as pilot:
        await start(pilot, "list:0.5", "2")  # 3 gates
        await until(pilot, slow.counting.is_set, "the count start")
        await pilot.press("ctrl+q")
        await pilot.pause()
        assert "A run is going" in text_of(app, "#confirm-question")
        await until(pilot, lambda: not app.backend.sweeping, "the end of the run")
        await settle(pilot)
        assert isinstance(app.screen, Confirm)
        question = text_of(app, "#confirm-question")
        assert "The run has ended" in question and "A run is going" not in question
        await pilot.press("y")
        await settle(pilot)
    assert app.return_code == 0
    with RunLog(tmp_path / "runs.sqlite") as log:
        (run,) = log.runs()
    assert run.status == "complete"  # nothing was paused: the run had ended


async def test_the_dwell_takes_the_command_line_bounds_named_as_the_field(bench, tmp_path):
    app = desk(bench, tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.press("f4")
        await pilot.pause()
        app.screen.query_one("#dwell", Input).value = "99999"
        app.screen.query_one("#dwell", Input).focus()
        await pilot.press("enter")
        await settle(pilot)
        status = text_of(app, "#sweep-status")
        # the wording of `aligner sweep --dwell 99999` (argparse's "argument --dwell: ...")
        assert "dwell 99999 is outside the allowed range (from 0.001 to 3600)" in status
        assert "--" not in status
        app.screen.query_one("#schedule", Input).value = "sideways:1:2:3"
        await pilot.press("ctrl+s")
        await settle(pilot)
        status = text_of(app, "#sweep-status")
        assert "schedule 'sideways:1:2:3': unknown form" in status and "--" not in status
    assert app.backend.opened is False  # nothing was opened, nothing moved


async def test_targets_beyond_the_combined_limit_are_warned_of(bench, tmp_path):
    app = desk(bench, tmp_path)
    async with app.run_test(size=(120, 36)) as pilot:
        await pilot.press("f4")
        await pilot.pause()
        app.screen.query_one("#schedule", Input).focus()
        await pilot.press("enter")
        await settle(pilot)
        (expected,) = plan_warnings(bench, parse_schedule(DEFAULT_SCHEDULE))
        assert "WARNING: targets beyond the bench's limit" in text_of(app, "#sweep-status")
        assert " ".join(expected.split()) in text_of(app, "#sweep-events")
        app.screen.query_one("#schedule", Input).value = "amplification:5:40:4"
        await pilot.press("enter")
        await settle(pilot)
        assert plan_warnings(bench, parse_schedule("amplification:5:40:4")) == ()
        assert "WARNING" not in text_of(app, "#sweep-status")
        assert "beyond" not in text_of(app, "#sweep-events")
