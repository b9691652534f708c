"""Find the crossed reading of a mount in closed loop (coarse scan, Poisson
fit, backlash-aware move, finer scans) with the bench's declared devices, under the detector
guard; the shutter is shut when the search ends, however it ends. Devices declared "sim" use
the simulated bench. Exit status: 0 converged; 2 bad input or no convergence; 3 a device fault
or a guard stop; 130 Ctrl-C.
"""

from __future__ import annotations

import argparse
import sys

from .common import add_bench_argument, add_device_arguments, add_json_flag, number
from .fit import SAFETY


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``null`` command."""
    p = sub.add_parser(
        "null", help="find the null of a mount in closed loop", description=__doc__, epilog=SAFETY
    )
    add_bench_argument(p)
    p.add_argument("--mount", metavar="M", help="mount to null (default: the analyzer's)")
    add_device_arguments(p, ("counter", "shutter"))
    p.add_argument(
        "--dwell",
        type=number(0, 600, low_open=True),
        default=0.2,
        metavar="S",
        help="gate per point (s; default 0.2, at most 600)",
    )
    p.add_argument(
        "--span",
        type=number(0, 90, low_open=True),
        default=2.0,
        metavar="DEG",
        help="half-width of the coarse scan (deg; narrowed to keep the detector dark)",
    )
    p.add_argument(
        "--points",
        type=number(5, 1001, integer=True),
        default=21,
        help="points per scan (default 21; 5 to 1001)",
    )
    p.add_argument(
        "--rounds",
        type=number(1, 50, integer=True),
        default=8,
        help="most scan-and-fit rounds (default 8; at most 50)",
    )
    p.add_argument(
        "--seed",
        type=number(0, 2**63 - 1, integer=True),
        help="seed of the simulated devices (default: fresh)",
    )
    p.add_argument(
        "--write",
        action="store_true",
        help="store the found offset in the bench file (comments kept)",
    )
    add_json_flag(p)
    p.set_defaults(handler=run)


def run(args: argparse.Namespace) -> int:
    """Run the search and report."""
    from ..bench import ensure_writable, load_bench, write_values
    from ..errors import InputError
    from ..run.station import Station, shutter_words
    from .common import device_overrides, emit_json
    from .fit import print_table

    bench = load_bench(args.bench)
    target = ensure_writable(bench.path) if args.write else None  # the demo bench is refused
    name = args.mount or bench.analyzer.mount
    if name not in bench.mounts:
        raise InputError(
            f"--mount {name!r}: no such mount; the bench has: {', '.join(bench.mounts)}"
        )
    bench.detector.require_safe_rate(bench.path)
    if not args.json:
        print(SAFETY, file=sys.stderr)
    overrides = {"pointer": ("none", None), **device_overrides(args)}
    with Station.open(bench, overrides=overrides, seed=args.seed) as station:
        result = station.null_search(
            name,
            dwell_s=args.dwell,
            span_deg=args.span,
            points=args.points,
            max_rounds=args.rounds,
        )
        shutter = shutter_words(result.shutter)
    updates = result.last_fit.bench_updates()
    if target is not None and result.converged:
        write_values(target, updates)
    doc = {**result.to_json(), "written": updates if args.write and result.converged else {}}
    if args.json:
        emit_json(doc)
        return 0 if result.converged else 2
    rows = [
        (
            "null reading",
            f"{result.null_reading_deg:.4f} +/- {result.null_reading_err_deg:.4f} deg",
        ),
        ("mount now at", f"{result.final_reading_deg:.4f} deg"),
        (
            "effective extinction ratio (all that fills the null)",
            f"{result.last_fit.extinction_ratio:.3g}",
        ),
        ("rounds", str(result.rounds)),
        ("counter reads", str(result.counter_reads)),
        ("shutter", shutter),
    ]
    notes = [result.message]
    if doc["written"]:
        notes.append(
            f"written to {bench.path}: "
            + ", ".join(f"{key} = {value:.6g}" for key, value in doc["written"].items())
        )
    elif args.write:
        notes.append("nothing written: the search did not converge")
    print_table(f"null search of {name}", rows, notes)
    return 0 if result.converged else 2
