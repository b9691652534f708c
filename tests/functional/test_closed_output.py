"""A command whose reader goes away (``aligner sweep ... | head -1``) stops as for SIGPIPE:
exit status 141, the shutter shut, the run resumable, no report of an internal error (the
shell's 128 + N convention for a signal; common practice, no source)."""

from __future__ import annotations

import os
import subprocess
import sys

from aligner.run.log import RunLog
from aligner.run.station import shutter_words


def _sweep_into_closed_pipe(db: str, schedule: str) -> subprocess.CompletedProcess[str]:
    """Run a sweep whose stdout is a pipe closed after the first line."""
    read_end, write_end = os.pipe()
    proc = subprocess.Popen(
        [sys.executable, "-m", "aligner", "sweep", "demo", "--schedule", schedule, "--db", db],
        stdout=write_end,
        stderr=subprocess.PIPE,
        text=True,
    )
    os.close(write_end)
    with os.fdopen(read_end, "rb") as reader:
        reader.readline()  # the first line, then the reader goes away
    _, err = proc.communicate(timeout=120)
    return subprocess.CompletedProcess(proc.args, proc.returncode, "", err)


def test_a_closed_pipe_pauses_the_sweep_resumably(tmp_path):
    db = str(tmp_path / "runs.sqlite")
    done = _sweep_into_closed_pipe(db, "list:1,1.2,1.4")
    assert done.returncode == 141, done.stderr
    assert "internal error" not in done.stderr
    assert "closed output pipe" in done.stderr
    with RunLog(db) as log:
        run = log.run(1)
        assert run.status == "interrupted"
        assert any(shutter_words("confirmed") in e.message for e in log.events(1))
    resumed = subprocess.run(
        [sys.executable, "-m", "aligner", "sweep", "demo", "--resume", "1", "--db", db],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert resumed.returncode == 0, resumed.stderr
    with RunLog(db) as log:
        assert log.run(1).status == "complete"
        assert len(log.points(1)) == 3


def test_a_stop_after_the_last_point_leaves_the_run_complete(tmp_path):
    db = str(tmp_path / "runs.sqlite")
    done = _sweep_into_closed_pipe(db, "list:1")
    assert done.returncode in (0, 141), done.stderr  # the pipe may close after the last line
    with RunLog(db) as log:
        assert log.run(1).status == "complete"
        assert len(log.points(1)) == 1
