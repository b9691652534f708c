"""The stable JSON block of ``aligner predict``: a scalar prediction, the pointer as its sensor
reads it, the SNR figures and the bench's limits (every key: docs/json.md)."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np

from ..bench import Bench
from .core import Prediction, predict
from .limits import Limits, limits, scalar_readings

__all__ = ["block_of", "prediction_block"]


def prediction_block(
    bench: Bench,
    readings: Mapping[str, float] | None = None,
) -> dict[str, Any]:
    """The stable JSON block of ``aligner predict`` (plain floats; single readings only)."""
    r = scalar_readings(bench, readings)
    return block_of(predict(bench, r), limits(bench, r))


def _optional(x: float | None) -> float | None:
    return None if x is None else float(x)


def block_of(p: Prediction, lim: Limits) -> dict[str, Any]:
    """The JSON block of a scalar prediction and the bench's limits (see
    :func:`prediction_block`)."""
    from .core import standard_shift
    from .pointer import cross_phase_rad
    from .snr import standard_information_snr, standard_snr_per_sqrt_s

    bench = p._evaluation.bench
    wv = complex(p.weak_value)
    practical = float(p.practical_amplification)
    return {
        "angles_deg": {k: float(v) for k, v in p.angles_deg.items()},
        "imbalance_deg": float(p.imbalance_deg),
        "weak_value": {"re": wv.real, "im": wv.imag},
        "leak": float(p.leak_rate),
        "amplification": {
            "linear": float(p.amplification_linear),
            "exact": float(p.amplification_exact),
        },
        "units": p.units,
        "detector": {
            "rate": float(p.detector_rate),
            "measured_rate": float(p.measured_rate),
            "saturated": bool(p.saturated),
            "over_safe_rate": bool(p.over_safe_rate),
        },
        "limit": {
            "max_amplification": lim.max_amplification,
            "at_imbalance_deg": lim.at_imbalance_deg,
            "limited_by": lim.limited_by,
        },
        "pointer": {
            "sensor": bench.readout.sensor,
            "method": bench.readout.method,
            "shift": float(p.pointer_shift),
            "spread": float(p.pointer_spread),
            "standard_shift": standard_shift(bench),
            "practical_amplification": practical if np.isfinite(practical) else None,
            "reading_rate": float(p.reading_rate),
            "reading_fraction": float(p.reading_fraction),
            "cross_phase_rad": _optional(cross_phase_rad(bench)),
        },
        "snr": {
            "centroid_per_sqrt_s": float(p.snr_per_sqrt_s),
            "information_per_sqrt_s": float(p.information_snr_per_sqrt_s),
            "both_ports_per_sqrt_s": float(p.both_ports_snr_per_sqrt_s),
            "standard_centroid_per_sqrt_s": standard_snr_per_sqrt_s(bench),
            "standard_information_per_sqrt_s": standard_information_snr(bench),
            "switched": float(p.switched_snr),
            "dwell_s": bench.readout.dwell_s,
            "measure_s": bench.readout.measure_s,
        },
        "heralded": None if bench.source.herald is None else _heralded(bench, p),
    }


def _heralded(bench: Bench, p: Prediction) -> dict[str, float]:
    """Coincidence rates of a heralded source and its photons' expected heralded g2."""
    from ..physics.detection import DetectorRates
    from .pointer import coincidences, heralded_g2

    rates = DetectorRates(
        np.asarray(p.detector_rate),
        np.asarray(p.measured_rate),
        np.asarray(p.exposure_rate),
        np.asarray(p.signal_fraction),
    )
    true, accidental = coincidences(bench, p.leak_rate, rates)
    return {
        "true_coincidence_rate": float(true),
        "accidental_rate": float(accidental),
        "g2": heralded_g2(bench),
    }
