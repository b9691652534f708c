"""Every shipped profile in a scripted dialogue: what the driver must send, what the device
answers (without framing), and what the driver makes of it. A new shipped profile without a
dialogue here fails the first test."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import pytest

from aligner_drivers.dialogue import DialoguePort, Pair
from aligner_drivers.lineproto import Bus, LineChannel, load_profile, shipped_profiles
from aligner_drivers.serial_counter import LineCounter
from aligner_drivers.serial_mount import LineMount
from aligner_drivers.serial_pointer import LinePointer
from aligner_drivers.serial_shutter import LineShutter

DRIVERS: dict[str, Callable[..., Any]] = {
    "mount": LineMount,
    "counter": LineCounter,
    "shutter": LineShutter,
    "pointer": LinePointer,
}


@dataclass(frozen=True)
class Dialogue:
    role: str
    action: Callable[[Any], Any]
    pairs: tuple[Pair, ...]
    result: Any = None
    lines: tuple[bytes, ...] = ()  # unsolicited lines, one per 20 ms


def move_to_10(mount: Any) -> float:
    mount.move_to(10.0)
    return round(mount.position(), 6)


def open_shutter(shutter: Any) -> bool:
    shutter.open()
    return shutter.is_open()


DIALOGUES = {
    "example-mount": Dialogue(
        "mount",
        move_to_10,
        (("GO 10000", "OK"), ("BUSY?", "BUSY 0"), ("AT?", "AT 10000"), ("AT?", "AT 10000")),
        10.0,
    ),
    "example-counter": Dialogue(
        "counter", lambda c: c.count(0.01), (("GATE 10", "COUNTS 3 4", 0.011),), (3, 4)
    ),
    "hex-addressed-mount": Dialogue(
        "mount",
        move_to_10,
        (("1mv00000FA0", "1MD00000FA0"), ("1gp", "1PS00000FA0"), ("1gp", "1PS00000FA0")),
        10.0,
    ),
    "silent-set-mount": Dialogue(
        "mount",
        move_to_10,
        (
            ("1PA10", None),
            ("1TE", "1TE0"),
            ("1TS", "1TS000028"),
            ("1TS", "1TS000033"),
            ("1TP", "1TP10.00000"),
            ("1TP", "1TP10.00000"),
        ),
        10.0,
    ),
    "slash-request-mount": Dialogue(
        "mount",
        move_to_10,
        (
            ("/01 1 move abs 32000", "@01 1 OK BUSY -- 0"),
            ("/01 1", "@01 1 OK IDLE -- 0"),
            ("/01 1 get pos", "@01 1 OK IDLE -- 32000"),
            ("/01 1 get pos", "@01 1 OK IDLE -- 32000"),
        ),
        10.0,
    ),
    "mnemonic-servo-mount": Dialogue(
        "mount",
        move_to_10,
        (
            ("SVO 1 1", None),  # the initialisation sequence, when the mount is created
            ("ERR?", "0"),
            ("MOV 1 10.0000", None),
            ("ERR?", "0"),
            ("\x05", b"1"),
            ("\x05", b"0"),
            ("POS? 1", "1=10.0000"),
            ("POS? 1", "1=10.0000"),
        ),
        10.0,
    ),
    "bitfield-status-mount": Dialogue(
        "mount",
        move_to_10,
        (
            ("X1:GOTO 5000", "X1:OK"),
            ("X1:STAT?", "X1:STAT 9233"),  # 0x2411: moving, with the bits of normal use
            ("X1:STAT?", "X1:STAT 8209"),  # 0x2011: stopped
            ("X1:POS?", "X1:POS 5000"),
            ("X1:POS?", "X1:POS 5000"),
        ),
        10.0,
    ),
    "echo-prompt-shutter": Dialogue(
        "shutter",
        open_shutter,
        (
            ("ens?", "0"),  # created: already shut, nothing to toggle
            ("ens?", "0"),
            ("ens?", "0"),  # open: toggle, then read back
            ("ens", None),
            ("ens?", "1"),
            ("ens?", "1"),
        ),
        True,
    ),
    "byte-shutter": Dialogue("shutter", open_shutter, ((b"\x80", None), (b"\x81", None)), True),
    "gated-counter": Dialogue(
        "counter",
        lambda c: c.count(0.02),
        (
            ("GT 200000", "OK"),
            ("GO", "OK"),
            ("ST?", "RUN"),
            ("ST?", "IDLE"),
            ("CT? A", "5"),
            ("CT? B", "6"),
        ),
        (5, 6),
    ),
    "free-running-counter": Dialogue(
        "counter",
        lambda c: (*c.count(0.04), c.last_windows),
        (),
        (30, 50, 2),
        lines=(b"C 1 9 9\r\n", b"C 2 10 20\r\n", b"C 3 20 30\r\n"),
    ),
    "query-pointer": Dialogue(
        "pointer",
        lambda p: p.read(0.008),
        tuple(("READ?", f"{v:+.6E}") for v in (0.1, 0.3) * 4),
        (0.2, 0.1 / 8**0.5 * (8 / 7) ** 0.5),  # sample standard deviation 0.1 * sqrt(8/7)
    ),
    "tcp-call-mount": Dialogue(
        "mount",
        move_to_10,
        (("move(1, 10.00000)", "at 10.00000"), ("where(1)", "10.00000"), ("where(1)", "10.0")),
        10.0,
    ),
    "chained-open-loop-mount": Dialogue(
        "mount",
        move_to_10,
        (
            ("1PA2000;TB?", "0, NO ERROR"),
            ("1MD?", "0"),
            ("1MD?", "1"),
            ("1TP?", "2000"),
            ("1TP?", "2000"),
        ),
        10.0,
    ),
}


def test_every_shipped_profile_has_a_dialogue():
    assert sorted(DIALOGUES) == shipped_profiles()


@pytest.mark.parametrize("name", sorted(DIALOGUES))
def test_dialogue(name):
    script = DIALOGUES[name]
    profile = load_profile(name)
    port = DialoguePort(profile, script.pairs)
    for k, line in enumerate(script.lines):
        port.later(line, 0.005 + 0.02 * k)
    device = DRIVERS[script.role](LineChannel(Bus(port, profile.link), profile))
    assert script.action(device) == pytest.approx(script.result)
    port.check_done()
