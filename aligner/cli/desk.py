"""``aligner desk BENCH [--db FILE]``: the operator's terminal desk for one bench."""

from __future__ import annotations

import argparse

from .common import add_bench_argument

__all__ = ["register", "run"]


def register(sub: argparse._SubParsersAction) -> None:
    """Create the ``desk`` subparser."""
    parser = sub.add_parser(
        "desk",
        help="terminal desk: bench, plan, sweep, meter, devices and run log",
        description="A keyboard-driven terminal desk for one bench: edit readings and see the "
        "prediction, the limits and the working point at once, plan a target amplification, "
        "run sweeps on the bench's declared devices ('sim' devices for the demo), watch the "
        "count rate while turning a mount (the meter), check every device's kind and state, "
        "and browse the run log. F1 lists the keys of the screen, F2-F8 switch screens, "
        "Ctrl+Q quits (while a sweep runs it asks first, then pauses the sweep: the count in "
        "progress stops, mounts stopped, shutter shut). SIGTERM, SIGHUP and SIGINT end the "
        "desk the same way. Works in an "
        "80x24 terminal and uses more room when there is more. Laser safety: follow your "
        "local laser-safety rules and your laser safety officer; never expose a "
        "single-photon detector to a bright beam.",
    )
    add_bench_argument(parser)
    parser.add_argument(
        "--db",
        metavar="FILE",
        help="run log (SQLite); default: runs.sqlite in the user data folder",
    )
    parser.set_defaults(handler=run)


def run(args: argparse.Namespace) -> int:
    """Build the desk for ``args.bench`` and run it until the operator quits (or a signal
    ends it: then ``SignalInterrupt``, after the bench is secured)."""
    from ..errors import SignalInterrupt
    from ..tui.app import make_app

    app = make_app(args.bench, db=args.db, realtime=True, catch_signals=True)
    try:
        app.run()
    finally:  # a signal or an error ends the desk too: pause a sweep, shut the shutter
        app.backend.shutdown()
    if app.signalled is not None:
        raise SignalInterrupt(app.signalled)
    return int(app.return_code or 0)
