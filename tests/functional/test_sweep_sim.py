"""Sweeps on the simulated bench: a 50-point schedule through the API and the quick start
through the command line."""

import json
import subprocess
import sys

import numpy as np
import pytest

from aligner.bench import load_bench
from aligner.run.log import RunLog
from aligner.run.schedule import parse_schedule, plan_points
from aligner.run.station import Station


def _cli(*args, timeout=60):
    return subprocess.run(
        [sys.executable, "-m", "aligner", *args], capture_output=True, text=True, timeout=timeout
    )


def test_fifty_points_on_sim_devices(tmp_path):
    bench = load_bench("demo")
    schedule = parse_schedule("outback:0.2:2.0:25", dwell_s=0.2)
    plan = plan_points(bench, schedule)
    station = Station.open(bench)
    devices = station.devices
    with RunLog(tmp_path / "runs.sqlite") as log:
        result = station.start_sweep(log, schedule)
        points = log.points(result.run_id)
    assert result.status == "complete" and len(points) == 50
    mount = devices.sim.mounts["analyzer"]
    res = bench.mounts["analyzer"].resolution_deg
    planned = np.array([p.readings["analyzer"] for p in plan])
    readback = np.array([p.reading_deg for p in points])
    assert np.allclose(readback, planned, atol=res / 2 + 1e-9)
    # backlash: every point's last move turned upwards (the outback half comes down, and each
    # of its points is approached from below after an overshoot); the turning point is taken
    # twice in a row and needs no second move
    targets = {round(p, 6) for p in planned}
    last_moves = [m for m in mount.move_log if round(m.target_deg, 6) in targets]
    repeated = int(np.sum(np.diff(planned) == 0))
    assert repeated == 1
    assert len(last_moves) == 50 - repeated and all(m.direction == 1 for m in last_moves)
    assert any(m.direction == -1 for m in mount.move_log)  # the overshoots on the way back
    # the prediction at the read-back gives back the scheduled imbalance
    assert np.allclose([p.imbalance_deg for p in points], [p.target for p in plan], atol=0.01)
    assert devices.sim.clock_s == pytest.approx(50 * 0.2)  # simulated time; nothing slept


def test_quick_start_command(tmp_path):
    db = tmp_path / "runs.sqlite"
    out = _cli("sweep", "demo", "--schedule", "amplification:5:60:8", "--db", str(db))
    assert out.returncode == 0, out.stderr
    assert out.stderr.count("laser safety officer") == 1 and "Traceback" not in out.stderr
    lines = [line for line in out.stdout.splitlines() if "/8)" in line and "predicted" in line]
    assert len(lines) == 8
    assert "complete" in out.stdout and "aligner log report 1" in out.stdout
    with RunLog(db) as log:
        assert log.run(1).status == "complete" and len(log.points(1)) == 8


def test_json_output_and_bad_input(tmp_path):
    db = str(tmp_path / "runs.sqlite")
    out = _cli(
        "sweep", "demo", "--schedule", "list:0.5,1.0", "--dwell", "0.3", "--db", db, "--json"
    )
    assert out.returncode == 0, out.stderr
    doc = json.loads(out.stdout)
    assert doc["status"] == "complete" and doc["points_done"] == 2 == len(doc["points"])
    assert {
        "reading_deg",
        "counts",
        "reference",
        "leak",
        "leak_low",
        "leak_high",
        "predicted_leak",
        "pointer",
        "pointer_err",
    } <= set(doc["points"][0])
    for args, words in (
        (["--schedule", "lin:1:2:3"], "unknown form"),
        (["--schedule", "linear:0.2:1:3", "--resume", "1"], "not both"),
        (["--resume", "1"], "already complete"),
        (["--schedule", "list:0.5", "--dwell", "-1"], "--dwell"),
        (["--resume", "9"], "no run 9"),
    ):
        bad = _cli("sweep", "demo", "--db", db, *args)
        assert bad.returncode == 2, (args, bad.stderr)
        assert words in bad.stderr and "Traceback" not in bad.stderr


@pytest.mark.parametrize("schedule", ["linear:-2.0:-0.2:4"])
def test_negative_imbalance_side(tmp_path, schedule):
    bench = load_bench("demo")
    plan = plan_points(bench, parse_schedule(schedule))
    assert all(p.readings["analyzer"] < 135.1 for p in plan)  # low-reading side of the null
