"""Leak rate against imbalance (the points of a sweep): imbalance offset and leak floor.

Each reading of the imbalance mount is turned into the bench's signed imbalance ``eps``
(:func:`aligner.model.imbalance_deg`). The leak, relative to the bright (fully transmitted)
rate, is modelled as ``L(eps) = (1 - f) sin^2(eps - eps0) + f``: ``eps0`` is where the real
null sits and ``f`` the floor that every extinction, depolarization and retardance error adds
up to; ``1/f`` is the extinction it implies. Counts are Poisson with mean
``dwell * detector(bright_rate * s * w_i * L)``, ``s`` a free rate scale, ``w_i`` the
``reference`` weights. The bench's own floor (its model at its null) is the prediction.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..bench import Bench
from ..model import imbalance_deg
from .counts import Verdict, compare
from .csvdata import CountScan
from .likelihood import FitResult, Poisson, maximize_likelihood
from .scanmodel import (
    dwell_per_point,
    null_reading_deg,
    post_probability,
    reference_weights,
    require_mount,
)

__all__ = ["LeakFit", "fit_leak_curve"]


@dataclass(frozen=True)
class LeakFit:
    """Result of :func:`fit_leak_curve`: ``imbalance_offset_deg`` (deg), ``leak_floor``
    (fraction of the bright rate), the implied extinction ``1/leak_floor``, the bench's
    predicted floor and the verdict comparing them (in ``ln`` of the floor)."""

    mount: str
    imbalance_offset_deg: float
    imbalance_offset_err_deg: float
    leak_floor: float
    leak_floor_err: float
    implied_extinction: float
    predicted_floor: float
    verdict: Verdict
    fit: FitResult

    def to_json(self) -> dict[str, Any]:
        """The JSON document of ``aligner fit leak --json``."""
        return {
            "fit": "leak",
            "mount": self.mount,
            "imbalance_offset_deg": self.imbalance_offset_deg,
            "imbalance_offset_err_deg": self.imbalance_offset_err_deg,
            "leak_floor": self.leak_floor,
            "leak_floor_err": self.leak_floor_err,
            "implied_extinction": self.implied_extinction,
            "predicted_floor": self.predicted_floor,
            "residual_sigma": self.verdict.residual_sigma,
            "verdict": self.verdict.text,
            **self.fit.summary(),
        }

    def bench_updates(self) -> dict[str, float]:
        """Nothing is written: the floor lumps several bench parameters together (use the null
        fit to store an offset and an extinction ratio)."""
        return {}


def _bright_probability(bench: Bench, mount: str) -> float:
    """Largest post-selection probability over half a turn of ``mount``."""
    reading = bench.mounts[mount].reading_deg
    return float(np.max(post_probability(bench, {mount: reading + np.linspace(0, 180, 721)})))


def fit_leak_curve(
    bench: Bench,
    scan: CountScan,
    mount: str | None = None,
    *,
    dwell_s: float | None = None,
    dark_rate: float | None = None,
) -> LeakFit:
    """Fit leak against imbalance (see the module docstring); ``mount`` defaults to the
    bench's ``imbalance_mount``."""
    name = require_mount(bench, mount, bench.imbalance_mount, "leak", scan)
    dwell = dwell_per_point(scan, dwell_s)
    weights = reference_weights(scan)
    eps = np.deg2rad(imbalance_deg(bench, {name: scan.reading_deg}))
    bright = bench.source.photon_rate * _bright_probability(bench, name)
    det = bench.detector
    dark = det.dark_rate if dark_rate is None else float(dark_rate)
    null = null_reading_deg(bench, name, float(scan.reading_deg[np.argmin(scan.counts)]))
    predicted = float(post_probability(bench, {name: null})) * bench.source.photon_rate / bright

    def model(theta: np.ndarray) -> np.ndarray:
        cols = np.atleast_2d(theta)
        floor = np.exp(cols[:, 1:2])
        leak = (1 - floor) * np.sin(eps - np.deg2rad(cols[:, 0:1])) ** 2 + floor
        rate = det.expected_rates(
            bright * np.exp(cols[:, 2:3]) * weights, leak, dark_rate=dark
        ).measured_rate
        return rate * dwell

    family = Poisson(scan.counts)
    eps_deg = np.rad2deg(eps)
    span = float(np.ptp(eps_deg))
    grid = np.array(
        [
            [e0, math.log(predicted) + dl, 0.0]
            for e0 in np.linspace(eps_deg.min(), eps_deg.max(), 41)
            for dl in np.linspace(-4.0, 4.0, 9)
        ]
    )
    deviance = np.sum(family.residuals(model(grid)) ** 2, axis=-1)
    start = grid[int(np.argmin(deviance))]
    bounds = (
        np.array([eps_deg.min() - span, math.log(1e-12), -8.0]),
        np.array([eps_deg.max() + span, 0.0, 8.0]),
    )
    fit = maximize_likelihood(
        model,
        family,
        start,
        ("imbalance_offset_deg", "ln_leak_floor", "ln_rate_scale"),
        [1e-4, 1e-4, 1e-4],
        bounds,
    )
    floor = math.exp(fit.value("ln_leak_floor"))
    ln_err = fit.error("ln_leak_floor")
    verdict = compare(math.log(floor), ln_err, math.log(predicted), kind="floor")
    return LeakFit(
        name,
        fit.value("imbalance_offset_deg"),
        fit.error("imbalance_offset_deg"),
        floor,
        floor * ln_err,
        1 / floor,
        predicted,
        verdict,
        fit,
    )
