"""Command-line front end: thin argparse wrappers around the engine.

Each command lives in its own module here, exposing ``register(subparsers)`` (argument set-up,
cheap to import) and ``run(args) -> int``. Heavy imports (numpy, scipy, sympy, textual) happen
inside ``run`` so that ``aligner --help`` stays fast.

Exit status (one table for every command, :data:`aligner.errors.EXIT_STATUS`): 0 success, 1 an
internal error, 2 bad input or an infeasible request, 3 a device fault, a guard stop or a run
log that cannot be written, 130 Ctrl-C, 128 + N signal N. SIGTERM and SIGHUP are turned into
:class:`aligner.errors.SignalInterrupt`, so a run they stop ends like one stopped by Ctrl-C:
shutter shut, run resumable. Errors are one plain sentence on stderr; ``--debug`` shows the
traceback too.
"""

from __future__ import annotations

import argparse
import importlib
import os
import signal
import sys
from collections.abc import Iterator, Sequence
from contextlib import contextmanager

__all__ = ["build_parser", "main"]

#: Command modules in the order ``aligner --help`` lists them.
COMMANDS = (
    "predict",
    "plan",
    "derive",
    "leak",
    "fit",
    "null",
    "sweep",
    "log",
    "recipe",
    "device",
    "desk",
)


def build_parser() -> argparse.ArgumentParser:
    """The full parser with every command registered."""
    from .. import __version__
    from .common import AlignerParser

    parser = AlignerParser(
        prog="aligner",
        description="Plan, align and log weak-value amplification measurements on polarization "
        "interferometers. Run 'aligner COMMAND --help' for each command. "
        "Laser safety: follow your local laser-safety rules and your laser safety officer; "
        "never expose a single-photon detector to a bright beam.",
    )
    parser.add_argument("--version", action="version", version=f"aligner {__version__}")
    parser.add_argument("--debug", action="store_true", help="show a traceback on errors")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=AlignerParser)
    for name in COMMANDS:
        try:
            module = importlib.import_module(f"{__name__}.{name}")
        except ModuleNotFoundError as exc:
            if exc.name != f"{__name__}.{name}":
                raise
            continue
        module.register(sub)
    return parser


@contextmanager
def _signals_as_interrupts() -> Iterator[None]:
    """While the command runs, SIGTERM and SIGHUP raise ``SignalInterrupt`` in the main thread
    (as Ctrl-C raises ``KeyboardInterrupt``), so every run ends through its cleanup."""
    from ..errors import SignalInterrupt

    def raise_interrupt(signum: int, _frame: object) -> None:
        raise SignalInterrupt(signum)

    import threading

    if threading.current_thread() is not threading.main_thread():  # e.g. main() in a test thread
        yield
        return
    wanted = [getattr(signal, name) for name in ("SIGTERM", "SIGHUP") if hasattr(signal, name)]
    previous = {signum: signal.signal(signum, raise_interrupt) for signum in wanted}
    try:
        yield
    finally:
        for signum, handler in previous.items():
            signal.signal(signum, handler)


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``aligner`` console script."""
    from ..errors import AlignerError, SignalInterrupt

    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # a usage error (status 2) or --help/--version (status 0)
        return int(exc.code or 0) if not isinstance(exc.code, str) else 2
    if not getattr(args, "handler", None):
        parser.print_help()
        return 0
    try:
        with _signals_as_interrupts():
            return int(args.handler(args) or 0)
    except AlignerError as exc:
        if args.debug:
            raise
        print(f"aligner {args.command}: {exc}", file=sys.stderr)
        return exc.exit_code
    except SignalInterrupt as exc:
        print(f"aligner {args.command}: stopped by {exc.cause}.", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        print(f"aligner {args.command}: interrupted.", file=sys.stderr)
        return 130
    except BrokenPipeError:  # the reader of plain output went away: nothing more to say
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0
    except Exception as exc:  # a bug: say so in one line, keep the traceback for --debug
        if args.debug:
            raise
        print(
            f"aligner {args.command}: internal error ({type(exc).__name__}: {exc}); any run "
            "was stopped with its shutter shut and can be resumed. Please report this with "
            "the output of 'aligner --debug ...'",
            file=sys.stderr,
        )
        return 1
