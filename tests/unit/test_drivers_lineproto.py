"""The bus, the channel and the line drivers over scripted dialogues (no tty)."""

from __future__ import annotations

import copy
import statistics
import threading
import tomllib

import pytest
import scipy.stats
import serial

from aligner.errors import (
    BadReply,
    DeviceError,
    DeviceRefused,
    DeviceTimeout,
    Disconnected,
    InputError,
    Unattributable,
)
from aligner_drivers.dialogue import DialoguePort, Pair
from aligner_drivers.lineproto import (
    PROFILE_DIR,
    Bus,
    DeviceProfile,
    LineChannel,
    load_profile,
    parse_profile,
)
from aligner_drivers.lineproto import bus as bus_module
from aligner_drivers.serial_counter import LineCounter
from aligner_drivers.serial_mount import LineMount
from aligner_drivers.serial_pointer import LinePointer
from aligner_drivers.serial_shutter import LineShutter

MOUNT = tomllib.loads((PROFILE_DIR / "example-mount.toml").read_text())


def profile_with(base: dict | str = "example-mount", **tables: dict) -> DeviceProfile:
    data = copy.deepcopy(MOUNT if base == "example-mount" else base)
    if isinstance(base, str) and base != "example-mount":
        data = tomllib.loads((PROFILE_DIR / f"{base}.toml").read_text())
    for table, values in tables.items():
        data.setdefault(table, {}).update(values)
    return parse_profile(data, "p.toml")


def channel_for(profile: DeviceProfile, pairs: list[Pair]) -> tuple[LineChannel, DialoguePort]:
    port = DialoguePort(profile, pairs)
    return LineChannel(Bus(port, profile.link), profile), port


class BrokenPort(DialoguePort):
    """A port whose reads fail with ``error``."""

    def __init__(self, profile: DeviceProfile, error: Exception) -> None:
        super().__init__(profile, [("AT?", None)])
        self.error = error

    def read(self, size: int = 1, /) -> bytes:
        raise self.error


FAST = {"reply_timeout_s": 0.02}


def test_channel_sends_the_template_and_decodes_the_reply():
    channel, port = channel_for(profile_with(), [("AT?", "AT -1200")])
    assert channel.read("position") == {"value": -1.2}
    assert port.sent == [b"AT?\r\n"]
    port.check_done()


@pytest.mark.parametrize(
    "first",
    [None, b"AT 12", b"\xff\xfe\r\n", "XX 12"],
    ids=["silent", "partial", "undecodable", "garbled"],
)
def test_a_transient_fault_is_retried(first):
    channel, port = channel_for(profile_with(link=FAST), [("AT?", first), ("AT?", "AT 12")])
    assert channel.read("position") == {"value": 0.012}
    port.check_done()


def test_persistent_silence_is_a_timeout_with_advice():
    profile = profile_with(link={**FAST, "retries": 3})
    channel, port = channel_for(profile, [("AT?", None)] * 4)
    with pytest.raises(DeviceTimeout) as info:
        channel.read("position")
    assert "no reply to 'AT?' within 0.02 s (4 attempt(s))" in str(info.value)
    assert "baud rate (link.baud = 115200 in p.toml; the command is entry.position)" in str(
        info.value
    )
    port.check_done()


def test_persistent_partial_and_garbled_replies_name_the_key_to_check():
    channel, _ = channel_for(profile_with(link=FAST), [("AT?", b"AT 1")] * 3)
    with pytest.raises(BadReply, match=r"cut short.*link\.reply_end \('\\r\\n'\)"):
        channel.read("position")
    channel, _ = channel_for(profile_with(link=FAST), [("AT?", "POS=12")] * 3)
    with pytest.raises(BadReply, match=r"does not have the form 'AT \{value:int\}' .*entry\.pos"):
        channel.read("position")


def test_error_reply_is_refused_at_once_with_the_device_text():
    channel, port = channel_for(profile_with(), [("AT?", "ERR 4 limit switch")])
    with pytest.raises(DeviceRefused, match=r"refused 'AT\?': limit switch"):
        channel.read("position")
    port.check_done()


@pytest.mark.parametrize(
    ("error", "kind", "advice"),
    [
        (serial.SerialException("read failed: [Errno 5]"), Disconnected, "check the cable"),
        (OSError(5, "Input/output error"), Disconnected, "no other program"),
        (serial.SerialTimeoutException("Write timeout"), DeviceTimeout, "flow-control"),
    ],
)
def test_port_errors_become_device_errors(error, kind, advice):
    profile = profile_with()
    channel = LineChannel(Bus(BrokenPort(profile, error), profile.link), profile)
    with pytest.raises(kind, match=advice) as info:
        channel.read("position")
    assert not isinstance(info.value, serial.SerialException | OSError)


def test_closed_channel_is_disconnected():
    channel, _ = channel_for(profile_with(), [])
    channel.close()
    with pytest.raises(Disconnected, match="closed"):
        channel.read("position")


# -- attribution ----------------------------------------------------------------------------


def test_a_late_reply_is_drained_before_the_next_command_and_reported():
    profile = profile_with(link={"reply_timeout_s": 0.05, "late_reply_s": 0.5, "retries": 0})
    channel, port = channel_for(profile, [("AT?", "AT 5", 0.1), ("AT?", "AT 7")])
    with pytest.raises(DeviceTimeout):
        channel.read("position")
    assert channel.read("position") == {"value": 0.007}  # not the late 'AT 5'
    assert channel.take_notices() == ["example-mount: discarded a late or unsolicited reply 'AT 5'"]
    port.check_done()


def test_counts_that_come_before_the_gate_can_have_ended_are_not_this_gate():
    """A reply in the count's form that comes sooner than the gate is a late reply to an
    earlier gate: discarded (and reported), and the true one is waited for."""
    channel, port = channel_for(load_profile("example-counter"), [("GATE 100", "COUNTS 4 5", 0.11)])
    counter = LineCounter(channel)
    port.later(b"COUNTS 9 9\r\n", 0.02)  # an earlier gate's counts, arriving during this one
    assert counter.count(0.1) == (4, 5)
    assert "discarded" in counter.take_notices()[0]
    port.check_done()


def test_two_replies_to_one_command_cannot_be_attributed():
    channel, _ = channel_for(profile_with(), [("AT?", b"AT 5\r\nAT 7\r\n")])
    with pytest.raises(Unattributable, match=r"two replies \('AT 5', 'AT 7'\)"):
        channel.read("position")


def test_the_minimum_gap_between_commands_is_kept(monkeypatch):
    waits: list[float] = []
    monkeypatch.setattr(bus_module.time, "sleep", waits.append)
    channel, _ = channel_for(profile_with(link={"gap_s": 0.25}), [("AT?", "AT 1")] * 2)
    channel.read("position")
    channel.read("position")
    assert len(waits) == 1 and 0.2 < waits[0] <= 0.25


# -- silent set commands, chaining, echo and prompt, byte commands --------------------------


def test_a_silent_set_command_is_checked_with_the_error_query():
    profile = load_profile("silent-set-mount")
    channel, port = channel_for(profile, [("1PA10", None), ("1TE", "1TE0")])
    assert channel.write("position", value=10.0) == {}
    channel, port = channel_for(profile, [("1PA200", None), ("1TE", "1TE2")])
    with pytest.raises(InputError, match=r"200 is outside -170 to 170"):
        channel.write("position", value=200.0)
    channel, port = channel_for(profile, [("1PA100", None), ("1TE", "1TE3")])
    with pytest.raises(DeviceRefused, match=r"'1PA100': the axis is not referenced .*error 3"):
        channel.write("position", value=100.0)
    port.check_done()


def test_a_silent_set_command_is_chained_with_the_error_query():
    profile = load_profile("chained-open-loop-mount")
    channel, port = channel_for(profile, [("1PA2000;TB?", "0, NO ERROR")])
    channel.write("position", value=10.0)
    channel, port = channel_for(profile, [("1PA2000;TB?", "26, INTERLOCK OPEN")])
    with pytest.raises(DeviceRefused, match=r"refused '1PA2000': INTERLOCK OPEN"):
        channel.write("position", value=10.0)
    port.check_done()


def test_echo_reply_and_prompt_are_framed_and_errors_between_them_refused():
    profile = load_profile("echo-prompt-shutter")
    channel, port = channel_for(profile, [("ens?", "1"), ("ens", None), ("ens", "! interlock")])
    assert channel.read("shutter") == {"state": "1"}
    assert channel.write("shutter", retries=0) == {}
    with pytest.raises(DeviceRefused, match="interlock"):
        channel.write("shutter", retries=0)
    port.check_done()
    assert port.sent == [b"ens?\r", b"ens\r", b"ens\r"]


def test_a_control_byte_query_gets_a_one_byte_reply_without_end_marker():
    profile = load_profile("mnemonic-servo-mount")
    channel, port = channel_for(profile, [("\x05", b"1"), ("\x05", b"0")])
    assert channel.read("status") == {"state": "1"}
    assert channel.read("status") == {"state": "0"}
    assert port.sent == [b"\x05", b"\x05"]
    port.check_done()


# -- the drivers ----------------------------------------------------------------------------


def test_mount_converts_moves_polls_and_verifies():
    profile = profile_with(entry={"position": {**MOUNT["entry"]["position"], "scale": -1000.0}})
    channel, port = channel_for(
        profile,
        [("GO -12500", "OK"), ("BUSY?", "BUSY 1"), ("BUSY?", "BUSY 0"), ("AT?", "AT -12500")],
    )
    LineMount(channel).move_to(12.5)
    port.check_done()
    channel, port = channel_for(
        profile, [("GO -12500", "OK"), ("BUSY?", "BUSY 0"), ("AT?", "AT -12400")]
    )
    with pytest.raises(BadReply, match=r"reads 12\.4 deg, -0\.1 deg off.*number format"):
        LineMount(channel).move_to(12.5)


def test_a_position_decoded_in_the_wrong_base_is_caught_on_the_first_move():
    """The controller answers in hex; a profile reading decimal would see 18049 pulses as the
    hex string '00004681' = 4681 decimal: the read-back check refuses it."""
    data = tomllib.loads((PROFILE_DIR / "hex-addressed-mount.toml").read_text())
    data["entry"]["position"]["reply"] = "{addr}PS{value:int}"
    profile = parse_profile(data, "wrong-base.toml")
    channel, _ = channel_for(profile, [("1mv00004681", "1MD00004681"), ("1gp", "1PS00004681")])
    with pytest.raises(BadReply, match=r"after the move to 45\.1225 deg the position reads 11\.70"):
        LineMount(channel).move_to(45.1225)


def test_mount_refuses_moves_outside_its_limits_and_missing_capabilities():
    data = copy.deepcopy(MOUNT)
    for key in ("home", "stop"):
        del data["entry"][key]
    channel, port = channel_for(parse_profile(data, "plain.toml"), [])
    mount = LineMount(channel)
    assert mount.capabilities == frozenset({"readback", "status"})
    with pytest.raises(InputError, match=r"cannot home: plain\.toml has no entry\.home"):
        mount.home()
    with pytest.raises(InputError, match=r"-180 is outside -170 to 170.*entry\.position\.limits"):
        mount.move_to(-180.0)
    assert port.sent == []


def test_mount_init_sequence_needs_home_and_a_status_that_says_not_referenced():
    profile = load_profile("silent-set-mount")
    channel, port = channel_for(profile, [("1PA10", None), ("1TE", "1TE0"), ("1TS00000A", None)])
    mount = LineMount(channel)
    assert "needs_home" in mount.capabilities
    port.pairs[-1] = ("1TS", "1TS00000A")
    with pytest.raises(DeviceRefused, match="not referenced; home it first"):
        mount.move_to(10.0)
    servo = load_profile("mnemonic-servo-mount")
    channel, port = channel_for(servo, [("SVO 1 1", None), ("ERR?", "0")])
    LineMount(channel)
    port.check_done()


def test_a_blocking_move_is_stopped_from_another_thread():
    profile = load_profile("hex-addressed-mount")
    channel, port = channel_for(profile, [("1mv00009C40", None)])
    mount = LineMount(channel)
    errors: list[DeviceError] = []

    def run() -> None:
        try:
            mount.move_to(100.0)
        except DeviceError as exc:
            errors.append(exc)

    worker = threading.Thread(target=run)
    worker.start()
    while port.pairs:  # the move went out
        threading.Event().wait(0.001)
    port.pairs = [("1st", "1MD00001000"), ("1gp", "1PS00001000")]
    mount.stop()
    worker.join(2.0)
    assert len(errors) == 1 and "stopped by stop() at 10.24 deg" in str(errors[0])
    port.check_done()


def test_gated_counter_checks_the_gate_ran_before_reading_the_channels():
    profile = load_profile("gated-counter")
    script: list[Pair] = [
        ("GT 200000", "OK"),
        ("GO", "OK"),
        ("ST?", "RUN"),
        ("ST?", "RUN"),
        ("ST?", "IDLE"),
        ("CT? A", "117"),
        ("CT? B", "95"),
    ]
    channel, port = channel_for(profile, script)
    assert LineCounter(channel).count(0.02) == (117, 95)
    port.check_done()
    channel, port = channel_for(profile, [("GT 2000000", "OK"), ("GO", "OK"), ("ST?", "IDLE")])
    with pytest.raises(Unattributable, match=r"did not start.*previous gate"):
        LineCounter(channel).count(0.2)


def test_free_running_counter_sums_whole_windows_and_refuses_gaps():
    profile = load_profile("free-running-counter")
    channel, port = channel_for(profile, [])
    counter = LineCounter(channel)
    port.later(b"C 5 7 7\r\n")  # before the count: dropped
    for k, line in enumerate((b"C 6 1 1\r\n", b"C 7 10 20\r\n", b"C 8 30 40\r\n")):
        port.later(line, 0.01 + 0.02 * k)  # C 6 covers a window begun before: skipped
    assert counter.count(0.04) == (40, 60) and counter.last_windows == 2
    for k, line in enumerate((b"C 2 0 0\r\n", b"C 3 1 1\r\n", b"C 5 1 1\r\n")):
        port.later(line, 0.01 + 0.02 * k)
    with pytest.raises(Unattributable, match=r"window numbers \[3, 5\] are not consecutive"):
        counter.count(0.04)
    with pytest.raises(InputError, match=r"0\.05 s is not on the 0\.02 s step"):
        counter.count(0.05)


def test_counter_refuses_a_gate_off_its_step():
    counter = LineCounter(channel_for(load_profile("example-counter"), [])[0])
    with pytest.raises(InputError, match=r"0\.0123 s is not on the 0\.001 s step"):
        counter.count(0.0123)
    assert counter.gate_step_s == pytest.approx(0.001)


def test_pointer_averages_its_queries():
    profile = profile_with(
        {
            "format": 1,
            "pointer": {"samples": 4},
            "entry": {"pointer": {"read": "R?", "reply": "{value}"}},
        }
    )
    readings = [0.125, 0.121, 0.13, 0.118]
    channel, port = channel_for(profile, [("R?", f"{r:+.6E}") for r in readings])
    mean, sem = LinePointer(channel).read(0.004)
    # scipy.stats.sem: standard error with ddof=1 (reference library)
    assert mean == pytest.approx(statistics.fmean(readings))
    assert sem == pytest.approx(scipy.stats.sem(readings))
    port.check_done()


def test_toggle_shutter_reads_back_and_never_resends_a_toggle():
    profile = load_profile("echo-prompt-shutter")
    script: list[Pair] = [("ens?", "1"), ("ens", None), ("ens?", "0")]  # created: shut it
    channel, port = channel_for(profile, script)
    shutter = LineShutter(channel)
    assert shutter.capabilities == frozenset({"readback"})
    port.pairs = [("ens?", "0"), ("ens", None), ("ens?", "0")]  # the toggle did nothing
    with pytest.raises(DeviceError, match="did not open"):
        shutter.open()
    port.pairs = [("ens?", "0")]
    assert shutter.is_open() is False
    port.check_done()


def test_byte_shutter_without_readback_repeats_the_last_command():
    profile = load_profile("byte-shutter")
    channel, port = channel_for(profile, [(b"\x80", None), (b"\x81", None)])
    shutter = LineShutter(channel)
    assert shutter.capabilities == frozenset() and not shutter.is_open()
    shutter.open()
    assert shutter.is_open() and port.sent == [b"\x80", b"\x81"]
