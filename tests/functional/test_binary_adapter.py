"""The framed binary protocol adapters against the pty emulator: the real pyserial transport,
the reader thread, unsolicited completions, the keep-alive and the faults."""

from __future__ import annotations

import struct
import sys
import threading
import time

import pytest

from aligner.errors import (
    BadReply,
    DeviceError,
    DeviceRefused,
    DeviceTimeout,
    Disconnected,
    InputError,
)
from aligner_drivers.adapters.framed import HEADER, MAX_DATA, Frame, FrameReader, Msg
from aligner_drivers.open import open_mount, open_shutter
from aligner_drivers.protocols import Identifies, RotationMount, Shutter

pytestmark = pytest.mark.skipif(sys.platform == "win32", reason="pty emulator is POSIX only")

if sys.platform != "win32":
    from aligner_drivers.binary_emulator import BinaryEmulator

CPD = 100_000.0  # encoder counts per degree
MOUNT = "py:aligner_drivers.adapters.binary:BinaryMount"
SHUTTER = "py:aligner_drivers.adapters.binary:BinaryShutter"


def _mount(emu, **options):
    options.setdefault("counts_per_deg", CPD)
    options.setdefault("reply_timeout_s", 0.5)
    return open_mount(f"{MOUNT}?port={emu.port}", **options)


@pytest.fixture
def emu():
    with BinaryEmulator(counts_per_deg=CPD, speed_deg_s=400.0) as e:
        yield e


def test_frames_round_trip_in_any_chunking():
    frames = [
        Frame(Msg.HOME, 1),
        Frame.motion(Msg.MOVE_TO, 1, -3_050_000),
        Frame.motion(Msg.MOVE_DONE, 1, 2**31 - 1, 0x5),
        Frame.fault(2, 3, "status not acknowledged"),
        Frame.identity(7, "ROT-EMU", (1, 2)),
    ]
    wire = b"".join(f.pack() for f in frames)
    # the layout the module docstring states: little-endian id, length, destination, source
    assert wire[:6] == struct.pack("<HBBBB", 0x2001, 1, 0, 0x22, 0x01)
    assert HEADER.unpack_from(frames[1].pack()) == (0xA011, 6, 0, 0x22, 0x01)
    assert frames[1].pack()[6:] == struct.pack("<Hi", 1, -3_050_000)
    for size in (1, 5, 7, len(wire)):
        reader = FrameReader()
        got = [f for i in range(0, len(wire), size) for f in reader.feed(wire[i : i + size])]
        assert got == frames
    assert frames[2].position() == (2**31 - 1, 5)
    assert frames[3].fault_reason() == (3, "status not acknowledged")
    assert frames[4].identity_text() == "ROT-EMU serial 7 firmware 1.2"


def test_reader_resynchronises_after_an_impossible_length():
    reader = FrameReader()
    junk = struct.pack("<HBBBB", 0x9111, 0xFF, 0xFF, 0x22, 0x01)  # length 65535 > MAX_DATA
    assert MAX_DATA < 0xFFFF
    assert reader.feed(junk + Frame(Msg.HOME, 1).pack()) == [Frame(Msg.HOME, 1)]
    assert reader.skipped == len(junk)


def test_home_and_moves_with_read_back(emu):
    mount = _mount(emu, name="analyzer")
    try:
        assert isinstance(mount, RotationMount) and isinstance(mount, Identifies)
        assert "needs_home" in mount.capabilities and mount.name == "analyzer"
        assert mount.identify() == "ROT-EMU serial 40713 firmware 2.1"
        mount.home()
        assert mount.position() == 0.0
        for target in (10.0, 45.12345, -30.5):
            mount.move_to(target)
            # the encoder grid is 1e-5 deg; read back within half a count
            assert mount.position() == pytest.approx(target, abs=0.5 / CPD)
            assert emu.position_counts(1) == round(target * CPD)
            assert not mount.is_moving()
        moves = [f for f in emu.received if f.msg == Msg.MOVE_TO]
        assert [f.position()[0] for f in moves] == [1_000_000, 4_512_345, -3_050_000]
    finally:
        mount.close()


def test_refusals_name_the_reason(emu):
    mount = _mount(emu)
    try:
        with pytest.raises(DeviceRefused, match="refused the move to 10 deg: 'axis not homed'"):
            mount.move_to(10.0)
        mount.home()
        with pytest.raises(DeviceRefused, match="'target beyond travel'"):
            mount.move_to(400.0)
        mount.move_to(1.0)  # the refusal left the link usable
    finally:
        mount.close()


def test_stop_from_another_thread():
    with BinaryEmulator(counts_per_deg=CPD, speed_deg_s=60.0, homed=True) as emu:
        mount = _mount(emu)
        try:
            threading.Timer(0.15, mount.stop).start()
            t0 = time.monotonic()
            with pytest.raises(DeviceError, match="was stopped by stop\\(\\) at"):
                mount.move_to(90.0)  # 1.5 s at 60 deg/s
            assert time.monotonic() - t0 < 1.0
            at = mount.position()
            assert 1.0 < at < 60.0 and not mount.is_moving()
            time.sleep(0.1)
            assert mount.position() == at  # it stays where it stopped
            mount.move_to(2.0)
            assert mount.position() == pytest.approx(2.0, abs=0.5 / CPD)
        finally:
            mount.close()


def test_keep_alive_is_sent_and_its_loss_is_a_fault(monkeypatch):
    with BinaryEmulator(
        counts_per_deg=CPD, speed_deg_s=100.0, homed=True, update_period_s=0.02, watchdog_s=0.15
    ) as emu:
        mount = _mount(emu)
        try:
            mount.move_to(50.0)  # 0.5 s, longer than the watchdog: acknowledged throughout
            assert emu.acks >= 10
            link = mount.device.link
            monkeypatch.setattr(link, "acknowledge", lambda channel: None)  # a stalled host
            with pytest.raises(DeviceError, match="not acknowledged in time") as caught:
                mount.move_to(0.0)
            assert not isinstance(caught.value, DeviceRefused)
            assert emu.position_counts(1) > 0  # halted on the way
            monkeypatch.undo()
            mount.move_to(0.0)  # updates turned on again, the move completes
            assert emu.updates and emu.position_counts(1) == 0
        finally:
            mount.close()


def test_a_move_that_outlasts_its_timeout_is_halted():
    with BinaryEmulator(counts_per_deg=CPD, speed_deg_s=20.0, homed=True) as emu:
        mount = _mount(emu, move_timeout_s=0.1)
        try:
            with pytest.raises(DeviceTimeout, match=r"did not finish within 0\.1 s"):
                mount.move_to(90.0)
            time.sleep(0.05)
            assert not mount.is_moving()
        finally:
            mount.close()


def test_disconnect_while_idle_and_during_a_move():
    with BinaryEmulator(counts_per_deg=CPD, speed_deg_s=50.0, homed=True) as emu:
        mount = _mount(emu)
        threading.Timer(0.1, emu.disconnect).start()
        with pytest.raises(Disconnected, match="the port failed"):
            mount.move_to(45.0)
        with pytest.raises(Disconnected):
            mount.position()
        mount.close()
    with BinaryEmulator(counts_per_deg=CPD, homed=True) as emu:
        mount = _mount(emu)
        emu.disconnect()
        with pytest.raises(Disconnected):
            mount.move_to(1.0)
        mount.close()
        with pytest.raises(Disconnected, match="closed"):
            mount.position()


def test_solenoid_and_flip_shutters_share_the_port_with_a_mount(emu):
    mount = _mount(emu)
    solenoid = open_shutter(f"{SHUTTER}?port={emu.port}&channel=2&kind=solenoid")
    flip = open_shutter(f"{SHUTTER}?port={emu.port}&channel=3&kind=flip&open_position=2")
    try:
        assert isinstance(solenoid, Shutter) and solenoid.capabilities == {"readback"}
        assert mount.device.link is solenoid.device.link is flip.device.link
        assert mount.device.link.users == 3
        solenoid.open()
        assert solenoid.is_open() and emu.beam_open(2)
        solenoid.shut()
        assert not solenoid.is_open() and not emu.beam_open(2)
        flip.open()  # position 2 clears the beam
        assert flip.is_open() and emu.flips[3].position == 2
        flip.shut()
        assert not flip.is_open() and emu.flips[3].position == 1
        mount.home()  # the motor channel works alongside
    finally:
        for device in (mount, solenoid, flip):
            device.close()
    assert emu.received  # every device spoke through the one port


def test_a_stuck_shutter_and_a_wrong_channel_are_errors(emu, monkeypatch):
    shutter = open_shutter(f"{SHUTTER}?port={emu.port}&channel=2")
    beam = emu._beam

    def stuck(frame, now):  # the solenoid ignores every command to change
        if frame.msg != Msg.BEAM_SET:
            beam(frame, now)

    try:
        monkeypatch.setattr(emu, "_beam", stuck)
        with pytest.raises(BadReply, match="asked to open, the controller reports it is not"):
            shutter.open()
    finally:
        shutter.close()
    mount = _mount(emu, channel=2)  # a motor command on a shutter channel
    try:
        with pytest.raises(DeviceRefused, match="bad beam request"):
            mount.move_to(1.0)
    finally:
        mount.close()


def test_devices_on_one_port_need_one_baud(emu):
    mount = _mount(emu)
    try:
        with pytest.raises(InputError, match="already open at 115200 baud"):
            open_shutter(f"{SHUTTER}?port={emu.port}&baud=9600")
        assert mount.device.link.users == 1
    finally:
        mount.close()
