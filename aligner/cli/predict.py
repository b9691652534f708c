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

    diluted = float(prediction.amplification_seen)
    _print_tables(bench, readings, block, diluted, lim, best_snr_imbalance(bench, settings))
    return 0


def _pointer_rows(bench: Any, block: dict[str, Any], diluted: float) -> list[tuple[str, str, str]]:
    """How the pointer is read: the sensor, the shift and spread at it, the events it uses."""
    pointer = block["pointer"]
    units = block["units"]
    by = (
        "a camera (no dark-count dilution)"
        if pointer["sensor"] == "camera"
        else "the counted photons"
        + (" (heralded coincidences)" if bench.source.herald is not None else "")
    )
    rows = [
        ("pointer read from", by, pointer["method"]),
        ("pointer shift at the sensor", f"{pointer['shift']:.5g}", units),
        ("  spread of one reading (exact)", f"{pointer['spread']:.5g}", units),
        ("  events read per second", f"{pointer['reading_rate']:.5g}", "1/s"),
        ("  share carrying the shift", f"{pointer['reading_fraction']:.4g}", ""),
        ("  amplification as seen", f"{diluted:.5g}", "exact x that share"),
    ]
    if pointer["practical_amplification"] is not None and (
        bench.readout.has_geometry or bench.coupling.kind == "kick"
    ):
        rows.append(
            (
                "  practical amplification",
                f"{pointer['practical_amplification']:.5g}",
                "shift / standard shift at the sensor",
            )
        )
    if pointer["cross_phase_rad"] is not None:
        rows.append(
            (
                "  mean cross-phase to compensate",
                f"{pointer['cross_phase_rad']:.5g}",
                "rad (assumed compensated)",
            )
        )
    return rows


def _snr_rows(block: dict[str, Any], choice: Any) -> list[tuple[str, str, str]]:
    snr = block["snr"]
    rows = [
        ("SNR, centroid", f"{snr['centroid_per_sqrt_s']:.4g}", "per sqrt(s)"),
        ("  standard measurement", f"{snr['standard_centroid_per_sqrt_s']:.4g}", "per sqrt(s)"),
        ("SNR bound (Cramer-Rao)", f"{snr['information_per_sqrt_s']:.4g}", "per sqrt(s)"),
        ("  both ports", f"{snr['both_ports_per_sqrt_s']:.4g}", "per sqrt(s)"),
        (
            "  standard measurement",
            f"{snr['standard_information_per_sqrt_s']:.4g}",
            "per sqrt(s)",
        ),
        (
            "SNR, switched on/off",
            f"{snr['switched']:.4g}",
            f"in {snr['measure_s']:g} s, {snr['dwell_s']:g}-s dwells, 1/f noise included",
        ),
    ]
    for key, best in choice.best.items():
        rows.append(
            (f"  best imbalance ({key})", f"{best.imbalance_deg:.4g}", f"deg, SNR {best.snr:.4g}")
        )
    return rows


def _print_tables(
    bench: Any,
    readings: dict[str, float],
    block: dict[str, Any],
    diluted: float,
    lim: Any,
    choice: Any,
) -> None:
    from rich.table import Table

    from ..prediction import format_weak_value
    from ..text import safe_text
    from .common import console as make_console

    console = make_console()
    axis = "Re A_w" if lim.axis == "re" else "Im A_w"
    mounts = Table(title=f"{safe_text(bench.name or 'bench')}: mounts")
    for column in ("mount", "reading (deg)", "element angle (deg)"):
        mounts.add_column(column, justify="right" if "deg" in column else "left")
    for name, angle in block["angles_deg"].items():
        mounts.add_row(safe_text(name), f"{readings[name]:.4f}", f"{angle:.4f}")
    console.print(mounts)

    det = block["detector"]
    wv = block["weak_value"]
    rows = [
        ("imbalance", f"{block['imbalance_deg']:.5g}", "deg"),
        ("weak value A_w", format_weak_value(complex(wv["re"], wv["im"])), ""),
        ("leak rate", f"{block['leak']:.5g}", "per source photon"),
        (f"amplification, linear ({axis})", f"{block['amplification']['linear']:.5g}", ""),
        ("amplification, exact", f"{block['amplification']['exact']:.5g}", ""),
        *_pointer_rows(bench, block, diluted),
        ("detector rate (incl. dark)", f"{det['rate']:.5g}", "counts/s"),
        ("measured rate (dead time)", f"{det['measured_rate']:.5g}", "counts/s"),
        ("saturated", "yes" if det["saturated"] else "no", ""),
        (
            "above safe rate",
            "YES" if det["over_safe_rate"] else "no",
            f"safe rate {bench.detector.safe_rate:g} counts/s",
        ),
        *_snr_rows(block, choice),
    ]
    table = Table(title="prediction")
    table.add_column("quantity")
    table.add_column("value", justify="right")
    table.add_column("unit")
    for row in rows:
        table.add_row(*(safe_text(x) for x in row))
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
    console.print(safe_text(lim.explanation))
    console.print(
        safe_text(
            f"One {bench.imbalance_mount} step changes the exact amplification by "
            f"{lim.step_error:.3g} at this reading."
        )
    )
    console.print(safe_text(choice.message))
    if det["over_safe_rate"] or det["saturated"]:
        console.print(
            "[bold red]Warning:[/] at these readings the detector would be "
            + ("above its safe rate" if det["over_safe_rate"] else "saturated")
            + "; do not open the shutter."
        )
    console.print(SAFETY)
