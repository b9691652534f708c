"""Leak rate against imbalance (the points of a sweep): imbalance offset and leak floor.

Each reading of the imbalance mount is turned into the bench's signed imbalance ``eps``
(:func:`aligner.model.imbalance_deg`). The leak, relative to the bright (fully transmitted)
rate, is modelled as ``L(eps) = (1 - f) sin^2(eps - eps0) + f``: ``eps0`` is where the real
null sits and ``f`` the floor that every extinction, depolarization and retardance error adds
up to; ``1/f`` is the extinction it implies. The bench's own floor (its model at its null) is
the prediction, and the verdict compares the two in ``ln f``.

Counts, with a free rate scale ``s``:

* without a reference column (or in pulsed mode): Poisson with mean
  ``dwell * detector(bright_rate * s * L)`` -- the source is taken as steady;
* with a reference column (continuous wave): both channels' counts enter the likelihood
  (:class:`aligner.fit.likelihood.PoissonPair`), each point's source intensity profiled out,
  each channel over its own live time (dead time) and dark rate. The reference is what the
  bench's ``[reference]`` says: a monitor of the source (``fraction`` counts per source
  photon), the analyzer's other port (its detector's ``efficiency``; it sees the light leaving
  the analyzer less the post-selected share), or, on a bench without one, a monitor of
  unknown fraction (its mean rate stands for the nominal intensity).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..bench import Bench
from ..errors import DataFileError
from ..model import imbalance_deg
from .counts import Verdict, compare
from .csvdata import CountScan
from .likelihood import FitResult, Poisson, PoissonPair, maximize_likelihood
from .scanmodel import (
    analyzer_input,
    dwell_per_point,
    null_reading_deg,
    post_probability,
    require_mount,
)

__all__ = ["LeakFit", "fit_leak_curve"]


@dataclass(frozen=True)
class LeakFit:
    """Result of :func:`fit_leak_curve`: ``imbalance_offset_deg`` (deg), ``leak_floor``
    (over the rate with the analyzer turned to transmission), the implied extinction
    ``1/leak_floor``, the bench's predicted floor and the verdict comparing them (in ``ln`` of
    the floor)."""

    mount: str
    imbalance_offset_deg: float
    imbalance_offset_err_deg: float
    leak_floor: float
    leak_floor_err: float
    implied_extinction: float
    predicted_floor: float
    verdict: Verdict
    fit: FitResult
    reference: str = ""

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
            "verdict": self.verdict.to_json(),
            "reference_text": self.reference,
            **self.fit.summary(),
        }

    def bench_updates(self) -> dict[str, float]:
        """Nothing is written: the floor lumps several bench parameters together (use the null
        fit to store an offset and an extinction ratio)."""
        return {}


Real = NDArray[np.float64]
#: Expected counts (or signal counts per unit intensity) from the leak share ``s L`` (m, n).
CountModel = Callable[[Real], Real]


def bright_probability(bench: Bench, mount: str) -> float:
    """Largest post-selection probability per source photon over half a turn of ``mount``."""
    reading = bench.mounts[mount].reading_deg
    return float(np.max(post_probability(bench, {mount: reading + np.linspace(0, 180, 721)})))


def _steady(
    bench: Bench, scan: CountScan, dwell: Real, dark: float, bright: float
) -> tuple[CountModel, Poisson]:
    """Signal counts alone, the source taken as steady."""
    det = bench.detector

    def counts(share: Real) -> Real:
        return det.expected_rates(bright, share, dark_rate=dark).measured_rate * dwell

    return counts, Poisson(scan.counts)


def _live(counts: Real, dwell: Real, dead_time_s: float, channel: str, scan: CountScan) -> Real:
    live = dwell - counts * dead_time_s
    if np.any(live <= 0):
        raise DataFileError(
            f"{scan.path}: the {channel} counts of some points leave no live time with a dead "
            f"time of {dead_time_s:.3g} s; check the counts and the bench's dead time"
        )
    return live


def _paired(
    bench: Bench, scan: CountScan, readings: dict[str, Real], dwell: Real, dark: float,
    bright: float, reference: Real,
) -> tuple[CountModel, PoissonPair, str]:  # fmt: skip
    """Signal and reference counts together (see the module docstring), and in words what the
    reference was taken to be."""
    det, ref, rate = bench.detector, bench.reference, bench.source.photon_rate
    live = _live(scan.counts, dwell, det.dead_time_s, "post-selected", scan)
    live_ref = _live(reference, dwell, ref.dead_time_s, "reference", scan)
    zero = np.zeros_like(live)
    if ref.kind == "port" and ref.efficiency is not None:
        c0 = live_ref * ref.efficiency * rate * analyzer_input(bench, readings)
        c1 = -live_ref * ref.efficiency / (live * det.efficiency)
        what = "the analyzer's other port"
    elif ref.kind == "monitor" and ref.fraction is not None:
        c0, c1 = live_ref * ref.fraction * rate, zero
        what = "a monitor of the source"
    else:
        c0, c1 = live_ref * float(np.mean(reference / live_ref)), zero
        what = "a monitor of unknown fraction (the bench has no [reference])"
    pair = PoissonPair(scan.counts, reference, live * dark, c0, c1, live_ref * ref.dark_rate)

    def signal(share: Real) -> Real:
        return live * det.efficiency * bright * share

    words = (
        f"reference counts in the likelihood with their own Poisson noise: {what}, its own "
        "dead time and dark rate"
    )
    return signal, pair, words


def _floor_verdict(
    model: Callable[[Real], Real],
    family: Poisson | PoissonPair,
    fit: FitResult,
    ln_predicted: float,
    bounds: tuple[Real, Real],
) -> Verdict:
    """The fitted floor against the bench's by the likelihood ratio: the fit again with the
    floor held at the prediction, ``z = sign(ln f - ln f_pred) sqrt(D_held - D)`` (Wilks'
    theorem, one degree of freedom; e.g. Cowan, Statistical Data Analysis, Oxford 1998, ch. 9).
    Unlike ``(ln f - ln f_pred) / error`` it keeps its false-alarm rate when the floor is
    poorly determined (a skewed or one-sided likelihood)."""
    keep = np.array([0, 2])

    def held(theta: Real) -> Real:
        cols = np.atleast_2d(theta)
        full = np.column_stack([cols[:, 0], np.full(cols.shape[0], ln_predicted), cols[:, 1]])
        return model(full)

    again = maximize_likelihood(
        held,
        family,
        fit.estimate[keep],
        ("imbalance_offset_deg", "ln_rate_scale"),
        [1e-4, 1e-4],
        (bounds[0][keep], bounds[1][keep]),
    )
    z = math.copysign(
        math.sqrt(max(again.deviance - fit.deviance, 0.0)),
        fit.value("ln_leak_floor") - ln_predicted,
    )
    return compare(z, 1.0, 0.0, kind="floor")


def fit_leak_curve(
    bench: Bench,
    scan: CountScan,
    mount: str | None = None,
    *,
    dwell_s: float | None = None,
    dark_rate: float | None = None,
) -> LeakFit:
    """Fit leak against imbalance (see the module docstring); ``mount`` defaults to the
    bench's ``imbalance_mount``, ``dark_rate`` (counts/s) to the bench detector's."""
    name = require_mount(bench, mount, bench.imbalance_mount, "leak", scan)
    dwell = dwell_per_point(scan, dwell_s)
    readings = {name: scan.reading_deg}
    eps = np.deg2rad(imbalance_deg(bench, readings))
    bright = bench.source.photon_rate * bright_probability(bench, name)
    dark = bench.detector.dark_rate if dark_rate is None else float(dark_rate)
    null = null_reading_deg(bench, name, float(scan.reading_deg[np.argmin(scan.counts)]))
    predicted = float(post_probability(bench, {name: null})) * bench.source.photon_rate / bright
    family: Poisson | PoissonPair
    if scan.reference is None:
        counts, family = _steady(bench, scan, dwell, dark, bright)
        words = "no reference column: the source is taken as steady"
    elif bench.detector.mode == "pulsed":
        counts, family = _steady(bench, scan, dwell, dark, bright)
        words = "pulsed mode: the reference column is not used (clicks are not photons)"
    else:
        counts, family, words = _paired(bench, scan, readings, dwell, dark, bright, scan.reference)

    def model(theta: np.ndarray) -> np.ndarray:
        cols = np.atleast_2d(theta)
        floor = np.exp(cols[:, 1:2])
        leak = (1 - floor) * np.sin(eps - np.deg2rad(cols[:, 0:1])) ** 2 + floor
        return counts(np.exp(cols[:, 2:3]) * leak)

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
    verdict = _floor_verdict(model, family, fit, math.log(predicted), bounds)
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
        words,
    )
