"""Command-line front end: thin argparse wrappers around the engine.

Each command lives in its own module here, exposing ``register(subparsers)`` (argument set-up,
cheap to import) and ``run(args) -> int``. Heavy imports (numpy, scipy, sympy, textual) happen
inside ``run`` so that ``aligner --help`` stays fast.

Exit status: 0 success, 2 bad input or an infeasible request, 3 a device fault. Errors are one
plain sentence on stderr; ``--debug`` shows the traceback too.
"""

from __future__ import annotations

import argparse
import importlib
import sys
from collections.abc import Sequence

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

    parser = argparse.ArgumentParser(
        prog="aligner",
        description="Plan, align and log weak-value amplification measurements on polarization "
        "interferometers. Run 'aligner COMMAND --help' for each command. "
        "Laser safety: follow your local laser-safety rules and your laser safety officer; "
        "never expose a single-photon detector to a bright beam.",
    )
    parser.add_argument("--version", action="version", version=f"aligner {__version__}")
    parser.add_argument("--debug", action="store_true", help="show a traceback on errors")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in COMMANDS:
        try:
            module = importlib.import_module(f"{__name__}.{name}")
        except ModuleNotFoundError as exc:
            if exc.name != f"{__name__}.{name}":
                raise
            continue
        module.register(sub)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``aligner`` console script."""
    from ..errors import AlignerError

    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "handler", None):
        parser.print_help()
        return 0
    try:
        return int(args.handler(args) or 0)
    except AlignerError as exc:
        if args.debug:
            raise
        print(f"aligner {args.command}: {exc}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        print(f"aligner {args.command}: interrupted.", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return 0
