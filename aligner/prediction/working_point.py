"""The working point with the best signal to noise within the detector's limits, against the
standard measurement (:mod:`.snr`)."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from ..bench import INF, Bench
from ..nulls import find_null
from .core import predict
from .limits import pick_best, scalar_readings, scan_grid
from .snr import standard_snr_per_sqrt_s

__all__ = ["SnrChoice", "best_snr_imbalance"]


@dataclass(frozen=True)
class SnrChoice:
    """Imbalance that maximizes the SNR within the detector's limits, against no post-selection.

    ``feasible`` is False when no scanned imbalance keeps the detector below its safe rate and
    out of saturation (then the other numbers describe the best overexposed point).
    ``ratio_to_standard`` compares with the standard measurement on the same detector without
    a rate limit; ``ratio_to_standard_within_limits`` with it attenuated to respect the limits.
    """

    feasible: bool
    reading_deg: float
    imbalance_deg: float
    snr_per_sqrt_s: float
    amplification: float
    leak_rate: float
    detector_rate: float
    standard_snr_per_sqrt_s: float
    standard_within_limits_snr_per_sqrt_s: float
    ratio_to_standard: float
    ratio_to_standard_within_limits: float
    message: str


def best_snr_imbalance(bench: Bench, readings: Mapping[str, float] | None = None) -> SnrChoice:
    """Scan the imbalance mount either side of the null (steps of at least one mount step) and
    pick the reading with the best SNR per sqrt(s) that keeps the detector within its limits."""
    r = scalar_readings(bench, readings)
    name = bench.imbalance_mount
    mount = bench.mounts[name]
    null = find_null(bench, r)
    x = scan_grid(bench, null, mount.resolution_deg)
    p = predict(bench, {**r, name: x})
    allowed = ~(p.saturated | p.over_safe_rate)
    feasible = bool(np.any(allowed))
    i = pick_best(
        x,
        np.where(allowed, p.snr_per_sqrt_s, -1.0) if feasible else p.snr_per_sqrt_s,
        null,
        r[name],
    )
    standard = standard_snr_per_sqrt_s(bench, r)
    limited = standard_snr_per_sqrt_s(bench, r, within_limits=True)
    snr = float(p.snr_per_sqrt_s[i])

    def ratio(x: float) -> float:
        return snr / x if x > 0 else INF

    if feasible:
        message = (
            f"Best SNR {snr:.4g}/sqrt(s) at an imbalance of {p.imbalance_deg[i]:.4g} deg "
            f"({name} at {x[i]:.4f} deg), {ratio(limited):.3g} times the standard "
            f"measurement kept within the detector's limits and {ratio(standard):.3g} "
            f"times it with the detector overexposed."
        )
    else:
        message = (
            "Every scanned imbalance overexposes or saturates the detector: attenuate "
            "the beam before counting (follow your laser-safety rules)."
        )
    return SnrChoice(
        feasible,
        float(x[i]),
        float(p.imbalance_deg[i]),
        snr,
        float(p.amplification_exact[i]),
        float(p.leak_rate[i]),
        float(p.detector_rate[i]),
        standard,
        limited,
        ratio(standard),
        ratio(limited),
        message,
    )
