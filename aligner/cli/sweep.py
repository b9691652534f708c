"""``aligner sweep``: step the imbalance mount through a schedule, count, and log every point."""

from __future__ import annotations

import argparse
import sys
from typing import Any

from ..run.schedule import DWELL_RANGE_S, REPEATS_RANGE, SETTLE_RANGE_S
from .common import add_bench_argument, add_device_arguments, add_json_flag, number, run_id

#: The schedule's parameters -> this command's options.
FLAGS = {
    "schedule": "--schedule",
    "dwell_s": "--dwell",
    "settle_s": "--settle",
    "repeats": "--repeats",
}

SAFETY = (
    "Safety: lasers and single-photon detectors can hurt people and equipment. Follow your "
    "local laser-safety rules and your laser safety officer; the detector guard is no "
    "substitute for a beam block and a shutter that fails closed."
)

SCHEDULE_HELP = """\
schedule forms (imbalance in deg, > 0 on the high-reading side of the null):
  linear:START:STOP:N         N imbalances evenly spaced (linear:0.2:2.0:10)
  amplification:START:STOP:N  N amplifications log-spaced (amplification:5:60:8)
  list:V1,V2,...              explicit imbalances (list:0.3,0.6,1.2)
  outback:START:STOP:N        N imbalances out, the same N back (hysteresis)

Devices: every device opens from its declaration in the bench file (each mount's driver,
[devices.counter], [devices.shutter], [devices.pointer]); --counter/--shutter/--pointer
override those with a spec of the same kind. A bench with any real device must declare every
device (driver = "sim" simulates one on purpose). With "sim" devices the counts come from the
physics model at the simulated mounts' true angles, on simulated time (no waiting unless
--realtime), and the run is labelled SIMULATED everywhere.

Exit status: 0 complete; 2 bad input; 3 paused by a device fault, the detector guard or a
run log that cannot be written; 130 Ctrl-C; 143 SIGTERM, 129 SIGHUP, 141 a closed output
pipe. A paused run has its
shutter shut and resumes with --resume RUN.
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
    )
    add_bench_argument(parser)
    parser.add_argument("--schedule", metavar="SPEC", help="the schedule (forms below)")
    parser.add_argument(
        "--dwell",
        metavar="S",
        type=number(*DWELL_RANGE_S),
        help="count time per point, s (default 1; 0.001 to 3600; a new run only)",
    )
    parser.add_argument(
        "--settle",
        metavar="S",
        type=number(*SETTLE_RANGE_S),
        help="wait after a move before the read-back, s (default 0; at most 600; a new run only)",
    )
    parser.add_argument(
        "--repeats",
        metavar="N",
        type=number(*REPEATS_RANGE, integer=True),
        help="run the schedule N times in a row (default 1; at most 1000; a new run only)",
    )
    parser.add_argument(
        "--db", metavar="FILE", help="run-log file (default: runs.sqlite in the user data folder)"
    )
    parser.add_argument(
        "--resume",
        metavar="RUN",
        type=run_id,
        help="continue an interrupted run (its bench snapshot and schedule)",
    )
    add_device_arguments(parser)
    parser.add_argument(
        "--retries",
        metavar="N",
        type=number(0, 10, integer=True),
        default=2,
        help="retries of a device operation before pausing (default 2; at most 10)",
    )
    parser.add_argument(
        "--realtime",
        action="store_true",
        help="simulated devices take real time for moves and dwells",
    )
    parser.add_argument(
        "--seed",
        metavar="N",
        type=number(0, 2**63 - 1, integer=True),
        help="seed of the simulated devices (default: [simulation] seed, else a fresh one; "
        "the seed is logged with the run)",
    )
    add_json_flag(parser)
    parser.set_defaults(handler=run)


def _line(point: Any, done: int, total: int, mount: str) -> str:
    ratio = ""
    if point.leak is None:
        measured = f"leak -- ({point.flag})"
    else:
        value = point.leak / point.predicted_leak if point.predicted_leak > 0 else float("nan")
        ratio = f"  ratio {value:.2f}"
        measured = (
            f"leak {point.leak:.3e} [{point.leak_lo:.3e}, {point.leak_hi:.3e}]  predicted "
            f"{point.predicted_leak:.3e}"
        )
    return (
        f"#{point.idx:<3} ({done}/{total})  {mount} {point.reading_deg:9.4f} deg  imbalance "
        f"{point.imbalance_deg:+7.3f} deg  counts {point.counts:>7}  {measured}{ratio}"
    )


def run(args: argparse.Namespace) -> int:
    """Run (or resume) a sweep."""
    from ..bench import load_bench
    from ..errors import InputError, ParameterError
    from ..run.log import RunLog
    from ..run.schedule import parse_schedule
    from ..run.station import Station, StationOptions
    from ..text import safe_text
    from .common import console as make_console
    from .common import device_overrides, emit_json

    if (args.schedule is None) == (args.resume is None):
        raise InputError(
            "give --schedule SPEC for a new run, or --resume RUN to continue one (not both)"
        )
    asked = {"dwell_s": args.dwell, "settle_s": args.settle, "repeats": args.repeats}
    timing = {name: value for name, value in asked.items() if value is not None}
    if args.resume is not None and timing:
        raise InputError(
            f"{', '.join(FLAGS[name] for name in timing)} cannot change a run being resumed: "
            f"run {args.resume} keeps the schedule, dwell and settle it was logged with (start a "
            "new run to change them)"
        )
    if args.retries < 0:
        raise InputError(f"--retries must be 0 or more, got {args.retries}")
    bench = load_bench(args.bench)
    bench.detector.require_safe_rate(bench.path)
    schedule = None
    if args.schedule is not None:
        from ..run.schedule import plan_points

        try:
            schedule = parse_schedule(args.schedule, **timing)  # its defaults for the rest
        except ParameterError as exc:
            raise InputError(f"{FLAGS.get(exc.parameter, exc.parameter)} {exc.problem}") from None
        planned = plan_points(bench, schedule)  # a target the bench cannot reach stops here
    make_console(stderr=True).print(SAFETY, style="yellow")
    if schedule is not None:
        from ..run.sweep import plan_warnings

        for warning in plan_warnings(bench, schedule):
            make_console(stderr=True).print(f"warning: {safe_text(warning)}", style="yellow")
    console = make_console(stderr=args.json)
    station = Station.open(
        bench,
        overrides=device_overrides(args),
        realtime=args.realtime,
        seed=args.seed,
        options=StationOptions(retries=args.retries),
    )
    simulated = station.provenance.kinds != {"real"}
    with station, RunLog(args.db, durable=not simulated) as log:
        progress = _Progress(console, bench.imbalance_mount, log, station, quiet=args.json)
        with progress:
            if schedule is not None:
                result = station.start_sweep(
                    log, schedule, plan=planned, on_start=progress.start, on_point=progress.point
                )
            else:
                result = station.resume_sweep(
                    log, args.resume, on_start=progress.start, on_point=progress.point
                )
        record, points = log.run(result.run_id), log.points(result.run_id)
        db_path = log.path
    if args.json:
        emit_json(
            {
                **result.to_json(),
                "db": str(db_path),
                "data": record.data_label,
                "points": [p.to_json() for p in points],
            }
        )
    else:
        for note in result.notes:
            make_console(stderr=True).print(f"note: {safe_text(note)}", style="yellow")
        _summary(console, result, record, points, args, db_path)
    if result.status != "complete" and not args.json:
        print(f"aligner sweep: paused: {result.message}", file=sys.stderr)
    return result.exit_code


class _Progress:
    """The live lines and the progress bar of a sweep in the terminal (silent with --json)."""

    def __init__(self, console: Any, mount: str, log: Any, station: Any, *, quiet: bool) -> None:
        from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn

        self.console, self.mount, self.log, self.station = console, mount, log, station
        self.quiet = quiet
        self.bar = Progress(
            TextColumn("sweep"), BarColumn(), MofNCompleteColumn(), console=console, transient=True
        )
        self.task: Any = None

    def __enter__(self) -> _Progress:
        if not self.quiet:
            self.bar.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self.bar.stop()

    def start(self, run_id: int, plan: Any) -> None:
        from ..text import safe_text

        if self.quiet:
            return
        kinds = ", ".join(sorted(self.station.provenance.kinds))
        self.console.print(
            f"run {run_id}: {len(plan)} point{'s' if len(plan) != 1 else ''} on "
            f"{safe_text(self.station.bench.name or '')}, "
            f"devices: {kinds}, log {safe_text(str(self.log.path))}"
        )
        done = len(self.log.done_indices(run_id))
        self.task = self.bar.add_task("sweep", total=len(plan), completed=done)

    def point(self, point: Any, done: int, total: int) -> None:
        if self.quiet:
            return
        self.bar.console.print(_line(point, done, total, self.mount))
        self.bar.update(self.task, completed=done)
        sys.stdout.flush()


def _summary(
    console: Any,
    result: Any,
    record: Any,
    points: list[Any],
    args: argparse.Namespace,
    db_path: Any,
) -> None:
    import numpy as np
    from rich.table import Table

    from ..run.station import shutter_words
    from ..text import safe_text

    table = Table(title=f"run {result.run_id}: {result.status} ({record.data_label})")
    table.show_header = False
    table.add_row("points", f"{result.points_done} of {result.points_total}")
    measured = [p for p in points if p.leak is not None and p.predicted_leak > 0]
    if points:
        lo = min(p.imbalance_deg for p in points)
        hi = max(p.imbalance_deg for p in points)
        table.add_row("imbalance (predicted at read-back)", f"{lo:+.3f} to {hi:+.3f} deg")
    if measured:
        ratio = np.array([p.leak / p.predicted_leak for p in measured])
        spread = f"median {np.median(ratio):.3g} (range {ratio.min():.3g}-{ratio.max():.3g})"
        table.add_row("measured / predicted leak", spread)
    flagged = len(points) - len(measured)
    if flagged:
        table.add_row("points without a leak rate", f"{flagged} (see their flags: log show)")
    table.add_row("shutter", shutter_words(result.shutter))
    table.add_row("run log", safe_text(str(db_path)))
    console.print(table)
    db = f" --db {safe_text(args.db)}" if args.db else ""
    bench = safe_text(args.bench)
    if result.status == "complete":
        console.print(
            f"next: aligner log report {result.run_id} --out DIR{db}  (summary and "
            "plot for the lab notebook)"
        )
    else:
        console.print(f"resume: aligner sweep {bench} --resume {result.run_id}{db}")
