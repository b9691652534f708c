"""Split (bi-cell) and quadrant detectors: the difference-over-sum signal of a spot, its
non-linear response, calibration slope and the noise of the counted photons.

Lengths in one unit (spot centre, rms width, gap). A Gaussian spot of intensity rms ``w`` at
``x0`` on a split detector whose two halves are separated by a dead gap ``gap`` (centred on the
split line; 0 for an ideal split) gives ``R = erfc((gap/2 - x0)/(sqrt2 w))/2`` and
``L = erfc((gap/2 + x0)/(sqrt2 w))/2``, the signal ``S = (R - L)/(R + L)`` (``= erf(x0/(sqrt2 w))``
without a gap) and the slope at the centre ``sqrt(2/pi) exp(-a^2) / (w erfc(a))``,
``a = gap/(2 sqrt2 w)`` (``sqrt(2/pi)/w`` without a gap).

Noise: of ``n`` photons counted on the two halves each lands right with probability
``(1 + S)/2``, so ``Var S = (1 - S^2)/n`` (binomial). A quadrant detector with a cross-shaped
gap reads a separable spot as two split detectors, one per axis; only the counted fraction is
the product of both axes' active fractions.

The exact post-selected pointer of :mod:`aligner.physics.branches` (not Gaussian beyond the
linear regime) is read with :func:`split_branches`, whose slope is with respect to the coupling
strength.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .branches import Branches, moments, tail

__all__ = [
    "QuadrantReading",
    "SplitReading",
    "position_noise",
    "quadrant_gaussian",
    "split_branches",
    "split_gaussian",
    "split_position",
    "split_snr",
]

Real = NDArray[np.float64]


@dataclass(frozen=True)
class SplitReading:
    """``signal`` ``(R - L)/(R + L)``; ``slope``: its derivative with respect to the spot centre
    (:func:`split_gaussian`, 1/length) or the coupling strength (:func:`split_branches`);
    ``active``: ``R + L``, the share of the light on the two halves (of the spot, or per source
    photon for :func:`split_branches`)."""

    signal: Real
    slope: Real
    active: Real


@dataclass(frozen=True)
class QuadrantReading:
    """Both axes of a quadrant detector (signals and their slopes with respect to the spot
    centre) and the counted share of the spot, ``active``."""

    signal_x: Real
    signal_y: Real
    slope_x: Real
    slope_y: Real
    active: Real


def split_gaussian(center: ArrayLike, width: ArrayLike, gap: ArrayLike = 0.0) -> SplitReading:
    """Split-detector reading of a Gaussian spot (see module)."""
    from scipy.special import erfc

    x0 = np.asarray(center, float)
    root2w = np.sqrt(2.0) * np.asarray(width, float)
    half = np.asarray(gap, float) / 2
    right = 0.5 * erfc((half - x0) / root2w)
    left = 0.5 * erfc((half + x0) / root2w)
    # d/dx0 of each half: the spot's density at the gap edge.
    d_right = np.exp(-(((half - x0) / root2w) ** 2)) / (np.sqrt(np.pi) * root2w)
    d_left = -np.exp(-(((half + x0) / root2w) ** 2)) / (np.sqrt(np.pi) * root2w)
    active = right + left
    signal = (right - left) / active
    slope = ((d_right - d_left) - signal * (d_right + d_left)) / active
    return SplitReading(signal, slope, active)


def split_position(signal: ArrayLike, width: ArrayLike) -> Real:
    """Spot centre behind a signal ``S`` (no gap): ``x0 = sqrt2 w erfinv(S)``, the inverse of the
    non-linear response. A linear calibration ``S / slope`` reads ``x0 (1 - x0^2/(6 w^2))`` to
    leading order."""
    from scipy.special import erfinv

    return np.sqrt(2.0) * np.asarray(width, float) * erfinv(np.asarray(signal, float))


def position_noise(
    center: ArrayLike, width: ArrayLike, counted: ArrayLike, gap: ArrayLike = 0.0
) -> Real:
    """Standard deviation of the spot centre inferred from ``counted`` photons on the halves:
    ``sqrt((1 - S^2)/n) / |dS/dx0|`` (``sqrt(pi/2) w / sqrt(n)`` at the centre, no gap)."""
    r = split_gaussian(center, width, gap)
    with np.errstate(divide="ignore"):
        return np.sqrt((1 - r.signal**2) / np.asarray(counted, float)) / np.abs(r.slope)


def quadrant_gaussian(
    center_x: ArrayLike,
    center_y: ArrayLike,
    width_x: ArrayLike,
    width_y: ArrayLike,
    gap: ArrayLike = 0.0,
) -> QuadrantReading:
    """Quadrant-detector reading of an elliptical Gaussian spot with axes along the gaps:
    ``((Q1 + Q4) - (Q2 + Q3)) / sum`` per axis, each the split signal of that axis."""
    x = split_gaussian(center_x, width_x, gap)
    y = split_gaussian(center_y, width_y, gap)
    return QuadrantReading(x.signal, y.signal, x.slope, y.slope, x.active * y.active)


def split_branches(branches: Branches, gap: ArrayLike = 0.0) -> SplitReading:
    """Split-detector reading of the exact post-selected pointer, ``slope`` = ``dS/dg``."""
    half = np.asarray(gap, float) / 2
    total = moments(branches)
    right, d_right = tail(branches, half)
    beyond_left, d_beyond = tail(branches, -half)
    left = total.probability - beyond_left
    d_left = total.dprobability - d_beyond
    active = right + left
    signal = (right - left) / active
    slope = ((d_right - d_left) - signal * (d_right + d_left)) / active
    return SplitReading(signal, slope, active)


def split_snr(reading: SplitReading, strength: ArrayLike, photons: ArrayLike) -> Real:
    """SNR of a parameter (the coupling strength, or the spot centre) read from the split
    signal: ``|strength slope| / sqrt((1 - S^2) / (n active))``. ``photons``: photons in the
    spot or source photons (:func:`split_branches`); a rate gives the SNR after one second."""
    counted = np.asarray(photons, float) * reading.active
    with np.errstate(divide="ignore", invalid="ignore"):
        snr = np.abs(np.asarray(strength, float) * reading.slope) / np.sqrt(
            (1 - reading.signal**2) / counted
        )
    return np.where(counted > 0, snr, 0.0)
