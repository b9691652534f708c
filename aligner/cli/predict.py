"""``aligner predict BENCH [--set MOUNT=READING_DEG ...] [--json]``: what the bench does at some
readings (weak value, leak rate, amplification, detector rate, SNR) and where the amplification
stops growing."""

from __future__ import annotations

import argparse
from typing import Any

from .common import (
    add_bench_argument,
    add_json_flag,
    add_set_argument,
    emit_json,
    laser_safety,
    parse_settings,
)

SAFETY = laser_safety(
    "block the beam before exposing a single-photon detector to a rate near its limit."
)


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``predict`` command."""
    parser = sub.add_parser(
        "predict",
        help="predict weak value, leak rate, amplification and detector rate",
        description="Predict the weak value, leak rate, amplification, detector rate and "
        "signal to noise of a bench at its mount readings (those in the file unless --set), "
        "and the largest amplification the bench allows. " + SAFETY,
    )
    add_bench_argument(parser)
    add_set_argument(parser)
    add_json_flag(parser)
    parser.set_defaults(handler=run)


def run(args: argparse.Namespace) -> int:
    """Print the prediction block (JSON) or readable tables."""
    from ..bench import load_bench
    from ..errors import InputError

    bench = load_bench(args.bench)
    settings = parse_settings(args.set)
    for name, value in settings.items():
        if name not in bench.mounts:
            raise InputError(
                f"--set {name}={value:g}: unknown mount {name!r}; the bench has: "
                f"{', '.join(bench.mounts)}"
            )
        low, high = bench.mounts[name].travel_deg
        if not low <= value <= high:
            raise InputError(
                f"--set {name}={value:g}: outside the mount's travel [{low:g}, {high:g}] deg"
            )
    from ..prediction import best_snr_imbalance, block_of, limits, predict

    readings = {**bench.readings(), **settings}
    prediction, lim = predict(bench, readings), limits(bench, readings)
    block = block_of(prediction, lim)
    if args.json:
        emit_json(block)
        return 0

    diluted = float(prediction.signal_fraction) * block["amplification"]["exact"]
    _print_tables(bench, readings, block, diluted, lim, best_snr_imbalance(bench, settings))
    return 0


def _print_tables(
    bench: Any,
    readings: dict[str, float],
    block: dict[str, Any],
    diluted: float,
    lim: Any,
    choice: Any,
) -> None:
    from rich.console import Console
    from rich.table import Table

    from ..prediction import format_weak_value

    console = Console()
    axis = "Re A_w" if lim.axis == "re" else "Im A_w"
    mounts = Table(title=f"{bench.name or 'bench'}: mounts")
    for column in ("mount", "reading (deg)", "element angle (deg)"):
        mounts.add_column(column, justify="right" if "deg" in column else "left")
    for name, angle in block["angles_deg"].items():
        mounts.add_row(name, f"{readings[name]:.4f}", f"{angle:.4f}")
    console.print(mounts)

    det = block["detector"]
    wv = block["weak_value"]
    rows = [
        ("imbalance", f"{block['imbalance_deg']:.5g}", "deg"),
        ("weak value A_w", format_weak_value(complex(wv["re"], wv["im"])), ""),
        ("leak rate", f"{block['leak_rate']:.5g}", "per source photon"),
        (f"amplification, linear ({axis})", f"{block['amplification']['linear']:.5g}", ""),
        ("amplification, exact", f"{block['amplification']['exact']:.5g}", ""),
        ("  as seen with dark counts", f"{diluted:.5g}", "exact x signal share of counts"),
        ("pointer shift", f"{block['pointer_shift']:.5g}", block["units"]),
        ("detector rate (incl. dark)", f"{det['rate']:.5g}", "counts/s"),
        ("measured rate (dead time)", f"{det['measured_rate']:.5g}", "counts/s"),
        ("saturated", "yes" if det["saturated"] else "no", ""),
        (
            "above safe rate",
            "YES" if det["over_safe_rate"] else "no",
            f"safe rate {bench.detector.safe_rate:g} counts/s",
        ),
        ("SNR of the coupling", f"{block['snr_per_sqrt_s']:.4g}", "per sqrt(s)"),
    ]
    table = Table(title="prediction")
    table.add_column("quantity")
    table.add_column("value", justify="right")
    table.add_column("unit")
    for row in rows:
        table.add_row(*row)
    console.print(table)

    caps = Table(title="where the amplification stops")
    caps.add_column("mechanism")
    caps.add_column("max |amplification|", justify="right")
    caps.add_column("at imbalance (deg)", justify="right")
    for key, item in lim.mechanisms.items():
        caps.add_row(
            f"{key} alone", f"{item.max_amplification:.5g}", f"{item.at_imbalance_deg:.4g}"
        )
    caps.add_row("all together", f"{lim.max_amplification:.5g}", f"{lim.at_imbalance_deg:.4g}")
    console.print(caps)
    console.print(lim.explanation)
    console.print(
        f"One {bench.imbalance_mount} step changes the exact amplification by "
        f"{lim.step_error:.3g} at this reading."
    )
    console.print(choice.message)
    if det["over_safe_rate"] or det["saturated"]:
        console.print(
            "[bold red]Warning:[/] at these readings the detector would be "
            + ("above its safe rate" if det["over_safe_rate"] else "saturated")
            + "; do not open the shutter."
        )
    console.print(SAFETY)
