"""The alignment meter, driven with Pilot on the demo bench with simulated devices: it follows a
count rate the test sets, holds the minimum and maximum until reset, stops at the detector
guard with the shutter shut, turns mounts through the guard with the predicted rate beside the
measured one, and takes typed-in rates from a typed-in counter.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from test_tui_support import desk, on_screen, text_of

from aligner.bench import load_bench
from aligner.prediction import predict
from aligner.run.station import Station
from aligner.tui.widgets.meter import digits
from aligner_drivers.open import open_counter

SIZE = (100, 40)
GATE_S = 0.05


@pytest.fixture(scope="module")
def bench():
    return load_bench("demo")


class SetRate:
    """A simulated counter whose true rates (counts/s) the test sets: Poisson counts per gate
    (numpy's generator, seeded)."""

    def __init__(self, post: float, reference: float = 2500.0) -> None:
        self.post, self.reference = post, reference
        self.rng = np.random.default_rng(7)

    def __call__(self, dwell_s: float) -> tuple[int, int]:
        return (
            int(self.rng.poisson(self.post * dwell_s)),
            int(self.rng.poisson(self.reference * dwell_s)),
        )


def with_counter(counter: SetRate):
    """Open the demo bench's station with ``counter`` counting (everything else as declared)."""

    def open_station(bench):
        station = Station.open(bench)
        station.devices.counter = open_counter("sim", fn=counter, channels=2)
        return station

    return open_station


async def samples(pilot, n: int) -> list:
    """Wait for ``n`` more gates; return every sample the meter showed since."""
    screen = pilot.app.screen
    seen: list = []
    last = screen.last
    for _ in range(400):
        await pilot.pause(GATE_S / 2)
        if screen.last is not last:
            last = screen.last
            seen.append(last)
            if len(seen) >= n:
                return seen
    raise AssertionError(f"only {len(seen)} gates in time")


async def start(pilot) -> None:
    await pilot.press("f5")
    await pilot.pause()
    pilot.app.screen.gate_s = GATE_S
    await pilot.press("ctrl+s")


async def stopped(pilot) -> None:
    for _ in range(200):
        await pilot.pause(0.05)
        if pilot.app.screen.session is None:
            return
    raise AssertionError("the meter did not stop")


def within_poisson(rate: float, true_rate: float, gate_s: float) -> bool:
    """A gate's rate lies within 5 sigma of the true rate (Poisson: sigma = sqrt(N))."""
    expected = true_rate * gate_s
    return abs(rate * gate_s - expected) <= 5 * math.sqrt(expected)


async def test_meter_follows_a_simulated_count_rate(bench, tmp_path):
    counter = SetRate(4000.0)
    app = desk(bench, tmp_path, station_factory=with_counter(counter))
    async with app.run_test(size=SIZE) as pilot:
        await start(pilot)
        low = await samples(pilot, 5)
        assert all(within_poisson(s.rates[0], 4000.0, GATE_S) for s in low)
        assert all(within_poisson(s.rates[1], 2500.0, GATE_S) for s in low)
        counter.post = 60000.0  # the operator turns a mount by hand: the rate goes up
        await samples(pilot, 2)  # a gate may straddle the change
        high = await samples(pilot, 5)
        assert all(within_poisson(s.rates[0], 60000.0, GATE_S) for s in high)
        post = app.screen.query_one("#meter-post")
        assert post.last == high[-1].rates[0]
        assert app.screen.query_one(".meter-digits").value == digits(high[-1].rates[0])
        assert post.low <= min(s.rates[0] for s in low)  # held from before the change
        assert post.high >= max(s.rates[0] for s in high)
        await pilot.press("ctrl+n")  # new min/max: they restart from the next gate
        after = await samples(pilot, 3)
        assert post.low > max(s.rates[0] for s in low)  # the old minimum is forgotten
        assert post.low <= min(s.rates[0] for s in after)
        await pilot.press("ctrl+p")
        await stopped(pilot)
        assert not app.backend.station(app.readings).devices.shutter.is_open()
        assert "meter stopped; shutter shut" in on_screen(app)


async def test_meter_stops_at_the_detector_guard_with_the_shutter_shut(bench, tmp_path):
    counter = SetRate(2000.0)
    app = desk(bench, tmp_path, station_factory=with_counter(counter))
    async with app.run_test(size=SIZE) as pilot:
        await start(pilot)
        await samples(pilot, 2)
        counter.post = 4 * bench.detector.safe_rate  # a bright beam reaches the detector
        await stopped(pilot)
        status = text_of(app, "#meter-status")
        assert "STOPPED BY THE DETECTOR GUARD" in status and "shutter shut" in status
        assert app.screen.query_one("#meter-status").has_class("problem")
        assert not app.backend.station(app.readings).devices.shutter.is_open()


async def test_meter_steps_a_mount_through_the_guard_with_the_prediction_beside(bench, tmp_path):
    app = desk(bench, tmp_path)  # the physics-driven simulated bench
    async with app.run_test(size=SIZE) as pilot:
        await start(pilot)
        first = (await samples(pilot, 2))[-1]
        assert first.readings["analyzer"] == pytest.approx(136.0, abs=0.002)
        # the analyzer's stepper has the focus: 100 steps up, twice (coalesced into moves)
        await pilot.press("pageup", "pageup")
        moved = first
        for _ in range(40):
            moved = (await samples(pilot, 1))[-1]
            if moved.readings["analyzer"] > 136.15:
                break
        assert moved.readings["analyzer"] == pytest.approx(136.2, abs=0.003)
        # the predicted rate beside the measured one is the engine's at the read-back
        expected = float(predict(bench, moved.readings).measured_rate)
        assert moved.predicted == pytest.approx(expected, rel=1e-12)
        assert moved.predicted > first.predicted  # further from the null: brighter
        stepper = app.screen.query_one("#stepper-2")
        assert stepper.bench_mount.name == "analyzer"
        assert f"{moved.readings['analyzer']:.4f}°" in text_of(app, "#stepper-2")
        await pilot.press("ctrl+p")
        await stopped(pilot)


async def test_meter_takes_typed_rates_from_a_typed_in_counter(bench, tmp_path: Path):
    text = bench.path.read_text(encoding="utf-8")
    typed = text.replace(
        '[devices.counter]\ndriver = "sim"', '[devices.counter]\ndriver = "manual"'
    )
    assert typed != text
    path = tmp_path / "typed-bench.toml"
    path.write_text(typed, encoding="utf-8")
    app = desk(load_bench(path), tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await start(pilot)
        for _ in range(100):  # (the meter's worker runs until stopped: no settle here)
            await pilot.pause(0.05)
            if "type the rates you read" in text_of(app, "#meter-status"):
                break
        assert "type the rates you read" in text_of(app, "#meter-status")
        app.screen.query_one("#typed-post").value = "12345"
        app.screen.query_one("#typed-ref").value = "2400"
        app.screen.query_one("#typed-post").focus()
        await pilot.press("enter")
        for _ in range(100):
            if app.screen.last is not None:
                break
            await pilot.pause(0.05)
        sample = app.screen.last
        assert sample is not None and sample.typed and sample.rates == (12345.0, 2400.0)
        assert app.screen.query_one(".meter-digits").value == "12 345"
        assert "typed in by the operator" in text_of(app, "#meter-headroom")
        app.screen.query_one("#typed-post").value = "-5"
        await pilot.press("enter")
        await pilot.pause()
        assert "cannot be negative" in text_of(app, "#meter-status")
        await pilot.press("ctrl+p")
        await stopped(pilot)
