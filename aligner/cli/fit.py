"""Calibration fits of measured scans (null, waveplate, leak curve, coupling).

Poisson maximum likelihood on the bench's full forward model for count scans, Gaussian for
pointer readings; errors from the observed information. '--write' stores what a fit found
into the bench file (comments kept).
"""

from __future__ import annotations

import argparse
from collections.abc import Iterable
from typing import Any

from .common import add_json_flag

KINDS = ("null", "waveplate", "leak", "coupling")
SAFETY = ("Laser safety: follow your local laser-safety rules and your laser safety officer; "
          "never expose a single-photon detector to a bright beam.")


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
    p = sub.add_parser("fit", help="fit a measured scan: null, waveplate, leak or coupling",
                       description=__doc__, epilog=SAFETY)
    p.add_argument("kind", choices=KINDS, help="which fit")
    p.add_argument("data", metavar="FILE|RUN",
                   help="CSV file (reading_deg,counts[,dwell_s,reference] or, for coupling, "
                        "reading_deg,pointer,pointer_err), or a logged run number (coupling)")
    p.add_argument("--bench", metavar="BENCH", default="demo",
                   help="bench file (TOML) or 'demo' (default: demo)")
    p.add_argument("--mount", metavar="M", help="the mount the scan turned (default: the "
                   "analyzer for null, phase_mount for waveplate, imbalance_mount otherwise)")
    p.add_argument("--dwell", type=float, metavar="S", help="gate time (s) when the file has "
                   "no dwell_s column")
    p.add_argument("--dark-rate", type=float, metavar="R", help="dark rate (counts/s) measured "
                   "with the shutter closed (default: the bench detector's)")
    p.add_argument("--free-rate", action="store_true", help="waveplate fit: fit the photon "
                   "rate too (only when the polarizers are not crossed)")
    p.add_argument("--db", metavar="PATH", help="run log database (coupling RUN)")
    p.add_argument("--write", action="store_true",
                   help="store the fitted values in the bench file (comments kept)")
    add_json_flag(p)
    p.set_defaults(handler=run)


def _load_pointer(data: str, db: str | None) -> Any:
    """A pointer scan from a CSV file, or from logged run number ``data``."""
    from pathlib import Path

    from ..errors import DataFileError
    from ..fit.csvdata import PointerScan, load_pointer_scan

    if Path(data).exists() or not data.isdigit():
        return load_pointer_scan(data)
    import numpy as np

    from ..run.log import read_run

    _, points = read_run(int(data), db)
    with_pointer = [p for p in points if p.pointer is not None and p.pointer_err]
    if len(with_pointer) < 2:
        raise DataFileError(f"run {data}: {len(with_pointer)} point(s) carry pointer readings; "
                            "the coupling fit needs at least 2")
    return PointerScan(np.array([p.reading_deg for p in with_pointer]),
                       np.array([p.pointer for p in with_pointer]),
                       np.array([p.pointer_err for p in with_pointer]), f"run {data}")


def _rows(doc: dict[str, Any]) -> list[tuple[str, str]]:
    skip = {"fit", "goodness_of_fit", "ambiguity", "statement", "verdict", "message"}
    rows = [(k, f"{v:.6g}" if isinstance(v, float) else str(v))
            for k, v in doc.items() if k not in skip]
    gof = doc["goodness_of_fit"]
    rows.append(("deviance / dof", f"{gof['deviance']:.1f} / {gof['dof']} "
                                   f"(p = {gof['p_value']:.3g})"))
    return rows


def run(args: argparse.Namespace) -> int:
    """Run the fit and print (or write) its result."""
    from ..bench import DEMO_BENCH, load_bench, write_values
    from ..errors import InputError
    from ..fit.csvdata import load_count_scan
    from .common import emit_json

    bench = load_bench(args.bench)
    options = {"dwell_s": args.dwell, "dark_rate": args.dark_rate}
    if args.kind == "coupling":
        from ..fit.coupling import fit_coupling

        result = fit_coupling(bench, _load_pointer(args.data, args.db), args.mount)
    elif args.kind == "null":
        from ..fit.null import fit_null

        result = fit_null(bench, load_count_scan(args.data), args.mount, **options)
    elif args.kind == "waveplate":
        from ..fit.waveplate import fit_waveplate

        result = fit_waveplate(bench, load_count_scan(args.data), args.mount,
                               free_scale=args.free_rate, **options)
    else:
        from ..fit.leakcurve import fit_leak_curve

        result = fit_leak_curve(bench, load_count_scan(args.data), args.mount, **options)
    doc = result.to_json()
    updates = result.bench_updates()
    if args.write and bench.path == DEMO_BENCH:
        raise InputError("--write: the bundled demo bench is not written to; copy it "
                         "(e.g. to my-bench.toml) and fit with --bench my-bench.toml")
    written = bool(args.write and updates and result.fit.success)
    if written:
        write_values(bench.path or args.bench, updates)
    doc["written"] = dict(updates) if written else {}
    if args.json:
        emit_json(doc)
        return 0 if result.fit.success else 1
    notes = [doc.get("ambiguity", ""), doc.get("statement", ""), doc.get("verdict", ""),
             f"optimizer: {doc['message']}"]
    if written:
        notes.append(f"written to {bench.path}: " + ", ".join(f"{k} = {v}"
                                                             for k, v in updates.items()))
    elif args.write:
        notes.append("nothing written: " + ("the fit failed" if updates else
                                            "this fit has no bench values to store"))
    print_table(f"{args.kind} fit of {args.data}", _rows(doc), [n for n in notes if n])
    return 0 if result.fit.success else 1
