"""The devices screen and the move to a plan, driven with Pilot: each declared device with its
kind and state, its last error, an alarm when a device declared real was opened as a
simulation, a question before real devices are opened, and the plan's "move the mounts"
going through the detector guard after a question (nothing moves before the answer)."""

from __future__ import annotations

from dataclasses import replace

import pytest
from test_tui_support import desk, on_screen, seen, settle, text_of

from aligner.bench import load_bench
from aligner.planning import plan
from aligner.run.station import Station
from aligner.tui.screens.confirm import Confirm

SIZE = (100, 40)


@pytest.fixture(scope="module")
def bench():
    return load_bench("demo")


async def test_each_device_with_its_kind_state_and_last_error(bench, tmp_path):
    app = desk(bench, tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.press("f6")
        await settle(pilot)
        await pilot.press("ctrl+r")
        await settle(pilot)
        # the pre-selection waveplate's mount stops answering
        app.backend.station(app.readings).devices.mounts["pre_hwp"].close()
        await pilot.press("ctrl+r")
        await settle(pilot)
        shown = await seen(pilot, "#devices")
        assert "mount pre_hwp SIMULATED" in shown and "state: NOT ANSWERING" in shown
        assert "pre_hwp: the device was closed" in shown  # the driver's own words
        assert "mount analyzer SIMULATED" in shown and "reads 136.0000°" in shown
        assert app.backend.errors["pre_hwp"].startswith("pre_hwp: the device was closed")


async def test_a_real_device_opened_as_a_simulation_is_an_alarm(bench, tmp_path):
    # the analyzer is declared on a serial port; the station opened is the simulated bench,
    # which a real desk never does: the panel must not let it pass quietly
    real = bench.with_mounts(analyzer=replace(bench.mounts["analyzer"], driver="/dev/ttyFAKE0"))
    app = desk(real, tmp_path, station_factory=lambda b: Station.open(bench))
    async with app.run_test(size=SIZE) as pilot:
        await pilot.press("f6")
        await settle(pilot)
        shown = await seen(pilot, "#devices")
        assert "mount analyzer REAL" in shown and "not opened yet" in shown
        await pilot.press("ctrl+r")  # real devices: ask first
        await pilot.pause()
        assert isinstance(app.screen, Confirm)
        assert "laser safety officer" in text_of(app, "#confirm-detail")
        await pilot.press("n")
        await settle(pilot)
        assert not app.backend.opened and "not opened (cancelled)" in on_screen(app)
        await pilot.press("ctrl+r")
        await pilot.pause()
        await pilot.press("y")
        await settle(pilot)
        shown = await seen(pilot, "#devices")
        assert "mount analyzer declared REAL, opened SIMULATED!" in shown
        status = text_of(app, "#devices-status")
        assert "ALARM" in status and "analyzer" in status
        assert app.screen.query_one("#devices-status").has_class("problem")


async def test_move_to_plan_asks_then_goes_through_the_guard(bench, tmp_path):
    app = desk(bench, tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.press("f3")
        await settle(pilot)
        expected = plan(bench, amplification=40.0, axis="re", exact=False)
        await pilot.press("ctrl+y")
        await pilot.pause()
        assert isinstance(app.screen, Confirm)
        question = text_of(app, "#confirm-question") + " " + text_of(app, "#confirm-detail")
        assert "Move the mounts (simulated) to branch 0" in question
        for name, reading in expected.quantized.settings.items():
            assert f"{name} → {reading:.4f}°" in question
        assert "detector guard" in question and "laser safety officer" in question
        await pilot.press("n")
        await settle(pilot)
        assert not app.backend.opened  # nothing moved, nothing was even opened
        await pilot.press("ctrl+y")
        await pilot.pause()
        await pilot.press("y")
        await settle(pilot)
        status = text_of(app, "#plan-moved")
        devices = app.backend.station(app.readings).devices
        for name, reading in expected.quantized.settings.items():
            assert devices.mounts[name].position() == pytest.approx(reading, abs=0.003)
            assert f"{name} reads" in status
            assert app.readings[name] == pytest.approx(reading, abs=0.003)
        assert "shutter shut" in status
        assert not devices.shutter.is_open()
