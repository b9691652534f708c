"""Post-selected counts -> leak rate with its interval, and verdicts against the bench's
prediction. With a heralded source, coincidences among heralds (--coincidences, --heralds)
give the leak per heralded photon instead.

Garwood interval for counted rates, Clopper-Pearson for clicks per pulse in pulsed mode; dead
time and dark counts are corrected bound by bound. A counted reference (the analyzer turned
to transmission, the analyzer's other port, or a monitor of the source) enters by profile
likelihood with its own Poisson noise, its own dead time and its own dark rate; with --bench
the reference detector is the bench's [reference] and the predicted leak is given in the same
units, with the difference in standard deviations.
"""

from __future__ import annotations

import argparse
from typing import Any

from .common import add_json_flag, add_set_argument, number
from .fit import SAFETY

#: Engine parameter -> the option that gave it (errors name the option).
FLAGS = {
    "counts": "--counts",
    "dwell_s": "--dwell",
    "dark": "--dark",
    "dark_dwell_s": "--dark-dwell",
    "reference": "--reference",
    "reference_dwell_s": "--reference-dwell",
    "reference_rate": "--reference-rate",
    "reference.efficiency": "--relative-efficiency",
    "reference.dead_time_s": "--reference-dead-time-ns",
    "detector.dead_time_s": "--dead-time-ns",
    "rep_rate_hz": "--rep-rate",
    "level": "--level",
}


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
        metavar="N",
        help="post-selected counts (clicks in pulsed mode); required unless --coincidences",
    )
    p.add_argument(
        "--dwell",
        type=number(1e-6, 1e6),
        required=True,
        metavar="S",
        help="gate time (s)",
    )
    herald = p.add_argument_group(
        "heralded source (coincidences of the post-selected detector with the heralds)"
    )
    herald.add_argument(
        "--coincidences",
        type=number(0, 1e15, integer=True),
        metavar="K",
        help="coincidences of the post-selected detector with a herald in the gate",
    )
    herald.add_argument(
        "--heralds", type=number(1, 1e15, integer=True), metavar="N", help="heralds counted"
    )
    herald.add_argument(
        "--signal-singles",
        type=number(0, 1e15, integer=True),
        metavar="N",
        help="all counts of the post-selected detector in the gate (for the accidentals)",
    )
    herald.add_argument(
        "--window-ns",
        type=number(1e-3, 1e9),
        metavar="NS",
        help="coincidence window, total width (default: the bench's coincidence_window_ns)",
    )
    herald.add_argument(
        "--heralding-efficiency",
        type=number(1e-6, 1),
        metavar="X",
        help="coincidences per herald with the analyzer taken out (measured in a long "
        "reference run)",
    )
    ref = p.add_mutually_exclusive_group()
    ref.add_argument(
        "--reference", type=number(0, 1e15, integer=True), metavar="N2", help="reference counts"
    )
    ref.add_argument(
        "--reference-rate",
        type=number(1e-6, 1e15),
        metavar="R",
        help="full-transmission count rate (counts/s, same detector)",
    )
    p.add_argument(
        "--reference-dwell",
        type=number(1e-6, 1e6),
        metavar="S",
        help="gate of the reference counts (default: --dwell)",
    )
    p.add_argument(
        "--reference-kind",
        choices=("bright", "port", "monitor"),
        help="bright: analyzer turned to transmission (leak = S/B); port: the analyzer's "
        "other port (leak = S/(S+R)); monitor: a pick-off of the source (leak per source "
        "photon); default: the bench's [reference] kind, else bright",
    )
    p.add_argument(
        "--relative-efficiency",
        type=number(1e-6, 1e6),
        metavar="X",
        help="without --bench: efficiency of the post-selected detector over the reference's "
        "(a monitor: over its counts per source photon); default 1",
    )
    p.add_argument(
        "--reference-dead-time-ns",
        type=number(0, 1e9),
        metavar="NS",
        help="the reference detector's dead time (ns; default: the bench's [reference]; for "
        "a bright reference the post-selected detector's; else 0)",
    )
    p.add_argument(
        "--dark",
        type=number(0, 1e15, integer=True),
        metavar="N3",
        help="dark counts, shutter closed",
    )
    p.add_argument(
        "--dark-dwell",
        type=number(1e-6, 1e6),
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
        type=number(1, 1e12),
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
        help="bench file or 'demo': detectors, reference channel, prediction",
    )
    add_set_argument(p)
    add_json_flag(p)
    p.set_defaults(handler=run)


def _reference(
    args: argparse.Namespace, bench: Any, detector: Any, readings: dict[str, float]
) -> tuple[Any, float | None]:
    """The reference the options and the bench give, and the predicted leak in its units (None
    when there is nothing to predict: a bright or a measured full-transmission rate)."""
    from dataclasses import replace

    from ..errors import InputError
    from ..fit.counts import Channel, CountedReference, RateReference

    if args.reference_rate is not None:
        return RateReference(args.reference_rate), None
    kind = args.reference_kind
    if args.reference is None:
        if bench is None:
            return None, None
        nominal = RateReference(bench.source.photon_rate * detector.efficiency, measured=False)
        return nominal, _predicted_leak(bench, readings, "none")
    if bench is None:
        kind = kind or "bright"
        base = detector if kind == "bright" else Channel()  # bright: the same detector, turned
        channel = replace(base, efficiency=detector.efficiency / (args.relative_efficiency or 1))
    else:
        kind = kind or (bench.reference.kind if bench.reference.kind != "none" else "bright")
        if kind != "bright" and bench.reference.kind != kind:
            raise InputError(
                f"--reference-kind {kind}: {bench.path or 'the bench'} has [reference] kind = "
                f"{bench.reference.kind!r}; describe the {kind} detector there ([reference] "
                f"kind = {kind!r} with its efficiency and dead time) or leave out --bench"
            )
        if args.relative_efficiency is not None:
            raise InputError(
                "--relative-efficiency applies only without --bench (the bench file gives "
                "both detectors' efficiencies)"
            )
        channel = detector if kind == "bright" else Channel.of_reference(bench.reference)
    if args.reference_dead_time_ns is not None:
        channel = replace(channel, dead_time_s=args.reference_dead_time_ns * 1e-9)
    counted = CountedReference(kind, args.reference, args.reference_dwell, channel)
    return counted, None if bench is None or kind == "bright" else _predicted_leak(
        bench, readings, kind
    )


def _predicted_leak(bench: Any, readings: dict[str, float], kind: str) -> float:
    """The bench's leak at ``readings`` in the units a reference of ``kind`` gives: per source
    photon, or for the analyzer's other port per photon leaving the analyzer."""
    from ..fit.scanmodel import analyzer_input
    from ..prediction import predict

    leak = float(predict(bench, readings).leak_rate)
    return leak / float(analyzer_input(bench, readings)) if kind == "port" else leak


def run(args: argparse.Namespace) -> int:
    """Compute and print the leak."""
    from dataclasses import replace

    from ..errors import InputError, ParameterError
    from ..fit.counts import Channel, DarkCounts, Gating, measure_leak
    from .common import emit_json, parse_settings

    if args.coincidences is not None:
        return _heralded(args)
    if args.counts is None:
        raise InputError("give --counts N (or --coincidences K with --heralds N)")
    bench = None
    detector, gating, predicted_rate = Channel(), None, None
    readings = parse_settings(args.set)
    if args.bench:
        from ..bench import load_bench
        from ..prediction import predict

        bench = load_bench(args.bench)
        d = bench.detector
        detector, gating = Channel.of_detector(d), Gating.of_detector(d)
        predicted_rate = float(predict(bench, readings).leak_rate) * (
            bench.source.photon_rate * d.efficiency
        )
    elif args.set:
        raise InputError("--set needs --bench (the readings are a bench's mount readings)")
    if args.dead_time_ns is not None:
        detector = replace(detector, dead_time_s=args.dead_time_ns * 1e-9)
    if args.rep_rate is not None:
        gating = Gating(args.rep_rate, gating.dark_probability if gating else 0.0)
    reference, predicted_leak = _reference(args, bench, detector, readings)
    try:
        m = measure_leak(
            args.counts,
            args.dwell,
            detector=detector,
            gating=gating,
            dark=None if args.dark is None else DarkCounts(args.dark, args.dark_dwell),
            reference=reference,
            level=args.level,
            predicted_rate=predicted_rate,
            predicted_leak=predicted_leak,
        )
    except ParameterError as exc:
        raise InputError(f"{FLAGS.get(exc.parameter, exc.parameter)} {exc.problem}") from None
    if args.json:
        emit_json({**m.to_json(), "bench_path": _bench_path(bench, args)})
        return 0
    from .fit import print_table

    verdicts = [
        f"verdict on the {what}: {v.text}"
        for what, v in (("leak", m.leak_verdict), ("signal rate", m.rate_verdict))
        if v is not None
    ]
    print_table("leak from counts", _rows(m), [*m.warnings, *m.notes, m.flag, *verdicts])
    return 0


def _rows(m: Any) -> list[tuple[str, str]]:
    """Readable rows of a :class:`~aligner.fit.counts.LeakMeasurement`: the raw rate, each
    correction in turn, then the signal and the leak (an upper limit when there is no
    interval), and the predictions."""
    from ..fit.counts import format_sigma

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
            (
                "reference after its own dead-time correction",
                f"{m.reference_corrected_rate:.4g} counts/s",
            ),
        ]
    if m.leak is not None:
        rows += [
            ("leak", f"{m.leak:.4g}"),
            (f"leak {pct} interval", f"{m.leak_low:.4g} to {m.leak_high:.4g}"),
        ]
    if m.reference is not None:
        rows.append(("reference", str(m.reference)))
    if pulsed:
        rows += [
            ("photons per pulse", f"{m.mean_photons_per_pulse:.4g}"),
            ("photons per pulse given a click", f"{m.mean_photons_given_click:.4g}"),
        ]
    if m.predicted_rate is not None:
        rows.append(("predicted signal rate", f"{m.predicted_rate:.4g} counts/s"))
    if m.predicted_leak is not None:
        rows.append(("predicted leak", f"{m.predicted_leak:.4g}"))
        if m.leak_verdict is not None:
            rows.append(("leak - predicted", format_sigma(m.leak_verdict.residual_sigma)))
    return rows


def _bench_path(bench: Any, args: argparse.Namespace) -> str | None:
    """The bench file the numbers used (None without ``--bench``)."""
    return None if bench is None else str(bench.path or args.bench)


def _heralded(args: argparse.Namespace) -> int:
    """The leak per heralded photon from coincidences among heralds
    (:func:`aligner.physics.heralded.heralded_leak`: Clopper-Pearson on the coincidences per
    herald, the accidental share removed), the weak value it gives, and the prediction."""
    from ..errors import InputError
    from ..fit.counts import HeraldedLeakResult
    from ..physics.heralded import accidental_probability, heralded_leak
    from .common import emit_json, parse_settings
    from .fit import print_table

    missing = [
        flag
        for flag, value in (
            ("--heralds", args.heralds),
            ("--signal-singles", args.signal_singles),
            ("--heralding-efficiency", args.heralding_efficiency),
        )
        if value is None
    ]
    if missing:
        raise InputError(f"--coincidences needs {', '.join(missing)} too")
    if args.counts is not None or args.reference is not None or args.reference_rate is not None:
        raise InputError("--coincidences replaces --counts and the reference options")
    if args.coincidences > min(args.heralds, args.signal_singles):
        raise InputError(
            f"--coincidences {args.coincidences} is more than the --heralds or the "
            "--signal-singles: the counts are swapped or from different gates"
        )
    bench = predicted = None
    window_s = None if args.window_ns is None else args.window_ns * 1e-9
    if args.bench:
        from ..bench import load_bench
        from ..prediction import predict

        bench = load_bench(args.bench)
        herald = bench.source.herald
        if herald is None:
            raise InputError(f"{bench.path}: [source] is not heralded (type = 'heralded')")
        window_s = window_s or herald.window_s
        predicted = float(predict(bench, parse_settings(args.set)).leak_rate)
    if window_s is None:
        raise InputError("give --window-ns (the coincidence window) or --bench")
    uncorrelated = max(args.signal_singles - args.coincidences, 0) / args.dwell
    accidental = float(accidental_probability(uncorrelated, window_s))
    m = heralded_leak(
        args.coincidences, args.heralds, accidental, args.heralding_efficiency, args.level
    )
    h = HeraldedLeakResult(
        coincidences=args.coincidences,
        heralds=args.heralds,
        accidental_probability=accidental,
        leak=float(m.leak),
        leak_low=float(m.low),
        leak_high=float(m.high),
        level=args.level,
        predicted_leak=predicted,
        bench_path=_bench_path(bench, args),
    )
    if args.json:
        emit_json(h.to_json())
        return 0
    rows = [
        ("coincidences per herald", f"{args.coincidences / args.heralds:.4g}"),
        ("accidental per herald", f"{accidental:.3g}"),
        ("leak per heralded photon", f"{h.leak:.4g}"),
        (f"{args.level:.1%} interval", f"{h.leak_low:.4g} to {h.leak_high:.4g}"),
        ("|weak value| (pure states, A^2 = 1)", f"{h.weak_value_abs:.4g}"),
    ]
    if predicted is not None:
        rows.append(("predicted leak", f"{predicted:.4g}"))
    notes = ["Clopper-Pearson on coincidences per herald, accidentals removed"]
    print_table("leak from heralded coincidences", rows, notes)
    return 0
