"""Resuming a run with a bench file that changed since the run started."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

from aligner.bench import DEMO_BENCH, load_bench
from aligner.run.log import RunLog
from aligner.run.schedule import parse_schedule
from aligner.run.station import Station


def _interrupted_run(tmp_path: Path) -> tuple[Path, Path]:
    bench_file = tmp_path / "bench.toml"
    bench_file.write_text(DEMO_BENCH.read_text(encoding="utf-8"), encoding="utf-8")
    bench = load_bench(bench_file)
    schedule = parse_schedule("linear:0.3:1.5:6", dwell_s=0.2)
    db = tmp_path / "runs.sqlite"
    with RunLog(db) as log, Station.open(bench) as station:

        def pause_after_two(point, done, total):
            if done == 2:
                station.request_stop()

        result = station.start_sweep(log, schedule, on_point=pause_after_two)
    assert result.status == "interrupted" and result.points_done == 2
    return bench_file, db


def _resume(bench_file: Path, db: Path) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [
            sys.executable,
            "-m",
            "aligner",
            "sweep",
            str(bench_file),
            "--resume",
            "1",
            "--db",
            str(db),
        ],
        capture_output=True,
        text=True,
        timeout=120,
    )


def test_unchanged_bench_resumes_without_a_note(tmp_path: Path) -> None:
    bench_file, db = _interrupted_run(tmp_path)
    out = _resume(bench_file, db)
    assert out.returncode == 0, out.stderr
    assert "differs from the bench logged" not in out.stderr


def test_a_stricter_safe_rate_in_the_file_is_honoured(tmp_path: Path) -> None:
    bench_file, db = _interrupted_run(tmp_path)
    text = bench_file.read_text(encoding="utf-8")
    bench_file.write_text(text.replace("safe_rate = 1.5e6", "safe_rate = 500.0"), encoding="utf-8")
    out = _resume(bench_file, db)
    assert "differs from the bench logged with run 1" in out.stderr
    # the remaining points are predicted at ~1e3 counts/s: above half of 500, so refused
    assert out.returncode == 3
    assert "detector guard" in out.stderr and "Traceback" not in out.stderr
