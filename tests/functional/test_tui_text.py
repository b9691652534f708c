"""Text from files, devices and users reaches the desk as written: a bench and mounts named with
dots, spaces, non-ASCII letters, markup (``[/]``, ``[b]``) and an emoji code (``:-1:``), a
schedule that looks like an emoji code, a device error with markup and a terminal escape
sequence. Every screen shows them literally (and none of them breaks a widget id)."""

from __future__ import annotations

import pytest
from test_tui_support import desk, on_screen, seen, settle, text_of

from aligner.bench import load_bench

NAMES_BENCH = """\
name = "Bänch [/] :-1: one.two"
wavelength_nm = 800.0
imbalance_mount = "ana lyzer [b]"

[source]
angle_deg = 0.0
extinction_ratio = 1e5
photon_rate = 1.0e6

[[pre]]
type = "hwp"
mount = "pré.hwp [/]"

[coupling]
observable = "HV"
readout = "position"
pointer_sigma = 100.0
strength = 1.0
units = "um"

[analyzer]
mount = "ana lyzer [b]"
extinction_ratio = 1e4
transmission = 0.9

[detector]
efficiency = 0.5
dark_rate = 10.0
dead_time_ns = 20.0
safe_rate = 1.0e6

[mounts."pré.hwp [/]"]
reading_deg = 22.5

[mounts."ana lyzer [b]"]
reading_deg = 136.0
travel_deg = [-10.0, 350.0]
"""
HWP, ANALYZER = "pré.hwp [/]", "ana lyzer [b]"
SCHEDULE = "linear:-1:1:3"  # ':-1:' is an emoji code to a markup parser


@pytest.fixture
def names_bench(write_bench):
    return load_bench(write_bench(NAMES_BENCH))


async def test_names_that_look_like_markup_show_as_written(names_bench, tmp_path):
    app = desk(names_bench, tmp_path)
    async with app.run_test(size=(160, 48)) as pilot:
        await settle(pilot)
        bar = text_of(app, ".desk-bar")
        assert "Bänch [/] :-1: one.two" in bar
        shown = await seen(pilot, "#readings")
        assert HWP in shown and ANALYZER in shown
        assert "um" in await seen(pilot, "#prediction")  # units are checked names now
        assert f"({ANALYZER})" in await seen(pilot, "#limits")
        assert HWP in await seen(pilot, "#beam-path")
        # typing a bad reading: the message quotes the mount and the text as typed
        app.screen.query_one("#readings").input_for(HWP).value = "[red]x"
        await pilot.pause()
        assert f"{HWP}: '[red]x' is not a number of degrees" in text_of(app, "#reading-problem")

        await pilot.press("f3")
        await settle(pilot)
        assert f"{ANALYZER} " in await seen(pilot, "#plan-result")

        await pilot.press("f4")
        await pilot.pause()
        app.screen.query_one("#schedule").value = SCHEDULE
        app.screen.query_one("#dwell").value = "0.1"
        await pilot.press("ctrl+s")
        await settle(pilot)
        assert "complete" in text_of(app, "#sweep-status")

        await pilot.press("f6")
        await settle(pilot)
        app.backend.note_error(HWP, RuntimeError("no reply [bold]ERR[/] \x1b[31m:fire:"))
        await pilot.press("ctrl+r")
        await settle(pilot)
        shown = await seen(pilot, "#devices")
        assert f"mount {HWP}" in shown and f"mount {ANALYZER}" in shown
        assert "no reply [bold]ERR[/] :fire:" in shown  # the escape sequence removed

        await pilot.press("f7")
        await settle(pilot)
        shown = await seen(pilot, "#runs")
        assert SCHEDULE in shown
        assert f"Points of run 1 · {SCHEDULE}" in on_screen(app)
        details = await seen(pilot, "#run-details")
        assert f"mount {HWP}: simulated" in details


async def test_names_that_look_like_markup_fit_80_columns(names_bench, tmp_path):
    app = desk(names_bench, tmp_path)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        assert "Bänch [/] :-1: one.two" in text_of(app, ".desk-bar")
        await pilot.press("f5")
        await settle(pilot)
        shown = await seen(pilot, "#meter-mounts")
        assert HWP in shown and ANALYZER in shown
        for key in ("f3", "f6", "f7"):  # every other screen composes with these names too
            await pilot.press(key)
            await settle(pilot)
            assert app.current_mode == {"f3": "plan", "f6": "devices", "f7": "log"}[key]
