"""The SQLite run log: round trip, one transaction per point, errors that name the file."""

import sqlite3
from pathlib import Path

import pytest

from aligner.errors import DataFileError, InputError
from aligner.run.log import SCHEMA_VERSION, Event, LoggedPoint, RunLog, read_run


def _point(idx: int) -> LoggedPoint:
    return LoggedPoint(
        idx,
        0.1 * idx,
        {"a": 1.0 + idx},
        {"a": 1.0005 + idx},
        1.0005 + idx,
        100 + idx,
        None if idx % 2 else 2000,
        0.5,
        1e-4,
        0.9e-4,
        1.1e-4,
        1.05e-4,
        210.0,
        0.1 * idx,
        3.0 if idx % 2 else None,
        0.2 if idx % 2 else None,
        "t0",
        "t1",
    )


def _run(log: RunLog) -> int:
    return log.create_run(
        bench_name="b",
        bench_path="b.toml",
        bench_toml="x = 1\n",
        schedule="list:0,0.1",
        plan=[{"index": 0}, {"index": 1}],
        dwell_s=0.5,
        settle_s=0.0,
        repeats=1,
        imbalance_mount="a",
        software_version="0",
        provenance={"devices": [{"role": "counter", "kind": "real", "spec": "/dev/x"}]},
    )


def test_round_trip_and_wal(tmp_path):
    db = tmp_path / "runs.sqlite"
    with RunLog(db) as log:
        run = _run(log)
        log.add_point(run, _point(0), [Event("fault", "retry", 0)])
        log.add_point(run, _point(1))
        log.note(run, "  iris checked ")
        log.set_status(run, "complete")
        assert log.integrity_ok()
        mode = log._db.execute("PRAGMA journal_mode").fetchone()[0]
    assert mode == "wal"
    record, points = read_run(run, db)
    assert record.status == "complete" and record.points == 2 and record.planned == 2
    assert record.kind == "sweep" and record.data_label == "measured"
    assert points == [_point(0), _point(1)]
    with RunLog(db) as log:
        assert [(e.kind, e.message, e.idx) for e in log.events(run)] == [
            ("fault", "retry", 0),
            ("note", "iris checked", None),
        ]


def test_duplicate_point_is_refused_and_rolled_back(tmp_path):
    with RunLog(tmp_path / "r.sqlite") as log:
        run = _run(log)
        log.add_point(run, _point(0))
        with pytest.raises(sqlite3.IntegrityError):
            log.add_point(run, _point(0), [Event("fault", "lost with the point")])
        assert log.done_indices(run) == {0}
        assert log.events(run) == []  # the events of the failed transaction are gone too


def test_errors_name_the_file(tmp_path):
    bad = tmp_path / "not-a-db.sqlite"
    bad.write_bytes(b"this is not sqlite" * 100)
    with pytest.raises(DataFileError, match=r"not-a-db\.sqlite"):
        RunLog(bad)
    with RunLog(tmp_path / "r.sqlite") as log:
        with pytest.raises(DataFileError, match="no run 7"):
            log.run(7)
        with pytest.raises(InputError, match="empty"):
            log.note(_run(log), "  ")


def test_default_path_is_in_the_user_data_folder():
    import platformdirs

    from aligner.run.log import default_db_path

    expected = Path(platformdirs.user_data_dir("aligner", appauthor=False))
    assert default_db_path() == expected / "runs.sqlite"


def test_a_given_path_creates_no_folder_and_readers_create_no_file(tmp_path):
    with pytest.raises(DataFileError, match="does not exist"):
        RunLog(tmp_path / "missing" / "runs.sqlite")
    assert not (tmp_path / "missing").exists()
    with pytest.raises(DataFileError, match="no run log here"):
        RunLog(tmp_path / "typo.sqlite", create=False)
    assert not (tmp_path / "typo.sqlite").exists()


def test_a_point_without_a_leak_rate_keeps_its_flag(tmp_path):
    from dataclasses import replace

    with RunLog(tmp_path / "r.sqlite") as log:
        run = _run(log)
        flagged = replace(_point(0), leak=None, leak_lo=None, leak_hi=None, flag="no reference")
        log.add_point(run, flagged)
        assert log.points(run) == [flagged]


def test_resumed_sessions_widen_the_label(tmp_path):
    with RunLog(tmp_path / "r.sqlite") as log:
        run = _run(log)
        log.add_session(run, {"devices": [{"role": "counter", "kind": "simulated"}]})
        record = log.run(run)
    assert record.device_kinds == {"real", "simulated"}
    assert record.data_label == "SIMULATED (with real devices)"


def test_a_log_of_the_first_schema_is_upgraded_with_its_rows(tmp_path):
    """A file written before the schema had run kinds, provenance and point flags."""
    db = tmp_path / "old.sqlite"
    con = sqlite3.connect(db)
    con.executescript(_SCHEMA_0)
    con.execute(
        "INSERT INTO runs VALUES (1, 'complete', 'b', 'b.toml', 'x = 1', 'list:0', '[]', 1.0, "
        "0.0, 1, 'a', '0.1.0', 't0', 't1', '')"
    )
    con.execute(
        "INSERT INTO points VALUES (1, 0, 0.0, '{}', '{}', 1.0, 10, NULL, 1.0, 1e-4, 9e-5, "
        "1.1e-4, 1e-4, 5.0, 0.1, NULL, NULL, 't0', 't1')"
    )
    con.execute("INSERT INTO events VALUES (1, 1, 0, 'note', 'kept', 't0')")
    con.commit()
    con.close()
    with RunLog(db) as log:
        record, points, events = log.run(1), log.points(1), log.events(1)
        assert log._db.execute("PRAGMA user_version").fetchone()[0] == SCHEMA_VERSION
    assert record.kind == "sweep" and record.data_label == "devices not recorded"
    assert points[0].counts == 10 and points[0].flag == ""
    assert [e.message for e in events] == ["kept"]


def test_a_newer_log_is_refused(tmp_path):
    db = tmp_path / "new.sqlite"
    con = sqlite3.connect(db)
    con.execute("PRAGMA user_version=99")
    con.close()
    with pytest.raises(DataFileError, match="newer aligner"):
        RunLog(db)


def test_one_process_at_a_time_drives_a_run(tmp_path):
    """The claim is an OS lock: a second process is refused while the first holds it."""
    import subprocess
    import sys

    db = tmp_path / "r.sqlite"
    with RunLog(db) as log:
        run = _run(log)
        with log.claim(run):
            code = (
                "import sys; from aligner.run.log import RunLog\n"
                f"log = RunLog({str(db)!r})\n"
                "try:\n"
                f"    with log.claim({run}): print('claimed')\n"
                "except Exception as exc: print(type(exc).__name__, exc)\n"
            )
            held = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
        free = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert held.stdout.startswith("InputError") and "another process" in held.stdout
    assert free.stdout.strip() == "claimed"


_SCHEMA_0 = """
CREATE TABLE runs (
    id INTEGER PRIMARY KEY AUTOINCREMENT,
    status TEXT NOT NULL CHECK (status IN ('running', 'interrupted', 'complete')),
    bench_name TEXT NOT NULL, bench_path TEXT, bench_toml TEXT NOT NULL, schedule TEXT NOT NULL,
    plan_json TEXT NOT NULL, dwell_s REAL NOT NULL, settle_s REAL NOT NULL,
    repeats INTEGER NOT NULL, imbalance_mount TEXT NOT NULL, software_version TEXT NOT NULL,
    started_utc TEXT NOT NULL, ended_utc TEXT, message TEXT NOT NULL DEFAULT ''
);
CREATE TABLE points (
    run_id INTEGER NOT NULL REFERENCES runs(id), idx INTEGER NOT NULL, target REAL NOT NULL,
    commanded_json TEXT NOT NULL, readback_json TEXT NOT NULL, reading_deg REAL NOT NULL,
    counts INTEGER NOT NULL, reference INTEGER, dwell_s REAL NOT NULL, leak REAL NOT NULL,
    leak_lo REAL NOT NULL, leak_hi REAL NOT NULL, predicted_leak REAL NOT NULL,
    predicted_rate REAL NOT NULL, imbalance_deg REAL NOT NULL, pointer REAL, pointer_err REAL,
    started_utc TEXT NOT NULL, ended_utc TEXT NOT NULL, PRIMARY KEY (run_id, idx)
);
CREATE TABLE events (
    id INTEGER PRIMARY KEY AUTOINCREMENT, run_id INTEGER NOT NULL REFERENCES runs(id),
    idx INTEGER,
    kind TEXT NOT NULL CHECK (kind IN ('fault', 'guard', 'pause', 'resume', 'note')),
    message TEXT NOT NULL, t_utc TEXT NOT NULL
);
"""
