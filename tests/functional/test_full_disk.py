"""A full disk, on a small temporary file system (skipped where the machine does not allow
mounting one): the sweep pauses cleanly and resumes once there is space; writing a bench file
fails cleanly, leaving the file as it was and no temporary file behind."""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path

import pytest

from aligner.bench import DEMO_BENCH
from aligner.run.log import RunLog

pytestmark = pytest.mark.skipif(sys.platform != "linux", reason="tmpfs is Linux only")


@pytest.fixture
def small_disk(tmp_path: Path) -> Iterator[Path]:
    disk = tmp_path / "disk"
    disk.mkdir()
    mounted = subprocess.run(
        ["mount", "-t", "tmpfs", "-o", "size=4m", "tmpfs", str(disk)], capture_output=True
    )
    if mounted.returncode != 0:
        pytest.skip("cannot mount a small file system here (needs root)")
    try:
        yield disk
    finally:
        subprocess.run(["umount", "-l", str(disk)], capture_output=True)


def _fill(disk: Path, leave: int) -> Path:
    """Fill ``disk`` up to ``leave`` bytes of free space; return the filler file."""
    filler = disk / "filler"
    stat = os.statvfs(disk)
    free = stat.f_bavail * stat.f_frsize
    filler.write_bytes(b"\0" * max(0, free - leave))
    return filler


def _cli(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "aligner", *args], capture_output=True, text=True, timeout=120
    )


def test_a_full_disk_pauses_the_sweep_and_it_resumes_once_there_is_space(small_disk, tmp_path):
    db = small_disk / "runs.sqlite"
    assert _cli("sweep", "demo", "--schedule", "list:0.5", "--dwell", "0.05", "--db", str(db))
    filler = _fill(small_disk, leave=256 * 1024)  # room for the run and some of its points
    out = _cli(
        "sweep", "demo", "--schedule", "linear:0.3:1.5:400", "--dwell", "0.05", "--db", str(db)
    )
    assert out.returncode == 3, out.stderr
    assert "free disk space" in out.stderr and "Traceback" not in out.stderr
    filler.unlink()
    with RunLog(db) as log:
        run = log.runs()[-1]
        done = run.points
    assert 0 < done < 400  # the points committed before the disk filled are kept
    resumed = _cli("sweep", "demo", "--resume", str(run.id), "--db", str(db))
    assert resumed.returncode == 0, resumed.stderr
    with RunLog(db) as log:
        assert [p.idx for p in log.points(run.id)] == list(range(400))
        assert log.integrity_ok()


def test_writing_a_bench_file_on_a_full_disk_changes_nothing(small_disk):
    bench = small_disk / "bench.toml"
    shutil.copy(DEMO_BENCH, bench)
    before = bench.read_bytes()
    _fill(small_disk, leave=0)
    out = _cli("plan", str(bench), "--amplification", "20", "--write")
    assert out.returncode == 2, out.stderr
    assert "cannot be written" in out.stderr and "Traceback" not in out.stderr
    assert bench.read_bytes() == before
    assert sorted(p.name for p in small_disk.iterdir()) == ["bench.toml", "filler"]
