"""The SQLite run log: round trip, one transaction per point, errors that name the file."""

import sqlite3
from pathlib import Path

import pytest

from aligner.errors import DataFileError, InputError
from aligner.run.log import Event, LoggedPoint, RunLog, read_run


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
    )


def test_round_trip_and_wal(tmp_path):
    db = tmp_path / "sub" / "runs.sqlite"
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
