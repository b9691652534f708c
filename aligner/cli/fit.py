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
    """A two-column table (quantity, value with units) and notes below it."""
    from rich.console import Console
    from rich.table import Table

    table = Table(title=title, show_header=True)
    table.add_column("quantity")
    table.add_column("value", justify="right")
    for key, value in rows:
        table.add_row(key, value)
    console = Console()
    console.print(table)
    for note in notes:
        console.print(note)


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
        "reading_deg,pointer,pointer_err), or a logged run number (coupling)",
    )
    p.add_argument(
        "--bench",
        metavar="BENCH",
        default="demo",
        help="bench file (TOML) or 'demo' (default: demo)",
    )
    p.add_argument(
        "--mount",
        metavar="M",
        help="the mount the scan turned (default: the "
        "analyzer for null, phase_mount for waveplate, imbalance_mount otherwise)",
    )
    p.add_argument(
        "--dwell",
        type=number(0, 1e6, low_open=True),
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
    p.add_argument("--db", metavar="PATH", help="run log database (coupling RUN)")
    p.add_argument(
        "--write",
        action="store_true",
        help="store the fitted values in the bench file (comments kept)",
    )
    add_json_flag(p)
    p.set_defaults(handler=run)


def _load_pointer(data: str, db: str | None) -> tuple[Any, str]:
    """A pointer scan from a CSV file, or from logged run number ``data``, and what to call it
    in a title."""
    from pathlib import Path

    from ..errors import DataFileError
    from ..fit.csvdata import PointerScan, load_pointer_scan

    if Path(data).exists() or not data.isdigit():
        return load_pointer_scan(data), data
    import numpy as np

    from ..run.log import read_run

    record, points = read_run(int(data), db)
    with_pointer = [p for p in points if p.pointer is not None and p.pointer_err]
    if len(with_pointer) < 2:
        raise DataFileError(
            f"run {data}: {len(with_pointer)} point(s) carry pointer readings; "
            "the coupling fit needs at least 2"
        )
    return PointerScan(
        np.array([p.reading_deg for p in with_pointer]),
        np.array([p.pointer for p in with_pointer]),
        np.array([p.pointer_err for p in with_pointer]),
        f"run {data}",
        record.imbalance_mount,
    ), f"run {data}"


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
        ("leak floor (fraction of bright)", "leak_floor", "leak_floor_err", ""),
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
        ("points", str(doc["points"])),
        (
            "deviance / degrees of freedom",
            f"{gof['deviance']:.1f} / {gof['dof']} (p = {gof['p_value']:.3g})",
        ),
        ("fit", "converged" if doc["success"] else "FAILED"),
    ]
    return rows


def run(args: argparse.Namespace) -> int:
    """Run the fit and print (or write) its result."""
    from ..bench import ensure_writable, load_bench, write_values
    from ..fit.csvdata import load_count_scan
    from ..fit.scanmodel import mount_statement
    from .common import emit_json

    bench = load_bench(args.bench)
    options = {"dwell_s": args.dwell, "dark_rate": args.dark_rate}
    label = args.data
    if args.kind == "coupling":
        from ..fit.coupling import fit_coupling

        scan, label = _load_pointer(args.data, args.db)
        result = fit_coupling(bench, scan, args.mount)
    else:
        scan = load_count_scan(args.data)
        if args.kind == "null":
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
        doc["mount_basis"],
        doc.get("ambiguity", ""),
        doc.get("statement", ""),
        getattr(result, "bench_comparison", ""),
        f"verdict: {doc['verdict']}" if doc.get("verdict") else "",
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
    print_table(f"{args.kind} fit of {label}", _rows(args.kind, doc), [n for n in notes if n])
    return 0 if result.fit.success else 2
