"""The desk (Textual UI), driven as an operator would with Pilot, on the demo bench with
simulated devices and a temporary run log.

The desk computes nothing itself: every check compares what a screen shows with the engine
function the screen calls (aligner.prediction, aligner.planning, aligner.run), which have their own
tests against published results.
"""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import pytest
from test_tui_support import desk, limits_shown, reading_box, settle, shown_in, text_of
from textual.widgets import Checkbox, Input, ProgressBar, Select, Static

from aligner.bench import load_bench
from aligner.errors import InfeasibleTarget, InputError
from aligner.planning import plan
from aligner.prediction import limits, predict
from aligner.run.log import RunLog
from aligner.run.schedule import parse_schedule, plan_points
from aligner.run.station import Station
from aligner.tui.app import DeskApp
from aligner.tui.backend import DeskBackend
from aligner.tui.format import num, rate, sci
from aligner.tui.messages import SweepEnded, SweepProgress
from aligner.tui.screens.confirm import Confirm
from aligner.tui.screens.typed import TypedValue
from aligner.tui.widgets.safety import SAFETY_TEXT

SIZE = (120, 36)


@pytest.fixture(scope="module")
def bench():
    return load_bench("demo")


# -- every screen ------------------------------------------------------------------------------


async def test_every_screen_has_the_safety_line_and_its_own_bar(bench, tmp_path):
    app = desk(bench, tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        for key, mode in (
            ("f2", "bench"),
            ("f3", "plan"),
            ("f4", "sweep"),
            ("f5", "meter"),
            ("f6", "devices"),
            ("f7", "log"),
        ):
            await pilot.press(key)
            await settle(pilot)
            assert app.current_mode == mode
            safety = text_of(app, ".safety-line")
            assert "laser safety officer" in safety and "detector" in safety
            assert "Local laser-safety rules" in safety
            assert " ".join(SAFETY_TEXT.split()) == safety
            bar = app.screen.query_one(".desk-bar")
            assert bar.current == mode


# -- bench ---------------------------------------------------------------------------------------


async def test_bench_shows_the_engine_prediction_and_steps_by_the_mount_resolution(bench, tmp_path):
    app = desk(bench, tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await settle(pilot)
        p = predict(bench, bench.readings())
        shown = text_of(app, "#prediction-numbers")
        assert sci(p.leak_rate) in shown
        assert num(p.amplification_exact, 5) in shown
        assert f"{float(p.imbalance_deg):+.4f}" in shown
        # the imbalance mount's input has the focus; three steps up
        await pilot.press("up", "up", "up")
        await settle(pilot)
        step = bench.mounts["analyzer"].resolution_deg
        expected = bench.readings()["analyzer"] + 3 * step
        assert app.readings["analyzer"] == pytest.approx(expected, abs=1e-9)
        p2 = predict(bench, app.readings)
        assert num(p2.amplification_exact, 5) in text_of(app, "#prediction-numbers")
        assert num(p2.amplification_exact, 5) != num(p.amplification_exact, 5)
        # once the keys pause, the beam path shows the element angle the engine gives
        await limits_shown(pilot)
        assert f"{float(p2.angles_deg['analyzer']):.3f}°" in text_of(app, "#beam-path")


async def test_bench_limits_arrive_from_the_worker(bench, tmp_path):
    app = desk(bench, tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await limits_shown(pilot)
        lim = limits(bench, bench.readings())
        shown = text_of(app, "#limits")
        assert num(lim.max_amplification, 4) in shown
        assert f"limited by {lim.limited_by}" in shown
        for mechanism in lim.mechanisms:
            assert mechanism in shown


async def test_bench_warns_plainly_above_the_safe_rate(bench, tmp_path):
    app = desk(bench, tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await settle(pilot)
        status = app.screen.query_one("#detector-status")
        assert not status.has_class("danger")
        box = reading_box(app, "analyzer")
        box.value = "50"  # far from the null: nearly full transmission
        await settle(pilot)
        p = predict(bench, {**bench.readings(), "analyzer": 50.0})
        assert bool(p.over_safe_rate)  # the engine agrees the detector would be overexposed
        assert status.has_class("danger")
        shown = text_of(app, "#detector-status")
        assert "ABOVE THE SAFE RATE" in shown and rate(bench.detector.safe_rate) in shown
        # back to the file readings: the warning goes away
        await pilot.press("ctrl+f")
        await settle(pilot)
        assert not status.has_class("danger")
        assert app.readings == bench.readings()


async def test_bench_refuses_a_reading_outside_travel(bench, tmp_path):
    app = desk(bench, tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await settle(pilot)
        before = dict(app.readings)
        reading_box(app, "pre_hwp").value = "400"
        await settle(pilot)
        problem = text_of(app, "#reading-problem")
        assert "pre_hwp" in problem and "outside its travel" in problem and "170" in problem
        assert app.readings == before
        reading_box(app, "pre_hwp").value = "abc"
        await settle(pilot)
        assert "not a number" in text_of(app, "#reading-problem")
        assert app.readings == before


# -- plan ----------------------------------------------------------------------------------------


async def test_plan_shows_the_engine_plan_and_applies_it_to_the_bench(bench, tmp_path):
    app = desk(bench, tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.press("f3")
        await settle(pilot)
        expected = plan(bench, amplification=40.0, axis="re", exact=False)
        assert "planned" in text_of(app, "#plan-status")
        shown = text_of(app, "#plan-result")
        for name, reading in expected.quantized.settings.items():
            assert f"{name} {reading:.4f}° {expected.settings[name]:.5f}°" in shown
        assert app.screen.query_one("#branches").row_count == len(expected.branches)
        assert expected.tolerance is not None and expected.tolerance.dominant in shown
        for s in expected.sensitivity:
            assert f"{s.mount} {num(s.derivative, 4)} per deg" in shown
        await pilot.press("ctrl+o")  # the readings to the bench screen; nothing moves
        await settle(pilot)
        assert app.current_mode == "bench"
        for name, reading in expected.quantized.settings.items():
            assert app.readings[name] == pytest.approx(reading)
            assert reading_box(app, name).value == f"{reading:.{3}f}"
        assert not app.backend.opened  # no device was even opened


async def test_plan_infeasible_target_shows_the_engine_message(bench, tmp_path):
    app = desk(bench, tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.press("f3")
        await settle(pilot)
        target = app.screen.query_one("#target", Input)
        target.value = "500"
        await pilot.press("enter")
        await settle(pilot)
        with pytest.raises(InfeasibleTarget) as info:
            plan(bench, amplification=500.0, axis="re", samples=0, predict=False)
        assert "cannot plan" in text_of(app, "#plan-status")
        assert info.value.limit in text_of(app, "#plan-status")
        assert " ".join(str(info.value).split())[:60] in text_of(app, "#plan-result")
        before = dict(app.readings)
        await pilot.press("ctrl+o")  # nothing to copy
        assert app.readings == before and app.current_mode == "plan"


async def test_plan_form_states_axis_and_exact_in_words(bench, tmp_path):
    app = desk(bench, tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.press("f3")
        await settle(pilot)
        assert "axis: re (position)" in shown_in(app, "#axis")
        assert "exact response: off" in shown_in(app, "#exact")
        assert text_of(app, "#plan-warning") == ""  # the demo's position readout sees Re
        await pilot.press("ctrl+t")
        await pilot.click("#exact")
        await settle(pilot)
        assert "axis: im (momentum)" in shown_in(app, "#axis")
        assert "exact response: on" in shown_in(app, "#exact")
        assert app.screen.query_one("#axis", Select).value == "im"
        assert app.screen.query_one("#exact", Checkbox).value
        assert text_of(app, "#plan-status").startswith("planned")
        assert "(im axis)" in text_of(app, "#plan-result")
        assert "exact amplification" in text_of(app, "#plan-result")


async def test_plan_for_the_axis_the_readout_does_not_see_says_so(bench, tmp_path):
    # a position readout measures Re A_w, a momentum readout Im A_w
    # (Jozsa, Phys. Rev. A 76, 044103 (2007))
    assert bench.coupling.readout == "position"
    app = desk(bench, tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.press("f3")
        await settle(pilot)
        await pilot.press("ctrl+t")
        await settle(pilot)
        note = text_of(app, "#plan-warning")
        assert "position readout, which measures Re A_w" in note
        assert "imaginary weak value" in note and "momentum readout" in note
        expected = plan(bench, amplification=40.0, axis="im", exact=False)
        await pilot.press("ctrl+o")
        await settle(pilot)
        p = predict(bench, app.readings)
        assert p.axis == "re" and abs(complex(p.weak_value).imag) > abs(complex(p.weak_value).real)
        assert app.readings["analyzer"] == pytest.approx(expected.quantized.settings["analyzer"])
        shown = text_of(app, "#prediction-numbers")
        assert f"ampl. (Re A_w) linear {num(p.amplification_linear, 5)}" in shown
        assert "A_w is mostly imaginary; a position readout sees Re A_w only" in shown


async def test_plan_target_typed_in_a_burst_keeps_every_key(bench, tmp_path):
    app = desk(bench, tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.press("f3")
        await settle(pilot)
        app.screen.query_one("#target", Input).focus()
        await pilot.press("end", "backspace", "backspace", "7", "5", "enter")
        assert app.screen.query_one("#target", Input).value == "75"
        await settle(pilot)
        assert text_of(app, "#plan-status").startswith("planned")
        expected = plan(bench, amplification=75.0, axis="re", exact=False)
        reading = expected.quantized.settings["analyzer"]
        assert f"analyzer {reading:.4f}°" in text_of(app, "#plan-result")


# -- sweep ---------------------------------------------------------------------------------------


async def start_sweep(pilot, schedule: str, dwell: str) -> None:
    await pilot.press("f4")
    await pilot.pause()
    app = pilot.app
    app.screen.query_one("#schedule", Input).value = schedule
    app.screen.query_one("#dwell", Input).value = dwell
    await pilot.press("ctrl+s")


def runs_in(tmp_path: Path) -> list:
    with RunLog(tmp_path / "runs.sqlite") as log:
        return log.runs()


async def test_enter_in_a_sweep_field_only_checks_it(bench, tmp_path):
    app = desk(bench, tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.press("f4")
        await pilot.pause()
        app.screen.query_one("#schedule", Input).value = "linear:0.5:2.0:4"
        dwell = app.screen.query_one("#dwell", Input)
        dwell.focus()
        await pilot.press("end", "backspace", "0", ".", "5", "enter")
        await settle(pilot)
        assert dwell.value == "0.5"
        status = text_of(app, "#sweep-status")
        assert "checked: 4 points" in status and "analyzer" in status and "Ctrl+S" in status
        assert runs_in(tmp_path) == [] and not app.backend.sweeping
        app.screen.query_one("#schedule", Input).focus()
        await pilot.press("enter")
        await settle(pilot)
        assert runs_in(tmp_path) == []


def hardware_desk(bench, tmp_path: Path) -> DeskApp:
    """The demo bench with its analyzer on a (generic line-protocol) driver; the devices are
    the simulated ones, so nothing real is opened."""
    real = bench.with_mounts(analyzer=replace(bench.mounts["analyzer"], driver="line:/dev/null"))
    return DeskApp(
        DeskBackend(
            real, db_path=tmp_path / "runs.sqlite", station_factory=lambda b: Station.open(bench)
        )
    )


async def test_sweep_with_real_mounts_asks_first(bench, tmp_path):
    app = hardware_desk(bench, tmp_path)
    assert app.backend.hardware_mounts() == ("analyzer",)
    schedule = "linear:0.5:2.0:4"
    expected = plan_points(bench, parse_schedule(schedule, dwell_s=0.5))
    async with app.run_test(size=SIZE) as pilot:
        await start_sweep(pilot, schedule, "0.5")
        await settle(pilot)
        assert isinstance(app.screen, Confirm)
        question = text_of(app, "#confirm-question")
        assert f"Start sweep: {len(expected)} points" in question
        assert "mounts analyzer will move" in question and "beam blocks in place?" in question
        assert "laser safety officer" in text_of(app, "#confirm-detail")
        await pilot.press("enter")  # Cancel has the focus: Enter does not start
        await settle(pilot)
        assert not isinstance(app.screen, Confirm)
        assert "cancelled" in text_of(app, "#sweep-status") and runs_in(tmp_path) == []
        await pilot.press("ctrl+s")
        await settle(pilot)
        await pilot.press("escape")
        await settle(pilot)
        assert runs_in(tmp_path) == []
        await pilot.press("ctrl+s")
        await settle(pilot)
        await pilot.press("y")
        await settle(pilot)
        assert "complete" in text_of(app, "#sweep-status")
        (run,) = runs_in(tmp_path)
        assert run.status == "complete" and run.points == len(expected)


async def test_sweep_runs_plots_tables_and_logs_every_point(bench, tmp_path):
    app = desk(bench, tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await start_sweep(pilot, "linear:0.5:2.0:4", "0.5")
        await settle(pilot)
        assert "complete" in text_of(app, "#sweep-status")
        bar = app.screen.query_one(ProgressBar)
        assert bar.progress == bar.total == 4
        table = app.screen.query_one("#sweep-points")
        assert table.row_count == 4
        with RunLog(tmp_path / "runs.sqlite") as log:
            (run,) = log.runs()
            points = log.points(run.id)
        assert run.status == "complete" and len(points) == 4
        assert [table.get_row_at(i)[4] for i in range(4)] == [str(p.counts) for p in points]
        plot = app.screen.query_one("#sweep-plot")
        assert len(plot._points) == 4 and plot._curve is not None
        # the shutter is shut at the end of a sweep
        assert not app.backend.station(app.readings).devices.shutter.is_open()


async def test_sweep_pause_leaves_the_bench_safe_and_resume_completes(bench, tmp_path):
    app = desk(bench, tmp_path, realtime=True)
    async with app.run_test(size=SIZE) as pilot:
        await start_sweep(pilot, "linear:0.5:1.5:6", "0.2")
        await wait_for_first_point(pilot)
        await pilot.press("ctrl+p")
        await settle(pilot)
        status = text_of(app, "#sweep-status")
        assert "paused as you asked" in status and "shutter shut" in status
        assert "operator:" not in status and not app.screen.query_one(
            "#sweep-status", Static
        ).has_class("problem")
        events = text_of(app, "#sweep-events")
        assert "paused by the operator" in events and "paused: paused" not in events
        devices = app.backend.station(app.readings).devices
        assert not devices.shutter.is_open()
        assert not any(m.is_moving() for m in devices.mounts.values())
        with RunLog(tmp_path / "runs.sqlite") as log:
            (run,) = log.runs()
        assert run.status == "interrupted" and 0 < run.points < 6
        await pilot.press("ctrl+g")
        await settle(pilot)
        assert "complete" in text_of(app, "#sweep-status")
        with RunLog(tmp_path / "runs.sqlite") as log:
            run = log.run(run.id)
            indices = [p.idx for p in log.points(run.id)]
        assert run.status == "complete" and indices == list(range(6))


async def test_sweep_states_bad_input_and_guard_refusals_plainly(bench, tmp_path):
    app = desk(bench, tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await start_sweep(pilot, "sideways:1:2:3", "1")
        await settle(pilot)
        with pytest.raises(InputError) as bad:
            parse_schedule("sideways:1:2:3")
        status = text_of(app, "#sweep-status")
        assert "not started" in status and "unknown form 'sideways'" in status
        assert str(bad.value)[:60] in text_of(app, "#sweep-events")
        # far from the null the detector guard refuses the point before anything moves
        await start_sweep(pilot, "list:60", "1")
        await settle(pilot)
        events = text_of(app, "#sweep-events")
        assert "detector guard" in events and "safe_rate" in events
        assert app.screen.query_one("#sweep-status", Static).has_class("problem")
        assert runs_in(tmp_path) == []  # refused before its first point: no run is logged


async def test_a_typed_in_counter_asks_on_the_desk(bench, tmp_path):
    text = bench.path.read_text(encoding="utf-8")
    path = tmp_path / "typed-bench.toml"
    path.write_text(
        text.replace('[devices.counter]\ndriver = "sim"', '[devices.counter]\ndriver = "manual"'),
        encoding="utf-8",
    )
    app = desk(load_bench(path), tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await start_sweep(pilot, "list:1.0", "0.5")
        asked = []
        for _ in range(8):  # a probe gate and the rest of the dwell, two channels each
            for _ in range(200):
                await pilot.pause(0.05)
                if isinstance(app.screen, TypedValue) or not app.backend.sweeping:
                    break
            if not isinstance(app.screen, TypedValue):
                break
            asked.append(text_of(app, "#typed-prompt"))
            await pilot.press(*"40", "enter")
        await settle(pilot)
        assert asked and all("counts in" in q for q in asked)
        assert any(q.startswith("post-selected") for q in asked)
        assert any(q.startswith("reference") for q in asked)
        assert "complete" in text_of(app, "#sweep-status")
        with RunLog(tmp_path / "runs.sqlite") as log:
            (run,) = log.runs()
            (point,) = log.points(run.id)
        assert run.data_label == "SIMULATED and TYPED IN"  # the mounts are simulated
        assert point.counts == 40 * sum(q.startswith("post-selected") for q in asked)


# -- log -----------------------------------------------------------------------------------------


async def test_log_lists_runs_and_shows_the_points_of_the_selected_one(bench, tmp_path):
    backend = DeskBackend(bench, db_path=tmp_path / "runs.sqlite")
    for spec in ("linear:0.5:1.0:2", "linear:0.6:1.2:3"):
        backend.sweep(spec, 0.2, bench.readings(), on_point=lambda *a: None)
    backend.close()
    app = desk(bench, tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.press("f7")
        await settle(pilot)
        runs = app.screen.query_one("#runs")
        assert runs.row_count == 2
        assert [runs.get_row_at(i)[4] for i in range(2)] == ["2/2", "3/3"]
        points = app.screen.query_one("#log-points")
        assert points.row_count == 3  # the newest run is selected first
        await pilot.press("up")
        await settle(pilot)
        assert points.row_count == 2
        with RunLog(tmp_path / "runs.sqlite") as log:
            first = log.points(1)
        assert [points.get_row_at(i)[5] for i in range(2)] == [sci(p.leak) for p in first]
        assert "run 1" in str(points.border_title)


async def wait_for_first_point(pilot) -> None:
    for _ in range(200):
        await pilot.pause(0.05)
        if pilot.app.screen.query_one("#sweep-points").row_count:
            return
    raise AssertionError("no point was taken")


async def test_quit_during_a_sweep_asks_first_then_pauses_it(bench, tmp_path):
    app = desk(bench, tmp_path, realtime=True)
    async with app.run_test(size=SIZE) as pilot:
        await start_sweep(pilot, "linear:0.5:1.5:20", "0.2")
        await wait_for_first_point(pilot)
        await pilot.press("ctrl+q")
        await pilot.pause()
        assert isinstance(app.screen, Confirm)
        assert "A run is going (a sweep or a recipe)" in text_of(app, "#confirm-question")
        await pilot.press("n")  # keep it running
        await pilot.pause()
        assert app.backend.sweeping and app.is_running
        await pilot.press("ctrl+q")
        await pilot.pause()
        await pilot.press("y")
        # the desk waits for the sweep to pause after its current point, then exits
        for _ in range(200):
            await pilot.pause(0.05)
            if not app.backend.sweeping:
                break
        await settle(pilot)
    assert app.return_code == 0
    with RunLog(tmp_path / "runs.sqlite") as log:
        (run,) = log.runs()
    assert run.status == "interrupted" and 0 < run.points < 20


def test_sweep_progress_messages_of_one_run_merge():
    older = SweepProgress(1, 1, 5, ("p0",))
    newer = SweepProgress(1, 2, 5, ("p0", "p1"))
    other = SweepProgress(2, 1, 5, ("q0",))
    # each message carries every point so far, so a newer one may stand in for an older one
    assert older.can_replace(newer) and not older.can_replace(other)
    assert not older.can_replace(SweepEnded(error="x"))


async def test_plan_beyond_the_combined_limit_names_the_mechanism(bench, tmp_path):
    lim = limits(bench, bench.readings())
    target = round(lim.max_amplification * 1.3)
    app = desk(bench, tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.press("f3")
        await settle(pilot)
        assert text_of(app, "#plan-warning") == ""  # 40 is below the limit
        app.screen.query_one("#target", Input).value = str(target)
        await pilot.press("enter")
        await settle(pilot)
        warning = text_of(app, "#plan-warning")
        assert f"{target} is beyond this bench's combined limit of" in warning
        assert f"{lim.max_amplification:.4g}" in warning and lim.limited_by in warning


async def test_a_signal_pauses_the_sweep_and_shuts_the_shutter(bench, tmp_path):
    import signal

    app = desk(bench, tmp_path, realtime=True)
    async with app.run_test(size=SIZE) as pilot:
        await start_sweep(pilot, "linear:0.5:1.5:20", "0.2")
        await wait_for_first_point(pilot)
        app.stop_for_signal(signal.SIGTERM)  # what the desk's SIGTERM handler calls
        for _ in range(200):  # the desk exits by itself once the sweep has paused
            await pilot.pause(0.05)
            if app.return_code is not None:
                break
        assert app.return_code == 128 + signal.SIGTERM and app.signalled == signal.SIGTERM
    assert not app.backend.station(app.readings).devices.shutter.is_open()
    with RunLog(tmp_path / "runs.sqlite") as log:
        (run,) = log.runs()
        notes = [e.message for e in log.events(run.id) if e.kind == "note"]
    assert run.status == "interrupted" and 0 < run.points < 20
    assert f"the desk was ended by signal {int(signal.SIGTERM)}" in notes
