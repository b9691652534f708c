"""``aligner derive BENCH [--free MOUNT] [--latex] [--json]``: the weak value and the leak rate of
a bench in closed form (sympy), with the free mounts' element angles as symbols, and their
leading order around the null."""

from __future__ import annotations

import argparse
import sys

from .common import add_bench_argument, emit_json


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``derive`` command."""
    parser = sub.add_parser(
        "derive",
        help="closed-form weak value and leak rate of a bench (sympy)",
        description="Derive, from the bench file's optics, the weak value A_w = Tr(E A rho) / "
        "Tr(E rho) and the leak rate in closed form, with the element angles of the imbalance "
        "mount, the phase mount and any --free mount as symbols (rad), the bench's leaks "
        "(d = 1/extinction ratio) and transmissions (T) as named symbols with their values "
        "listed, and their leading order around the null, extinction floor included. "
        "When those mounts cannot reach a null, the first other mount that lets them is freed "
        "as well and a note says which. Paste-ready for lab notebooks (--latex: a fragment "
        "for a document that loads amsmath). Takes a few seconds (sympy). Exit status 2 for a bad "
        "bench file or mount name: the message goes to stderr, and with --json nothing is "
        "printed on stdout.",
    )
    add_bench_argument(parser)
    parser.add_argument(
        "--free",
        metavar="MOUNT",
        action="append",
        default=[],
        help="also keep this mount's element angle as a symbol (repeatable)",
    )
    output = parser.add_mutually_exclusive_group()
    output.add_argument(
        "--latex",
        action="store_true",
        help="print LaTeX (symbol table and formulas) instead of plain text",
    )
    output.add_argument(
        "--json",
        action="store_true",
        help="print one JSON document: symbols (meaning, latex, value), "
        "angles, offsets, null_deg, expressions (each as text in sympy "
        "syntax and as latex; null without a series) and notes; every key in docs/json.md",
    )
    parser.set_defaults(handler=run)


def run(args: argparse.Namespace) -> int:
    """Print the derivation (a progress note on stderr for the readable forms)."""
    from ..bench import load_bench

    bench = load_bench(args.bench)
    if not args.json:
        print("deriving... (sympy, a few seconds)", file=sys.stderr, flush=True)
    from ..planning.derive import derive

    result = derive(bench, tuple(args.free))
    if args.json:
        emit_json(result.to_dict())
    else:
        print(result.text(latex=args.latex))
    return 0
