"""The run log: one SQLite file (stdlib ``sqlite3``, WAL journal) holding every sweep.

Tables:

``runs``
    ``id``, ``kind`` (``sweep``; other kinds of run share the table), ``status`` (``running``,
    ``interrupted``, ``complete``), ``bench_name``,
    ``bench_path``, ``bench_toml`` (the bench file's text: a snapshot the run can be resumed and
    re-analysed from), ``schedule`` (the one-word spec), ``plan_json`` (the planned points with
    their readings, deg), ``dwell_s``, ``settle_s``, ``repeats``, ``imbalance_mount``,
    ``software_version``, ``started_utc``, ``ended_utc``, ``message``, ``provenance_json``
    (what every device was: :class:`aligner.run.station.Provenance`, with the bench file's
    hash and the simulation's seed).
``points``
    one row per measured point, key (``run_id``, ``idx``) so a resumed run cannot duplicate a
    point: ``target``, ``commanded_json`` (the readings actually commanded, deg: the plan's,
    or a guard's equivalent reading) / ``readback_json`` (mount -> reading, deg),
    ``reading_deg`` (read-back of the imbalance mount, deg), ``counts`` (post-selected),
    ``reference`` (reference port, NULL with one channel), ``dwell_s``, ``leak`` / ``leak_lo`` /
    ``leak_hi`` (measured leak rate per source photon and its interval; NULL when the counts
    give none, ``flag`` then says why), ``predicted_leak``,
    ``predicted_rate`` (counts/s at the read-back readings, dead time included),
    ``imbalance_deg`` (predicted at the read-back), ``pointer`` / ``pointer_err`` (pointer
    units, NULL without a pointer channel), ``started_utc``, ``ended_utc``, ``flag``.
``events``
    ``run_id``, ``idx`` (point, may be NULL), ``kind`` (:data:`EVENT_KINDS`), ``message``,
    ``t_utc``.
``recipe_runs`` (schema 2)
    one row per run of kind ``recipe``: ``run_id``, ``name`` and ``path`` of the recipe,
    ``recipe_text`` (the file's text: a resumed run follows the recipe as it was), ``steps``.
``recipe_steps`` (schema 2)
    one row per step of a recipe run, key (``run_id``, ``number``; 1 = the first step):
    ``do``, ``state`` (:data:`aligner.recipe.results.STEP_STATES`), ``outcome_json`` (the
    step's :class:`aligner.recipe.results.StepOutcome`: values with units and uncertainties,
    pass/fail, the operator's answer, the devices used), ``started_utc``, ``ended_utc``. A
    step done again on a resume replaces its row.

A point and the events raised while taking it are written in one transaction, so a crash
loses at most the point being counted. Times are UTC ISO 8601 strings. The file's
``user_version`` is the schema version (:data:`SCHEMA_VERSION`); older files are upgraded in
place when opened for writing, newer ones refused. One process at a time may drive a run
(:meth:`RunLog.claim`).
"""

from __future__ import annotations

import contextlib
import json
import sqlite3
import sys
from collections.abc import Iterable, Iterator, Mapping, Sequence
from contextlib import contextmanager
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from ..errors import DataFileError, InputError, StorageError

__all__ = [
    "EVENT_KINDS",
    "RUN_STATUSES",
    "Event",
    "LoggedPoint",
    "RecipeRunRow",
    "RecipeStepRow",
    "RunLog",
    "RunRecord",
    "Salvage",
    "default_db_path",
    "read_run",
    "salvage",
    "utc_now",
]

RUN_STATUSES = ("running", "interrupted", "complete")
#: ``device``: a device's remark that is not a fault (a late reply discarded, a homing).
EVENT_KINDS = ("fault", "guard", "pause", "resume", "note", "device")
#: The schema this code writes (the file's ``PRAGMA user_version``); 0 is the first schema.
SCHEMA_VERSION = 2
#: What to do with a damaged run log (``{path}``: the file).
SALVAGE_HINT = (
    "Copy the readable runs into a new file with 'aligner log salvage --db {path} --out "
    "NEW.sqlite' and keep the damaged file for reference"
)

_SCHEMA = """
CREATE TABLE IF NOT EXISTS runs (
    id INTEGER PRIMARY KEY AUTOINCREMENT,
    kind TEXT NOT NULL DEFAULT 'sweep',
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
    message TEXT NOT NULL DEFAULT '',
    provenance_json TEXT NOT NULL DEFAULT '{}'
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
    leak REAL,
    leak_lo REAL,
    leak_hi REAL,
    predicted_leak REAL NOT NULL,
    predicted_rate REAL NOT NULL,
    imbalance_deg REAL NOT NULL,
    pointer REAL,
    pointer_err REAL,
    started_utc TEXT NOT NULL,
    ended_utc TEXT NOT NULL,
    flag TEXT NOT NULL DEFAULT '',
    PRIMARY KEY (run_id, idx)
);
CREATE TABLE IF NOT EXISTS events (
    id INTEGER PRIMARY KEY AUTOINCREMENT,
    run_id INTEGER NOT NULL REFERENCES runs(id),
    idx INTEGER,
    kind TEXT NOT NULL,
    message TEXT NOT NULL,
    t_utc TEXT NOT NULL
);
CREATE TABLE IF NOT EXISTS recipe_runs (
    run_id INTEGER PRIMARY KEY REFERENCES runs(id),
    name TEXT NOT NULL,
    path TEXT NOT NULL,
    recipe_text TEXT NOT NULL,
    steps INTEGER NOT NULL
);
CREATE TABLE IF NOT EXISTS recipe_steps (
    run_id INTEGER NOT NULL REFERENCES runs(id),
    number INTEGER NOT NULL,
    do TEXT NOT NULL,
    state TEXT NOT NULL,
    outcome_json TEXT NOT NULL,
    started_utc TEXT NOT NULL,
    ended_utc TEXT NOT NULL,
    PRIMARY KEY (run_id, number)
);
"""

#: The tables of :data:`SCHEMA_VERSION`.
_TABLES = frozenset({"runs", "points", "events", "recipe_runs", "recipe_steps"})

#: Schema 0 -> 1: run kind and provenance, nullable leak with a flag, event kinds checked in
#: Python. SQLite cannot relax NOT NULL or CHECK in place, so points and events are rebuilt.
_UPGRADE_0_TO_1 = """
ALTER TABLE runs ADD COLUMN kind TEXT NOT NULL DEFAULT 'sweep';
ALTER TABLE runs ADD COLUMN provenance_json TEXT NOT NULL DEFAULT '{}';
ALTER TABLE points RENAME TO points_0;
ALTER TABLE events RENAME TO events_0;
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
    "flag",
)
_RUN_COLUMNS = (
    "id, kind, status, bench_name, bench_path, bench_toml, schedule, plan_json, dwell_s, "
    "settle_s, repeats, imbalance_mount, software_version, started_utc, ended_utc, message, "
    "provenance_json, (SELECT COUNT(*) FROM points WHERE run_id = runs.id)"
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

    def to_json(self) -> dict[str, Any]:
        """The event as JSON (``index``: the point it belongs to, or null)."""
        return {"kind": self.kind, "message": self.message, "index": self.idx, "t_utc": self.t_utc}


@dataclass(frozen=True)
class LoggedPoint:
    """One measured point (units as in the module docstring). ``leak``, ``leak_lo`` and
    ``leak_hi`` are None when the counts give no leak rate; ``flag`` then says why."""

    idx: int
    target: float
    commanded: Mapping[str, float]
    readback: Mapping[str, float]
    reading_deg: float
    counts: int
    reference: int | None
    dwell_s: float
    leak: float | None
    leak_lo: float | None
    leak_hi: float | None
    predicted_leak: float
    predicted_rate: float
    imbalance_deg: float
    pointer: float | None
    pointer_err: float | None
    started_utc: str
    ended_utc: str
    flag: str = ""

    def to_json(self) -> dict[str, Any]:
        """The point as JSON, with the names every output uses (docs/json.md): ``index``,
        ``leak_low`` / ``leak_high`` for the interval."""
        return {
            "index": self.idx,
            "target": self.target,
            "commanded": dict(self.commanded),
            "readback": dict(self.readback),
            "reading_deg": self.reading_deg,
            "counts": self.counts,
            "reference": self.reference,
            "dwell_s": self.dwell_s,
            "leak": self.leak,
            "leak_low": self.leak_lo,
            "leak_high": self.leak_hi,
            "flag": self.flag,
            "predicted_leak": self.predicted_leak,
            "predicted_rate": self.predicted_rate,
            "imbalance_deg": self.imbalance_deg,
            "pointer": self.pointer,
            "pointer_err": self.pointer_err,
            "started_utc": self.started_utc,
            "ended_utc": self.ended_utc,
        }


@dataclass(frozen=True)
class RunRecord:
    """A run's header and how far it got; ``provenance`` is the stored JSON document of
    :class:`aligner.run.station.Provenance` (empty for runs logged before it existed)."""

    id: int
    kind: str
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
    provenance: Mapping[str, Any]
    points: int

    @property
    def planned(self) -> int:
        """Number of planned points."""
        return len(self.plan)

    def to_json(self) -> dict[str, Any]:
        """The run's header as JSON (docs/json.md): ``points_done`` of ``points_total`` for a
        sweep, null for a recipe run (it logs steps, not points; its sweeps are runs of their
        own); the points themselves are listed under ``points`` where a command gives them."""
        sweep = self.kind != "recipe"
        return {
            "run": self.id,
            "kind": self.kind,
            "status": self.status,
            "data": self.data_label,
            "points_done": self.points if sweep else None,
            "points_total": self.planned if sweep else None,
            "bench_name": self.bench_name,
            "bench_path": self.bench_path,
            "schedule": self.schedule,
            "started_utc": self.started_utc,
            "ended_utc": self.ended_utc,
            "message": self.message,
        }

    @property
    def device_kinds(self) -> frozenset[str]:
        """Kinds of the devices that took part (``real``, ``simulated``, ``typed``); empty for
        a run logged before devices were recorded."""
        sessions = [self.provenance, *self.provenance.get("resumed", ())]
        devices = [d for session in sessions for d in session.get("devices") or ()]
        return frozenset(d.get("kind", "") for d in devices) - {"absent", ""}

    @property
    def data_label(self) -> str:
        """What the numbers of the run are, for every output: ``measured`` (real devices only),
        ``SIMULATED``, ``TYPED IN`` (an operator typed readings), or ``devices not recorded``."""
        kinds = self.device_kinds
        if not kinds:
            return "devices not recorded"
        words = [w for k, w in (("simulated", "SIMULATED"), ("typed", "TYPED IN")) if k in kinds]
        if not words:
            return "measured"
        return " and ".join(words) + (" (with real devices)" if "real" in kinds else "")


@dataclass(frozen=True)
class RecipeRunRow:
    """What a recipe run follows: the recipe's ``name``, ``path``, the file's ``text`` as it
    was when the run started, and its number of ``steps``."""

    run_id: int
    name: str
    path: str
    text: str
    steps: int

    def to_json(self) -> dict[str, Any]:
        """The recipe a run follows, as the keys of ``aligner log show --json``: ``recipe`` is
        its name (as in ``aligner recipe run --json``), the count is ``steps_total`` (``steps``
        is always a list)."""
        return {"recipe": self.name, "recipe_path": self.path, "steps_total": self.steps}


@dataclass(frozen=True)
class RecipeStepRow:
    """One logged step of a recipe run (``outcome`` is the stored JSON document)."""

    number: int
    do: str
    state: str
    outcome: Mapping[str, Any]
    started_utc: str
    ended_utc: str


class RunLog:
    """A connection to a run-log file; created (with its folder) when missing.

    ``durable`` (default) syncs every point to disk (``synchronous=FULL``); ``False`` keeps
    WAL's crash safety without the per-point disk sync (for simulated benches). Use as a
    context manager or call :meth:`close`. Not shared between threads.
    """

    def __init__(
        self, path: str | Path | None = None, *, durable: bool = True, create: bool = True
    ) -> None:
        self.path = Path(path) if path is not None else default_db_path()
        if not isinstance(durable, bool):
            raise InputError(f"durable must be True or False, got {durable!r}")
        if not self.path.exists() and not create:
            raise DataFileError(
                f"{self.path}: no run log here (nothing has been logged to it); check the "
                "path given with --db"
            )
        if path is None:  # only the default data folder is made on demand
            self.path.parent.mkdir(parents=True, exist_ok=True)
        elif not self.path.parent.is_dir():
            raise DataFileError(
                f"{self.path}: the folder {self.path.parent} does not exist; check the path "
                "given with --db"
            )
        try:
            self._db = sqlite3.connect(self.path, isolation_level=None)
            self._open(durable)
        except sqlite3.DatabaseError as exc:
            raise DataFileError(
                f"{self.path}: cannot be used as a run log ({exc}); give another file with --db"
            ) from None
        except OSError as exc:
            raise DataFileError(
                f"{self.path}: cannot create the run log ({exc}); give another file with --db"
            ) from None

    def _open(self, durable: bool) -> None:
        """Check the file before anything is written to it (a newer schema, another program's
        file, damage), then set it up: WAL journal, the schema created or upgraded."""
        version = int(self._db.execute("PRAGMA user_version").fetchone()[0])
        if version > SCHEMA_VERSION:
            raise DataFileError(
                f"{self.path}: written by a newer aligner (run-log schema {version}, this one "
                f"reads up to {SCHEMA_VERSION}); update aligner to read it"
            )
        tables = {
            r[0] for r in self._db.execute("SELECT name FROM sqlite_master WHERE type = 'table'")
        } - {"sqlite_sequence"}
        if tables and "runs" not in tables:
            raise DataFileError(
                f"{self.path}: is an SQLite file but not a run log (it holds "
                f"{', '.join(sorted(tables))}); give another file with --db"
            )
        check = self._db.execute("PRAGMA integrity_check(1)").fetchone()[0]
        page = int(self._db.execute("PRAGMA page_size").fetchone()[0])
        if tables and self.path.stat().st_size % page:
            check = f"its size is not a whole number of {page}-byte pages: it was cut short"
        if check != "ok":
            raise DataFileError(
                f"{self.path}: the run log is damaged ({check}); nothing is written to it. "
                f"{SALVAGE_HINT.format(path=self.path)}"
            )
        self._db.execute("PRAGMA journal_mode=WAL")
        # FULL syncs every commit to disk, so a point survives a power cut too; NORMAL (WAL)
        # survives a crash of the program but may lose the last points to a power cut
        self._db.execute(f"PRAGMA synchronous={'FULL' if durable else 'NORMAL'}")
        self._db.execute("PRAGMA foreign_keys=ON")
        if version == SCHEMA_VERSION and tables >= _TABLES:
            self.runs()  # every run's header decodes: a damaged one is refused here, not later
            return
        if "runs" in tables and version < 1:
            self._upgrade()
        # schema 1 -> 2 adds the recipe tables only: CREATE TABLE IF NOT EXISTS does it
        self._db.executescript(_SCHEMA)
        self._db.execute(f"PRAGMA user_version={SCHEMA_VERSION}")

    def _upgrade(self) -> None:
        """Schema 0 -> 1 in one transaction (the rows are kept; see ``_UPGRADE_0_TO_1``)."""
        old_points = ", ".join(_POINT_COLUMNS[:-1])
        with self._transaction():
            for statement in _UPGRADE_0_TO_1.strip().split(";\n"):
                self._db.execute(statement.rstrip(";"))
            for statement in _SCHEMA.split(";")[1:]:
                if statement.strip():
                    self._db.execute(statement)
            self._db.execute(
                f"INSERT INTO points (run_id, {old_points}) SELECT run_id, {old_points} "
                "FROM points_0"
            )
            self._db.execute(
                "INSERT INTO events (id, run_id, idx, kind, message, t_utc) SELECT id, run_id, "
                "idx, kind, message, t_utc FROM events_0"
            )
            self._db.execute("DROP TABLE points_0")
            self._db.execute("DROP TABLE events_0")

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
        provenance: Mapping[str, Any],
        kind: str = "sweep",
    ) -> int:
        """Insert a run with status ``running``; return its id."""
        try:
            cur = self._db.execute(
                "INSERT INTO runs (kind, status, bench_name, bench_path, bench_toml, schedule, "
                "plan_json, dwell_s, settle_s, repeats, imbalance_mount, software_version, "
                "started_utc, provenance_json) "
                "VALUES (?, 'running', ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                (
                    kind,
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
                    json.dumps(dict(provenance)),
                ),
            )
        except sqlite3.OperationalError as exc:
            raise _storage_error(self.path, exc) from None
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

    def add_session(self, run_id: int, provenance: Mapping[str, Any]) -> None:
        """Record the devices of a later session of the run (a resume): appended to the run's
        provenance under ``resumed``, so the run's label covers every device that took part."""
        with self._transaction():
            row = self._db.execute(
                "SELECT provenance_json FROM runs WHERE id = ?", (run_id,)
            ).fetchone()
            if row is None:
                raise DataFileError(f"{self.path}: no run {run_id}")
            doc = json.loads(row[0])
            doc.setdefault("resumed", []).append(dict(provenance))
            self._db.execute(
                "UPDATE runs SET provenance_json = ? WHERE id = ?", (json.dumps(doc), run_id)
            )

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
        events = list(events)
        unknown = sorted({e.kind for e in events} - set(EVENT_KINDS))
        if unknown:
            raise InputError(f"event kind {unknown[0]!r}; allowed: {', '.join(EVENT_KINDS)}")
        self._db.executemany(
            "INSERT INTO events (run_id, idx, kind, message, t_utc) VALUES (?, ?, ?, ?, ?)",
            [(run_id, e.idx, e.kind, e.message, e.t_utc or utc_now()) for e in events],
        )

    # -- recipe runs (schema 2) ----------------------------------------------------------------

    def create_recipe_run(
        self,
        *,
        recipe: Mapping[str, Any],
        bench_name: str,
        bench_path: str | None,
        bench_toml: str,
        imbalance_mount: str,
        software_version: str,
        provenance: Mapping[str, Any],
    ) -> int:
        """Insert a run of kind ``recipe`` (status ``running``) and what it follows:
        ``recipe`` holds ``name``, ``path``, ``text`` and ``steps`` (a list of the steps as
        plain data, stored as the run's plan). Returns the run's id."""
        steps = list(recipe["steps"])
        with self._transaction():
            run_id = self.create_run(
                bench_name=bench_name,
                bench_path=bench_path,
                bench_toml=bench_toml,
                schedule=str(recipe["name"]),
                plan=steps,
                dwell_s=0.0,
                settle_s=0.0,
                repeats=1,
                imbalance_mount=imbalance_mount,
                software_version=software_version,
                provenance=provenance,
                kind="recipe",
            )
            self._db.execute(
                "INSERT INTO recipe_runs (run_id, name, path, recipe_text, steps) "
                "VALUES (?, ?, ?, ?, ?)",
                (run_id, str(recipe["name"]), str(recipe["path"]), str(recipe["text"]), len(steps)),
            )
        return run_id

    def put_step(
        self,
        run_id: int,
        outcome: Mapping[str, Any],
        events: Iterable[Event] = (),
    ) -> None:
        """Write (or replace) one recipe step's outcome document (``number``, ``do``,
        ``state``, ``started_utc``, ``ended_utc`` read from it) and its events in one
        transaction."""
        with self._transaction():
            self._db.execute(
                "INSERT OR REPLACE INTO recipe_steps (run_id, number, do, state, outcome_json, "
                "started_utc, ended_utc) VALUES (?, ?, ?, ?, ?, ?, ?)",
                (
                    run_id,
                    int(outcome["number"]),
                    str(outcome["do"]),
                    str(outcome["state"]),
                    json.dumps(dict(outcome)),
                    str(outcome.get("started_utc") or utc_now()),
                    str(outcome.get("ended_utc") or utc_now()),
                ),
            )
            self._insert_events(run_id, events)

    def recipe_run(self, run_id: int) -> RecipeRunRow:
        """What recipe run ``run_id`` follows; a run of another kind raises ``InputError``."""
        record = self.run(run_id)
        row = self._db.execute(
            "SELECT name, path, recipe_text, steps FROM recipe_runs WHERE run_id = ?", (run_id,)
        ).fetchone()
        if row is None:
            raise InputError(
                f"run {run_id} is a {record.kind} run, not a recipe run; see 'aligner log list'"
            )
        return RecipeRunRow(run_id, *row)

    def recipe_steps(self, run_id: int) -> list[RecipeStepRow]:
        """The logged steps of a recipe run, in step order."""
        rows = self._db.execute(
            "SELECT number, do, state, outcome_json, started_utc, ended_utc FROM recipe_steps "
            "WHERE run_id = ? ORDER BY number",
            (run_id,),
        )
        return [RecipeStepRow(n, do, st, json.loads(o), t0, t1) for n, do, st, o, t0, t1 in rows]

    def recipe_run_ids(self, name: str) -> list[int]:
        """Ids of the runs of recipe ``name``, newest first."""
        rows = self._db.execute(
            "SELECT run_id FROM recipe_runs WHERE name = ? ORDER BY run_id DESC", (name,)
        )
        return [int(r[0]) for r in rows]

    def _transaction(self) -> _Transaction:
        return _Transaction(self._db, self.path)

    # -- reading -----------------------------------------------------------------------------

    @contextmanager
    def _reading(self, what: str) -> Iterator[None]:
        """Turn what a damaged file does to a read into one ``DataFileError`` with the way
        out."""
        try:
            yield
        except (sqlite3.DatabaseError, ValueError, TypeError, KeyError) as exc:
            raise DataFileError(
                f"{self.path}: {what} cannot be read: the run log is damaged ({exc}). "
                f"{SALVAGE_HINT.format(path=self.path)}"
            ) from None

    def run(self, run_id: int) -> RunRecord:
        """A run's record; an unknown id raises ``DataFileError`` naming the file."""
        with self._reading(f"run {run_id}"):
            row = self._db.execute(
                f"SELECT {_RUN_COLUMNS} FROM runs WHERE id = ?", (run_id,)
            ).fetchone()
            return self._found(run_id, row)

    def _found(self, run_id: int, row: Sequence[Any] | None) -> RunRecord:
        if row is None:
            known = [str(r[0]) for r in self._db.execute("SELECT id FROM runs ORDER BY id")]
            listing = ", ".join(known[-10:]) or "none yet"
            raise DataFileError(
                f"{self.path}: no run {run_id} (runs: {listing}); see 'aligner log list'"
            )
        return self._record(row)

    def runs(self) -> list[RunRecord]:
        """All runs, oldest first."""
        with self._reading("the list of runs"):
            rows = self._db.execute(f"SELECT {_RUN_COLUMNS} FROM runs ORDER BY id")
            return [self._record(r) for r in rows]

    @staticmethod
    def _record(row: Sequence[Any]) -> RunRecord:
        (run_id, kind, status, name, path, toml, schedule, plan, dwell, settle, repeats,
         mount, version, started, ended, message, provenance, points) = row  # fmt: skip
        plan_rows = json.loads(plan)
        doc = json.loads(provenance)
        if not isinstance(plan_rows, list) or not isinstance(doc, dict):
            raise ValueError(f"run {run_id}: its plan or provenance is not what was written")
        return RunRecord(
            id=int(run_id),
            kind=str(kind),
            status=str(status),
            bench_name=str(name),
            bench_path=None if path is None else str(path),
            bench_toml=str(toml),
            schedule=str(schedule),
            plan=tuple(plan_rows),
            dwell_s=float(dwell),
            settle_s=float(settle),
            repeats=int(repeats),
            imbalance_mount=str(mount),
            software_version=str(version),
            started_utc=str(started),
            ended_utc=None if ended is None else str(ended),
            message=str(message),
            provenance=doc,
            points=int(points),
        )

    def points(self, run_id: int) -> list[LoggedPoint]:
        """A run's points in index order."""
        self.run(run_id)
        with self._reading(f"the points of run {run_id}"):
            rows = self._db.execute(
                f"SELECT {', '.join(_POINT_COLUMNS)} FROM points WHERE run_id = ? ORDER BY idx",
                (run_id,),
            )
            return [_point(dict(zip(_POINT_COLUMNS, r, strict=True))) for r in rows]

    def done_indices(self, run_id: int) -> set[int]:
        """Indices of the points already logged."""
        with self._reading(f"the points of run {run_id}"):
            rows = self._db.execute("SELECT idx FROM points WHERE run_id = ?", (run_id,))
            return {int(r[0]) for r in rows}

    def events(self, run_id: int) -> list[Event]:
        """A run's events, oldest first."""
        with self._reading(f"the events of run {run_id}"):
            rows = self._db.execute(
                "SELECT kind, message, idx, t_utc FROM events WHERE run_id = ? ORDER BY id",
                (run_id,),
            )
            return [
                Event(str(kind), str(message), None if idx is None else int(idx), str(t))
                for kind, message, idx, t in rows
            ]

    def integrity_ok(self) -> bool:
        """``PRAGMA integrity_check`` says ``ok``."""
        return self._db.execute("PRAGMA integrity_check").fetchone()[0] == "ok"

    @contextmanager
    def claim(self, run_id: int) -> Iterator[None]:
        """Hold run ``run_id`` for this process while the block runs: a second process that
        tries to drive the same run gets :class:`InputError` before it touches a device. The
        claim is an OS lock on byte ``run_id`` of a lock file beside the log (never deleted, so
        two processes always lock the same file), released when the process ends in any way."""
        lock_path = self.path.with_name(f"{self.path.name}.locks")
        try:
            handle = open(lock_path, "a+b")  # noqa: SIM115 - held for the whole block
        except OSError as exc:
            raise DataFileError(f"{lock_path}: cannot create the runs' lock file ({exc})") from None
        try:
            if not _try_lock(handle, run_id):
                raise InputError(
                    f"run {run_id} is being driven by another process right now (lock file "
                    f"{lock_path}); wait for it to end or stop it, then resume"
                )
            yield
        finally:
            handle.close()


def _optional(value: Any) -> float | None:
    return None if value is None else float(value)


def _point(values: dict[str, Any]) -> LoggedPoint:
    """A points row as a :class:`LoggedPoint`, every column converted to its type (a value of
    the wrong type raises ``ValueError`` or ``TypeError``: a damaged row)."""
    commanded = json.loads(values["commanded_json"])
    readback = json.loads(values["readback_json"])
    if not isinstance(commanded, dict) or not isinstance(readback, dict):
        raise ValueError(f"point {values['idx']}: its readings are not what was written")
    return LoggedPoint(
        idx=int(values["idx"]),
        target=float(values["target"]),
        commanded={str(k): float(v) for k, v in commanded.items()},
        readback={str(k): float(v) for k, v in readback.items()},
        reading_deg=float(values["reading_deg"]),
        counts=int(values["counts"]),
        reference=None if values["reference"] is None else int(values["reference"]),
        dwell_s=float(values["dwell_s"]),
        leak=_optional(values["leak"]),
        leak_lo=_optional(values["leak_lo"]),
        leak_hi=_optional(values["leak_hi"]),
        predicted_leak=float(values["predicted_leak"]),
        predicted_rate=float(values["predicted_rate"]),
        imbalance_deg=float(values["imbalance_deg"]),
        pointer=_optional(values["pointer"]),
        pointer_err=_optional(values["pointer_err"]),
        started_utc=str(values["started_utc"]),
        ended_utc=str(values["ended_utc"]),
        flag=str(values["flag"]),
    )


def _try_lock(handle: Any, byte: int) -> bool:
    """Lock byte ``byte`` of an open file for this process (exclusive, non-blocking); False
    when another process holds it."""
    if sys.platform == "win32":
        import msvcrt

        handle.seek(byte)
        try:
            msvcrt.locking(handle.fileno(), msvcrt.LK_NBLCK, 1)
        except OSError:
            return False
        return True
    import fcntl

    try:
        fcntl.lockf(handle.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB, 1, byte)
    except OSError:
        return False
    return True


def _storage_error(path: Path, exc: sqlite3.Error) -> StorageError:
    return StorageError(
        f"{path}: the run log could not be written ({exc}); free disk space (or fix the "
        "file's permissions, or stop the program holding it), then resume the run"
    )


class _Transaction:
    """``BEGIN IMMEDIATE`` ... ``COMMIT`` (``ROLLBACK`` on error) on an autocommit connection;
    a write the file system refuses (a full disk, a read-only file) is a ``StorageError``."""

    def __init__(self, db: sqlite3.Connection, path: Path) -> None:
        self._db, self._path = db, path

    def __enter__(self) -> None:
        try:
            self._db.execute("BEGIN IMMEDIATE")
        except sqlite3.OperationalError as exc:
            raise _storage_error(self._path, exc) from None

    def __exit__(
        self, exc_type: type[BaseException] | None, exc: BaseException | None, *rest: object
    ) -> None:
        try:
            self._db.execute("COMMIT" if exc_type is None else "ROLLBACK")
        except sqlite3.OperationalError as failed:
            if exc_type is None:
                with contextlib.suppress(sqlite3.Error):
                    self._db.execute("ROLLBACK")
            raise _storage_error(self._path, failed) from None
        if isinstance(exc, sqlite3.OperationalError):
            raise _storage_error(self._path, exc) from None


def read_run(run_id: int, db: str | Path | None = None) -> tuple[RunRecord, list[LoggedPoint]]:
    """A logged run and its points (for fits: ``aligner fit coupling RUN``).

    Points carry ``pointer`` / ``pointer_err`` (bench pointer units) when the sweep had a
    pointer channel, else None. ``db`` defaults to :func:`default_db_path`.
    """
    with RunLog(db, create=False) as log:
        return log.run(run_id), log.points(run_id)


@dataclass(frozen=True)
class Salvage:
    """What :func:`salvage` copied: the runs, points and events it could read, and what it
    could not (plain sentences)."""

    source: str
    out: str
    runs: int
    points: int
    events: int
    lost: tuple[str, ...]

    def to_json(self) -> dict[str, Any]:
        """The JSON document of ``aligner log salvage --json`` (counts as ``*_copied``)."""
        return {
            "source": self.source,
            "out": self.out,
            "runs_copied": self.runs,
            "points_copied": self.points,
            "events_copied": self.events,
            "lost": list(self.lost),
        }


#: Runs probed one by one when the damaged file cannot list them.
_PROBE_RUNS = 10_000


def _rows(db: sqlite3.Connection, sql: str, args: Sequence[Any] = ()) -> list[dict[str, Any]]:
    cur = db.execute(sql, args)
    names = [d[0] for d in cur.description]
    return [dict(zip(names, row, strict=True)) for row in cur.fetchall()]


def salvage(damaged: str | Path, out: str | Path) -> Salvage:
    """Copy every run, point and event that can still be read from the run log ``damaged``
    (opened read-only, never changed) into a new run log ``out`` (which must not exist),
    keeping run ids; rows that cannot be read are counted in ``lost``."""
    source, target = Path(damaged), Path(out)
    if not source.is_file():
        raise DataFileError(f"{source}: no such file")
    if target.exists():
        raise DataFileError(f"{target}: exists; give a new file name for the salvaged runs")
    try:
        db = sqlite3.connect(f"file:{source}?mode=ro", uri=True)
    except sqlite3.Error as exc:
        raise DataFileError(f"{source}: cannot be opened ({exc})") from None
    lost: list[str] = []
    try:
        try:
            ids = [r["id"] for r in _rows(db, "SELECT id FROM runs ORDER BY id")]
        except sqlite3.Error:
            lost.append("the list of runs (each run id was probed instead)")
            ids = list(range(1, _PROBE_RUNS + 1))
        copied = [0, 0, 0]
        with RunLog(target) as new:
            for run_id in ids:
                _salvage_run(db, new._db, run_id, copied, lost, probing=len(ids) == _PROBE_RUNS)
    finally:
        db.close()
    runs, points, events = copied
    return Salvage(str(source), str(target), runs, points, events, tuple(lost))


def _salvage_run(
    db: sqlite3.Connection,
    new: sqlite3.Connection,
    run_id: int,
    copied: list[int],
    lost: list[str],
    *,
    probing: bool,
) -> None:
    """Copy run ``run_id`` (its row, then its points and events as far as they read)."""
    try:
        rows = _rows(db, "SELECT * FROM runs WHERE id = ?", (run_id,))
    except sqlite3.Error as exc:
        if not probing:
            lost.append(f"run {run_id} ({exc})")
        return
    if not rows:
        return
    run = {k: v for k, v in rows[0].items() if k in _SALVAGED_RUN_COLUMNS}
    new.execute(
        f"INSERT INTO runs ({', '.join(run)}) VALUES ({', '.join('?' * len(run))})",
        list(run.values()),
    )
    copied[0] += 1
    for table, key in _SALVAGED_TABLES:
        try:
            items = _rows(db, f"SELECT * FROM {table} WHERE run_id = ? ORDER BY {key}", (run_id,))
        except sqlite3.OperationalError as exc:
            if "no such table" not in str(exc):  # an older file has no recipe tables
                lost.append(f"the {table} of run {run_id} ({exc})")
            continue
        except sqlite3.Error as exc:
            lost.append(f"the {table} of run {run_id} ({exc})")
            continue
        for item in items:
            new.execute(
                f"INSERT INTO {table} ({', '.join(item)}) VALUES ({', '.join('?' * len(item))})",
                list(item.values()),
            )
        if table in ("points", "events"):
            copied[1 if table == "points" else 2] += len(items)


#: Tables a salvage copies row by row after a run's header, and the column to order them by.
_SALVAGED_TABLES = (
    ("points", "idx"),
    ("events", "id"),
    ("recipe_runs", "run_id"),
    ("recipe_steps", "number"),
)
#: Columns of ``runs`` a salvage copies (older files lack the last two; the defaults apply).
_SALVAGED_RUN_COLUMNS = (
    "id",
    "status",
    "bench_name",
    "bench_path",
    "bench_toml",
    "schedule",
    "plan_json",
    "dwell_s",
    "settle_s",
    "repeats",
    "imbalance_mount",
    "software_version",
    "started_utc",
    "ended_utc",
    "message",
    "kind",
    "provenance_json",
)
