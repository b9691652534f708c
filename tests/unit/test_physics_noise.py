"""Technical noise: closed forms against numerical quadrature over the spectrum and a Monte Carlo
of synthesized white + 1/f noise (fixed seed); the technical advantage of post-selection."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from scipy.integrate import quad

from aligner.physics.branches import moments
from aligner.physics.channels import analyzer_effect
from aligner.physics.information import best_setting, readout_branches
from aligner.physics.jones import PAULI, density_from_vector, linear_vector
from aligner.physics.noise import (
    NoiseSpectrum,
    allan_variance,
    dwell_snr,
    mean_variance,
    structure_function,
    switched_variance,
)

SPECTRUM = NoiseSpectrum.from_rms(0.7, corner_hz=0.3)


PERIODS = 400  # quadrature over this many periods of sin^2(x), the rest by its average


def integrate_x(func, x_low, tail):
    """Brute force, this test: int_{x_low}^inf func(x) dx, x = pi f T, by adaptive quadrature
    over geometric pieces up to pi and one piece per period beyond, plus ``tail(X)``, the
    integral past X = PERIODS pi with the oscillation replaced by its average."""
    edges = np.concatenate([np.geomspace(x_low, np.pi, 30), np.pi * np.arange(2, PERIODS + 1)])
    return sum(quad(func, a, b)[0] for a, b in itertools.pairwise(edges)) + tail(edges[-1])


@pytest.mark.parametrize(("dwell", "low"), [(0.5, 1e-3), (2.0, 0.05), (0.1, 2.0)])
def test_mean_variance_against_quadrature(dwell, low):
    h0, h1 = SPECTRUM.white, SPECTRUM.flicker

    def integrand(x):  # S(f) sinc^2(pi f T) df
        return (h0 + h1 * np.pi * dwell / x) * np.sin(x) ** 2 / x**2 / (np.pi * dwell)

    def tail(big):
        return (h0 / (2 * big) + h1 * np.pi * dwell / (4 * big**2)) / (np.pi * dwell)

    expected = integrate_x(integrand, np.pi * low * dwell, tail)
    assert mean_variance(SPECTRUM, dwell, low) == pytest.approx(expected, rel=1e-6)
    # white only: 1-s mean has rms 0.7 without a cut-off (the defining convention)
    white = NoiseSpectrum.from_rms(0.7)
    assert mean_variance(white, 1.0, 0.0) == pytest.approx(0.49)
    assert mean_variance(SPECTRUM, dwell, 0.0) == np.inf


@pytest.mark.parametrize("ratio", [1.0, 1.5, 3.0, 10.0])
def test_structure_function_against_quadrature(ratio):
    dwell = 0.8
    h0, h1 = SPECTRUM.white, SPECTRUM.flicker

    def integrand(x):  # 2 S(f) sinc^2(pi f T) (1 - cos(2 pi f D)) df
        shape = np.sin(x) ** 2 * (1 - np.cos(2 * ratio * x)) / x**2
        return 2 * (h0 + h1 * np.pi * dwell / x) * shape / (np.pi * dwell)

    average = 0.5 + (0.25 if ratio == 1.0 else 0.0)  # mean of sin^2 x (1 - cos 2 r x)

    def tail(big):
        return 2 * average * (h0 / big + h1 * np.pi * dwell / (2 * big**2)) / (np.pi * dwell)

    expected = integrate_x(integrand, 1e-8, tail)
    assert structure_function(SPECTRUM, dwell, ratio * dwell) == pytest.approx(expected, rel=1e-6)
    with pytest.raises(ValueError, match="must not overlap"):
        structure_function(SPECTRUM, dwell, 0.5 * dwell)


def test_allan_variance_of_white_and_flicker_noise():
    # Barnes et al., IEEE Trans. Instrum. Meas. IM-20, 105 (1971) (from memory): white h0/(2T),
    # flicker 2 ln2 h_-1, independent of T.
    flicker = NoiseSpectrum(0.0, 3.0)
    assert allan_variance(flicker, np.array([0.01, 1.0, 100.0])) == pytest.approx(6 * np.log(2))
    assert allan_variance(NoiseSpectrum(4.0), 2.0) == pytest.approx(1.0)


def synthesize(spectrum, rate_hz, samples, rng):
    """Noise with a one-sided spectrum by random Fourier amplitudes (brute force, this test):
    E|X_k|^2 = N S(f_k) f_s / 2, no DC term (lowest frequency 1/record length)."""
    f = np.fft.rfftfreq(samples, 1 / rate_hz)[1:]
    amp = np.sqrt(samples * spectrum.psd(f) * rate_hz / 4)
    spec = np.zeros(f.size + 1, complex)
    spec[1:] = amp * (rng.normal(size=f.size) + 1j * rng.normal(size=f.size))
    spec[-1] = spec[-1].real * np.sqrt(2)  # the Nyquist term is real
    return np.fft.irfft(spec, n=samples)


def test_switched_variance_by_monte_carlo():
    rng = np.random.default_rng(2024)
    rate, samples = 200.0, 2**18
    dwell, settle, cycles = 0.5, 0.25, 4
    n_dwell, n_step = int(dwell * rate), int((dwell + settle) * rate)
    starts = np.arange(2 * cycles) * n_step
    span = starts[-1] + n_dwell
    estimates = []
    for _ in range(24):
        x = synthesize(SPECTRUM, rate, samples, rng)
        for begin in range(0, samples - span, span):
            means = np.array([x[begin + s : begin + s + n_dwell].mean() for s in starts])
            estimates.append(means[0::2].mean() - means[1::2].mean())
    estimates = np.array(estimates)
    expected = switched_variance(SPECTRUM, dwell, settle, cycles)
    # Variance of a sample variance: ~ sqrt(2/N) relative for Gaussian estimates.
    assert np.var(estimates) == pytest.approx(expected, rel=4 * np.sqrt(2 / estimates.size))
    # White noise alone: every dwell mean is independent, h0/(n T) (derived).
    white = NoiseSpectrum.from_rms(0.7)
    assert switched_variance(white, dwell, settle, cycles) == pytest.approx(
        white.white / (cycles * dwell)
    )
    # One pair of adjacent dwells: twice the Allan variance.
    assert switched_variance(SPECTRUM, dwell, 0.0, 1) == pytest.approx(
        2 * allan_variance(SPECTRUM, dwell)
    )


def worked_case(eps):
    rho = density_from_vector(linear_vector(np.pi / 4))
    return rho, analyzer_effect(-np.pi / 4 + np.asarray(eps, float), 1e5, 1.0)


def test_technical_advantage_of_post_selection():
    # Jordan et al., PRX 4, 011031 (2014): technical noise is not amplified,
    # so in its limit the post-selected SNR exceeds the standard one by the amplification; with
    # shot noise only the post-selected SNR is at most cos(eps) of it (Ferrie & Combes, PRL 112,
    # 040406 (2014)).
    g, sigma, rate = 1e-3, 1.0, 1e5
    eps = np.geomspace(2e-3, 0.5, 160)
    rho, effect = worked_case(eps)
    m = moments(readout_branches(rho, effect, PAULI["HV"], g, sigma))
    shot_post = m.variance / (rate * m.probability)
    shot_std = sigma**2 / rate
    quiet = NoiseSpectrum()
    noisy = NoiseSpectrum.from_rms(0.05, corner_hz=0.5)  # >> shot noise of the full beam

    def snr(shift, shot, spectrum):
        return dwell_snr(shift, shot, spectrum, dwell_s=1.0, settle_s=0.5, total_s=60.0)

    post_quiet, std_quiet = snr(m.mean, shot_post, quiet), snr(g, shot_std, quiet)
    assert np.all(post_quiet <= std_quiet * np.cos(eps) * (1 + 1e-9))
    post_noisy, std_noisy = snr(m.mean, shot_post, noisy), snr(g, shot_std, noisy)
    technical_limit = snr(m.mean, 0.0 * shot_post, noisy) / snr(g, 0.0, noisy)
    assert technical_limit == pytest.approx(m.mean / g)
    best = best_setting(eps, post_noisy)
    assert best.interior
    assert best.merit > 10 * std_noisy
    # The best imbalance under technical noise lies deeper than under shot noise alone.
    assert best.setting < best_setting(eps, post_quiet).setting


def test_no_time_for_one_cycle_gives_zero_snr():
    assert dwell_snr(1.0, 1.0, SPECTRUM, dwell_s=2.0, settle_s=1.0, total_s=5.0) == 0.0
    with pytest.raises(ValueError, match="cycles"):
        switched_variance(SPECTRUM, 1.0, 0.0, 0)
