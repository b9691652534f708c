"""Post-selected counts -> leak rate with an exact confidence interval, and a
verdict against the bench's prediction.

Garwood interval for counted rates, Clopper-Pearson for count ratios and for clicks per pulse
in pulsed mode; dead time and dark counts are corrected bound by bound.
"""

from __future__ import annotations

import argparse
from typing import Any

from .common import add_json_flag, add_set_argument, number
from .fit import SAFETY


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``leak`` command."""
    p = sub.add_parser(
        "leak",
        help="leak rate from counts, with an exact interval",
        description=__doc__,
        epilog=SAFETY,
    )
    p.add_argument(
        "--counts",
        type=number(0, 1e15, integer=True),
        required=True,
        metavar="N",
        help="post-selected counts (clicks in pulsed mode)",
    )
    p.add_argument(
        "--dwell",
        type=number(0, 1e6, low_open=True),
        required=True,
        metavar="S",
        help="gate time (s)",
    )
    ref = p.add_mutually_exclusive_group()
    ref.add_argument(
        "--reference", type=number(0, 1e15, integer=True), metavar="N2", help="reference counts"
    )
    ref.add_argument(
        "--reference-rate",
        type=number(0, 1e15, low_open=True),
        metavar="R",
        help="full-transmission count rate (counts/s, same detector)",
    )
    p.add_argument(
        "--reference-dwell",
        type=number(0, 1e6, low_open=True),
        metavar="S",
        help="gate of the reference counts (default: --dwell)",
    )
    p.add_argument(
        "--reference-kind",
        choices=("bright", "port"),
        default="bright",
        help="bright: analyzer turned to transmission (leak = S/B); port: other "
        "port of a polarizing beam splitter (leak = S/(S+B))",
    )
    p.add_argument(
        "--relative-efficiency",
        type=number(0, 1e6, low_open=True),
        default=1.0,
        metavar="X",
        help="efficiency of the post-selected detector over the reference one",
    )
    p.add_argument(
        "--dark",
        type=number(0, 1e15, integer=True),
        metavar="N3",
        help="dark counts, shutter closed",
    )
    p.add_argument(
        "--dark-dwell",
        type=number(0, 1e6, low_open=True),
        metavar="S",
        help="gate of the dark counts (default: --dwell)",
    )
    p.add_argument(
        "--dead-time-ns",
        type=number(0, 1e9),
        metavar="NS",
        help="dead time (ns; default: the bench detector's, else 0)",
    )
    p.add_argument(
        "--rep-rate",
        type=number(0, 1e12, low_open=True),
        metavar="HZ",
        help="pulsed mode: repetition rate (default: the bench's in pulsed mode)",
    )
    p.add_argument(
        "--level",
        type=number(0.5, 0.9999),
        default=0.683,
        help="confidence level of the interval (default 0.683)",
    )
    p.add_argument(
        "--bench",
        metavar="BENCH",
        help="bench file or 'demo': dark rate, dead time, efficiency, prediction",
    )
    add_set_argument(p)
    add_json_flag(p)
    p.set_defaults(handler=run)


def run(args: argparse.Namespace) -> int:
    """Compute and print the leak."""
    from ..fit.counts import measure_leak
    from .common import emit_json, parse_settings
    from .fit import print_table

    options: dict = {}
    predicted = None
    if args.bench:
        from ..bench import load_bench
        from ..prediction import predict

        bench = load_bench(args.bench)
        d = bench.detector
        p = predict(bench, parse_settings(args.set))
        signal = float(p.leak_rate) * bench.source.photon_rate * d.efficiency
        predicted = signal
        options = {
            "dark_rate": d.dark_rate,
            "dead_time_s": d.dead_time_ns * 1e-9,
            "efficiency": d.efficiency,
            "dark_probability": d.gate_dark_probability,
            "rep_rate_hz": d.rep_rate_hz if d.mode == "pulsed" else None,
        }
        options["safe_rate"] = d.safe_rate
        if args.reference is None and args.reference_rate is None:
            options["reference_rate"] = bench.source.photon_rate * d.efficiency
            options["reference_measured"] = False
    elif args.set:
        from ..errors import InputError

        raise InputError("--set needs --bench (the readings are a bench's mount readings)")
    if args.dead_time_ns is not None:
        options["dead_time_s"] = args.dead_time_ns * 1e-9
    if args.rep_rate is not None:
        options["rep_rate_hz"] = args.rep_rate
    if args.reference_rate is not None:
        options["reference_rate"] = args.reference_rate
    m = measure_leak(
        args.counts,
        args.dwell,
        reference=args.reference,
        reference_dwell_s=args.reference_dwell,
        reference_kind=args.reference_kind,
        dark=args.dark,
        dark_dwell_s=args.dark_dwell,
        relative_efficiency=args.relative_efficiency,
        level=args.level,
        predicted_rate=predicted,
        **options,
    )
    doc = m.to_json()
    if args.json:
        emit_json(doc)
        return 0
    print_table(
        "leak from counts",
        _rows(m),
        [*m.warnings, *m.notes, *([f"verdict: {m.verdict.text}"] if m.verdict else [])],
    )
    return 0


def _rows(m: Any) -> list[tuple[str, str]]:
    """Readable rows of a :class:`~aligner.fit.counts.LeakMeasurement`: the raw rate, each
    correction in turn, then the signal and the leak (an upper limit when there is no
    interval)."""
    pct = f"{m.level:.1%}"
    pulsed = m.mean_photons_per_pulse is not None
    rows = [
        ("raw rate (counts / gate)", f"{m.raw_rate:.4g} counts/s"),
        (
            f"after dead-time correction ({m.dead_time_s * 1e9:g} ns)",
            f"{m.dead_time_corrected_rate:.4g} counts/s",
        ),
        (
            "dark rate subtracted" if not pulsed else "dark clicks removed (per s)",
            f"{m.dark_rate:.4g} counts/s",
        ),
        ("signal rate", f"{m.signal_rate:.4g} counts/s"),
    ]
    if m.upper_limit:
        rows.append(
            (
                f"signal rate upper limit ({m.upper_limit_credibility:.2%})",
                f"below {m.signal_rate_high:.4g} counts/s",
            )
        )
    else:
        rows.append(
            (f"{pct} interval", f"{m.signal_rate_low:.4g} to {m.signal_rate_high:.4g} counts/s")
        )
    rows.append(("method", m.method))
    if m.reference_raw_rate is not None:
        rows += [
            ("reference raw rate", f"{m.reference_raw_rate:.4g} counts/s"),
            ("reference after dead-time correction", f"{m.reference_corrected_rate:.4g} counts/s"),
        ]
    if m.leak is not None:
        if m.upper_limit:
            rows.append(
                (f"leak upper limit ({m.upper_limit_credibility:.2%})", f"below {m.leak_high:.4g}")
            )
        else:
            rows += [
                ("leak", f"{m.leak:.4g}"),
                (f"leak {pct} interval", f"{m.leak_low:.4g} to {m.leak_high:.4g}"),
            ]
        rows.append(("reference", str(m.reference)))
    if pulsed:
        rows += [
            ("photons per pulse", f"{m.mean_photons_per_pulse:.4g}"),
            ("photons per pulse given a click", f"{m.mean_photons_given_click:.4g}"),
        ]
    if m.predicted_rate is not None:
        rows.append(("predicted signal rate", f"{m.predicted_rate:.4g} counts/s"))
    return rows
