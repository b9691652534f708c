"""CSV input for the fits: a header row, then one row per point.

Count scans: columns ``reading_deg,counts`` and optionally ``dwell_s`` (s) and ``reference``
(counts of a reference port or monitor over the same gate). Pointer scans: ``reading_deg,
pointer,pointer_err`` (pointer units of the bench). Other columns are ignored. Every problem is
a :class:`~aligner.errors.DataFileError` naming the file, the row (1 = header) and the column.

Which mount the readings belong to: a ``mount`` column (one mount name on every row, as in
``aligner log export``) names it; a run export without one (columns ``run``, ``index`` and
``imbalance_deg``) holds readings of the run's imbalance mount (``run_export`` True). The
fits check either against the mount they are asked to fit
(:func:`aligner.fit.scanmodel.require_mount`).
"""

from __future__ import annotations

import csv
import math
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

from ..errors import DataFileError

__all__ = ["CountScan", "PointerScan", "load_count_scan", "load_pointer_scan", "read_columns"]

#: The text column naming the mount the readings were taken with.
MOUNT_COLUMN = "mount"
#: Columns that together mark a run export (``aligner log export``): readings of the imbalance
#: mount of the run.
RUN_EXPORT_COLUMNS = ("run", "index", "imbalance_deg")

Real = NDArray[np.float64]


@dataclass(frozen=True)
class Column:
    """What a column may hold."""

    required: bool = True
    minimum: float | None = None
    positive: bool = False
    whole: bool = False

    def allowed(self) -> str:
        if self.whole:
            return "whole numbers >= 0"
        if self.positive:
            return "numbers > 0"
        if self.minimum is not None:
            return f"numbers >= {self.minimum:g}"
        return "finite numbers"


COUNT_COLUMNS = {
    "reading_deg": Column(),
    "counts": Column(whole=True),
    "dwell_s": Column(required=False, positive=True),
    "reference": Column(required=False, minimum=0.0),
}
POINTER_COLUMNS = {
    "reading_deg": Column(),
    "pointer": Column(),
    "pointer_err": Column(positive=True),
}


def _check(path: str, row: int, name: str, text: str, spec: Column) -> float:
    where = f"{path}: row {row}, column {name!r}"
    try:
        value = float(text)
    except ValueError:
        raise DataFileError(
            f"{where}: {text.strip()!r} is not a number (allowed: {spec.allowed()})"
        ) from None
    bad = (
        not math.isfinite(value)
        or (spec.whole and (value < 0 or value != int(value)))
        or (spec.positive and value <= 0)
        or (spec.minimum is not None and value < spec.minimum)
    )
    if bad:
        raise DataFileError(f"{where}: {text.strip()} is not allowed (allowed: {spec.allowed()})")
    return value


#: Most data rows a scan may have (a scan of a mount rarely has more than a few thousand), and
#: most characters a field may hold: a bigger file is refused before it is held in memory.
MAX_ROWS = 100_000
MAX_FIELD = 1_000


def _read_table(path: str | Path) -> tuple[str, list[str], list[list[str]]]:
    """The file's name, its header row (stripped cells) and its non-empty data rows; lines
    starting with ``#`` (e.g. the header comments of ``aligner log export``) and a byte-order
    mark are skipped; more than :data:`MAX_ROWS` rows are refused."""
    name = str(path)
    rows: list[list[str]] = []
    try:
        with open(path, newline="", encoding="utf-8-sig") as handle:
            lines = (line for line in handle if not line.lstrip().startswith("#"))
            for row in csv.reader(lines):
                if any(len(cell) > MAX_FIELD for cell in row):
                    raise DataFileError(
                        f"{name}: row {len(rows) + 1} has a field longer than {MAX_FIELD} "
                        "characters; is this a CSV scan?"
                    )
                if any(cell.strip() for cell in row):
                    rows.append(row)
                if len(rows) > MAX_ROWS + 1:
                    raise DataFileError(
                        f"{name}: more than {MAX_ROWS:,} data rows; split the scan (a mount "
                        "scan has at most a few thousand points)"
                    )
    except FileNotFoundError:
        raise DataFileError(f"{name}: file not found (give the path of a CSV file)") from None
    except (OSError, UnicodeDecodeError, csv.Error) as exc:
        raise DataFileError(f"{name}: cannot be read as CSV ({exc})") from None
    if not rows:
        raise DataFileError(f"{name}: the file is empty; expected a header row and data rows")
    return name, [cell.strip() for cell in rows[0]], rows[1:]


def read_columns(path: str | Path, columns: Mapping[str, Column], min_rows: int) -> dict[str, Real]:
    """Read the named columns of a CSV file as float arrays (absent optional ones left out)."""
    return _columns(*_read_table(path), columns, min_rows)


def _columns(
    name: str,
    header: list[str],
    data: list[list[str]],
    columns: Mapping[str, Column],
    min_rows: int,
) -> dict[str, Real]:
    wanted = ", ".join(k for k, c in columns.items() if c.required)
    missing = [k for k, c in columns.items() if c.required and k not in header]
    if missing:
        raise DataFileError(
            f"{name}: row 1 (header) lacks column(s) {', '.join(missing)}; "
            f"the header must name at least: {wanted}"
        )
    if len(data) < min_rows:
        raise DataFileError(f"{name}: {len(data)} data row(s); this fit needs at least {min_rows}")
    out: dict[str, Real] = {}
    for key, spec in columns.items():
        if key not in header:
            continue
        index = header.index(key)
        values = []
        for number, row in enumerate(data, start=2):
            if index >= len(row) or not row[index].strip():
                raise DataFileError(
                    f"{name}: row {number}, column {key!r}: the value is "
                    f"missing (allowed: {spec.allowed()})"
                )
            values.append(_check(name, number, key, row[index], spec))
        out[key] = np.array(values)
    readings = out.get("reading_deg")
    if readings is not None and readings.size and np.ptp(readings) == 0:
        raise DataFileError(
            f"{name}: every reading_deg is {readings[0]:g}: the mount did not move, so the scan "
            "says nothing a fit could use; check the mount and its driver"
        )
    return out


def _mount(name: str, header: list[str], data: list[list[str]]) -> tuple[str | None, bool]:
    """The mount named by the ``mount`` column (None without one) and whether the file is a
    run export (readings of the run's imbalance mount)."""
    export = all(c in header for c in RUN_EXPORT_COLUMNS)
    if MOUNT_COLUMN not in header:
        return None, export
    index = header.index(MOUNT_COLUMN)
    cells = [row[index].strip() if index < len(row) else "" for row in data]
    first = cells[0] if cells else ""
    for number, cell in enumerate(cells, start=2):
        if not cell or cell != first:
            problem = f"differs from {first!r} in row 2" if cell else "is empty"
            raise DataFileError(
                f"{name}: row {number}, column {MOUNT_COLUMN!r}: {cell!r} "
                f"{problem}; a scan turns one mount, so every row must name "
                "the same mount (split the file by mount)"
            )
    return (first or None), export


@dataclass(frozen=True)
class CountScan:
    """Counts against a mount reading. ``dwell_s`` and ``reference`` per point (None when the
    file has no such column); ``mount`` is the file's mount column (None without one),
    ``run_export`` True for a run export (readings of the run's imbalance mount)."""

    reading_deg: Real
    counts: Real
    dwell_s: Real | None
    reference: Real | None
    path: str
    mount: str | None = None
    run_export: bool = False


@dataclass(frozen=True)
class PointerScan:
    """Pointer readings (mean and standard error, bench units) against a mount reading;
    ``mount`` and ``run_export`` as for :class:`CountScan`."""

    reading_deg: Real
    pointer: Real
    pointer_err: Real
    path: str
    mount: str | None = None
    run_export: bool = False


def load_count_scan(path: str | Path, min_rows: int = 4) -> CountScan:
    """Read a count scan CSV (see the module docstring)."""
    table = _read_table(path)
    cols = _columns(*table, COUNT_COLUMNS, min_rows)
    return CountScan(
        cols["reading_deg"],
        cols["counts"],
        cols.get("dwell_s"),
        cols.get("reference"),
        table[0],
        *_mount(*table),
    )


def load_pointer_scan(path: str | Path, min_rows: int = 2) -> PointerScan:
    """Read a pointer scan CSV (see the module docstring)."""
    table = _read_table(path)
    cols = _columns(*table, POINTER_COLUMNS, min_rows)
    return PointerScan(
        cols["reading_deg"], cols["pointer"], cols["pointer_err"], table[0], *_mount(*table)
    )
