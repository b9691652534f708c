"""`aligner plan` and `aligner derive` as a user meets them: JSON keys, readable output, exit
status 2 with the limit named for infeasible targets, --write keeping comments."""

from __future__ import annotations

import json
import subprocess
import sys
from collections.abc import Callable
from pathlib import Path

import pytest


def aligner(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "aligner", *args], capture_output=True, text=True, timeout=300
    )


def test_plan_json_document() -> None:
    done = aligner("plan", "demo", "--amplification", "40", "--json", "--samples", "2000")
    assert done.returncode == 0, done.stderr
    doc = json.loads(done.stdout)
    for key in ("readings", "branches", "predict", "sensitivity", "tolerance"):
        assert key in doc
    assert set(doc["readings"]) == {"analyzer", "pre_qwp"}
    assert doc["predict"]["amplification"]["linear"] == pytest.approx(40.0, rel=1e-9)
    assert doc["tolerance"]["samples"] == 2000
    assert doc["tolerance"]["dominant"] in doc["tolerance"]["by_source"]
    assert len(doc["branches"]) >= 2 and doc["chosen"]["index"] == 0
    # one branch per optical setting; readings 180 deg apart are listed with it
    assert len(doc["branches"]) == 8
    for branch in doc["branches"]:
        assert branch["equivalent_readings"][0] == branch["readings"]
        assert len(branch["equivalent_readings"]) == 4
    assert {"derivative_per_deg", "reading_for_1pct_deg"} <= set(doc["sensitivity"]["analyzer"])


def test_plan_readable_output() -> None:
    done = aligner("plan", "demo", "--weak-value", "10,-12", "--samples", "0")
    assert done.returncode == 0, done.stderr
    assert "Set analyzer to" in done.stdout
    assert "laser safety officer" in done.stdout
    assert "solution branches" in done.stdout


@pytest.mark.parametrize(
    ("edits", "args", "limit"),
    [
        ({}, ("--amplification", "80"), "extinction"),
        (
            {"travel_deg = [-10.0, 350.0]": "travel_deg = [-10.0, 350.0]\nresolution_deg = 0.3"},
            ("--amplification", "40"),
            "resolution",
        ),
        (
            {
                "pointer_sigma = 100.0": "pointer_sigma = 10.0",
                "extinction_ratio = 1e4": "extinction_ratio = 1e9",
                "extinction_ratio = 1e5": "extinction_ratio = 1e9",
            },
            ("--amplification", "20", "--exact"),
            "pointer",
        ),
        (
            {"travel_deg = [-10.0, 350.0]": "travel_deg = [135.5, 137.0]"},
            ("--amplification", "5"),
            "travel",
        ),
        ({}, ("--leak-rate", "1e-9"), "extinction"),
        ({}, ("--leak-rate", "0.99"), "transmission"),
    ],
)
def test_infeasible_targets_exit_2(
    write_bench: Callable[[str], Path],
    bench_text: str,
    edits: dict[str, str],
    args: tuple[str, ...],
    limit: str,
) -> None:
    text = bench_text
    for old, new in edits.items():
        assert old in text
        text = text.replace(old, new)
    done = aligner("plan", str(write_bench(text)), *args, "--samples", "0")
    assert done.returncode == 2, done.stdout + done.stderr
    (line,) = done.stderr.strip().splitlines()
    assert limit in line and "Traceback" not in done.stderr
    assert done.stdout == ""


def test_extinction_message_names_both_polarizers_with_json(bench_file: Path) -> None:
    """The cap quoted for ideal states is 1/(2 sqrt(d_a + d_s)) (physics.md, derived; related:
    Knee, Briggs, Benjamin & Gauger, Phys. Rev. A 87, 012115 (2013)); with --json an error
    leaves stdout empty and goes to stderr with exit status 2, as --help says."""
    done = aligner("plan", str(bench_file), "--amplification", "500", "--json", "--samples", "0")
    assert done.returncode == 2 and done.stdout == ""
    message = done.stderr
    for needle in ("source polarizer", "analyzer", "d_a + d_s", "1/(2 sqrt(d_a + d_s))"):
        assert needle in message
    assert "sqrt(ER)/2" not in message
    helped = aligner("plan", "--help")
    text = " ".join(helped.stdout.split())
    assert "stdout stays empty" in text and "stderr" in text and "exit status 2" in text
    assert "equivalent" in text


@pytest.mark.parametrize(
    ("args", "needle"),
    [
        (("--weak-value", "abc"), "--weak-value"),
        (("--amplification", "10", "--branch", "99"), "branch"),
        (("--amplification", "10", "--free", "nope"), "unknown mount"),
        (("--amplification", "10", "--samples", "-3"), "--samples"),
    ],
)
def test_bad_arguments_exit_2(bench_file: Path, args: tuple[str, ...], needle: str) -> None:
    done = aligner("plan", str(bench_file), *args)
    assert done.returncode == 2
    assert needle in done.stderr and "Traceback" not in done.stderr


def test_write_refuses_the_demo() -> None:
    done = aligner("plan", "demo", "--amplification", "10", "--write", "--samples", "0")
    assert done.returncode == 2 and "demo bench is not written to" in done.stderr


def test_write_stores_rounded_readings_and_keeps_comments(bench_file: Path) -> None:
    done = aligner(
        "plan", str(bench_file), "--amplification", "25", "--json", "--write", "--samples", "0"
    )
    assert done.returncode == 0, done.stderr
    doc = json.loads(done.stdout)
    text = bench_file.read_text()
    assert "# minimal test bench" in text
    reading = doc["quantized"]["readings"]["ana"]
    assert f"reading_deg = {reading}" in text
    again = aligner("predict", str(bench_file), "--json")
    assert json.loads(again.stdout)["amplification"]["linear"] == pytest.approx(
        doc["quantized"]["value"], rel=1e-9
    )


def test_derive_plain_and_latex(bench_file: Path) -> None:
    done = aligner("derive", str(bench_file))
    assert done.returncode == 0, done.stderr
    assert "A_w ~" in done.stdout and "d_a" in done.stdout
    latex = aligner("derive", str(bench_file), "--latex")
    assert latex.returncode == 0 and "\\frac" in latex.stdout


def test_derive_json_and_progress_note(bench_file: Path) -> None:
    done = aligner("derive", str(bench_file), "--json")
    assert done.returncode == 0, done.stderr
    doc = json.loads(done.stdout)
    assert {"symbols", "expressions"} <= set(doc) and "d_a" in doc["symbols"]
    assert "deriving" not in done.stderr
    readable = aligner("derive", str(bench_file))
    assert "deriving... (sympy, a few seconds)" in readable.stderr
    assert "deriving" not in readable.stdout
    bad = aligner("derive", str(bench_file), "--json", "--free", "nope")
    assert bad.returncode == 2 and bad.stdout == "" and "unknown mount" in bad.stderr
