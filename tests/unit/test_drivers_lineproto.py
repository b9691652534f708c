"""Device profiles and LineChannel over a scripted in-memory port (no tty)."""

from __future__ import annotations

import copy
import tomllib

import pytest
import serial

from aligner.errors import BadReply, DeviceRefused, DeviceTimeout, Disconnected, InputError
from aligner_drivers.lineproto import PROFILE_DIR, DeviceProfile, LineChannel, load_profile
from aligner_drivers.serial_counter import LineCounter
from aligner_drivers.serial_mount import LineMount
from aligner_drivers.serial_pointer import LinePointer

MOUNT_DATA = tomllib.loads((PROFILE_DIR / "example-mount.toml").read_text())


class ScriptedPort:
    """A pyserial-like port answering each write with the next scripted item.

    Items: bytes (returned by read_until), or an exception instance (raised on read).
    """

    def __init__(self, *replies: bytes | Exception) -> None:
        self.replies = list(replies)
        self.written: list[bytes] = []
        self.timeout: float | None = None
        self.resets = 0
        self.closed = False

    def write(self, data: bytes) -> int:
        self.written.append(data)
        return len(data)

    def read_until(self, expected: bytes = b"\n", size: int | None = None) -> bytes:
        item = self.replies.pop(0) if self.replies else b""
        if isinstance(item, Exception):
            raise item
        return item

    def reset_input_buffer(self) -> None:
        self.resets += 1

    def close(self) -> None:
        self.closed = True


def profile_with(**changes: dict) -> DeviceProfile:
    data = copy.deepcopy(MOUNT_DATA)
    for table, values in changes.items():
        data.setdefault(table, {}).update(values)
    return DeviceProfile.from_mapping(data, "bench-rotator.toml")


def test_shipped_profiles_load_by_name_and_path():
    mount = load_profile("example-mount")
    assert mount.has("home") and mount.steps_per_degree == 1000.0
    counter = load_profile(PROFILE_DIR / "example-counter.toml")
    assert counter.channels == 2 and counter.has("shutter_open")


@pytest.mark.parametrize(
    ("changes", "key", "allowed"),
    [
        ({"axis": {"sense": 2}}, "axis.sense", "1 or -1"),
        ({"axis": {"steps_per_degree": 0}}, "axis.steps_per_degree", "> 0"),
        ({"axis": {"travel_deg": [10, -10]}}, "axis.travel_deg", "low < high"),
        ({"axis": {"speed": 3}}, "axis.speed", "allowed: position_tolerance_deg, sense"),
        ({"link": {"retries": -1}}, "link.retries", ">= 0"),
        ({"link": {"retries": 1.5}}, "link.retries", "whole number"),
        ({"link": {"baud": "fast"}}, "link.baud", "whole number"),
        ({"link": {"encoding": "klingon"}}, "link.encoding", "unknown codec"),
        ({"link": {"terminator": ""}}, "link.terminator", "non-empty string"),
        ({"commands": {"move": "GO {angle}"}}, "commands.move", "allowed: steps"),
        ({"commands": {"move": "GO"}}, "commands.move", "must contain {steps}"),
        ({"commands": {"move": "GO {steps"}}, "commands.move", "bad template"),
        ({"commands": {"move": "GO {steps:q}"}}, "commands.move", "bad template"),
        ({"commands": {"move": "GO {steps} {}"}}, "commands.move", "unknown field {}"),
        ({"commands": {"jog": "J"}}, "commands.jog", "unknown key; allowed: count, home"),
        ({"replies": {"query": "AT (\\d+)"}}, "replies.query", "named group(s) steps"),
        ({"replies": {"query": "AT (?P<steps>"}}, "replies.query", "not a valid regular"),
        ({"replies": {"count": "C (?P<ch1>\\d+)"}}, "commands.count", "has no command"),
        ({"counter": {"channels": 3}}, "counter.channels", "1 or 2"),
        ({"gearbox": {"ratio": 2}}, "gearbox", "unknown table; allowed: axis, commands"),
    ],
)
def test_profile_errors_name_file_key_and_what_is_allowed(changes, key, allowed):
    with pytest.raises(InputError) as info:
        profile_with(**changes)
    message = str(info.value)
    assert message.startswith(f"bench-rotator.toml: {key}:")
    assert allowed in message


def test_missing_reply_pattern_and_two_channel_groups_are_named():
    data = copy.deepcopy(MOUNT_DATA)
    del data["replies"]["home"]
    with pytest.raises(InputError, match=r"replies\.home: is missing: commands\.home"):
        DeviceProfile.from_mapping(data, "p.toml")
    counter = tomllib.loads((PROFILE_DIR / "example-counter.toml").read_text())
    counter["replies"]["count"] = r"COUNTS (?P<ch1>\d+)"
    with pytest.raises(InputError, match=r"replies\.count: needs the named group\(s\) ch2"):
        DeviceProfile.from_mapping(counter, "c.toml")


def test_missing_and_broken_files_are_input_errors(tmp_path):
    with pytest.raises(InputError, match=r"no such profile file.*example-mount"):
        load_profile(tmp_path / "absent.toml")
    broken = tmp_path / "broken.toml"
    broken.write_text("[link\nbaud = 1")
    with pytest.raises(InputError, match=r"broken\.toml: not valid TOML"):
        load_profile(broken)


def test_steps_and_readings_with_sense():
    plus, minus = profile_with(), profile_with(axis={"sense": -1, "steps_per_degree": 400.0})
    assert plus.to_steps(12.3456) == 12346
    assert minus.to_steps(10.0) == -4000
    assert minus.to_degrees(minus.to_steps(-33.25)) == -33.25
    assert plus.position_tolerance_deg == 0.002
    assert profile_with(axis={"position_tolerance_deg": 0}).position_tolerance_deg == 0


def test_default_tolerance_is_one_and_a_half_steps():
    data = copy.deepcopy(MOUNT_DATA)
    del data["axis"]["position_tolerance_deg"]
    assert DeviceProfile.from_mapping(data).position_tolerance_deg == pytest.approx(0.0015)


def test_channel_sends_template_with_terminator_and_parses_groups():
    port = ScriptedPort(b"AT -1200\r\n")
    channel = LineChannel(port, profile_with())
    assert channel.transact("query") == {"steps": "-1200"}
    assert port.written == [b"AT?\r\n"] and port.resets == 1 and port.timeout == 0.5


@pytest.mark.parametrize(
    "first",
    [b"", b"AT 12", b"\xff\xfe\r\n", b"XX 12\r\n"],
    ids=["silent", "partial", "undecodable", "garbled"],
)
def test_channel_retries_a_transient_fault(first):
    port = ScriptedPort(first, b"AT 12\r\n")
    assert LineChannel(port, profile_with()).transact("query") == {"steps": "12"}
    assert len(port.written) == 2 and port.resets == 2


def test_persistent_silence_is_a_timeout_with_advice():
    port = ScriptedPort()
    with pytest.raises(DeviceTimeout) as info:
        LineChannel(port, profile_with(link={"retries": 3})).transact("query", timeout_s=0.01)
    assert len(port.written) == 4
    assert "no reply to 'AT?' within 0.01 s (4 attempt(s))" in str(info.value)
    assert "baud rate (profile: 115200)" in str(info.value)


def test_persistent_partial_line_points_at_the_terminator():
    port = ScriptedPort(b"AT 1", b"AT 1", b"AT 1")
    with pytest.raises(BadReply, match=r"cut short.*link\.terminator \('\\r\\n'\)"):
        LineChannel(port, profile_with()).transact("query")


def test_persistent_garbage_names_the_pattern():
    port = ScriptedPort(*[b"POS=12\r\n"] * 3)
    with pytest.raises(BadReply, match=r"does not match replies\.query"):
        LineChannel(port, profile_with()).transact("query")


def test_error_reply_is_refused_at_once_with_the_device_text():
    port = ScriptedPort(b"ERR 4 limit switch\r\n", b"AT 0\r\n")
    with pytest.raises(DeviceRefused, match="refused 'AT\\?': limit switch"):
        LineChannel(port, profile_with()).transact("query")
    assert len(port.written) == 1


@pytest.mark.parametrize(
    ("error", "kind", "advice"),
    [
        (serial.SerialException("read failed: [Errno 5]"), Disconnected, "check the cable"),
        (OSError(5, "Input/output error"), Disconnected, "no other program"),
        (serial.SerialTimeoutException("Write timeout"), DeviceTimeout, "flow-control"),
    ],
)
def test_port_errors_become_device_errors(error, kind, advice):
    with pytest.raises(kind, match=advice) as info:
        LineChannel(ScriptedPort(error), profile_with()).transact("query")
    assert not isinstance(info.value, serial.SerialException | OSError)


def test_closed_channel_is_disconnected_and_close_never_raises():
    class BrokenClose(ScriptedPort):
        def close(self) -> None:
            raise OSError(9, "Bad file descriptor")

    channel = LineChannel(BrokenClose(), profile_with())
    channel.close()
    with pytest.raises(Disconnected, match="closed"):
        channel.transact("query")


def test_line_mount_converts_and_verifies_over_a_scripted_port():
    profile = profile_with(axis={"sense": -1})
    port = ScriptedPort(b"OK\r\n", b"BUSY 1\r\n", b"BUSY 0\r\n", b"AT -12500\r\n")
    LineMount(LineChannel(port, profile)).move_to(12.5)
    assert port.written == [b"GO -12500\r\n", b"BUSY?\r\n", b"BUSY?\r\n", b"AT?\r\n"]
    port = ScriptedPort(b"OK\r\n", b"BUSY 0\r\n", b"AT -12400\r\n")
    with pytest.raises(BadReply, match=r"reads 12\.4 deg, -0\.1 deg off"):
        LineMount(LineChannel(port, profile)).move_to(12.5)


def test_line_mount_refuses_moves_outside_travel_and_missing_capabilities():
    data = copy.deepcopy(MOUNT_DATA)
    for table in ("commands", "replies"):
        for key in ("home", "stop", "status"):
            del data[table][key]
    port = ScriptedPort()
    mount = LineMount(LineChannel(port, DeviceProfile.from_mapping(data, "plain.toml")))
    assert mount.capabilities == frozenset({"readback"})
    assert mount.is_moving() is False
    with pytest.raises(InputError, match=r"cannot home: plain\.toml has no commands\.home"):
        mount.home()
    with pytest.raises(InputError, match=r"-170 to 170 deg \(axis\.travel_deg"):
        mount.move_to(-180.0)
    assert port.written == []


def test_line_mount_without_status_waits_for_the_move_reply():
    data = copy.deepcopy(MOUNT_DATA)
    for table in ("commands", "replies"):
        del data[table]["status"]
    data["link"]["move_timeout_s"] = 7.0
    port = ScriptedPort(b"OK\r\n", b"AT 1000\r\n")
    LineMount(LineChannel(port, DeviceProfile.from_mapping(data))).move_to(1.0)
    assert port.written == [b"GO 1000\r\n", b"AT?\r\n"]


def test_profile_lacking_required_commands_is_refused_by_the_driver():
    with pytest.raises(InputError, match=r"commands\.count: is required for a counter"):
        LineCounter(LineChannel(ScriptedPort(), profile_with()))


def test_line_pointer_parses_mean_and_error():
    data = {
        "link": {"terminator": "\n", "reply_timeout_s": 0.2},
        "commands": {"pointer_read": "MEAN? {dwell_ms}"},
        "replies": {"pointer_read": r"MEAN (?P<mean>\S+) (?P<sem>\S+)"},
    }
    port = ScriptedPort(b"MEAN 0.125 0.002\n", b"MEAN 0.1 -3\n", b"MEAN x 1\n")
    pointer = LinePointer(LineChannel(port, DeviceProfile.from_mapping(data)))
    assert pointer.read(1.5) == (0.125, 0.002)
    assert port.written == [b"MEAN? 1500\n"] and port.timeout == pytest.approx(1.7)
    with pytest.raises(BadReply, match="standard error >= 0"):
        pointer.read(1.0)
    with pytest.raises(BadReply, match="group 'mean'"):
        pointer.read(1.0)


def test_gate_below_one_millisecond_is_an_input_error():
    counter = LineCounter(LineChannel(ScriptedPort(), load_profile("example-counter")))
    with pytest.raises(InputError, match=r"1 ms step of commands\.count"):
        counter.count(0.0001)
