"""``aligner sweep``: step the imbalance mount through a schedule, count, and log every point."""

from __future__ import annotations

import argparse
import sys
from functools import partial
from typing import Any

from .common import add_bench_argument, add_json_flag

SAFETY = (
    "Safety: lasers and single-photon detectors can hurt people and equipment. Follow your "
    "local laser-safety rules and your laser safety officer; the detector guard is no "
    "substitute for a beam block and a shutter that fails closed."
)

SCHEDULE_HELP = """\
schedule forms (imbalance in deg, positive on the high-reading side of the null):
  linear:START:STOP:N         N imbalances evenly spaced, e.g. linear:0.2:2.0:10
  amplification:START:STOP:N  N amplifications log-spaced, e.g. amplification:5:60:8
  list:V1,V2,...              explicit imbalances, e.g. list:0.3,0.6,1.2
  outback:START:STOP:N        N imbalances out and the same N back (hysteresis check)

Devices: each mount opens from its bench entry (driver = "sim", a serial port or URL with
profile = ...); --counter/--shutter/--pointer take the same kind of spec. With "sim" devices
the counts come from the physics model at the simulated mounts' true angles, on simulated
time (no waiting unless --realtime).

Exit status: 0 complete, 3 paused by a device fault or the detector guard (resumable with
--resume RUN), 130 paused by Ctrl-C, 2 bad input.
"""


def register(sub: argparse._SubParsersAction) -> None:
    """Create the ``sweep`` subcommand."""
    parser = sub.add_parser(
        "sweep",
        help="run an imbalance sweep and log it",
        description="Step the bench's imbalance mount through a schedule, count the "
        "post-selected and reference ports at each point and log measured against "
        "predicted leak rates in the run log. " + SAFETY,
        epilog=SCHEDULE_HELP,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    add_bench_argument(parser)
    parser.add_argument("--schedule", metavar="SPEC", help="the schedule (forms below)")
    parser.add_argument(
        "--dwell", metavar="S", type=float, default=1.0, help="count time per point, s (default 1)"
    )
    parser.add_argument(
        "--settle",
        metavar="S",
        type=float,
        default=0.0,
        help="wait after a move before the read-back, s (default 0)",
    )
    parser.add_argument(
        "--repeats",
        metavar="N",
        type=int,
        default=1,
        help="run the schedule N times in a row (default 1)",
    )
    parser.add_argument(
        "--db", metavar="FILE", help="run-log file (default: runs.sqlite in the user data folder)"
    )
    parser.add_argument(
        "--resume",
        metavar="RUN",
        type=int,
        help="continue an interrupted run (its bench snapshot and schedule)",
    )
    for device in ("counter", "shutter", "pointer"):
        parser.add_argument(
            f"--{device}",
            metavar="SPEC",
            default="sim",
            help=f"{device} device spec (default sim"
            + ("" if device == "counter" else "; none for no " + device)
            + ")",
        )
        parser.add_argument(
            f"--{device}-profile", metavar="PROFILE", help=f"device profile of a serial {device}"
        )
    parser.add_argument(
        "--retries",
        metavar="N",
        type=int,
        default=2,
        help="retries of a device operation before pausing (default 2)",
    )
    parser.add_argument(
        "--realtime",
        action="store_true",
        help="simulated devices take real time for moves and dwells",
    )
    parser.add_argument(
        "--seed",
        metavar="N",
        type=int,
        help="seed of the simulated bench (default: simulation.seed)",
    )
    add_json_flag(parser)
    parser.set_defaults(handler=run)


def _line(point: Any, done: int, total: int, mount: str) -> str:
    ratio = point.leak / point.predicted_leak if point.predicted_leak > 0 else float("nan")
    return (
        f"#{point.idx:<3} ({done}/{total})  {mount} {point.reading_deg:9.4f} deg  imbalance "
        f"{point.imbalance_deg:+7.3f} deg  counts {point.counts:>7}  leak {point.leak:.3e} "
        f"[{point.leak_lo:.3e}, {point.leak_hi:.3e}]  predicted {point.predicted_leak:.3e}  "
        f"ratio {ratio:.2f}"
    )


def run(args: argparse.Namespace) -> int:
    """Run (or resume) a sweep."""
    from rich.console import Console
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn

    from ..bench import load_bench
    from ..errors import InputError
    from ..run.log import RunLog
    from ..run.schedule import parse_schedule, plan_points
    from ..run.simbench import open_devices
    from ..run.sweep import SweepOptions, resume_plan, run_sweep, start_run
    from .common import emit_json

    if (args.schedule is None) == (args.resume is None):
        raise InputError(
            "give --schedule SPEC for a new run, or --resume RUN to continue one (not both)"
        )
    if args.retries < 0:
        raise InputError(f"--retries must be 0 or more, got {args.retries}")
    Console(stderr=True).print(SAFETY, style="yellow", highlight=False)
    devices_bench = load_bench(args.bench)
    simulated = (
        all(m.driver == "sim" for m in devices_bench.mounts.values())
        and args.counter == "sim"
        and args.shutter in ("sim", "none")
        and args.pointer in ("sim", "none")
    )
    # with real devices every point is synced to disk; a simulation need not outlive power cuts
    with RunLog(args.db, durable=not simulated) as log:
        if args.resume is not None:
            record = log.run(args.resume)
            if record.status == "complete":
                raise InputError(f"run {record.id} is already complete ({record.points} points)")
            bench, plan = resume_plan(record)
            bench = _resume_bench(bench, devices_bench, record)
            dwell, settle = record.dwell_s, record.settle_s
            run_id = record.id
        else:
            schedule = parse_schedule(
                args.schedule, repeats=args.repeats, dwell_s=args.dwell, settle_s=args.settle
            )
            bench = devices_bench
            plan = plan_points(bench, schedule)
            dwell, settle = schedule.dwell_s, schedule.settle_s
            run_id = None
        devices = open_devices(
            devices_bench,
            counter=args.counter,
            counter_profile=args.counter_profile,
            shutter=args.shutter,
            shutter_profile=args.shutter_profile,
            pointer=args.pointer,
            pointer_profile=args.pointer_profile,
            realtime=args.realtime,
            seed=args.seed,
        )
        try:
            if run_id is None:
                run_id = start_run(log, bench, schedule, plan)
            options = SweepOptions(retries=args.retries)
            sweep = partial(
                run_sweep,
                bench,
                devices,
                log,
                run_id,
                plan,
                dwell_s=dwell,
                settle_s=settle,
                options=options,
            )
            if args.json:
                result = sweep()
            else:
                console = Console(highlight=False, soft_wrap=True)
                console.print(
                    f"run {run_id}: {len(plan)} points on {bench.name or args.bench}, "
                    f"dwell {dwell:g} s, log {log.path}"
                )
                with Progress(
                    TextColumn("sweep"),
                    BarColumn(),
                    MofNCompleteColumn(),
                    console=console,
                    transient=True,
                ) as progress:
                    task = progress.add_task(
                        "sweep", total=len(plan), completed=len(log.done_indices(run_id))
                    )

                    def show(point: Any, done: int, total: int) -> None:
                        progress.console.print(_line(point, done, total, bench.imbalance_mount))
                        progress.update(task, completed=done)
                        sys.stdout.flush()

                    result = sweep(on_point=show)
        finally:
            devices.close()
        points = log.points(run_id)
        db_path = log.path
    if args.json:
        emit_json(
            {
                "run": result.run_id,
                "status": result.status,
                "points_done": result.points_done,
                "points_total": result.points_total,
                "reason": result.reason,
                "message": result.message,
                "db": str(db_path),
                "points": [_point_json(p) for p in points],
            }
        )
    else:
        _summary(console, result, points, args, db_path)
    if result.status == "complete":
        return 0
    if not args.json:
        print(f"aligner sweep: paused: {result.message}", file=sys.stderr)
    return 130 if result.reason == "interrupt" else 3


def _resume_bench(logged: Any, given: Any, record: Any) -> Any:
    """The bench a resumed run continues with: the one logged at its start (so predictions stay
    comparable), but never with a laxer detector limit than the bench file given now."""
    from dataclasses import replace

    from rich.console import Console

    from ..bench import snapshot_text

    if snapshot_text(given) == record.bench_toml:
        return logged
    safe = min(logged.detector.safe_rate, given.detector.safe_rate)
    Console(stderr=True).print(
        f"note: {given.path} differs from the bench logged with run {record.id}; the run "
        f"continues with the logged bench, and the detector guard uses the lower safe_rate of "
        f"the two ({safe:.3g} counts/s).",
        style="yellow",
        highlight=False,
    )
    return replace(logged, detector=replace(logged.detector, safe_rate=safe))


def _point_json(p: Any) -> dict[str, Any]:
    return {
        "index": p.idx,
        "target": p.target,
        "reading_deg": p.reading_deg,
        "readback": p.readback,
        "counts": p.counts,
        "reference": p.reference,
        "dwell_s": p.dwell_s,
        "leak": p.leak,
        "leak_lo": p.leak_lo,
        "leak_hi": p.leak_hi,
        "predicted_leak": p.predicted_leak,
        "predicted_rate": p.predicted_rate,
        "imbalance_deg": p.imbalance_deg,
        "pointer": p.pointer,
        "pointer_err": p.pointer_err,
    }


def _summary(
    console: Any, result: Any, points: list[Any], args: argparse.Namespace, db_path: Any
) -> None:
    import numpy as np
    from rich.table import Table

    table = Table(title=f"run {result.run_id}: {result.status}", show_header=False)
    table.add_row("points", f"{result.points_done} of {result.points_total}")
    if points:
        ratio = np.array([p.leak / p.predicted_leak for p in points if p.predicted_leak > 0])
        lo = min(p.imbalance_deg for p in points)
        hi = max(p.imbalance_deg for p in points)
        table.add_row("imbalance (predicted at read-back)", f"{lo:+.3f} to {hi:+.3f} deg")
        if ratio.size:
            spread = f"median {np.median(ratio):.3g} (range {ratio.min():.3g}-{ratio.max():.3g})"
            table.add_row("measured / predicted leak", spread)
    table.add_row("run log", str(db_path))
    console.print(table)
    db = f" --db {args.db}" if args.db else ""
    if result.status == "complete":
        console.print(
            f"next: aligner log report {result.run_id} --out DIR{db}  (summary and "
            "plot for the lab notebook)"
        )
    else:
        console.print(f"resume: aligner sweep {args.bench} --resume {result.run_id}{db}")
