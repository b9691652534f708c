"""The stable JSON block of ``aligner predict``: a scalar prediction and the bench's limits."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

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


def block_of(p: Prediction, lim: Limits) -> dict[str, Any]:
    """The JSON block of a scalar prediction and the bench's limits (see
    :func:`prediction_block`)."""
    wv = complex(p.weak_value)
    return {
        "angles_deg": {k: float(v) for k, v in p.angles_deg.items()},
        "imbalance_deg": float(p.imbalance_deg),
        "weak_value": {"re": wv.real, "im": wv.imag},
        "leak_rate": float(p.leak_rate),
        "amplification": {
            "linear": float(p.amplification_linear),
            "exact": float(p.amplification_exact),
        },
        "pointer_shift": float(p.pointer_shift),
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
        "snr_per_sqrt_s": float(p.snr_per_sqrt_s),
    }
