"""Analyzer null scan: counts against the analyzer (or another) mount reading -> the crossed
reading (a mount offset) and the analyzer's extinction ratio.

Poisson maximum likelihood on the full forward model (:mod:`aligner.fit.scanmodel`). Fit
parameters: the mount's offset change ``d`` (deg), ``ln ER`` of the analyzer and, unless fixed,
``ln s`` of a photon-rate scale ``s`` (the source rate is rarely known to a few percent). The
dark rate is *not* fitted: one scan cannot tell an extinction floor from dark counts, so it
comes from the bench's detector or a separate shutter-closed measurement (``dark_rate``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..bench import Bench
from .csvdata import CountScan
from .likelihood import FitResult, Poisson, maximize_likelihood
from .scanmodel import (
    detected_rate,
    dwell_per_point,
    null_reading_deg,
    reference_weights,
    require_mount,
    with_analyzer_extinction,
    with_offset,
)

__all__ = ["NullFit", "fit_null"]


@dataclass(frozen=True)
class NullFit:
    """Result of :func:`fit_null`.

    ``null_reading_deg`` is the mount reading of least post-selection (the crossed position),
    ``offset_deg`` the mount offset that puts the bench's model there; errors are 1 standard
    error from the observed information. ``extinction_ratio_err`` is the delta-method error
    ``ER * stderr(ln ER)``; ``log_extinction_err`` is ``stderr(ln ER)`` (use it when the
    error is not small). ``rate_scale`` multiplies the bench's photon rate.
    """

    mount: str
    null_reading_deg: float
    null_reading_err_deg: float
    offset_deg: float
    extinction_ratio: float
    extinction_ratio_err: float
    log_extinction_err: float
    rate_scale: float
    rate_scale_err: float
    dark_rate: float
    fit: FitResult

    def to_json(self) -> dict[str, Any]:
        """The JSON document of ``aligner fit null --json``."""
        return {
            "fit": "null",
            "mount": self.mount,
            "null_reading_deg": self.null_reading_deg,
            "null_reading_err_deg": self.null_reading_err_deg,
            "offset_deg": self.offset_deg,
            "extinction_ratio": self.extinction_ratio,
            "extinction_ratio_err": self.extinction_ratio_err,
            "log_extinction_err": self.log_extinction_err,
            "rate_scale": self.rate_scale,
            "rate_scale_err": self.rate_scale_err,
            "dark_rate": self.dark_rate,
            **self.fit.summary(),
        }

    def bench_updates(self) -> dict[str, float]:
        """Dotted bench keys and the values found (for :func:`aligner.bench.write_values`)."""
        return {
            f"mounts.{self.mount}.offset_deg": round(self.offset_deg, 6),
            f"mounts.{self.mount}.offset_err_deg": round(self.null_reading_err_deg, 6),
            "analyzer.extinction_ratio": float(f"{self.extinction_ratio:.4g}"),
        }


def fit_null(
    bench: Bench,
    scan: CountScan,
    mount: str | None = None,
    *,
    dwell_s: float | None = None,
    dark_rate: float | None = None,
    free_scale: bool = True,
) -> NullFit:
    """Fit an analyzer null scan (see the module docstring).

    ``mount`` defaults to the analyzer's mount; ``dwell_s`` is used when the scan has no
    ``dwell_s`` column; ``dark_rate`` (counts/s) overrides the bench detector's dark rate.
    """
    name = require_mount(bench, mount, bench.analyzer.mount, "null", scan)
    dwell = dwell_per_point(scan, dwell_s)
    weights = reference_weights(scan)
    readings = scan.reading_deg
    offset0 = bench.mounts[name].offset_deg
    er0 = bench.analyzer.extinction_ratio
    dark = bench.detector.dark_rate if dark_rate is None else float(dark_rate)

    def model(theta: np.ndarray) -> np.ndarray:
        cols = np.atleast_2d(theta)
        trial = with_offset(bench, name, offset0 + cols[:, 0:1])
        trial = with_analyzer_extinction(trial, np.exp(cols[:, 1:2]))
        scale = np.exp(cols[:, 2:3]) if free_scale else 1.0
        rate = detected_rate(
            trial, {name: readings}, bench.source.photon_rate * scale * weights, dark
        )
        return rate * dwell

    family = Poisson(scan.counts)
    nominal = null_reading_deg(bench, name, float(readings[np.argmin(scan.counts)]))
    low_counts = readings[scan.counts <= np.quantile(scan.counts, 0.1)]
    shift0 = float(np.median(low_counts)) - nominal
    log_er0 = math.log(er0) if math.isfinite(er0) else math.log(1e6)
    start = [shift0, log_er0, 0.0][: 3 if free_scale else 2]
    # a coarse look along the offset and ln ER axes gives a start inside the basin
    span = float(np.ptp(readings))
    grid = np.array(
        [
            [shift0 + ds, log_er0 + dl, 0.0][: len(start)]
            for ds in np.linspace(-0.05, 0.05, 11) * span
            for dl in np.linspace(-3.0, 3.0, 7)
        ]
    )
    deviance = np.sum(family.residuals(model(grid)) ** 2, axis=-1)
    start = grid[int(np.argmin(deviance))]
    steps = [1e-4, 1e-4, 1e-4][: len(start)]
    low = [shift0 - span, math.log(1.0001), -8.0][: len(start)]
    high = [shift0 + span, math.log(1e10), 8.0][: len(start)]
    names = ("offset_shift_deg", "ln_extinction_ratio", "ln_rate_scale")[: len(start)]
    fit = maximize_likelihood(model, family, start, names, steps, (np.array(low), np.array(high)))
    shift, shift_err = fit.value("offset_shift_deg"), fit.error("offset_shift_deg")
    er = math.exp(fit.value("ln_extinction_ratio"))
    ln_er_err = fit.error("ln_extinction_ratio")
    scale = math.exp(fit.value("ln_rate_scale")) if free_scale else 1.0
    scale_err = scale * fit.error("ln_rate_scale") if free_scale else 0.0
    return NullFit(
        name,
        nominal + shift,
        shift_err,
        offset0 + shift,
        er,
        er * ln_er_err,
        ln_er_err,
        scale,
        scale_err,
        dark,
        fit,
    )
