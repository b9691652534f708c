"""The command line as a user meets it: help, exit status 2 and one plain line for bad input."""

from __future__ import annotations

import json
import subprocess
import sys

import pytest


def aligner(*args: str, cwd=None) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "aligner", *args],
        capture_output=True,
        text=True,
        timeout=120,
        cwd=cwd,
    )


def test_help_exits_zero():
    done = aligner("--help")
    assert done.returncode == 0 and not done.stderr
    assert "COMMAND" in done.stdout and "predict" in done.stdout


def _assert_one_line_error(done: subprocess.CompletedProcess, *needles: str) -> None:
    # Requirement (foundation issue): exit 2 for bad input, one plain sentence on stderr, no
    # traceback, nothing on stdout.
    assert done.returncode == 2, done.stderr
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1, done.stderr
    assert "Traceback" not in done.stderr
    assert done.stdout == ""
    for needle in needles:
        assert needle in lines[0]


@pytest.mark.parametrize(
    ("old", "new", "key"),
    [
        ("photon_rate = 1.0e6", "photon_rat = 1.0e6", "source.photon_rat"),
        ("efficiency = 0.5", "efficiency = 1.5", "detector.efficiency"),
        ("extinction_ratio = 1e4", "extinction_ratio = nan", "analyzer.extinction_ratio"),
        ('mount = "hwp"', 'mount = "hwq"', "pre[0].mount"),
        ("reading_deg = 22.5", "reading_deg = 22.5\nsense = 2", "mounts.hwp.sense"),
    ],
)
def test_predict_on_bad_bench_is_one_line_exit_2(write_bench, bench_text, old, new, key):
    path = write_bench(bench_text.replace(old, new))
    _assert_one_line_error(aligner("predict", str(path)), "aligner predict:", str(path), key)


def test_predict_on_missing_file(tmp_path):
    path = tmp_path / "nope.toml"
    _assert_one_line_error(aligner("predict", str(path)), str(path), "file not found")


def test_predict_on_file_that_is_not_toml(write_bench):
    path = write_bench("this is = = not toml\n")
    _assert_one_line_error(aligner("predict", str(path)), str(path), "not valid TOML")


def test_predict_with_unknown_mount_setting():
    _assert_one_line_error(aligner("predict", "demo", "--set", "nosuch=1"), "nosuch")


def test_debug_flag_shows_the_traceback(tmp_path):
    done = aligner("--debug", "predict", str(tmp_path / "nope.toml"))
    assert done.returncode != 0 and "Traceback" in done.stderr


def test_predict_on_good_minimal_bench_gives_json(bench_file):
    done = aligner("predict", str(bench_file), "--json")
    assert done.returncode == 0, done.stderr
    assert isinstance(json.loads(done.stdout), dict)
