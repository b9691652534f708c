"""Damaged run logs: every command answers with a clear error (never a traceback), nothing is
written into a damaged file, and ``log salvage`` copies the readable runs out."""

from __future__ import annotations

import hashlib
import shutil
import sqlite3
from pathlib import Path

import numpy as np
import pytest

from aligner.cli import main
from aligner.run.log import RunLog


@pytest.fixture(scope="module")
def good_log(tmp_path_factory) -> Path:
    """A run log with three runs of the simulated demo bench."""
    db = tmp_path_factory.mktemp("good") / "runs.sqlite"
    for spec in ("linear:0.3:1.0:3", "list:0.5,0.8", "linear:0.4:1.2:4"):
        assert main(["sweep", "demo", "--schedule", spec, "--dwell", "0.1", "--db", str(db)]) == 0
    return db


def _commands(db: Path, tmp: Path) -> list[list[str]]:
    d = str(db)
    return [
        ["log", "list", "--db", d],
        ["log", "show", "1", "--db", d],
        ["log", "show", "2", "--db", d, "--json"],
        ["log", "export", "3", "--csv", str(tmp / "x.csv"), "--db", d, "--force"],
        ["log", "report", "1", "--out", str(tmp / "rep"), "--db", d],
        ["sweep", "demo", "--resume", "2", "--db", d],
        ["sweep", "demo", "--schedule", "list:0.5", "--dwell", "0.1", "--db", d],
    ]


def _corruptions(good: Path, tmp: Path):
    """(name, path) of damaged copies of ``good``."""
    data = good.read_bytes()
    rng = np.random.default_rng(16)
    for n, cut in enumerate((100, len(data) // 3, len(data) // 2, len(data) - 700)):
        path = tmp / f"cut{n}.sqlite"
        path.write_bytes(data[:cut])
        yield f"truncated at {cut}", path
    for n in range(12):
        page = int(rng.integers(1, len(data) // 4096)) * 4096
        spoilt = bytearray(data)
        spoilt[page + 8 : page + 120] = rng.integers(0, 256, 112, dtype=np.uint8).tobytes()
        path = tmp / f"flip{n}.sqlite"
        path.write_bytes(bytes(spoilt))
        yield f"bytes spoilt in page {page // 4096}", path
    for n, sql in enumerate(
        (
            "UPDATE runs SET plan_json = '{not json' WHERE id = 2",
            "UPDATE points SET readback_json = '[1, 2]' WHERE run_id = 3",
            "UPDATE points SET counts = 'many' WHERE run_id = 1",
            "UPDATE runs SET provenance_json = 'null'",
            "DROP TABLE events",
        )
    ):
        path = tmp / f"edit{n}.sqlite"
        shutil.copy(good, path)
        with sqlite3.connect(path) as con:
            con.execute(sql)
        con.close()
        yield sql, path
    foreign = tmp / "foreign.sqlite"
    with sqlite3.connect(foreign) as con:
        con.execute("CREATE TABLE samples (x REAL)")
    con.close()
    yield "another program's SQLite file", foreign
    noise = tmp / "noise.sqlite"
    noise.write_bytes(rng.integers(0, 256, 8192, dtype=np.uint8).tobytes())
    yield "not SQLite at all", noise


def test_damaged_logs_give_clear_errors_and_are_never_written(good_log, tmp_path, capsys):
    """No command ever crashes on a damaged log; a log found damaged when opened (structure,
    size, a run header that does not decode, another program's file) is refused by every
    command and never written to. Damage inside a text no check can see (a bench snapshot's
    bytes) shows up only when that text is read -- as an error, not a traceback."""
    refused = 0
    for name, path in _corruptions(good_log, tmp_path):
        before = hashlib.sha256(path.read_bytes()).hexdigest()
        codes = []
        for argv in _commands(path, tmp_path):
            codes.append(main(argv))
            err = capsys.readouterr().err
            assert codes[-1] in (0, 2, 3), (name, argv, codes[-1], err)
            assert "Traceback" not in err and "internal error" not in err, (name, argv, err)
        if codes[0] == 2 and name != "DROP TABLE events":  # `log list` refused: found damaged
            refused += 1
            after = hashlib.sha256(path.read_bytes()).hexdigest()
            assert after == before, f"{name}: the damaged file was written to"
            assert codes[-1] == 2, f"{name}: a new run was started in a damaged file"
    assert refused >= 12  # most damage is found on opening


def test_salvage_copies_the_readable_runs(good_log, tmp_path, capsys):
    spoilt = tmp_path / "spoilt.sqlite"
    shutil.copy(good_log, spoilt)
    with sqlite3.connect(spoilt) as con:
        con.execute("UPDATE points SET readback_json = '{broken' WHERE run_id = 3")
    con.close()
    assert main(["log", "show", "3", "--db", str(spoilt)]) == 2
    assert "aligner log salvage" in capsys.readouterr().err
    out = tmp_path / "saved.sqlite"
    assert main(["log", "salvage", "--db", str(spoilt), "--out", str(out)]) == 0
    assert "copied 3 runs" in capsys.readouterr().out
    with RunLog(out, create=False) as log, RunLog(good_log, create=False) as good:
        assert [r.id for r in log.runs()] == [1, 2, 3]
        assert log.points(1) == good.points(1) and log.events(2) == good.events(2)
    assert main(["log", "salvage", "--db", str(spoilt), "--out", str(out)]) == 2  # no overwrite
