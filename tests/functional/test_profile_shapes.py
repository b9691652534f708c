"""Each shipped protocol shape: its example profile drives its emulator (pty or TCP) through
the real transport and framing; or a real controller when ALIGNER_TEST_PORT names its port.

Real hardware: set ALIGNER_TEST_PORT (e.g. /dev/ttyUSB0 or socket://host:port) and
ALIGNER_TEST_PROFILE (a profile file). Only the tests for that profile's role run, without the
emulator's back door (refusals and stops that need it are skipped). A mount moves to 10,
45.12345 and -30.5 deg and is homed. CAUTION: block the beam and switch the single-photon
detectors off first, and follow your local laser-safety rules and laser safety officer.
"""

from __future__ import annotations

import os
import sys
import threading
import time
import tomllib
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from typing import Any

import pytest
import scipy.stats

from aligner.errors import BadReply, DeviceError, DeviceRefused
from aligner_drivers.emulator import Emulator
from aligner_drivers.emulator_shapes import SHAPES
from aligner_drivers.lineproto import PROFILE_DIR, DeviceProfile, load_profile, parse_profile
from aligner_drivers.open import open_counter, open_mount, open_pointer, open_shutter

pytestmark = pytest.mark.skipif(sys.platform == "win32", reason="pty emulator is POSIX only")

REAL_PORT = os.environ.get("ALIGNER_TEST_PORT")
REAL_PROFILE = os.environ.get("ALIGNER_TEST_PROFILE")
OPENERS: dict[str, Callable[..., Any]] = {
    "mount": open_mount,
    "counter": open_counter,
    "shutter": open_shutter,
    "pointer": open_pointer,
}
#: what each shape's refusal (an interlock, forced through the emulator's back door) must say
REFUSALS = {
    "hex-addressed-mount": "interlock open",
    "silent-set-mount": "interlock open",
    "slash-request-mount": "INTERLOCK",
    "mnemonic-servo-mount": "interlock open",
    "bitfield-status-mount": "interlock",
    "echo-prompt-shutter": "interlock active",
    "gated-counter": "detector protection interlock",
    "free-running-counter": "interlock",
    "query-pointer": "interlock",
    "tcp-call-mount": "interlock",
    "chained-open-loop-mount": "INTERLOCK OPEN",
}
SHAPE_NAMES = [name for name in SHAPES if name != "basic"]


@dataclass
class Target:
    port: str
    profile: DeviceProfile
    emulator: Emulator | None

    @property
    def role(self) -> str:
        return sorted(self.profile.roles)[0]

    def open(self, role: str, **options: Any) -> Any:
        if role not in self.profile.roles:
            pytest.skip(f"{self.profile.name} is no {role}")
        return OPENERS[role](self.port, profile=self.profile, **options)


@pytest.fixture(params=[*SHAPE_NAMES, "real-port"])
def target(request: pytest.FixtureRequest) -> Iterator[Target]:
    if request.param == "real-port":
        if not (REAL_PORT and REAL_PROFILE):
            pytest.skip("set ALIGNER_TEST_PORT and ALIGNER_TEST_PROFILE to test a real port")
        yield Target(REAL_PORT, load_profile(REAL_PROFILE), None)
        return
    with Emulator(request.param, seed=7) as emu:
        yield Target(emu.port, load_profile(request.param), emu)


def test_every_shape_has_an_example_profile_and_a_refusal():
    assert set(SHAPE_NAMES) <= set(REFUSALS) | {"byte-shutter"}
    for name in SHAPE_NAMES:
        assert load_profile(name).name == name


def test_mount_homes_moves_and_reads_back(target: Target):
    mount = target.open("mount")
    try:
        assert mount.identify() or not target.profile.has("identity")
        if "home" in mount.capabilities:
            mount.home()
        tolerance = mount.profile.axis.tolerance_deg
        for reading in (10.0, 45.12345, -30.5):
            mount.move_to(reading)
            assert mount.position() == pytest.approx(reading, abs=tolerance)
            assert not mount.is_moving()
    finally:
        mount.close()
    if target.emulator is not None:
        scale = abs(target.profile.entries["position"].scale)
        assert target.emulator.device.axis().position / scale == pytest.approx(-30.5, abs=tolerance)


def test_mount_stops_from_another_thread(target: Target):
    if target.emulator is None:
        pytest.skip("needs the emulator's back door (a slow axis)")
    mount = target.open("mount")
    axis = target.emulator.device.axis()
    mount.home()
    axis.speed = 50.0 * abs(target.profile.entries["position"].scale)  # 50 deg/s
    errors: list[DeviceError] = []

    def run() -> None:
        try:
            mount.move_to(100.0)
        except DeviceError as exc:
            errors.append(exc)

    worker = threading.Thread(target=run)
    worker.start()
    deadline = time.monotonic() + 2.0
    while not axis.moving and time.monotonic() < deadline:
        time.sleep(0.005)
    time.sleep(0.05)
    assert mount.is_moving()
    mount.stop()
    worker.join(3.0)
    stopped_at = mount.position()
    mount.close()
    assert len(errors) == 1 and "stopped by stop()" in str(errors[0])
    assert 0.5 < stopped_at < 90.0


def test_a_refusal_is_a_device_error_naming_the_reason(target: Target):
    if target.emulator is None:
        pytest.skip("needs the emulator's back door (a forced refusal)")
    name = target.profile.name
    if name not in REFUSALS:
        pytest.skip(f"{name} has no reply channel at all: a refusal cannot be reported")
    device = target.open(target.role)
    if target.role == "mount" and "needs_home" in device.capabilities:
        device.home()
    target.emulator.device.force_refusal("interlock")
    action = {
        "mount": lambda: device.move_to(10.0),
        "counter": lambda: device.count(0.04),
        "shutter": lambda: device.open(),
        "pointer": lambda: device.read(0.02),
    }[target.role]
    with pytest.raises(DeviceRefused) as info:
        action()
    device.close()
    assert REFUSALS[name] in str(info.value)
    assert target.profile.source in str(info.value) or name in str(info.value)


def test_counter_gates_and_returns_this_gates_counts(target: Target):
    counter = target.open("counter")
    try:
        counts = [counter.count(0.04) for _ in range(3)]
    finally:
        counter.close()
    assert all(len(c) == counter.channels and min(c) >= 0 for c in counts)
    if target.emulator is None:
        return
    device = target.emulator.device
    if target.profile.has("stream"):
        assert counter.last_windows == 2
        sent = [c for _, c in device.windows]
        pairs = [tuple(map(sum, zip(*sent[i : i + 2], strict=True))) for i in range(len(sent))]
        assert all(c in pairs for c in counts)
    else:
        assert counts == device.gates[-3:]


def test_shutter_opens_and_shuts_with_state_read_back(target: Target):
    shutter = target.open("shutter")
    readback = target.profile.entries["shutter"].read is not None
    assert ("readback" in shutter.capabilities) == readback

    def emulated(state: bool) -> bool:
        """The emulator's own state (a shutter without replies acts a moment later)."""
        if target.emulator is None:
            return True
        deadline = time.monotonic() + 1.0
        while target.emulator.beam_on != state and time.monotonic() < deadline:
            time.sleep(0.002)
        return target.emulator.beam_on == state

    try:
        assert not shutter.is_open() and emulated(False)
        shutter.open()
        assert shutter.is_open() and emulated(True)
        shutter.shut()
        assert not shutter.is_open() and emulated(False)
    finally:
        shutter.close()


def test_pointer_reads_the_mean_and_its_standard_error(target: Target):
    pointer = target.open("pointer")
    try:
        mean, sem = pointer.read(0.04)
    finally:
        pointer.close()
    assert sem >= 0.0
    if target.emulator is not None:
        readings = target.emulator.device.readings
        assert len(readings) == target.profile.samples
        # scipy.stats.sem (reference library): the standard error of the mean, ddof = 1
        assert mean == pytest.approx(sum(readings) / len(readings), abs=1e-6)
        assert sem == pytest.approx(scipy.stats.sem(readings), rel=1e-4)


@pytest.mark.parametrize("shape", ["silent-set-mount", "mnemonic-servo-mount"])
def test_a_mount_that_needs_homing_refuses_moves_until_homed(shape):
    with Emulator(shape) as emu:
        mount = open_mount(emu.port, profile=shape)
        assert "needs_home" in mount.capabilities
        with pytest.raises(DeviceRefused, match="not referenced"):
            mount.move_to(10.0)
        mount.home()
        mount.move_to(10.0)
        mount.close()


def test_a_profile_reading_positions_in_the_wrong_base_is_caught_on_the_first_move():
    """Issue 10: a position decoded in the wrong number base must not pass silently."""
    data = tomllib.loads((PROFILE_DIR / "hex-addressed-mount.toml").read_text())
    data["entry"]["position"]["reply"] = "{addr}PS{value:int}"  # hex read as decimal
    wrong = parse_profile(data, "wrong-base.toml")
    with Emulator("hex-addressed-mount") as emu:
        mount = open_mount(emu.port, profile=wrong)
        with pytest.raises(BadReply, match=r"'1PS00000FA0' to '1gp' does not have the form"):
            mount.move_to(10.0)  # 4000 pulses = 00000FA0: not even a decimal number
        with pytest.raises(BadReply, match=r"reads 11\.7025 deg, -33\.4 deg off.*number format"):
            mount.move_to(45.1225)  # 18049 = 00004681, read as 4681 pulses = 11.7025 deg
        mount.close()


def test_devices_at_two_addresses_share_one_port_without_stealing_replies():
    """Two mounts on one line, moved and read from two threads at once: every move reaches
    its own target, and each mount reads back its own position."""
    with Emulator("hex-addressed-mount", seed=3) as emu:
        first = open_mount(emu.port, profile="hex-addressed-mount", addr="1", name="first")
        second = open_mount(emu.port, profile="hex-addressed-mount", addr="2", name="second")
        assert first.channel.bus is second.channel.bus
        errors: list[BaseException] = []

        def drive(mount: Any, targets: list[float]) -> None:
            try:
                for target in targets:
                    mount.move_to(target)
                    assert mount.position() == pytest.approx(target, abs=0.0025)
            except BaseException as exc:  # reported below
                errors.append(exc)

        plans = {first: [10.0, -30.5, 45.1225, 5.0] * 5, second: [-12.0, 60.0, 0.5, 33.0] * 5}
        threads = [threading.Thread(target=drive, args=item) for item in plans.items()]
        for thread in threads:
            thread.start()
        for thread in threads:
            thread.join(20.0)
        first.close()
        second.close()
    assert errors == []
    assert emu.device.axes["1"].move_log == [round(t * 400) for t in plans[first]]
    assert emu.device.axes["2"].move_log == [round(t * 400) for t in plans[second]]
