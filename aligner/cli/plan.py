"""``aligner plan BENCH (--amplification X [--axis re|im] [--exact] | --weak-value RE,IM |
--leak-rate P) [--free MOUNT] [--branch N] [--samples N] [--json] [--write]``: where to set the
mounts for a target, how precisely they must sit, and the alternatives."""

from __future__ import annotations

import argparse
import math
from typing import Any

from .common import add_bench_argument, emit_json, laser_safety, number

SAFETY = laser_safety("check the expected detector rate before exposing a single-photon detector.")


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``plan`` command."""
    parser = sub.add_parser(
        "plan",
        help="mount readings for a target amplification, weak value or leak rate",
        description="Solve the full bench model for the mount readings that give a target "
        "amplification, complex weak value or leak rate; list every solution branch inside "
        "the travel, round to the mounts' resolution, and estimate how precisely the mounts "
        "must sit (Monte Carlo tolerance budget). Readings of a mount 180 deg apart set the "
        "same optics (polarizers, waveplates, rotators), and 90 deg apart for a half-wave "
        "plate of exactly half a wave, so they are one branch; the table "
        "shows the reading nearest the current one and how many equivalent readings the "
        "travel holds. Exit status 2 when the target is beyond the bench's limits or an "
        "argument is wrong: the message goes to stderr, and with --json nothing is printed on "
        "stdout. " + SAFETY,
    )
    add_bench_argument(parser)
    target = parser.add_mutually_exclusive_group(required=True)
    target.add_argument(
        "--amplification",
        type=number(1e-3, 1e6),
        metavar="X",
        help="size of the amplification, 0.001 to 1e6 (both signs are offered as branches)",
    )
    target.add_argument("--weak-value", metavar="RE,IM", help="complex weak value, e.g. 20,-5")
    target.add_argument(
        "--leak-rate",
        type=number(1e-15, 1),
        metavar="P",
        help="post-selection probability per source photon, in (0, 1]",
    )
    parser.add_argument(
        "--axis",
        choices=("re", "im"),
        default=None,
        help="amplification axis (default: the bench's readout: position and "
        "phase -> re, momentum -> im)",
    )
    parser.add_argument(
        "--exact",
        action="store_true",
        help="target the exact (all-orders) pointer response, not Re/Im A_w",
    )
    parser.add_argument(
        "--free",
        metavar="MOUNT",
        action="append",
        default=[],
        help="also solve for this mount (repeatable)",
    )
    parser.add_argument(
        "--branch",
        type=number(0, 10_000, integer=True),
        metavar="N",
        help="use branch N (a row of the branch table: a distinct optical "
        "setting, at its reading nearest the current one) instead of the "
        "default, the weak-regime setting nearest the current readings",
    )
    parser.add_argument(
        "--samples",
        type=number(0, 10_000_000, integer=True),
        default=100_000,
        metavar="N",
        help="Monte Carlo samples of the tolerance budget (0 skips it; default 100000; at most "
        "1e7)",
    )
    parser.add_argument(
        "--json",
        action="store_true",
        help="print one JSON document on stdout (keys: target, unknowns, "
        "readings, chosen, branches with equivalent_readings, quantized, "
        "predict, sensitivity, tolerance, warnings, message; every key in "
        "docs/json.md); on an error stdout stays empty, the message goes to "
        "stderr, exit status 2",
    )
    parser.add_argument(
        "--write",
        action="store_true",
        help="store the rounded readings in the bench file (comments kept)",
    )
    parser.set_defaults(handler=run)


def parse_weak_value(text: str) -> complex:
    """``"20,-5"`` -> ``20-5j``, with an error naming the option otherwise."""
    from ..errors import InputError

    parts = text.split(",")
    try:
        re_part, im_part = (float(p) for p in parts)
    except ValueError:
        raise InputError(
            f"--weak-value {text!r}: expected RE,IM (two numbers), e.g. --weak-value 20,-5"
        ) from None
    if not (math.isfinite(re_part) and math.isfinite(im_part)):
        raise InputError(f"--weak-value {text!r}: both parts must be finite numbers")
    return complex(re_part, im_part)


def run(args: argparse.Namespace) -> int:
    """Plan, then print JSON or readable tables; ``--write`` stores the rounded readings."""
    from ..bench import ensure_writable, load_bench, write_values
    from ..errors import InputError
    from ..planning import plan

    bench = load_bench(args.bench)
    if args.samples < 0:
        raise InputError(f"--samples {args.samples}: must be 0 (skip) or a positive count")
    if args.write:
        ensure_writable(bench.path)  # before any work: the demo bench is not written to
    weak = parse_weak_value(args.weak_value) if args.weak_value is not None else None
    result = plan(
        bench,
        args.amplification,
        axis=args.axis,
        exact=args.exact,
        weak_value=weak,
        leak_rate=args.leak_rate,
        free=tuple(args.free),
        branch=args.branch,
        samples=args.samples,
    )
    if args.write:
        assert bench.path is not None
        write_values(
            bench.path,
            {
                f"mounts.{name}.reading_deg": value
                for name, value in result.quantized.settings.items()
            },
        )
    if args.json:
        emit_json(result.to_dict())
    else:
        _print(bench, result, wrote=args.write)
    return 0


def _one_percent(deg: float) -> str:
    return "> 360 (no effect)" if not deg <= 360.0 else f"{deg:.3g}"


def _print(bench: Any, result: Any, *, wrote: bool) -> None:
    from rich.table import Table

    from ..text import safe_text
    from .common import console as make_console

    console = make_console()
    q = result.quantized
    sens = {s.mount: s for s in result.sensitivity}
    settings = Table(
        title=f"{safe_text(bench.name or 'bench')}: planned readings, {result.quantity}"
    )
    for column in (
        "mount",
        "exact (deg)",
        "set to (deg)",
        "step (deg)",
        "d value/d reading",
        "1 % change (deg)",
    ):
        settings.add_column(column, justify="left" if column == "mount" else "right")
    for name, mount in bench.mounts.items():
        exact = result.settings.get(name)
        settings.add_row(
            safe_text(name),
            "fixed" if exact is None else f"{exact:.6f}",
            f"{q.settings.get(name, mount.reading_deg):.6g}",
            f"{mount.resolution_deg:g}",
            f"{sens[name].derivative:.4g} /deg",
            _one_percent(sens[name].reading_for_1pct_deg),
        )
    console.print(settings)

    branches = Table(title="solution branches, one per optical setting (* = chosen)")
    branches.add_column("#", justify="right")
    for name in result.unknowns:
        branches.add_column(f"{safe_text(name)} (deg)", justify="right")
    for column in ("regime", "imbalance (deg)", "value", "leak rate", "equiv."):
        branches.add_column(column, justify="left" if column == "regime" else "right")
    for b in result.branches:
        branches.add_row(
            f"{b.index}{'*' if b.index == result.chosen else ''}",
            *(f"{b.settings[n]:.4f}" for n in result.unknowns),
            "floor" if b.regime == "extinction floor" else b.regime,
            f"{b.imbalance_deg:+.5g}",
            f"{b.value:.6g}",
            f"{b.leak_rate:.4g}",
            str(len(b.equivalent_readings)),
        )
    console.print(branches)
    console.print(
        "floor: inside the extinction floor (leaked light dominates, touchy). "
        "imbalance > 0: high-reading side of the null. equiv.: readings inside the "
        "travel that set the same optics (180 deg apart on a mount, 90 deg for a mount "
        "holding only half-wave plates of exactly half a wave); the row shows "
        "the one nearest the current readings, --json lists them all "
        "(branches[].equivalent_readings)."
    )

    tol = result.tolerance
    if tol is not None:
        table = Table(title=f"tolerance budget ({tol.samples} Monte Carlo samples)")
        for column in ("quantity", "median", "68 % range", "95 % range"):
            table.add_column(column, justify="left" if column == "quantity" else "right")
        for label, s in (("value", tol.figure), ("leak rate", tol.leak_rate)):
            table.add_row(
                label,
                f"{s.median:.5g}",
                f"{s.low68:.5g} .. {s.high68:.5g}",
                f"{s.low95:.5g} .. {s.high95:.5g}",
            )
        console.print(table)
        errors = Table(title="each error alone (68 % half-width of the value)")
        errors.add_column("error")
        errors.add_column("half-width", justify="right")
        for label, width in sorted(tol.by_source.items(), key=lambda kv: -kv[1]):
            errors.add_row(safe_text(label), f"{width:.4g}")
        errors.add_row("first-order propagation, all (std)", f"{tol.first_order_std:.4g}")
        console.print(errors)
    console.print(safe_text(result.message))
    if wrote:
        console.print(safe_text(f"Stored the rounded readings in {bench.path}."))
