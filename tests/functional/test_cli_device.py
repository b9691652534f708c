"""``aligner device``: identify and self-test emulated devices; exit status 0, 2 and 3; the wire
log escapes every control byte."""

from __future__ import annotations

import io
import json
import sys
import time
import tomllib

import pytest

from aligner.cli import main
from aligner.cli.device import clean, escaped
from aligner_drivers.emulator import Emulator, Faults
from aligner_drivers.lineproto import PROFILE_DIR, shipped_profiles

pytestmark = pytest.mark.skipif(sys.platform == "win32", reason="pty emulator is POSIX only")


def device(capsys, *args: str, answer: str | None = None, monkeypatch=None) -> tuple[int, str, str]:
    if monkeypatch is not None:
        monkeypatch.setattr(sys, "stdin", io.StringIO(answer or ""))
    code = main(["device", *args])
    out, err = capsys.readouterr()
    return code, out, err


def test_profiles_lists_every_shipped_profile_with_its_roles(capsys):
    code, out, _ = device(capsys, "profiles", "--json")
    rows = json.loads(out)["profiles"]
    assert code == 0 and [r["name"] for r in rows] == shipped_profiles()
    assert {"name": "example-counter", "roles": ["counter", "shutter"]}.items() <= rows[
        [r["name"] for r in rows].index("example-counter")
    ].items()


def test_show_prints_the_identity_and_state_and_moves_nothing(capsys):
    with Emulator("silent-set-mount") as emu:
        code, out, _ = device(capsys, "show", emu.port, "--profile", "silent-set-mount")
    assert code == 0
    assert "identity:     silent-set stage 4.0" in out
    assert "needs_home" in out and "position_deg: 0.0" in out
    assert emu.device.axis().move_log == []


def test_try_asks_first_and_a_refusal_moves_nothing(capsys, monkeypatch):
    with Emulator("hex-addressed-mount") as emu:
        args = ("try", emu.port, "--profile", "hex-addressed-mount")
        code, out, err = device(capsys, *args, answer="no\n", monkeypatch=monkeypatch)
    assert code == 2 and out == ""
    assert "laser safety officer" in err and "not confirmed" in err
    assert emu.device.axis().move_log == []


def test_try_homes_steps_and_comes_back_within_tolerance(capsys, monkeypatch):
    with Emulator("mnemonic-servo-mount") as emu:
        args = ("try", emu.port, "--profile", "mnemonic-servo-mount", "--step", "2", "--json")
        code, out, _ = device(capsys, *args, answer="yes\n", monkeypatch=monkeypatch)
    report = json.loads(out)
    assert code == 0 and report["ok"] and report["identity"] == "mnemonic servo controller 7.2"
    assert [s["name"] for s in report["steps"]] == ["home", "step", "back", "query"]
    assert emu.device.axis().move_log == [0.0, 2.0, 0.0]  # FRF, then the step and back
    assert all(s["seconds"] > 0 for s in report["steps"])


@pytest.mark.parametrize(
    ("shape", "role", "first_step"),
    [
        ("echo-prompt-shutter", "shutter", "reads shut"),
        ("byte-shutter", "shutter", "not confirmable"),
        ("gated-counter", "counter", "0.1 s gate: counts ["),
        ("free-running-counter", "counter", "(5 windows)"),
        ("query-pointer", "pointer", "0.1 s reading: 0.12"),
    ],
)
def test_try_other_devices(capsys, shape, role, first_step):
    with Emulator(shape) as emu:
        code, out, _ = device(capsys, "try", emu.port, "--profile", shape, "--yes")
        deadline = time.monotonic() + 1.0  # a shutter without replies acts a moment later
        while emu.beam_on and time.monotonic() < deadline:
            time.sleep(0.002)
        assert not emu.beam_on  # a shutter is left shut
    assert code == 0 and f"a {role}" in out and first_step in out


def test_a_device_fault_exits_3_and_says_what_failed(capsys, tmp_path):
    data = (PROFILE_DIR / "hex-addressed-mount.toml").read_text()
    wrong = tmp_path / "wrong-base.toml"
    wrong.write_text(
        data.replace('reply = "{addr}PS{value:hex8s}"', 'reply = "{addr}PS{value:int}"')
    )
    assert tomllib.loads(wrong.read_text())["entry"]["position"]["reply"].endswith(":int}")
    with Emulator("hex-addressed-mount") as emu:
        emu.device.axis().force(4000)  # 10 deg = 00000FA0: no decimal reading
        code, out, err = device(capsys, "try", emu.port, "--profile", str(wrong), "--yes")
    assert code == 3 and out == "" and "Traceback" not in err
    assert "'1PS00000FA0' to '1gp' does not have the form '{addr}PS{value:int}'" in err


def test_bad_input_exits_2_with_one_line(capsys):
    code, out, err = device(capsys, "show", "/dev/ttyUSB9")
    assert code == 2 and "--as: say which device" in err and out == ""
    code, _, err = device(capsys, "show", "/dev/ttyUSB9", "--as", "mount")
    assert code == 2 and "needs profile=" in err
    code, _, err = device(capsys, "show", "/dev/ttyUSB9", "--profile", "example-counter")
    assert code == 2 and "drives counter and shutter; choose one" in err


def test_the_wire_log_escapes_control_bytes(capsys):
    with Emulator("mnemonic-servo-mount") as emu:
        args = ("show", emu.port, "--profile", "mnemonic-servo-mount", "--wire")
        code, _, err = device(capsys, *args)
    assert code == 0
    assert "-> \\x05" in err and "-> SVO 1 1\\n" in err and "<- 0" in err
    assert not any(ch in err for ch in "\x05\r") and err.count("\n") == len(err.splitlines())


def test_escaping_helpers():
    assert escaped(b"A\r\n\x1b[2J\\\xff") == "A\\r\\n\\x1b[2J\\\\\\xff"
    assert clean("ok\x1b[31m\x07") == "ok?[31m?"


def test_a_failed_step_is_reported_and_exits_3(capsys):
    faults = Faults(script=("offset",), only=frozenset({"GO"}))  # a stalled motor
    with Emulator(faults=faults) as emu:
        code, out, _ = device(capsys, "try", emu.port, "--profile", "example-mount", "--yes")
    assert code == 3
    assert "FAIL step" in out and "+0.05 deg off" in out and " back " not in out


def test_the_emulator_runs_as_a_command_for_a_first_try(capsys):
    # docs/device-profiles.md: `python -m aligner_drivers.emulator SHAPE` prints the port that
    # `aligner device show` then reaches through the real transport (common practice, no source)
    import subprocess

    proc = subprocess.Popen(
        [sys.executable, "-m", "aligner_drivers.emulator", "hex-addressed-mount"],
        stdout=subprocess.PIPE,
        text=True,
    )
    try:
        assert proc.stdout is not None
        line = proc.stdout.readline()
        assert line.startswith("serving the hex-addressed-mount shape on ")
        port = line.split(" on ")[1].split(" ")[0]
        assert main(["device", "show", port, "--profile", "hex-addressed-mount"]) == 0
        assert "identity:     hex stepper" in capsys.readouterr().out
    finally:
        proc.terminate()
        assert proc.wait(timeout=10) == 0
