"""The real LineMount / LineCounter / LineShutter through a tty: the pty emulator by default,
or a real controller when ALIGNER_TEST_PORT names its port.

Real hardware: set ALIGNER_TEST_PORT (e.g. /dev/ttyUSB0) and ALIGNER_TEST_PROFILE (a profile
file; default example-mount). Tests needing commands the profile lacks are skipped. The mount
moves by a few degrees around 0 only. CAUTION: block the beam and switch the single-photon
detectors off first, and follow your local laser-safety rules and laser safety officer.
"""

from __future__ import annotations

import os
import threading
import time
from collections.abc import Iterator
from dataclasses import dataclass

import pytest

from aligner.errors import DeviceError
from aligner_drivers import (
    LineCounter,
    LineMount,
    load_profile,
    open_counter,
    open_mount,
    open_shutter,
)
from aligner_drivers.emulator import Emulator

REAL_PORT = os.environ.get("ALIGNER_TEST_PORT")
REAL_PROFILE = os.environ.get("ALIGNER_TEST_PROFILE", "example-mount")


@dataclass
class Target:
    port: str
    profile: str
    emulator: Emulator | None


@pytest.fixture(params=["emulator", "real-port"])
def target(request: pytest.FixtureRequest) -> Iterator[Target]:
    """A port and profile to test; each test names the profile it needs via `needs`."""
    if request.param == "real-port":
        if not REAL_PORT:
            pytest.skip("set ALIGNER_TEST_PORT (and ALIGNER_TEST_PROFILE) to test a real port")
        yield Target(REAL_PORT, REAL_PROFILE, None)
        return
    with Emulator(speed_steps_s=200_000.0, seed=11) as emu:
        yield Target(emu.port, "", emu)


def needs(target: Target, example: str, *entries: str) -> str:
    """The profile to use: the example on the emulator, else the real one if it has them."""
    if target.emulator is not None:
        return example
    profile = load_profile(target.profile)
    missing = [e for e in entries if not profile.has(e)]
    if missing:
        pytest.skip(f"{target.profile} has no entry {', '.join(missing)}")
    return target.profile


def test_moves_read_back_within_tolerance(target: Target):
    mount = open_mount(target.port, profile=needs(target, "example-mount", "position"))
    assert isinstance(mount, LineMount) and "readback" in mount.capabilities
    try:
        for reading in (1.5, -2.25, 0.001, 3.0, 0.0):
            mount.move_to(reading)
            assert mount.position() == pytest.approx(reading, abs=mount.profile.axis.tolerance_deg)
            assert not mount.is_moving()
    finally:
        mount.close()
    if target.emulator:
        assert target.emulator.move_log == [1500, -2250, 1, 3000, 0]


def test_home_reads_zero(target: Target):
    mount = open_mount(target.port, profile=needs(target, "example-mount", "home"))
    try:
        mount.move_to(2.0)
        mount.home()
        assert mount.position() == pytest.approx(0.0, abs=mount.profile.axis.tolerance_deg)
    finally:
        mount.close()


def test_counter_gives_one_line_per_gate(target: Target):
    counter = open_counter(target.port, profile=needs(target, "example-counter", "count"))
    assert isinstance(counter, LineCounter)
    try:
        counts = [counter.count(0.05) for _ in range(5)]
    finally:
        counter.close()
    assert all(len(c) == counter.channels and min(c) >= 0 for c in counts)
    if target.emulator:
        assert target.emulator.received == ["GATE 50"] * 5


def test_shutter_starts_shut_and_follows_commands(target: Target):
    profile = needs(target, "example-counter", "shutter")
    shutter = open_shutter(target.port, profile=profile)
    try:
        assert not shutter.is_open()
        shutter.open()
        assert shutter.is_open() and (target.emulator is None or target.emulator.beam_on)
        shutter.shut()
        assert not shutter.is_open() and (target.emulator is None or not target.emulator.beam_on)
    finally:
        shutter.close()


def test_backlash_approach_sequence_reaches_the_controller_in_order():
    """A driver-level approach from below (engine's job) arrives as the commanded targets."""
    with Emulator() as emu:
        mount = open_mount(emu.port, profile="example-mount", timeout=0.2)
        for reading in (10.0, 9.9, 10.0, 9.95):  # overshoot below, then approach upward
            mount.move_to(reading)
        mount.close()
    assert emu.move_log == [10000, 9900, 10000, 9950]


def test_stop_from_another_thread_interrupts_a_polled_move():
    with Emulator(speed_steps_s=50_000.0) as emu:  # 100 deg take 2 s
        mount = open_mount(emu.port, profile="example-mount", timeout=0.2)
        errors: list[DeviceError] = []

        def run() -> None:
            try:
                mount.move_to(100.0)
            except DeviceError as exc:
                errors.append(exc)

        worker = threading.Thread(target=run)
        worker.start()
        time.sleep(0.2)
        assert mount.is_moving()
        mount.stop()
        worker.join(3.0)
        stopped_at = mount.position()
        mount.close()
    assert len(errors) == 1 and "stopped by stop()" in str(errors[0])
    assert 1.0 < stopped_at < 90.0
    assert emu.received.count("HALT") == 1
