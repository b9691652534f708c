"""Analyzer null scan: counts against the analyzer (or another) mount reading -> the crossed
reading (a mount offset) and the floor of light left at the null.

Poisson maximum likelihood on the full forward model (:mod:`aligner.fit.scanmodel`). Fit
parameters: the mount's offset change ``d`` (deg), ``ln ER`` of the analyzer and, unless fixed,
``ln s`` of a photon-rate scale ``s`` (the source rate is rarely known to a few percent). The
dark rate is *not* fitted: one scan cannot tell an extinction floor from dark counts, so it
comes from the bench's detector or a separate shutter-closed measurement (``dark_rate``).

What fills the null: the analyzer's leak, the source polarizer's, a plate's retardance error
(elliptical light no linear analyzer extinguishes) and any polarizer in the arms all leave the
same flat floor under a scan of one mount, so such a scan measures the floor, not its causes.
The fit keeps the floor as its own quantity: ``floor`` (leak rate per source photon at the
null) and the ``effective_extinction_ratio`` (the brightest over the darkest leak of that mount
in the fitted model: everything together, and so a lower bound on the analyzer's own extinction
ratio). ``extinction_ratio`` is the analyzer's only if the rest of the bench is exactly as the
file says; it is never written to the bench file (:meth:`NullFit.bench_updates`). What the
file's optics do not explain is kept apart, as the analyzer's ``unexplained_leak`` (an
unpolarized leak of the post-selection, :class:`aligner.bench.Analyzer`), so predictions see
the floor the bench has without blaming any one element for it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
from numpy.typing import ArrayLike

from ..bench import Bench
from .csvdata import CountScan
from .likelihood import FitResult, Poisson, maximize_likelihood
from .scanmodel import (
    detected_rate,
    dwell_per_point,
    null_reading_deg,
    post_probability,
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
    error is not small): the analyzer's extinction ratio that reproduces the floor if
    everything else is as the bench file says. ``floor`` (and ``floor_err``) is the fitted
    leak rate per source photon at the null; ``effective_extinction_ratio`` the mount's
    brightest over its darkest leak in the fitted model (a lower bound on the analyzer's own).
    ``file_floor``: the floor the bench file's optics predict at that null;
    ``unexplained_leak``: the analyzer's unexplained leak (:class:`aligner.bench.Analyzer`)
    that makes the file's floor the fitted one (``file_unexplained_leak`` before).
    ``attribution`` says what the scan can and cannot tell about the causes of the floor.
    ``rate_scale`` multiplies the bench's photon rate.
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
    floor: float
    floor_err: float
    effective_extinction_ratio: float
    file_floor: float
    unexplained_leak: float
    file_unexplained_leak: float

    @property
    def attribution(self) -> str:
        """What one scan of one mount can tell about the causes of the floor (see module)."""
        if self.unexplained_leak > self.file_unexplained_leak:
            store = (
                f"the light beyond what the file's optics explain ({self.file_floor:.3g}) is "
                f"kept as the analyzer's unexplained_leak, {self.unexplained_leak:.3g}"
            )
        elif self.floor < self.file_floor:
            store = (
                f"the floor is below the file's {self.file_floor:.3g}: its extinction ratios "
                "are conservative"
            )
        else:
            store = "the file's optics explain it"
        return (
            f"the floor at the null, {self.floor:.3g} per source photon (effective extinction "
            f"ratio {self.effective_extinction_ratio:.3g}), is everything together: one scan "
            f"of {self.mount} cannot tell the analyzer's leak from the source polarizer's or "
            "from a plate's retardance error, which fill the null alike. So the analyzer's "
            f"own extinction ratio is only known to be at least "
            f"{self.effective_extinction_ratio:.3g} ({self.extinction_ratio:.3g} if the rest "
            f"of the bench is exactly as the file says) and is not written; {store}"
        )

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
            "floor": self.floor,
            "floor_err": self.floor_err,
            "effective_extinction_ratio": self.effective_extinction_ratio,
            "file_floor": self.file_floor,
            "unexplained_leak": self.unexplained_leak,
            "attribution": self.attribution,
            **self.fit.summary(),
        }

    def bench_updates(self) -> dict[str, float]:
        """Dotted bench keys and the values found (for :func:`aligner.bench.write_values`): the
        mount's offset and its error, and the analyzer's ``unexplained_leak`` when it changed.
        The floor is not the analyzer's extinction (module doc): that is never written."""
        updates = {
            f"mounts.{self.mount}.offset_deg": round(self.offset_deg, 6),
            f"mounts.{self.mount}.offset_err_deg": round(self.null_reading_err_deg, 6),
        }
        if not math.isclose(self.unexplained_leak, self.file_unexplained_leak, rel_tol=1e-3):
            updates["analyzer.unexplained_leak"] = float(f"{self.unexplained_leak:.4g}")
        return updates


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
    floor, floor_err, effective, file_floor, leak = _floor(
        bench, name, offset0 + shift, nominal + shift, er, ln_er_err
    )
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
        floor,
        floor_err,
        effective,
        file_floor,
        leak,
        bench.analyzer.unexplained_leak,
    )


def _floor(
    bench: Bench, name: str, offset: float, null: float, er: float, ln_er_err: float
) -> tuple[float, float, float, float, float]:
    """At the null of the fitted model: the leak rate per source photon and its error from that
    of ``ln ER`` (central difference); the brightest over the darkest leak over one turn of the
    mount; the floor the bench file predicts (the fitted offset, the file's optics); and the
    analyzer's ``unexplained_leak`` that makes the file's floor the fitted one (the model is
    linear in it; never below 0)."""
    file_bench = with_offset(bench, name, offset)
    at: dict[str, ArrayLike] = {name: np.array([null])}
    step = 1e-3
    trials = with_analyzer_extinction(file_bench, er * np.exp(np.array([[0.0], [step], [-step]])))
    at_null = post_probability(trials, at)[:, 0]
    slope = (at_null[1] - at_null[2]) / (2 * step)
    turn = null + np.linspace(0.0, 360.0, 1441)
    fitted = with_analyzer_extinction(file_bench, er)
    over_turn: dict[str, ArrayLike] = {name: turn}
    bright = float(np.max(post_probability(fitted, over_turn)))
    floor = float(at_null[0])
    leak = bench.analyzer.unexplained_leak
    file_floor = float(post_probability(file_bench, at)[0])
    more = replace(file_bench, analyzer=replace(bench.analyzer, unexplained_leak=leak + 1.0))
    per_leak = float(post_probability(more, at)[0]) - file_floor
    new_leak = max(leak + (floor - file_floor) / per_leak, 0.0) if per_leak > 0 else leak
    effective = bright / floor if floor > 0 else math.inf
    return floor, float(abs(slope) * ln_er_err), effective, file_floor, new_leak
