"""Opening devices from spec strings."""

from __future__ import annotations

import pytest

from aligner.errors import BadReply, Disconnected, InputError
from aligner_drivers import (
    FunctionCounter,
    LineMount,
    ManualCounter,
    ManualPointer,
    SimMount,
    SimPointer,
    SimShutter,
    open_counter,
    open_mount,
    open_pointer,
    open_shutter,
)


def test_plain_sim_and_query_options():
    assert isinstance(open_mount("sim"), SimMount)
    mount = open_mount(
        "sim:?resolution=0.001&backlash=0.05&speed=20&travel=-170,170&noise=0.0005&seed=3"
    )
    assert (mount.resolution_deg, mount.backlash_deg, mount.speed_deg_s) == (0.001, 0.05, 20.0)
    assert mount.travel_deg == (-170.0, 170.0) and mount.noise_rms_deg == 0.0005
    assert mount.realtime is False


def test_keyword_options_override_the_query():
    mount = open_mount("sim:?backlash=0.05&name=hwp", backlash=0.2, travel=(-10, 10))
    assert mount.backlash_deg == 0.2 and mount.name == "hwp" and mount.travel_deg == (-10, 10)


def test_sim_counter_shutter_pointer():
    counter = open_counter("sim:?channels=2&rate=100&ref_rate=0&seed=1")
    assert isinstance(counter, FunctionCounter) and counter.channels == 2
    assert counter.count(1.0)[1] == 0
    fixed = open_counter("sim", fn=lambda dwell_s: (7,))
    assert fixed.count(0.1) == (7,)
    assert isinstance(open_shutter("sim:?open=yes"), SimShutter)
    assert open_shutter("sim:?open=yes").is_open()
    pointer = open_pointer("sim:?value=0.3&sem=0.01")
    assert isinstance(pointer, SimPointer) and pointer.read(1.0) == (0.3, 0.01)


def test_manual_devices():
    answers = iter(["5", "6"])
    counter = open_counter("manual:?channels=2", input_fn=lambda p: next(answers), output_fn=str)
    assert isinstance(counter, ManualCounter) and counter.count(1.0) == (5, 6)
    assert isinstance(open_pointer("manual"), ManualPointer)
    with pytest.raises(InputError, match="only for counters and pointers"):
        open_mount("manual")


@pytest.mark.parametrize(
    ("spec", "options", "message"),
    [
        ("usb://3", {}, r"unknown device spec 'usb://3'; allowed: a serial port path"),
        ("ttyUSB0", {}, r"allowed: .*loop://.*rfc2217://.*socket://.*sim"),
        ("", {}, "non-empty"),
        ("sim:?backlash=lots", {}, r"option backlash='lots': expected a finite number"),
        ("sim:?gear=3", {}, r"unknown option 'gear'; allowed: backlash, name, noise"),
        ("sim", {"travel": "5"}, "two numbers, low,high"),
        ("sim:?realtime=maybe", {}, "expected one of 1, true"),
        ("sim:?travel=5,-5", {}, "low < high"),
        ("sim:?backlash", {}, "bad option list; write sim:[?]key=value"),
        ("sim:?=&&", {}, "bad option list"),
    ],
)
def test_bad_specs_and_options_say_what_is_allowed(spec, options, message):
    with pytest.raises(InputError, match=message):
        open_mount(spec, **options)


def test_serial_specs_need_a_profile_and_check_options():
    with pytest.raises(InputError, match="needs profile="):
        open_mount("/dev/ttyUSB0")
    with pytest.raises(InputError, match="unknown option 'speed'; allowed: addr, axis, baud, name"):
        open_mount("loop://", profile="example-mount", speed=3)
    with pytest.raises(InputError, match="retries >= 0"):
        open_mount("loop://", profile="example-mount", retries=-1)


def test_missing_port_is_disconnected_with_advice():
    with pytest.raises(Disconnected, match=r"cannot open /dev/tty-no-such-port.*plugged in"):
        open_mount("/dev/tty-no-such-port", profile="example-mount")


def test_loop_url_opens_through_pyserial_and_an_echo_is_a_bad_reply():
    # loop:// echoes every command back: a real transport, but no controller behind it
    mount = open_mount("loop://", profile="example-mount", timeout=0.05, retries=1)
    assert isinstance(mount, LineMount) and mount.name == "example-mount"
    with pytest.raises(BadReply, match=r"'AT\?' does not have the form 'AT \{value:int\}'"):
        mount.position()
    mount.close()
    with pytest.raises(Disconnected):
        mount.position()


def test_profile_that_cannot_drive_the_device_closes_the_port():
    with pytest.raises(InputError, match=r"entry\.position: is required for a rotation mount"):
        open_mount("loop://", profile="example-counter")


def test_devices_on_one_port_share_one_open_port_and_the_last_closes_it():
    first = open_mount("loop://", profile="example-mount", timeout=0.05)
    second = open_mount("loop://", profile="example-mount", name="second")
    assert first.channel.bus is second.channel.bus
    port = first.channel.bus.port
    first.close()
    assert port.is_open
    second.close()
    assert not port.is_open
    third = open_mount("loop://", profile="example-mount")
    assert third.channel.bus.port is not port
    with pytest.raises(InputError, match=r"loop:// is already open with other link settings"):
        open_counter("loop://", profile="query-pointer")
    third.close()
