"""Every screen of the desk at 80x24 and at 160x48: the numbers are on the screen (scrolled into
view where a narrow terminal stacks the panels), not only rendered; an SVG screenshot of each
is kept as a test artifact (see test_tui_support).

The desk computes nothing itself: each number is compared with the engine function the screen
calls (aligner.prediction, aligner.planning, aligner.run), which have their own tests against
published results.
"""

from __future__ import annotations

import pytest
from test_tui_support import (
    SIZES,
    desk,
    limits_shown,
    on_screen,
    screenshot,
    seen,
    settle,
)

from aligner.bench import load_bench
from aligner.planning import plan
from aligner.prediction import format_weak_value, limits, predict
from aligner.run.log import RunLog
from aligner.tui.format import interval, num, rate, sci, stamp
from aligner.tui.widgets.meter import digits


@pytest.fixture(scope="module")
def bench():
    return load_bench("demo")


@pytest.fixture(params=list(SIZES), ids=list(SIZES))
def size(request):
    return SIZES[request.param]


def sweep_into(bench, tmp_path, schedule: str = "linear:0.5:2.0:4") -> None:
    """Log one short sweep in the run log the desk will show."""
    from aligner.tui.backend import DeskBackend

    backend = DeskBackend(bench, db_path=tmp_path / "runs.sqlite")
    backend.sweep(schedule, 0.2, bench.readings(), on_point=lambda *a: None)
    backend.close()


async def test_bench_screen(bench, tmp_path, size):
    app = desk(bench, tmp_path)
    async with app.run_test(size=size) as pilot:
        await limits_shown(pilot)
        p = predict(bench, bench.readings())
        lim = limits(bench, bench.readings())
        shown = await seen(pilot, "#prediction")
        for number in (
            f"{float(p.imbalance_deg):+.4f}°",
            format_weak_value(complex(p.weak_value), 5),
            sci(p.leak_rate),
            num(p.amplification_linear, 5),
            num(p.amplification_exact, 5),
        ):
            assert number in shown
        shown = await seen(pilot, "#limits")
        assert num(lim.max_amplification, 4) in shown and lim.limited_by in shown
        for mechanism, m in lim.mechanisms.items():
            assert mechanism in shown and f"{m.at_imbalance_deg:+.4f}°" in shown
        shown = await seen(pilot, "#readings")
        for name, reading in bench.readings().items():
            assert name in shown and f"{reading:.3f}" in shown
        shown = await seen(pilot, "#beam-path")
        assert f"{float(p.angles_deg['analyzer']):.3f}°" in shown
        caption = await seen(pilot, ".working-caption")
        assert f"now: imbalance {float(p.imbalance_deg):+.4f}°" in caption
        assert f"largest amplification {num(lim.max_amplification, 4)}" in caption
        screenshot(app, f"bench-{size[0]}x{size[1]}", tmp_path)


async def test_plan_screen(bench, tmp_path, size):
    app = desk(bench, tmp_path)
    async with app.run_test(size=size) as pilot:
        await pilot.press("f3")
        await settle(pilot)
        expected = plan(bench, amplification=40.0, axis="re", exact=False)
        shown = await seen(pilot, "#branches")
        assert len(expected.branches) == app.screen.query_one("#branches").row_count
        for b in expected.branches[:4]:  # the rows a 24-line terminal shows at once
            assert f"{b.imbalance_deg:+.4f}°" in shown and num(b.amplification_exact, 5) in shown
        shown = await seen(pilot, "#plan-result")
        for name, reading in expected.quantized.settings.items():
            assert f"{name} {reading:.4f}°" in shown
        caption = await seen(pilot, "#plan-plots .working-caption")
        at_plan = predict(bench, {**bench.readings(), **expected.quantized.settings})
        assert f"plan: imbalance {float(at_plan.imbalance_deg):+.4f}°" in caption
        assert f"amplification {num(at_plan.amplification_exact, 4)}" in caption
        assert "planned: branch 0 of" in on_screen(app)
        screenshot(app, f"plan-{size[0]}x{size[1]}", tmp_path)


async def test_sweep_screen(bench, tmp_path, size):
    app = desk(bench, tmp_path)
    async with app.run_test(size=size) as pilot:
        await pilot.press("f4")
        await pilot.pause()
        app.screen.query_one("#schedule").value = "linear:0.5:2.0:4"
        app.screen.query_one("#dwell").value = "0.2"
        await pilot.press("ctrl+s")
        await settle(pilot)
        with RunLog(tmp_path / "runs.sqlite") as log:
            (run,) = log.runs()
            points = log.points(run.id)
        assert "complete: 4 of 4 points logged" in on_screen(app)
        shown = await seen(pilot, "#sweep-points")
        for p in points:
            assert f"{p.imbalance_deg:+.4f}" in shown and str(p.counts) in shown
            assert sci(p.leak) in shown and sci(p.predicted_leak) in shown
            assert interval(p.leak_lo, p.leak_hi) in shown
        screenshot(app, f"sweep-{size[0]}x{size[1]}", tmp_path)


async def test_meter_screen(bench, tmp_path, size):
    app = desk(bench, tmp_path)
    async with app.run_test(size=size) as pilot:
        await pilot.press("f5")
        await pilot.pause()
        app.screen.gate_s = 0.05
        await pilot.press("ctrl+s")
        for _ in range(200):
            await pilot.pause(0.05)
            if app.screen.last is not None and len(app.screen.query_one("#meter-post").history) > 2:
                break
        sample = app.screen.last
        assert sample is not None
        await pilot.press("ctrl+p")  # hold the numbers still: stop the meter
        for _ in range(100):
            await pilot.pause(0.05)
            if app.screen.session is None:
                break
        sample = app.screen.last
        post = app.screen.query_one("#meter-post")
        assert post.last == sample.rates[0]
        assert app.screen.query_one(".meter-digits").value == digits(sample.rates[0])
        shown = await seen(pilot, "#meter-post")
        assert "post-selected port · SIMULATED" in shown  # never passed off as measured
        assert f"min {rate(post.low)}" in shown and f"max {rate(post.high)}" in shown
        assert f"predicted {rate(sample.predicted)}" in shown
        shown = await seen(pilot, "#meter-headroom")
        assert "safe rate 1.5 Mcounts/s" in shown and f"now {rate(sample.rates[0])}" in shown
        shown = await seen(pilot, "#meter-mounts")
        for name, reading in sample.readings.items():
            assert f"{name} {reading:.4f}°" in shown
        assert "shutter shut" in on_screen(app)
        screenshot(app, f"meter-{size[0]}x{size[1]}", tmp_path)


async def test_devices_screen(bench, tmp_path, size):
    app = desk(bench, tmp_path)
    async with app.run_test(size=size) as pilot:
        await pilot.press("f6")
        await settle(pilot)
        shown = await seen(pilot, "#devices")
        assert "not opened yet" in shown
        await pilot.press("ctrl+r")  # a simulated bench opens without a question
        await settle(pilot)
        shown = await seen(pilot, "#devices")
        for name, reading in bench.readings().items():
            assert f"mount {name} SIMULATED" in shown
            assert f"reads {reading:.4f}°" in shown
        for role in ("counter", "shutter", "pointer"):
            assert f"{role} SIMULATED" in shown
        assert "state: shut" in shown and "ready, 2 channels" in shown
        assert "devices open (simulated)" in on_screen(app)
        screenshot(app, f"devices-{size[0]}x{size[1]}", tmp_path)


async def test_log_screen(bench, tmp_path, size):
    sweep_into(bench, tmp_path)
    with RunLog(tmp_path / "runs.sqlite") as log:
        (run,) = log.runs()
        points = log.points(run.id)
    app = desk(bench, tmp_path)
    async with app.run_test(size=size) as pilot:
        await pilot.press("f7")
        await settle(pilot)
        shown = await seen(pilot, "#runs")
        assert stamp(run.started_utc) in shown and stamp(run.started_utc).endswith("UTC")
        assert "SIMULATED" in shown and "4/4" in shown
        details = await seen(pilot, "#run-details")
        assert f"run {run.id}: SIMULATED" in details and "seed" in details
        shown = await seen(pilot, "#log-points")
        for p in points:
            assert f"{p.reading_deg:.4f}" in shown and sci(p.leak) in shown
        screenshot(app, f"log-{size[0]}x{size[1]}", tmp_path)
