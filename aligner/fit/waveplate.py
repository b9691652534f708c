"""Waveplate scan between fixed polarizers: counts against the plate's mount reading -> the
fast-axis reading (the mount offset) and the retardance.

Poisson maximum likelihood on the full forward model. Parameters: the offset change ``d``
(deg), the retardance change (waves) and, when ``free_scale``, ``ln`` of a photon-rate scale.
Between crossed polarizers the modulation depth is ``sin^2(pi r)`` times the photon rate, so
the rate and the retardance cannot both be free there: by default the bench's photon rate
(and the ``reference`` column, if any) sets the scale.

Ambiguity: between linear polarizers the counts are the same when the fast and slow axes swap
(fast axis at ``x`` or ``x + 90`` deg) and for retardance ``r`` or ``k - r`` waves (any whole
``k``); the fit reports the solution nearest the bench file's values and says so.
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
    plate_element,
    reference_weights,
    require_mount,
    with_offset,
    with_retardance,
)

__all__ = ["WaveplateFit", "fit_waveplate"]


@dataclass(frozen=True)
class WaveplateFit:
    """Result of :func:`fit_waveplate` (angles in deg, retardance in waves, 1 standard error)."""

    mount: str
    fast_axis_reading_deg: float
    fast_axis_err_deg: float
    retardance_waves: float
    retardance_err_waves: float
    rate_scale: float
    fit: FitResult

    @property
    def ambiguity(self) -> str:
        """The 90 deg (fast/slow) and retardance ambiguity in words."""
        x = self.fast_axis_reading_deg
        r = self.retardance_waves
        other = math.ceil(r) - r if r % 1 else 1.0
        return (
            f"Counts between linear polarizers cannot tell the fast axis from the slow axis: "
            f"reading {x:.3f} deg and {x + 90:.3f} deg (or {x - 90:.3f} deg) fit equally "
            f"well, and so do retardances of {r:.4f} and {other:.4f} waves (modulo whole "
            "waves). The result is the solution nearest the bench file; check the fast "
            "axis once against a marked plate or a circular-polarization test."
        )

    def to_json(self) -> dict[str, Any]:
        """The JSON document of ``aligner fit waveplate --json``."""
        return {
            "fit": "waveplate",
            "mount": self.mount,
            "fast_axis_reading_deg": self.fast_axis_reading_deg,
            "fast_axis_err_deg": self.fast_axis_err_deg,
            "fast_axis_alternative_deg": self.fast_axis_reading_deg + 90.0,
            "retardance_waves": self.retardance_waves,
            "retardance_err_waves": self.retardance_err_waves,
            "rate_scale": self.rate_scale,
            "ambiguity": self.ambiguity,
            **self.fit.summary(),
        }

    def bench_updates(self) -> dict[str, float]:
        """Dotted bench keys for :func:`aligner.bench.write_values`: the mount offset (the
        reading of the fast axis) and its error. The retardance is reported, not written:
        ``write_values`` addresses tables by name, not entries of ``[[pre]]``/``[[post]]``."""
        return {
            f"mounts.{self.mount}.offset_deg": round(self.fast_axis_reading_deg, 6),
            f"mounts.{self.mount}.offset_err_deg": round(self.fast_axis_err_deg, 6),
        }


def fit_waveplate(
    bench: Bench,
    scan: CountScan,
    mount: str | None = None,
    *,
    dwell_s: float | None = None,
    dark_rate: float | None = None,
    free_scale: bool = False,
) -> WaveplateFit:
    """Fit a waveplate scan (see the module docstring); ``mount`` defaults to the bench's
    ``phase_mount``."""
    name = require_mount(bench, mount, bench.phase_mount, "waveplate", scan)
    element = plate_element(bench, name)
    dwell = dwell_per_point(scan, dwell_s)
    weights = reference_weights(scan)
    offset0 = bench.mounts[name].offset_deg
    waves0 = element.retardance_waves

    def model(theta: np.ndarray) -> np.ndarray:
        cols = np.atleast_2d(theta)
        trial = with_retardance(
            with_offset(bench, name, offset0 + cols[:, 0:1]), name, waves0 + cols[:, 1:2]
        )
        scale = np.exp(cols[:, 2:3]) if free_scale else 1.0
        rate = detected_rate(
            trial, {name: scan.reading_deg}, bench.source.photon_rate * scale * weights, dark_rate
        )
        return rate * dwell

    family = Poisson(scan.counts)
    size = 3 if free_scale else 2
    grid = np.array(
        [
            [ds, dr, 0.0][:size]
            for ds in np.arange(-45.0, 45.0, 2.5)
            for dr in np.linspace(-0.12, 0.12, 7)
        ]
    )
    deviance = np.sum(family.residuals(model(grid)) ** 2, axis=-1)
    start = grid[int(np.argmin(deviance))]
    names = ("offset_shift_deg", "retardance_shift_waves", "ln_rate_scale")[:size]
    bounds = (np.array([-60.0, -0.5, -8.0][:size]), np.array([60.0, 0.5, 8.0][:size]))
    fit = maximize_likelihood(model, family, start, names, [1e-4] * size, bounds)
    shift = fit.value("offset_shift_deg")
    scale = math.exp(fit.value("ln_rate_scale")) if free_scale else 1.0
    return WaveplateFit(
        name,
        offset0 + shift,
        fit.error("offset_shift_deg"),
        waves0 + fit.value("retardance_shift_waves"),
        fit.error("retardance_shift_waves"),
        scale,
        fit,
    )
