"""``aligner derive BENCH [--free MOUNT] [--latex]``: the weak value and the leak rate of a bench in
closed form (sympy), with the free mounts' element angles as symbols, and their leading order
around the null."""

from __future__ import annotations

import argparse


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``derive`` command."""
    parser = sub.add_parser(
        "derive", help="closed-form weak value and leak rate of a bench (sympy)",
        description="Derive, from the bench file's optics, the weak value A_w = Tr(E A rho) / "
        "Tr(E rho) and the leak rate in closed form, with the element angles of the imbalance "
        "mount, the phase mount and any --free mount as symbols (rad), and their leading order "
        "around the null, extinction floor included. Paste-ready for lab notebooks.")
    parser.add_argument("bench", metavar="BENCH",
                        help="bench file (TOML), or 'demo' for the bundled demo bench")
    parser.add_argument("--free", metavar="MOUNT", action="append", default=[],
                        help="also keep this mount's element angle as a symbol (repeatable)")
    parser.add_argument("--latex", action="store_true", help="print LaTeX instead of plain text")
    parser.set_defaults(handler=run)


def run(args: argparse.Namespace) -> int:
    """Print the derivation."""
    from ..bench import load_bench
    from ..plan.derive import derive

    bench = load_bench(args.bench)
    print(derive(bench, tuple(args.free)).text(latex=args.latex))
    return 0
