"""``aligner desk BENCH [--db FILE]``: the operator's terminal desk for one bench."""

from __future__ import annotations

import argparse

from .common import add_bench_argument

__all__ = ["register", "run"]


def register(sub: argparse._SubParsersAction) -> None:
    """Create the ``desk`` subparser."""
    parser = sub.add_parser(
        "desk",
        help="terminal desk: bench, plan, sweep and run log in one screen",
        description="A keyboard-driven terminal desk for one bench: edit readings and see the "
        "prediction and the limits at once, plan a target amplification, run sweeps on the "
        "bench's devices ('sim' devices for the demo) and browse the run log. F1-F4 switch "
        "screens, Ctrl+Q quits (a running sweep is paused first: mounts stopped, shutter shut). "
        "Laser safety: follow your local laser-safety rules and your laser safety officer; "
        "never expose a single-photon detector to a bright beam.",
    )
    add_bench_argument(parser)
    parser.add_argument(
        "--db",
        metavar="FILE",
        help="run log (SQLite); default: runs.sqlite in the user data folder",
    )
    parser.set_defaults(handler=run)


def run(args: argparse.Namespace) -> int:
    """Build the desk for ``args.bench`` and run it until the operator quits."""
    from ..tui.app import make_app

    app = make_app(args.bench, db=args.db, realtime=True)
    try:
        app.run()
    finally:  # a signal or an error ends the desk too: pause a sweep, shut the shutter
        app.backend.shutdown()
    return int(app.return_code or 0)
