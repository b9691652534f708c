"""The run log: one SQLite file (stdlib ``sqlite3``, WAL journal) holding every sweep.

Tables:

``runs``
    ``id``, ``status`` (``running``, ``interrupted``, ``complete``), ``bench_name``,
    ``bench_path``, ``bench_toml`` (the bench file's text: a snapshot the run can be resumed and
    re-analysed from), ``schedule`` (the one-word spec), ``plan_json`` (the planned points with
    their readings, deg), ``dwell_s``, ``settle_s``, ``repeats``, ``imbalance_mount``,
    ``software_version``, ``started_utc``, ``ended_utc``, ``message``.
``points``
    one row per measured point, key (``run_id``, ``idx``) so a resumed run cannot duplicate a
    point: ``target``, ``commanded_json`` (the readings actually commanded, deg: the plan's,
    or a guard's equivalent reading) / ``readback_json`` (mount -> reading, deg),
    ``reading_deg`` (read-back of the imbalance mount, deg), ``counts`` (post-selected),
    ``reference`` (reference port, NULL with one channel), ``dwell_s``, ``leak`` / ``leak_lo`` /
    ``leak_hi`` (measured leak rate per incident photon and its interval), ``predicted_leak``,
    ``predicted_rate`` (counts/s at the read-back readings, dead time included),
    ``imbalance_deg`` (predicted at the read-back), ``pointer`` / ``pointer_err`` (pointer
    units, NULL without a pointer channel), ``started_utc``, ``ended_utc``.
``events``
    ``run_id``, ``idx`` (point, may be NULL), ``kind`` (``fault``, ``guard``, ``pause``,
    ``resume``, ``note``), ``message``, ``t_utc``.

A point and the events raised while taking it are written in one transaction, so a crash
loses at most the point being counted. Times are UTC ISO 8601 strings.
"""

from __future__ import annotations

import json
import sqlite3
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from ..errors import DataFileError, InputError

__all__ = [
    "EVENT_KINDS",
    "RUN_STATUSES",
    "Event",
    "LoggedPoint",
    "RunLog",
    "RunRecord",
    "default_db_path",
    "read_run",
    "utc_now",
]

RUN_STATUSES = ("running", "interrupted", "complete")
EVENT_KINDS = ("fault", "guard", "pause", "resume", "note")

_SCHEMA = """
CREATE TABLE IF NOT EXISTS runs (
    id INTEGER PRIMARY KEY AUTOINCREMENT,
    status TEXT NOT NULL CHECK (status IN ('running', 'interrupted', 'complete')),
    bench_name TEXT NOT NULL,
    bench_path TEXT,
    bench_toml TEXT NOT NULL,
    schedule TEXT NOT NULL,
    plan_json TEXT NOT NULL,
    dwell_s REAL NOT NULL,
    settle_s REAL NOT NULL,
    repeats INTEGER NOT NULL,
    imbalance_mount TEXT NOT NULL,
    software_version TEXT NOT NULL,
    started_utc TEXT NOT NULL,
    ended_utc TEXT,
    message TEXT NOT NULL DEFAULT ''
);
CREATE TABLE IF NOT EXISTS points (
    run_id INTEGER NOT NULL REFERENCES runs(id),
    idx INTEGER NOT NULL,
    target REAL NOT NULL,
    commanded_json TEXT NOT NULL,
    readback_json TEXT NOT NULL,
    reading_deg REAL NOT NULL,
    counts INTEGER NOT NULL,
    reference INTEGER,
    dwell_s REAL NOT NULL,
    leak REAL NOT NULL,
    leak_lo REAL NOT NULL,
    leak_hi REAL NOT NULL,
    predicted_leak REAL NOT NULL,
    predicted_rate REAL NOT NULL,
    imbalance_deg REAL NOT NULL,
    pointer REAL,
    pointer_err REAL,
    started_utc TEXT NOT NULL,
    ended_utc TEXT NOT NULL,
    PRIMARY KEY (run_id, idx)
);
CREATE TABLE IF NOT EXISTS events (
    id INTEGER PRIMARY KEY AUTOINCREMENT,
    run_id INTEGER NOT NULL REFERENCES runs(id),
    idx INTEGER,
    kind TEXT NOT NULL CHECK (kind IN ('fault', 'guard', 'pause', 'resume', 'note')),
    message TEXT NOT NULL,
    t_utc TEXT NOT NULL
);
"""

_POINT_COLUMNS = (
    "idx",
    "target",
    "commanded_json",
    "readback_json",
    "reading_deg",
    "counts",
    "reference",
    "dwell_s",
    "leak",
    "leak_lo",
    "leak_hi",
    "predicted_leak",
    "predicted_rate",
    "imbalance_deg",
    "pointer",
    "pointer_err",
    "started_utc",
    "ended_utc",
)


def utc_now() -> str:
    """The current time, UTC, ISO 8601 with microseconds."""
    return datetime.now(UTC).isoformat(timespec="microseconds")


def default_db_path() -> Path:
    """``runs.sqlite`` in the user data folder (platformdirs), e.g. ``~/.local/share/aligner``."""
    import platformdirs

    return Path(platformdirs.user_data_dir("aligner", appauthor=False)) / "runs.sqlite"


@dataclass(frozen=True)
class Event:
    """A fault, guard trip, pause, resume or operator note."""

    kind: str
    message: str
    idx: int | None = None
    t_utc: str = ""


@dataclass(frozen=True)
class LoggedPoint:
    """One measured point (units as in the module docstring)."""

    idx: int
    target: float
    commanded: Mapping[str, float]
    readback: Mapping[str, float]
    reading_deg: float
    counts: int
    reference: int | None
    dwell_s: float
    leak: float
    leak_lo: float
    leak_hi: float
    predicted_leak: float
    predicted_rate: float
    imbalance_deg: float
    pointer: float | None
    pointer_err: float | None
    started_utc: str
    ended_utc: str


@dataclass(frozen=True)
class RunRecord:
    """A run's header and how far it got."""

    id: int
    status: str
    bench_name: str
    bench_path: str | None
    bench_toml: str
    schedule: str
    plan: tuple[Mapping[str, Any], ...]
    dwell_s: float
    settle_s: float
    repeats: int
    imbalance_mount: str
    software_version: str
    started_utc: str
    ended_utc: str | None
    message: str
    points: int

    @property
    def planned(self) -> int:
        """Number of planned points."""
        return len(self.plan)


class RunLog:
    """A connection to a run-log file; created (with its folder) when missing.

    ``durable`` (default) syncs every point to disk (``synchronous=FULL``); ``False`` keeps
    WAL's crash safety without the per-point disk sync (for simulated benches). Use as a
    context manager or call :meth:`close`. Not shared between threads.
    """

    def __init__(self, path: str | Path | None = None, *, durable: bool = True) -> None:
        self.path = Path(path) if path is not None else default_db_path()
        if not isinstance(durable, bool):
            raise InputError(f"durable must be True or False, got {durable!r}")
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            self._db = sqlite3.connect(self.path, isolation_level=None)
            self._db.execute("PRAGMA journal_mode=WAL")
            # FULL syncs every commit to disk, so a point survives a power cut too; NORMAL (WAL)
            # survives a crash of the program but may lose the last points to a power cut
            self._db.execute(f"PRAGMA synchronous={'FULL' if durable else 'NORMAL'}")
            self._db.execute("PRAGMA foreign_keys=ON")
            self._db.executescript(_SCHEMA)
        except sqlite3.DatabaseError as exc:
            raise DataFileError(
                f"{self.path}: cannot be used as a run log ({exc}); give another file with --db"
            ) from None
        except OSError as exc:
            raise DataFileError(
                f"{self.path}: cannot create the run log ({exc}); give another file with --db"
            ) from None

    def __enter__(self) -> RunLog:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def close(self) -> None:
        """Close the connection."""
        self._db.close()

    # -- writing -----------------------------------------------------------------------------

    def create_run(
        self,
        *,
        bench_name: str,
        bench_path: str | None,
        bench_toml: str,
        schedule: str,
        plan: Sequence[Mapping[str, Any]],
        dwell_s: float,
        settle_s: float,
        repeats: int,
        imbalance_mount: str,
        software_version: str,
    ) -> int:
        """Insert a run with status ``running``; return its id."""
        cur = self._db.execute(
            "INSERT INTO runs (status, bench_name, bench_path, bench_toml, schedule, plan_json, "
            "dwell_s, settle_s, repeats, imbalance_mount, software_version, started_utc) "
            "VALUES ('running', ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
            (
                bench_name,
                bench_path,
                bench_toml,
                schedule,
                json.dumps(list(plan)),
                dwell_s,
                settle_s,
                repeats,
                imbalance_mount,
                software_version,
                utc_now(),
            ),
        )
        return int(cur.lastrowid or 0)

    def add_point(self, run_id: int, point: LoggedPoint, events: Iterable[Event] = ()) -> None:
        """Write one point and its events in one transaction."""
        row = {
            **point.__dict__,
            "commanded_json": json.dumps(dict(point.commanded)),
            "readback_json": json.dumps(dict(point.readback)),
        }
        with self._transaction():
            self._db.execute(
                f"INSERT INTO points (run_id, {', '.join(_POINT_COLUMNS)}) VALUES "
                f"(?, {', '.join('?' * len(_POINT_COLUMNS))})",
                (run_id, *(row[c] for c in _POINT_COLUMNS)),
            )
            self._insert_events(run_id, events)

    def add_events(self, run_id: int, events: Iterable[Event]) -> None:
        """Write events (faults, guard trips, notes) in one transaction."""
        with self._transaction():
            self._insert_events(run_id, events)

    def note(self, run_id: int, text: str) -> None:
        """Add an operator note to a run."""
        self.run(run_id)
        if not text.strip():
            raise InputError("the note is empty; give the text to store")
        self.add_events(run_id, [Event("note", text.strip())])

    def set_status(self, run_id: int, status: str, message: str = "") -> None:
        """Mark a run ``running``, ``interrupted`` or ``complete`` (with a message)."""
        ended = None if status == "running" else utc_now()
        with self._transaction():
            self._db.execute(
                "UPDATE runs SET status = ?, ended_utc = ?, message = ? WHERE id = ?",
                (status, ended, message, run_id),
            )

    def _insert_events(self, run_id: int, events: Iterable[Event]) -> None:
        self._db.executemany(
            "INSERT INTO events (run_id, idx, kind, message, t_utc) VALUES (?, ?, ?, ?, ?)",
            [(run_id, e.idx, e.kind, e.message, e.t_utc or utc_now()) for e in events],
        )

    def _transaction(self) -> _Transaction:
        return _Transaction(self._db)

    # -- reading -----------------------------------------------------------------------------

    def run(self, run_id: int) -> RunRecord:
        """A run's record; an unknown id raises ``DataFileError`` naming the file."""
        row = self._db.execute(
            "SELECT id, status, bench_name, bench_path, bench_toml, schedule, plan_json, dwell_s, "
            "settle_s, repeats, imbalance_mount, software_version, started_utc, ended_utc, "
            "message, (SELECT COUNT(*) FROM points WHERE run_id = runs.id) FROM runs WHERE id = ?",
            (run_id,),
        ).fetchone()
        if row is None:
            known = [str(r[0]) for r in self._db.execute("SELECT id FROM runs ORDER BY id")]
            listing = ", ".join(known[-10:]) or "none yet"
            raise DataFileError(
                f"{self.path}: no run {run_id} (runs: {listing}); see 'aligner log list'"
            )
        return self._record(row)

    def runs(self) -> list[RunRecord]:
        """All runs, oldest first."""
        rows = self._db.execute(
            "SELECT id, status, bench_name, bench_path, bench_toml, schedule, plan_json, dwell_s, "
            "settle_s, repeats, imbalance_mount, software_version, started_utc, ended_utc, "
            "message, (SELECT COUNT(*) FROM points WHERE run_id = runs.id) FROM runs ORDER BY id"
        )
        return [self._record(r) for r in rows]

    @staticmethod
    def _record(row: Sequence[Any]) -> RunRecord:
        plan = tuple(json.loads(row[6]))
        return RunRecord(
            row[0],
            row[1],
            row[2],
            row[3],
            row[4],
            row[5],
            plan,
            row[7],
            row[8],
            row[9],
            row[10],
            row[11],
            row[12],
            row[13],
            row[14],
            row[15],
        )

    def points(self, run_id: int) -> list[LoggedPoint]:
        """A run's points in index order."""
        self.run(run_id)
        rows = self._db.execute(
            f"SELECT {', '.join(_POINT_COLUMNS)} FROM points WHERE run_id = ? ORDER BY idx",
            (run_id,),
        )
        out = []
        for r in rows:
            values = dict(zip(_POINT_COLUMNS, r, strict=True))
            values["commanded"] = json.loads(values.pop("commanded_json"))
            values["readback"] = json.loads(values.pop("readback_json"))
            out.append(LoggedPoint(**values))
        return out

    def done_indices(self, run_id: int) -> set[int]:
        """Indices of the points already logged."""
        return {
            r[0] for r in self._db.execute("SELECT idx FROM points WHERE run_id = ?", (run_id,))
        }

    def events(self, run_id: int) -> list[Event]:
        """A run's events, oldest first."""
        rows = self._db.execute(
            "SELECT kind, message, idx, t_utc FROM events WHERE run_id = ? ORDER BY id", (run_id,)
        )
        return [Event(kind, message, idx, t) for kind, message, idx, t in rows]

    def integrity_ok(self) -> bool:
        """``PRAGMA integrity_check`` says ``ok``."""
        return self._db.execute("PRAGMA integrity_check").fetchone()[0] == "ok"


class _Transaction:
    """``BEGIN IMMEDIATE`` ... ``COMMIT`` (``ROLLBACK`` on error) on an autocommit connection."""

    def __init__(self, db: sqlite3.Connection) -> None:
        self._db = db

    def __enter__(self) -> None:
        self._db.execute("BEGIN IMMEDIATE")

    def __exit__(self, exc_type: type[BaseException] | None, *exc: object) -> None:
        self._db.execute("COMMIT" if exc_type is None else "ROLLBACK")


def read_run(run_id: int, db: str | Path | None = None) -> tuple[RunRecord, list[LoggedPoint]]:
    """A logged run and its points (for fits: ``aligner fit coupling RUN``).

    Points carry ``pointer`` / ``pointer_err`` (bench pointer units) when the sweep had a
    pointer channel, else None. ``db`` defaults to :func:`default_db_path`.
    """
    with RunLog(db) as log:
        return log.run(run_id), log.points(run_id)
