"""The working points with the best signal to noise within the detector's limits, for each SNR
figure of :mod:`.snr`, against the standard measurement."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from ..bench import INF, Bench
from ..nulls import find_null
from ..physics.information import best_setting
from .core import predict
from .limits import pick_best, scalar_readings, scan_grid
from .snr import standard_information_snr, standard_snr_per_sqrt_s

__all__ = ["Best", "SnrChoice", "best_snr_imbalance"]

#: The SNR figures a working point is chosen for: Prediction field, words.
FIGURES = {
    "centroid": ("snr_per_sqrt_s", "per sqrt(s), centroid of the post-selected readings"),
    "information": (
        "information_snr_per_sqrt_s",
        "per sqrt(s), Cramer-Rao bound of the post-selected events",
    ),
    "switched": ("switched_snr", "in a switched measurement under the whole noise spectrum"),
}


@dataclass(frozen=True)
class Best:
    """The best imbalance for one SNR figure: the imbalance (deg) and mount reading (deg) of
    the best scanned point refined by a parabola through its neighbours
    (:func:`aligner.physics.information.best_setting`), and the SNR there."""

    imbalance_deg: float
    reading_deg: float
    snr: float


@dataclass(frozen=True)
class SnrChoice:
    """Imbalance that maximizes the centroid SNR within the detector's limits, against no
    post-selection, and the best imbalance of the other SNR figures (``best``, keyed as
    :data:`FIGURES`).

    ``feasible`` is False when no scanned imbalance keeps the detector below its safe rate and
    out of saturation (then the other numbers describe the best overexposed point).
    ``ratio_to_standard`` compares with the standard measurement on the same detector without
    a rate limit; ``ratio_to_standard_within_limits`` with it attenuated to respect the limits;
    ``information_ratio_to_standard``: the best Cramer-Rao SNR of the post-selected events over
    the standard measurement's (at most about ``cos(imbalance)`` with ideal optics).
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
    best: Mapping[str, Best]
    standard_information_snr_per_sqrt_s: float
    information_ratio_to_standard: float


def _refine(x: np.ndarray, imbalance: np.ndarray, merit: np.ndarray, i: int) -> Best:
    """The best point ``i`` refined within its side of the null."""
    side = np.sign(imbalance) == np.sign(imbalance[i])
    xs, ms, ims = x[side], merit[side], imbalance[side]
    order = np.argsort(xs)
    xs, ms, ims = xs[order], ms[order], ims[order]
    best = best_setting(xs, ms)
    at = float(np.interp(best.setting, xs, ims)) if best.interior else float(ims[best.index])
    return Best(at, float(best.setting), float(best.merit))


def best_snr_imbalance(bench: Bench, readings: Mapping[str, float] | None = None) -> SnrChoice:
    """Scan the imbalance mount either side of the null (steps of at least one mount step) and
    pick the reading with the best SNR per sqrt(s) that keeps the detector within its limits,
    and likewise for each figure of :data:`FIGURES`."""
    r = scalar_readings(bench, readings)
    name = bench.imbalance_mount
    mount = bench.mounts[name]
    null = find_null(bench, r)
    x = scan_grid(bench, null, mount.resolution_deg)
    p = predict(bench, {**r, name: x})
    allowed = ~(p.saturated | p.over_safe_rate)
    feasible = bool(np.any(allowed))
    best = {}
    for key, (field, _) in FIGURES.items():
        merit = np.nan_to_num(np.asarray(getattr(p, field), float), nan=-1.0)
        merit = np.where(allowed, merit, -1.0) if feasible else merit
        i = pick_best(x, merit, null, r[name])
        best[key] = _refine(x, np.asarray(p.imbalance_deg), merit, i)
    # the working point is the refined centroid best where the detector allows it there too
    # (one number in the table and the sentence), else the best scanned point
    c = best["centroid"]
    at = predict(bench, {**r, name: c.reading_deg})
    if not feasible or at.saturated or at.over_safe_rate:
        i = pick_best(
            x,
            np.where(allowed, p.snr_per_sqrt_s, -1.0) if feasible else p.snr_per_sqrt_s,
            null,
            r[name],
        )
        at = predict(bench, {**r, name: float(x[i])})
        best["centroid"] = Best(float(at.imbalance_deg), float(x[i]), float(at.snr_per_sqrt_s))
    c = best["centroid"]
    standard = standard_snr_per_sqrt_s(bench, r)
    limited = standard_snr_per_sqrt_s(bench, r, within_limits=True)
    information_standard = standard_information_snr(bench, r)
    snr = float(at.snr_per_sqrt_s)

    def ratio(value: float, x: float) -> float:
        return value / x if x > 0 else INF

    if feasible:
        fisher = best["information"]
        message = (
            f"Best SNR {snr:.4g}/sqrt(s) at an imbalance of {c.imbalance_deg:.4g} deg "
            f"({name} at {c.reading_deg:.4f} deg), {ratio(snr, limited):.3g} times the standard "
            f"measurement kept within the detector's limits and {ratio(snr, standard):.3g} "
            f"times it with the detector overexposed. The Cramer-Rao bound of the "
            f"post-selected events is best at {fisher.imbalance_deg:.4g} deg "
            f"({fisher.snr:.4g}/sqrt(s), {ratio(fisher.snr, information_standard):.3g} times "
            f"the standard measurement's bound)."
        )
    else:
        message = (
            "Every scanned imbalance overexposes or saturates the detector: attenuate "
            "the beam before counting (follow your laser-safety rules)."
        )
    return SnrChoice(
        feasible,
        c.reading_deg,
        c.imbalance_deg,
        snr,
        float(at.amplification_exact),
        float(at.leak_rate),
        float(at.detector_rate),
        standard,
        limited,
        ratio(snr, standard),
        ratio(snr, limited),
        message,
        best,
        information_standard,
        ratio(best["information"].snr, information_standard),
    )
