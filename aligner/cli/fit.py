"""Calibration fits of measured scans (null, waveplate, leak curve, coupling).

Poisson maximum likelihood on the bench's full forward model for count scans, Gaussian for
pointer readings; errors from the observed information. '--write' stores what a fit found
into the bench file (comments kept).
"""

from __future__ import annotations

import argparse
from collections.abc import Iterable
from typing import Any

from .common import add_json_flag, laser_safety, number

KINDS = ("null", "waveplate", "leak", "coupling")
SAFETY = laser_safety("never expose a single-photon detector to a bright beam.")


def print_table(title: str, rows: Iterable[tuple[str, str]], notes: Iterable[str] = ()) -> None:
    """A two-column table (quantity, value with units) and the non-empty notes below it; every
    text shown as written (file names and notes may hold markup-like text)."""
    from rich.table import Table

    from ..text import safe_text
    from .common import console as make_console

    table = Table(title=safe_text(title), show_header=True)
    table.add_column("quantity")
    table.add_column("value", justify="right")
    for key, value in rows:
        table.add_row(safe_text(key), safe_text(value))
    console = make_console()
    console.print(table)
    for note in notes:
        if note:
            console.print(safe_text(note))


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``fit`` command."""
    p = sub.add_parser(
        "fit",
        help="fit a measured scan: null, waveplate, leak or coupling",
        description=__doc__,
        epilog=SAFETY,
    )
    p.add_argument("kind", choices=KINDS, help="which fit")
    p.add_argument(
        "data",
        metavar="FILE|RUN",
        help="CSV file (reading_deg,counts[,dwell_s,reference] or, for coupling, "
        "reading_deg,pointer,pointer_err), or a logged run number (--db)",
    )
    p.add_argument(
        "--bench",
        metavar="BENCH",
        help="the bench file (TOML) the scan was taken on, or 'demo' for the bundled demo bench "
        "(required for a CSV file; a run uses the bench stored with it unless this is given)",
    )
    p.add_argument(
        "--mount",
        metavar="M",
        help="the mount the scan turned (default: the "
        "analyzer for null, phase_mount for waveplate, imbalance_mount otherwise)",
    )
    p.add_argument(
        "--dwell",
        type=number(1e-6, 1e6),
        metavar="S",
        help="gate time (s) when the file has no dwell_s column",
    )
    p.add_argument(
        "--dark-rate",
        type=number(0, 1e9),
        metavar="R",
        help="dark rate (counts/s) measured "
        "with the shutter closed (default: the bench detector's)",
    )
    p.add_argument(
        "--free-rate",
        action="store_true",
        help="waveplate fit: fit the photon rate too (only when the polarizers are not crossed)",
    )
    p.add_argument("--db", metavar="PATH", help="run log database (for a RUN)")
    p.add_argument(
        "--write",
        action="store_true",
        help="store the fitted values in the bench file (comments kept)",
    )
    add_json_flag(p)
    p.set_defaults(handler=run)


def _is_run(data: str) -> bool:
    """A run number rather than a file (a file of that name wins)."""
    from pathlib import Path

    return data.isdigit() and not Path(data).exists()


def _bench_for(args: argparse.Namespace, record: Any) -> tuple[Any, str]:
    """The bench a fit uses and how to say which: ``--bench`` when given, else a run's own
    stored bench (the snapshot taken when it started); a CSV file needs ``--bench``."""
    from ..bench import load_bench
    from ..errors import InputError

    if args.bench:
        bench = load_bench(args.bench)
        return bench, f"bench {bench.path or args.bench} (--bench)"
    if record is not None:
        from ..run.result import stored_bench

        return stored_bench(record), (
            f"the bench stored with run {record.id} ({record.bench_path or record.bench_name}, "
            "as it was when the run started)"
        )
    raise InputError(
        "--bench BENCH is required for a CSV file: the bench file the scan was taken on ('demo' "
        "for the bundled demo bench); a fit against another bench's model gives wrong numbers"
    )


def _run_scan(kind: str, data: str, db: str | None) -> tuple[Any, Any]:
    """A logged run and its points as the scan a fit of ``kind`` reads (pointer readings for
    the coupling, counts otherwise), the readings being of the run's imbalance mount."""
    import numpy as np

    from ..errors import DataFileError
    from ..fit.csvdata import CountScan, PointerScan
    from ..run.log import read_run

    record, points = read_run(int(data), db)
    label = f"run {data}"
    if kind == "coupling":
        kept = [p for p in points if p.pointer is not None and p.pointer_err]
        if len(kept) < 2:
            raise DataFileError(
                f"{label}: {len(kept)} point(s) carry pointer readings; the coupling fit "
                "needs at least 2"
            )
        return record, PointerScan(
            np.array([p.reading_deg for p in kept]),
            np.array([p.pointer for p in kept]),
            np.array([p.pointer_err for p in kept]),
            label,
            record.imbalance_mount,
        )
    if len(points) < 4:
        raise DataFileError(f"{label}: {len(points)} point(s); this fit needs at least 4")
    with_reference = all(p.reference is not None for p in points)
    return record, CountScan(
        np.array([p.reading_deg for p in points]),
        np.array([float(p.counts) for p in points]),
        np.array([p.dwell_s for p in points]),
        np.array([float(p.reference or 0) for p in points]) if with_reference else None,
        label,
        record.imbalance_mount,
    )


def _pm(doc: dict[str, Any], key: str, err: str | None, unit: str, fmt: str = ".6g") -> str:
    """``value +/- error unit`` from a fit's JSON document."""
    text = format(doc[key], fmt)
    if err is not None:
        text += f" +/- {format(doc[err], '.2g')}"
    return f"{text} {unit}".rstrip()


#: Readable rows of each fit: (label, value key, error key or None, unit).
ROWS: dict[str, tuple[tuple[str, str, str | None, str], ...]] = {
    "null": (
        ("null reading", "null_reading_deg", "null_reading_err_deg", "deg"),
        ("mount offset for the bench file", "offset_deg", None, "deg"),
        ("analyzer extinction ratio", "extinction_ratio", "extinction_ratio_err", ""),
        ("photon rate / bench file's", "rate_scale", "rate_scale_err", ""),
        ("dark rate used", "dark_rate", None, "counts/s"),
    ),
    "waveplate": (
        ("fast-axis reading", "fast_axis_reading_deg", "fast_axis_err_deg", "deg"),
        ("equally good reading (fast/slow swapped)", "fast_axis_alternative_deg", None, "deg"),
        ("retardance", "retardance_waves", "retardance_err_waves", "waves"),
        ("photon rate / bench file's", "rate_scale", None, ""),
    ),
    "leak": (
        ("imbalance offset", "imbalance_offset_deg", "imbalance_offset_err_deg", "deg"),
        (
            "leak floor (over the analyzer turned to transmission)",
            "leak_floor",
            "leak_floor_err",
            "",
        ),
        ("implied extinction", "implied_extinction", None, ""),
        ("bench file's predicted floor", "predicted_floor", None, ""),
    ),
    "coupling": (
        ("coupling strength (exact)", "strength", "strength_err", ""),
        ("coupling strength (linear formula)", "linear_strength", "linear_strength_err", ""),
        ("bench file's coupling.strength", "bench_strength", None, ""),
    ),
}


def _rows(kind: str, doc: dict[str, Any]) -> list[tuple[str, str]]:
    """The readable table of a fit: words with units (a coupling in the bench's pointer
    units), no raw keys."""
    from ..fit.counts import format_sigma

    rows = [("mount", str(doc["mount"]))]
    rows += [
        (label, _pm(doc, key, err, doc["units"] if kind == "coupling" else unit))
        for label, key, err, unit in ROWS[kind]
    ]
    if kind == "coupling":
        rows.append(("fitted - bench file", format_sigma(doc["bench_difference_sigma"])))
    gof = doc["goodness_of_fit"]
    rows += [
        ("points", str(doc["points_fitted"])),
        (
            "deviance / degrees of freedom",
            f"{gof['deviance']:.1f} / {gof['dof']} (p = {gof['p_value']:.3g})",
        ),
        ("fit", "converged" if doc["success"] else "FAILED"),
    ]
    return rows


def run(args: argparse.Namespace) -> int:
    """Run the fit and print (or write) its result."""
    from ..bench import ensure_writable, write_values
    from ..errors import InputError
    from ..fit.csvdata import load_count_scan, load_pointer_scan
    from ..fit.scanmodel import mount_statement
    from .common import emit_json

    record = None
    if _is_run(args.data):
        record, scan = _run_scan(args.kind, args.data, args.db)
    elif args.kind == "coupling":
        scan = load_pointer_scan(args.data)
    else:
        scan = load_count_scan(args.data)
    if args.write and record is not None and not args.bench:
        raise InputError(
            f"--write: run {record.id}'s stored bench is a snapshot, not a file to write; give "
            "the bench file to store the values in with --bench"
        )
    bench, bench_words = _bench_for(args, record)
    options = {"dwell_s": args.dwell, "dark_rate": args.dark_rate}
    result: Any
    if args.kind == "coupling":
        from ..fit.coupling import fit_coupling

        result = fit_coupling(bench, scan, args.mount)
    elif args.kind == "null":
        from ..fit.null import fit_null

        result = fit_null(bench, scan, args.mount, **options)
    elif args.kind == "waveplate":
        from ..fit.waveplate import fit_waveplate

        result = fit_waveplate(bench, scan, args.mount, free_scale=args.free_rate, **options)
    else:
        from ..fit.leakcurve import fit_leak_curve

        result = fit_leak_curve(bench, scan, args.mount, **options)
    doc = result.to_json()
    doc["mount_basis"] = mount_statement(bench, scan, args.mount, result.mount)
    doc["bench_used"] = bench_words
    updates = result.bench_updates()
    if args.write:
        ensure_writable(bench.path)  # before any work: the demo bench is not written to
    sound = result.fit.success and not result.fit.warning
    written = bool(args.write and updates and sound)
    if written:
        write_values(bench.path or args.bench, updates)
    doc["written"] = dict(updates) if written else {}
    if args.json:
        emit_json(doc)
        return 0 if result.fit.success else 2
    notes = [
        result.fit.warning,
        f"fitted with {bench_words}",
        doc["mount_basis"],
        doc.get("ambiguity", ""),
        doc.get("statement", ""),
        doc.get("reference_text", ""),
        getattr(result, "bench_comparison", ""),
        f"verdict: {doc['verdict']['text']}" if doc.get("verdict") else "",
        "" if result.fit.success else f"the fit failed: {result.fit.message}",
    ]
    if written:
        notes.append(
            f"written to {bench.path}: " + ", ".join(f"{k} = {v}" for k, v in updates.items())
        )
    elif args.write:
        why = (
            "this fit has no bench values to store"
            if not updates
            else "the fit failed"
            if not result.fit.success
            else "the model does not describe the data (see the warning)"
        )
        notes.append(f"nothing written: {why}")
    title = f"{args.kind} fit of {scan.path}"
    print_table(title, _rows(args.kind, doc), notes)
    return 0 if result.fit.success else 2
