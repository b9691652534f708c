"""Crash safety: a sweep killed with SIGKILL at random points loses no acknowledged point, leaves
a sound database, and ``--resume`` completes the schedule without a duplicate."""

import os
import re
import signal
import subprocess
import sys
import time
from concurrent.futures import ThreadPoolExecutor

import numpy as np
import pytest

from aligner.run.log import RunLog

pytestmark = pytest.mark.skipif(sys.platform == "win32", reason="SIGKILL is POSIX only")

N_POINTS = 30
SWEEP = [
    "sweep",
    "demo",
    "--schedule",
    f"linear:0.2:2.0:{N_POINTS}",
    "--dwell",
    "0.01",
    "--realtime",
]
ACK = re.compile(r"^#(\d+)\s+\((\d+)/(\d+)\)")  # "#index (done/total)" of a logged point


def _trial(db, kill_after, extra_delay):
    """Run a sweep, SIGKILL it after ``kill_after`` acknowledged points (+ a random delay),
    check the log, resume. Returns True when the run had to be resumed."""
    env = {**os.environ, "PYTHONUNBUFFERED": "1", "COLUMNS": "200"}
    proc = subprocess.Popen(
        [sys.executable, "-m", "aligner", *SWEEP, "--db", str(db)],
        stdout=subprocess.PIPE,
        stderr=subprocess.DEVNULL,
        text=True,
        env=env,
    )
    acked, run_id = [], None
    for line in proc.stdout:
        if run_id is None and (m := re.match(r"run (\d+):", line)):
            run_id = int(m.group(1))
        if m := ACK.match(line):
            acked.append(int(m.group(1)))  # the index of the point just logged
        if len(acked) >= kill_after:
            break
    time.sleep(extra_delay)
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    proc.stdout.close()
    if run_id is None:  # killed before the run was created: nothing was acknowledged
        assert not acked
        return False
    with RunLog(db) as log:
        assert log.integrity_ok()
        assert set(acked) <= log.done_indices(run_id)  # every acknowledged point survived
        if log.run(run_id).status == "complete":
            return False
    out = subprocess.run(
        [
            sys.executable,
            "-m",
            "aligner",
            "sweep",
            "demo",
            "--resume",
            str(run_id),
            "--db",
            str(db),
        ],
        capture_output=True,
        text=True,
        timeout=60,
    )
    assert out.returncode == 0, out.stderr
    assert "Traceback" not in out.stderr
    with RunLog(db) as log:
        assert log.integrity_ok()
        assert [p.idx for p in log.points(run_id)] == list(range(N_POINTS))  # no duplicate
        assert log.run(run_id).status == "complete"
    return True


def test_sigkill_at_random_points(tmp_path):
    rng = np.random.default_rng(2026)
    plans = [
        (tmp_path / f"t{i}.sqlite", int(rng.integers(0, N_POINTS)), float(rng.uniform(0, 0.03)))
        for i in range(20)
    ]
    with ThreadPoolExecutor(max_workers=4) as pool:
        resumed = sum(pool.map(lambda p: _trial(*p), plans))
    assert resumed >= 10  # most trials were killed mid-sweep
