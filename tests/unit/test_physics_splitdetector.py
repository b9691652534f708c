"""Split and quadrant detectors against Monte Carlo photon counting (fixed seeds) and grid
integration of the exact post-selected spot."""

from __future__ import annotations

import numpy as np
import pytest
from physics_reference import intensity, post_selected_fields, tail_from, trapezoid
from scipy.special import erf

from aligner.physics.branches import prepare, shift
from aligner.physics.channels import analyzer_effect
from aligner.physics.jones import PAULI, density_from_vector, linear_vector
from aligner.physics.splitdetector import (
    position_noise,
    quadrant_gaussian,
    split_branches,
    split_gaussian,
    split_position,
    split_snr,
)

SIGMA_Z = PAULI["HV"]


def test_signal_and_slope_of_a_gaussian_spot():
    # physics.md (derived, common practice): (R - L)/(R + L) = erf(x0 / (sqrt2 w)), slope at the
    # centre sqrt(2/pi)/w.
    x0 = np.linspace(-3, 3, 13)
    r = split_gaussian(x0, 1.5)
    assert r.signal == pytest.approx(erf(x0 / (np.sqrt(2) * 1.5)))
    assert split_gaussian(0.0, 1.5).slope == pytest.approx(np.sqrt(2 / np.pi) / 1.5)
    # Brute force, this test: central differences, with and without a gap.
    for gap in (0.0, 0.8):
        h = 1e-6
        up, dn = split_gaussian(x0 + h, 1.5, gap), split_gaussian(x0 - h, 1.5, gap)
        assert split_gaussian(x0, 1.5, gap).slope == pytest.approx(
            (up.signal - dn.signal) / (2 * h), rel=1e-7
        )


def test_inverse_and_linear_calibration_error():
    # Inverse of the erf response; linear calibration reads x0 (1 - x0^2/(6 w^2)) to leading
    # order (erf series, Abramowitz & Stegun 7.1.5, from memory).
    w, x0 = 2.0, np.array([0.01, 0.05, 0.2])
    s = split_gaussian(x0, w).signal
    assert split_position(s, w) == pytest.approx(x0, rel=1e-12)
    linear = s / split_gaussian(0.0, w).slope
    assert (linear / x0 - 1) / (-(x0**2) / (6 * w**2)) == pytest.approx(1.0, abs=0.02)


def test_counting_noise_by_monte_carlo():
    # Brute force, this test: photons drawn from the spot (fixed seed), counted on the halves
    # with a dead gap; the signal's mean, its spread sqrt((1 - S^2)/n) and the position noise.
    rng = np.random.default_rng(11)
    x0, w, gap, n_spot, trials = 0.4, 1.0, 0.3, 400, 4000
    x = rng.normal(x0, w, size=(trials, n_spot))
    right = np.sum(x > gap / 2, axis=1)
    left = np.sum(x < -gap / 2, axis=1)
    s = (right - left) / (right + left)
    r = split_gaussian(x0, w, gap)
    counted = n_spot * r.active
    assert np.mean(right + left) / n_spot == pytest.approx(r.active, rel=5e-3)
    assert np.mean(s) == pytest.approx(r.signal, abs=4 * np.std(s) / np.sqrt(trials))
    assert np.std(s) == pytest.approx(np.sqrt((1 - r.signal**2) / counted), rel=0.05)
    inferred = np.mean(s) / r.slope  # small spread: the slope maps it linearly
    noise = position_noise(x0, w, counted, gap)
    assert np.std(s / r.slope) == pytest.approx(noise, rel=0.05)
    assert inferred == pytest.approx(r.signal / r.slope, rel=0.05)
    # At the centre, no gap: sqrt(pi/2) w / sqrt(n), the 2/pi efficiency of a split detector
    # against the centroid (derived, common practice).
    assert position_noise(0.0, w, 100.0) == pytest.approx(np.sqrt(np.pi / 2) * w / 10)
    assert split_snr(split_gaussian(0.0, w), 1.0, 100.0) == pytest.approx(
        10 / (np.sqrt(np.pi / 2) * w)
    )


def test_quadrant_detector_by_monte_carlo():
    # Brute force, this test: 2-D photon positions on four quadrants with a cross-shaped gap.
    rng = np.random.default_rng(5)
    x0, y0, wx, wy, gap = 0.3, -0.5, 1.0, 1.4, 0.2
    n = 2_000_000
    x, y = rng.normal(x0, wx, n), rng.normal(y0, wy, n)
    on = (np.abs(x) > gap / 2) & (np.abs(y) > gap / 2)
    q = quadrant_gaussian(x0, y0, wx, wy, gap)
    assert np.mean(on) == pytest.approx(q.active, rel=2e-3)
    sx = (np.sum(on & (x > 0)) - np.sum(on & (x < 0))) / np.sum(on)
    sy = (np.sum(on & (y > 0)) - np.sum(on & (y < 0))) / np.sum(on)
    for signal, expected in ((sx, q.signal_x), (sy, q.signal_y)):
        spread = np.sqrt((1 - expected**2) / np.sum(on))  # binomial
        assert signal == pytest.approx(expected, abs=5 * spread)


@pytest.mark.parametrize("eps", [0.3, 0.03, 0.004])
def test_exact_post_selected_spot_on_a_split_detector(eps):
    # Brute force, this test: the post-selected pointer on a grid (FFT coupling), integrated
    # over each half (edges on grid points); strength derivative by central differences.
    rho = density_from_vector(linear_vector(np.pi / 4))
    effect = analyzer_effect(-np.pi / 4 + eps, 1e5, 0.9)
    g, sigma = 0.05, 1.0
    x = np.linspace(-20, 20, 2**14, endpoint=False)
    edge = int(np.searchsorted(x, 0.125))
    gap = 2 * x[edge]
    mirror = int(np.searchsorted(x, -x[edge]))

    def grid_signal(s):
        f = intensity(*post_selected_fields(rho, effect, SIGMA_Z, s, sigma, "shift", x))
        right = tail_from(f, x, edge)
        left = trapezoid(f, x) - tail_from(f, x, mirror)
        return (right - left) / (right + left)

    r = split_branches(shift(prepare(rho, effect, SIGMA_Z, sigma), g), gap)
    assert r.signal == pytest.approx(grid_signal(g), rel=1e-8)
    h = 1e-4
    slope = (grid_signal(g * (1 + h)) - grid_signal(g * (1 - h))) / (2 * g * h)
    assert r.slope == pytest.approx(slope, rel=1e-6)
