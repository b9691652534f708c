"""``aligner log``: list, show, export, annotate and report logged runs."""

from __future__ import annotations

import argparse
from typing import Any

from .common import add_json_flag, run_id


def register(sub: argparse._SubParsersAction) -> None:
    """Create the ``log`` subcommand and its actions."""
    parser = sub.add_parser(
        "log",
        help="read the run log: list, show, export, note, report",
        description="Read and annotate the run log written by 'aligner sweep'.",
    )
    actions = parser.add_subparsers(dest="action", metavar="ACTION", required=True)

    def action(name: str, help_text: str) -> argparse.ArgumentParser:
        p = actions.add_parser(name, help=help_text, description=help_text)
        p.add_argument(
            "--db",
            metavar="FILE",
            help="run-log file (default: runs.sqlite in the user data folder)",
        )
        p.set_defaults(handler=run)
        return p

    add_json_flag(action("list", "list the runs"))
    show = action("show", "show one run: header, points and events")
    show.add_argument("run", metavar="RUN", type=run_id)
    add_json_flag(show)
    export = action("export", "write a run's points as CSV")
    export.add_argument("run", metavar="RUN", type=run_id)
    export.add_argument("--csv", metavar="FILE", required=True, help="CSV file to write")
    export.add_argument("--force", action="store_true", help="replace an existing CSV file")
    note = action("note", "add an operator note to a run")
    note.add_argument("run", metavar="RUN", type=run_id)
    note.add_argument("text", metavar="TEXT", nargs="+")
    report = action("report", "write a Markdown summary and a plot of a run")
    report.add_argument("run", metavar="RUN", type=run_id)
    report.add_argument("--out", metavar="DIR", required=True, help="folder to write into")
    report.add_argument("--force", action="store_true", help="replace a report already there")
    add_json_flag(report)
    rescue = action(
        "salvage",
        "copy the readable runs of a damaged run log (--db) into a new file (--out)",
    )
    rescue.add_argument("--out", metavar="FILE", required=True, help="new run-log file")
    add_json_flag(rescue)


def _show_recipe(console: Any, log: Any, run_id: int, as_json: bool) -> None:
    """``log show`` of a recipe run: its header, devices, every step and the events."""
    from ..recipe.report import step_lines
    from ..run.report import device_lines
    from ..text import safe_text
    from .common import emit_json

    record, steps, events = log.run(run_id), log.recipe_steps(run_id), log.events(run_id)
    recipe = log.recipe_run(run_id)
    if as_json:
        emit_json(
            {
                **record.to_json(),
                **recipe.to_json(),
                "provenance": record.provenance,
                "steps": [row.outcome for row in steps],
                "events": [e.to_json() for e in events],
            }
        )
        return
    console.print(
        safe_text(
            f"run {record.id}: recipe {recipe.name} ({recipe.path}), {record.status} "
            f"({record.data_label}), {len(steps)} of {recipe.steps} steps logged, bench "
            f"{record.bench_name}" + (f"\n{record.message}" if record.message else "")
        )
    )
    for line in (*device_lines(record), *step_lines(steps)):
        console.print(f"  {safe_text(line)}")
    for e in events:
        console.print(f"{e.t_utc[:19]} {e.kind}: {safe_text(e.message)}")


def run(args: argparse.Namespace) -> int:
    """Carry out one ``log`` action."""
    from rich.table import Table

    from ..run.log import RunLog
    from ..run.report import device_lines, export_csv, write_report
    from ..run.result import result_lines, run_result_or_reason
    from ..text import safe_text
    from .common import console as make_console
    from .common import emit_json

    console = make_console()
    if args.action == "salvage":
        return _salvage(args, console)
    with RunLog(args.db, create=args.action == "note") as log:
        if args.action == "list":
            runs = log.runs()
            if args.json:
                emit_json({"db": str(log.path), "runs": [r.to_json() for r in runs]})
                return 0
            table = Table(title=f"runs in {safe_text(log.path)}")
            for column in ("run", "status", "data", "points", "schedule", "bench", "started"):
                table.add_column(column)
            for r in runs:
                recipe = r.kind == "recipe"
                table.add_row(
                    str(r.id),
                    r.status,
                    r.data_label,
                    f"{len(log.recipe_steps(r.id))}/{r.planned} steps"
                    if recipe
                    else f"{r.points}/{r.planned}",
                    safe_text(f"recipe {r.schedule}" if recipe else r.schedule),
                    safe_text(r.bench_name),
                    r.started_utc[:19].replace("T", " ") + " UTC",
                )
            console.print(table)
        elif args.action == "show" and log.run(args.run).kind == "recipe":
            _show_recipe(console, log, args.run, args.json)
        elif args.action == "show":
            record, points, events = log.run(args.run), log.points(args.run), log.events(args.run)
            result, why = run_result_or_reason(record, points)
            if args.json:
                emit_json(
                    {
                        **record.to_json(),
                        "provenance": record.provenance,
                        "points": [p.to_json() for p in points],
                        "events": [e.to_json() for e in events],
                        "result": None if result is None else result.to_json(),
                        "result_note": why,
                    }
                )
                return 0
            console.print(
                safe_text(
                    f"run {record.id}: {record.status} ({record.data_label}), "
                    f"{record.points}/{record.planned} points, schedule {record.schedule}, "
                    f"bench {record.bench_name}" + (f"\n{record.message}" if record.message else "")
                )
            )
            for line in device_lines(record):
                console.print(f"  {safe_text(line)}")
            if result is None:
                console.print(safe_text(why))
            else:
                for table in _points_tables(result, points):
                    console.print(table)
                for line in result_lines(result):
                    console.print(safe_text(line))
            for e in events:
                console.print(f"{e.t_utc[:19]} {e.kind}: {safe_text(e.message)}")
        elif args.action == "export":
            n = export_csv(log.run(args.run), log.points(args.run), args.csv, overwrite=args.force)
            console.print(f"wrote {n} points of run {args.run} to {safe_text(args.csv)}")
        elif args.action == "note":
            log.note(args.run, " ".join(args.text))
            console.print(f"note added to run {args.run}")
        else:
            record = log.run(args.run)
            if record.kind == "recipe":
                from ..recipe.report import write_recipe_report

                report = write_recipe_report(
                    record,
                    log.recipe_run(args.run),
                    log.recipe_steps(args.run),
                    log.events(args.run),
                    args.out,
                )
            else:
                report = write_report(
                    record,
                    log.points(args.run),
                    log.events(args.run),
                    args.out,
                    overwrite=args.force,
                )
            if args.json:
                emit_json({"run": record.id, "data": record.data_label, **report.to_json()})
                return 0
            console.print(
                safe_text(
                    f"wrote {report.markdown}"
                    + (f" and {report.plot}" if report.plot else f" ({report.note})")
                )
            )
            if report.result is not None:
                console.print(safe_text(report.result.headline))
    return 0


def _short(value: float) -> str:
    """A number in at most about 8 characters: 3 digits, powers of ten outside 1e-3..1e5."""
    return f"{value:.3g}" if value == 0 or 1e-3 <= abs(value) < 1e5 else f"{value:.1e}"


def _points_tables(result: Any, points: Any) -> list[Any]:
    """The points of a sweep run: counts and leak against the prediction; and, when the run
    has pointer readings, the pointer shift against its linear and exact predictions with the
    measured amplification."""
    from rich import box
    from rich.table import Table

    from ..text import safe_text

    counts = Table(title="counts")
    for column in ("#", "reading (deg)", "imbalance (deg)", "counts", "reference", "leak",
                   "predicted"):  # fmt: skip
        counts.add_column(column, justify="right")
    pointer = Table(
        title=f"pointer shift ({safe_text(result.units)}) and amplification",
        caption="imb.: imbalance (deg); lin., exact: predicted to first and all orders; "
        "z = (shift - exact) / s.e.; ampl. = shift / " + safe_text(result.amplification_basis),
        box=box.SIMPLE_HEAD,
        pad_edge=False,
        show_edge=False,
        padding=(0, 1),
        collapse_padding=True,
    )
    for column in ("#", "imb.", "shift", "s.e.", "exact", "z", "ampl.", "s.e.", "lin.",
                   "exact"):  # fmt: skip
        pointer.add_column(column, justify="right")
    for r, p in zip(result.points, points, strict=True):
        counts.add_row(
            str(r.idx),
            f"{r.reading_deg:.4f}",
            f"{r.imbalance_deg:+.3f}",
            str(p.counts),
            "-" if p.reference is None else str(p.reference),
            safe_text(r.flag) if r.leak is None else f"{r.leak:.3e}",
            f"{r.predicted_leak:.3e}",
        )
        if r.pointer is not None and r.pointer_err:
            pointer.add_row(
                str(r.idx),
                f"{r.imbalance_deg:+.3f}",
                *map(_short, (r.pointer, r.pointer_err, r.exact_shift)),
                f"{r.residual_sigma:+.1f}",
                *map(_short, (r.amplification, r.amplification_err)),
                *map(_short, (r.amplification_linear, r.amplification_exact)),
            )
    return [counts, pointer] if pointer.row_count else [counts]


def _salvage(args: argparse.Namespace, console: Any) -> int:
    from ..run.log import default_db_path, salvage
    from ..text import safe_text
    from .common import emit_json

    result = salvage(args.db or default_db_path(), args.out)
    if args.json:
        emit_json(result.to_json())
        return 0
    console.print(
        safe_text(
            f"copied {result.runs} runs, {result.points} points and {result.events} events "
            f"from {result.source} into {result.out}"
        )
    )
    for item in result.lost:
        console.print(f"  not readable: {safe_text(item)}")
    return 0
