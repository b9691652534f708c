"""The quick start's first command, ``aligner desk demo``, in a real terminal: a private tmux
server with an 80x24 window, keys sent with ``send-keys`` and the screen read back with
``capture-pane``. Skipped where tmux is not installed.

Checks: the first screen shows every tab, the prediction's numbers and the whole safety text
at 80x24; a keystroke steps the reading; F1 lists the keys; Ctrl+Q quits and leaves the
terminal as it was; SIGTERM during a sweep pauses it after its point with the shutter shut,
records why, and exits with 128 + 15 saying so; closing the terminal (SIGHUP) does the same
and ends the desk.
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import sys
import time
from collections.abc import Callable, Iterator
from pathlib import Path

import pytest

from aligner.bench import load_bench
from aligner.prediction import format_weak_value, predict
from aligner.run.log import RunLog
from aligner.tui.format import sci
from aligner.tui.widgets.safety import SAFETY_TEXT

pytestmark = pytest.mark.skipif(
    shutil.which("tmux") is None or shutil.which("pgrep") is None or not Path("/proc").is_dir(),
    reason="needs tmux, pgrep and /proc",
)

#: Seconds to wait for the desk to draw or react (a busy 2-core machine).
PATIENCE_S = 30.0


class Terminal:
    """One tmux window of 80x24 cells on a private tmux server, running a command under a
    shell that afterwards prints the command's exit status and stays, so the terminal can be
    read as the operator would see it after the desk has ended."""

    def __init__(self, folder: Path) -> None:
        self.socket = str(folder / "tmux.sock")  # a private server, its socket removed with it

    def tmux(self, *args: str) -> str:
        done = subprocess.run(
            ["tmux", "-S", self.socket, "-f", os.devnull, *args],
            capture_output=True,
            text=True,
            timeout=30,
            check=True,
        )
        return done.stdout

    def start(self, command: list[str]) -> None:
        script = '"$@"; echo "exit status $?"; sleep 600'
        self.tmux(
            *("new-session", "-d", "-s", "desk", "-x", "80", "-y", "24"),
            *("sh", "-c", script, "sh", *command),
        )

    def screen(self) -> str:
        return self.tmux("capture-pane", "-p", "-t", "desk")

    def keys(self, *keys: str) -> None:
        self.tmux("send-keys", "-t", "desk", *keys)

    def wait_for(self, test: Callable[[str], bool], what: str) -> str:
        deadline = time.monotonic() + PATIENCE_S
        while time.monotonic() < deadline:
            text = self.screen()
            if test(text):
                return text
            time.sleep(0.2)
        raise AssertionError(f"never saw {what}; the screen was:\n{self.screen()}")

    def ended(self) -> int:
        """Wait for the command to end; its exit status, as the shell printed it."""
        text = self.wait_for(lambda s: "exit status" in s, "the desk's end")
        said = re.search(r"exit status (\d+)", text)
        assert said is not None
        return int(said.group(1))

    def pid(self) -> int:
        """The command's process id (the shell's child)."""
        shell = self.tmux("display", "-p", "-t", "desk", "#{pane_pid}").strip()
        child = subprocess.run(["pgrep", "-P", shell], capture_output=True, text=True)
        return int(child.stdout.split()[0])

    def close(self) -> None:
        subprocess.run(["tmux", "-S", self.socket, "kill-server"], capture_output=True)


@pytest.fixture
def terminal(tmp_path_factory) -> Iterator[Terminal]:
    term = Terminal(tmp_path_factory.mktemp("tmux"))  # short: a socket path has a length limit
    yield term
    term.close()


def desk_command(tmp_path: Path) -> list[str]:
    return [sys.executable, "-m", "aligner", "desk", "demo", "--db", str(tmp_path / "runs.sqlite")]


def test_desk_demo_in_an_80x24_terminal(terminal, tmp_path):
    bench = load_bench("demo")
    p = predict(bench, bench.readings())
    terminal.start(desk_command(tmp_path))
    screen = terminal.wait_for(
        lambda s: "weak value A_w" in s and "safety officer" in s, "the bench screen"
    )
    lines = screen.splitlines()
    assert len(lines) <= 24 and max(len(line) for line in lines) <= 80
    for tab in ("F2 Bench", "F3 Plan", "F4 Sweep", "F5 Meter", "F6 Devices", "F7 Log", "F1 Help"):
        assert tab in screen
    assert format_weak_value(complex(p.weak_value), 5) in screen
    assert sci(p.leak_rate) in screen and f"{float(p.imbalance_deg):+.4f}°" in screen
    assert " ".join(SAFETY_TEXT.split()) in " ".join(screen.split())  # not cut
    terminal.keys("Up")
    terminal.wait_for(lambda s: "136.001" in s and "+1.0010°" in s, "the stepped reading")
    terminal.keys("F1")
    terminal.wait_for(lambda s: "Keys of the bench screen" in s, "the help")
    terminal.keys("Escape")
    terminal.wait_for(lambda s: "Keys of the bench" not in s, "the help closed")
    terminal.keys("C-q")
    assert terminal.ended() == 0
    after = terminal.screen()
    assert "weak value" not in after and "Traceback" not in after  # the shell's screen is back


def test_sigterm_during_a_sweep_pauses_it_and_shuts_the_shutter(terminal, tmp_path):
    terminal.start(desk_command(tmp_path))
    terminal.wait_for(lambda s: "weak value A_w" in s, "the bench screen")
    terminal.keys("F4")
    terminal.wait_for(lambda s: "idle: Ctrl+S starts" in s, "the sweep screen")
    terminal.keys("C-s")
    terminal.wait_for(lambda s: "point #0 logged" in s, "the first point")
    os.kill(terminal.pid(), 15)
    assert terminal.ended() == 128 + 15
    after = terminal.screen()
    assert "aligner desk: stopped by signal 15." in after and "point #" not in after
    with RunLog(tmp_path / "runs.sqlite") as log:
        (run,) = log.runs()
        events = log.events(run.id)
    assert run.status == "interrupted" and 0 < run.points < run.planned
    assert any("shutter shut (confirmed by the shutter)" in e.message for e in events)
    assert any(e.message == "the desk was ended by signal 15" for e in events)


def test_a_hang_up_during_a_sweep_pauses_it_and_ends_the_desk(terminal, tmp_path):
    # closing the terminal sends SIGHUP; the terminal is gone, so the desk secures the bench
    # and ends without drawing anything
    terminal.start(desk_command(tmp_path))
    terminal.wait_for(lambda s: "weak value A_w" in s, "the bench screen")
    terminal.keys("F4")
    terminal.wait_for(lambda s: "idle: Ctrl+S starts" in s, "the sweep screen")
    terminal.keys("C-s")
    terminal.wait_for(lambda s: "point #0 logged" in s, "the first point")
    pid = terminal.pid()
    terminal.tmux("kill-session", "-t", "desk")
    deadline = time.monotonic() + PATIENCE_S
    while Path(f"/proc/{pid}").exists() and time.monotonic() < deadline:
        time.sleep(0.2)
    assert not Path(f"/proc/{pid}").exists(), "the desk is still running after the hang-up"
    with RunLog(tmp_path / "runs.sqlite") as log:
        (run,) = log.runs()
        events = log.events(run.id)
    assert run.status == "interrupted" and 0 < run.points < run.planned
    assert any("shutter shut (confirmed by the shutter)" in e.message for e in events)
    assert any(e.message == "the desk was ended by signal 1" for e in events)
