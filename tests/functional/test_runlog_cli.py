"""``aligner log``: list, show, export, note and report through the command line."""

import csv
import json
import subprocess
import sys

import pytest


def _cli(*args):
    return subprocess.run(
        [sys.executable, "-m", "aligner", *args], capture_output=True, text=True, timeout=60
    )


@pytest.fixture(scope="module")
def db(tmp_path_factory):
    path = tmp_path_factory.mktemp("log") / "runs.sqlite"
    out = _cli(
        "sweep",
        "demo",
        "--schedule",
        "linear:0.2:2.0:6",
        "--dwell",
        "0.5",
        "--db",
        str(path),
        "--json",
    )
    assert out.returncode == 0, out.stderr
    return str(path)


def test_list_json_and_show(db):
    doc = json.loads(_cli("log", "list", "--db", db, "--json").stdout)
    assert [(r["run"], r["status"], r["points_done"]) for r in doc["runs"]] == [(1, "complete", 6)]
    show = _cli("log", "show", "1", "--db", db)
    assert show.returncode == 0 and "complete" in show.stdout and "135.2" in show.stdout


def test_export_csv_has_the_issue_columns(db, tmp_path):
    target = tmp_path / "run1.csv"
    assert _cli("log", "export", "1", "--csv", str(target), "--db", db).returncode == 0
    lines = target.read_text().splitlines()
    comments = [line for line in lines if line.startswith("#")]
    assert comments[0] == "# run 1: SIMULATED"  # the data say what they are
    assert any(line.startswith("# counter: simulated (sim") for line in comments)
    assert any(line.startswith("# mount analyzer: simulated") for line in comments)
    rows = list(csv.DictReader(line for line in lines if not line.startswith("#")))
    assert len(rows) == 6
    assert {
        "run",
        "index",
        "reading_deg",
        "counts",
        "reference",
        "leak",
        "leak_low",
        "leak_high",
        "predicted_leak",
    } <= set(rows[0])
    assert all(float(r["leak_low"]) <= float(r["leak"]) <= float(r["leak_high"]) for r in rows)
    # the export reads back as a count scan for the fits
    from aligner.fit.csvdata import load_count_scan

    assert load_count_scan(target).counts.shape == (6,)
    assert {r["mount"] for r in rows} == {"analyzer"}  # the demo's imbalance mount


def test_export_keeps_an_existing_file_unless_forced(db, tmp_path):
    target = tmp_path / "run1.csv"
    target.write_text("my notes\n")
    out = _cli("log", "export", "1", "--csv", str(target), "--db", db)
    assert out.returncode == 2 and "--force" in out.stderr
    assert target.read_text() == "my notes\n"
    assert _cli("log", "export", "1", "--csv", str(target), "--db", db, "--force").returncode == 0
    assert "\nrun,index,mount," in target.read_text()


def test_note_and_report(db, tmp_path):
    assert _cli("log", "note", "1", "iris", "re-centred", "--db", db).returncode == 0
    show = json.loads(_cli("log", "show", "1", "--db", db, "--json").stdout)
    assert show["events"][-1]["message"] == "iris re-centred"
    out = _cli("log", "report", "1", "--out", str(tmp_path / "rep"), "--db", db)
    assert out.returncode == 0, out.stderr
    text = (tmp_path / "rep" / "run-1.md").read_text()
    assert "fitted imbalance offset" in text and "iris re-centred" in text
    assert "laser safety officer" in text
    svg = tmp_path / "rep" / "run-1.svg"
    assert svg.exists() and "<svg" in svg.read_text()[:500]


def test_errors_are_one_line(db, tmp_path):
    for args, words in (
        (["show", "5"], "no run 5"),
        (["note", "1", " "], "empty"),
        (["export", "1", "--csv", str(tmp_path / "no" / "such" / "x.csv")], "cannot be written"),
    ):
        out = _cli("log", *args, "--db", db)
        assert out.returncode == 2 and words in out.stderr and "Traceback" not in out.stderr
