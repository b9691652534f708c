"""Fault injection through the pty emulator: transient faults are retried away, persistent
ones raise the right DeviceError with advice, and no pyserial or OS error ever escapes."""

from __future__ import annotations

import contextlib
import dataclasses
import os
import threading
from collections.abc import Callable, Iterator

import pytest

from aligner.errors import (
    BadReply,
    DeviceError,
    DeviceRefused,
    DeviceTimeout,
    Disconnected,
    InputError,
)
from aligner_drivers import LineCounter, LineMount, load_profile, open_counter, open_mount
from aligner_drivers.emulator import Emulator, Faults

TIMEOUT_S = 0.1
STALL_S = 0.15  # longer than one reply timeout, shorter than two


def mount_on(emu: Emulator, **options) -> LineMount:
    return open_mount(emu.port, profile="example-mount", timeout=TIMEOUT_S, **options)


def counter_on(emu: Emulator) -> LineCounter:
    return open_counter(emu.port, profile="example-counter", timeout=TIMEOUT_S)


@pytest.fixture
def faulty() -> Iterator[Callable[..., Emulator]]:
    """Build emulators with a fault plan; all are closed after the test."""
    made: list[Emulator] = []

    def build(**plan) -> Emulator:
        emu = Emulator(faults=Faults(stall_s=STALL_S, **plan), seed=2).__enter__()
        made.append(emu)
        return emu

    yield build
    for emu in made:
        emu.close()


@pytest.mark.parametrize("kind", ["garbage", "partial", "stall"])
def test_one_bad_query_reply_is_retried(faulty, kind):
    emu = faulty(script=(kind,), only=frozenset({"AT?"}))
    mount = mount_on(emu)
    assert mount.position() == 0.0
    assert emu.received == ["AT?", "AT?"]
    mount.close()


@pytest.mark.parametrize("kind", ["garbage", "partial", "stall"])
def test_one_bad_move_reply_is_retried_and_the_move_completes(faulty, kind):
    emu = faulty(script=(kind,), only=frozenset({"GO"}))
    mount = mount_on(emu)
    mount.move_to(12.5)
    assert mount.position() == 12.5
    # a stalled GO is lost; a garbled or cut reply came after the GO was carried out
    assert emu.move_log == ([12500] if kind == "stall" else [12500, 12500])
    mount.close()


@pytest.mark.parametrize(
    ("kind", "error", "advice"),
    [
        ("stall", DeviceTimeout, r"no reply to 'AT\?' within 0\.1 s \(3 attempt\(s\)\).*baud rate"),
        ("garbage", BadReply, r"does not have the form 'AT \{value:int\}'.*check the baud rate"),
        ("partial", BadReply, r"cut short.*link\.reply_end"),
        ("error", DeviceRefused, r"refused 'AT\?': injected fault"),
        ("disconnect", Disconnected, r"check the cable"),
    ],
)
def test_persistent_fault_raises_the_right_error(faulty, kind, error, advice):
    emu = faulty(**{kind: 1.0}, only=frozenset({"AT?"}))
    mount = mount_on(emu)
    with pytest.raises(error, match=advice) as info:
        mount.position()
    assert isinstance(info.value, DeviceError)
    expected_tries = {"error": 1, "disconnect": 1}.get(kind, 3)
    if kind == "stall":  # the emulator may still be hanging on the second attempt
        assert emu.received in (["AT?"] * 2, ["AT?"] * 3)
    else:
        assert emu.received == ["AT?"] * expected_tries
    mount.close()


def test_after_a_disconnect_every_call_is_disconnected(faulty):
    emu = faulty(script=("disconnect",), only=frozenset({"BUSY?"}))
    mount = mount_on(emu)
    with pytest.raises(Disconnected):
        mount.move_to(5.0)
    for call in (mount.position, mount.is_moving, mount.home, lambda: mount.move_to(1.0)):
        with pytest.raises(Disconnected):
            call()
    mount.close()


def test_position_disagreeing_with_the_command_is_a_bad_reply(faulty):
    emu = faulty(script=("offset",), only=frozenset({"GO"}))
    mount = mount_on(emu)
    with pytest.raises(BadReply, match=r"reads 3\.05 deg, \+0\.05 deg off.*obstruction"):
        mount.move_to(3.0)
    mount.move_to(3.0)  # the next move, without the fault, arrives
    assert mount.position() == 3.0
    mount.close()


def test_move_that_never_ends_times_out_and_is_stopped():
    loaded = load_profile("example-mount")
    profile = dataclasses.replace(loaded, axis=dataclasses.replace(loaded.axis, move_timeout_s=0.2))
    with Emulator(speed_steps_s=1000.0) as emu:  # 1 deg/s
        mount = open_mount(emu.port, profile=profile, timeout=TIMEOUT_S)
        with pytest.raises(DeviceTimeout, match=r"did not finish within 0\.2 s.*was stopped"):
            mount.move_to(50.0)
        assert emu.received[-1] == "HALT"
        assert 0.0 < mount.position() < 1.0
        mount.close()


def test_random_faults_are_recovered_with_enough_retries(faulty):
    emu = faulty(garbage=0.1, partial=0.1, stall=0.03)
    mount = mount_on(emu, retries=5)
    for reading in (1.0, -1.0, 2.0, -2.0, 0.5, 0.0):
        mount.move_to(reading)
        assert mount.position() == reading
    assert len(emu.received) > 6 * 3  # faults really were injected and retried
    mount.close()


def test_counter_faults(faulty):
    emu = faulty(script=("garbage", None, "error"), only=frozenset({"GATE"}))
    counter = counter_on(emu)
    assert len(counter.count(0.02)) == 2  # garbage, then a good gate (retries = 1)
    with pytest.raises(DeviceRefused, match="injected fault"):
        counter.count(0.02)
    assert emu.received == ["GATE 20"] * 3
    counter.close()


def test_counter_persistent_stall_times_out(faulty):
    emu = faulty(stall=1.0)
    counter = counter_on(emu)
    with pytest.raises(DeviceTimeout, match=r"'GATE 20' within 0\.12 s \(2 attempt"):
        counter.count(0.02)
    counter.close()


def open_fds() -> set[str]:
    return set(os.listdir("/proc/self/fd"))


@pytest.mark.skipif(not os.path.isdir("/proc/self/fd"), reason="needs /proc")
def test_emulator_and_drivers_leak_no_threads_or_fds():
    threads, fds = threading.active_count(), open_fds()
    for plan in (Faults(), Faults(script=("disconnect",))):
        with Emulator(faults=plan) as emu:
            mount = mount_on(emu)
            with contextlib.suppress(Disconnected):
                mount.move_to(1.0)
            mount.close()
    assert threading.active_count() == threads
    assert open_fds() == fds


def test_fault_plans_are_checked():
    with pytest.raises(InputError, match="unknown fault 'smoke'"):
        Faults(script=("smoke",))
    with pytest.raises(InputError, match="add up to <= 1"):
        Faults(garbage=0.7, stall=0.7)
