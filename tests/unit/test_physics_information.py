"""Fisher information, Cramer-Rao bound and centroid SNR against a numerical derivative of the
brute-force post-selected pointer distribution and the published information results."""

from __future__ import annotations

import numpy as np
import pytest
from physics_reference import fisher, intensity, post_selected_fields, wavenumbers
from scipy.optimize import minimize_scalar

from aligner.physics.branches import moments
from aligner.physics.channels import analyzer_effect
from aligner.physics.information import (
    best_setting,
    both_ports_information,
    centroid_snr,
    cramer_rao,
    post_selected_information,
    readout_branches,
    standard_information,
)
from aligner.physics.jones import PAULI, density_from_vector, linear_vector

SIGMA_Z = PAULI["HV"]
PLUS = density_from_vector(linear_vector(np.pi / 4))


def worked_case(eps, extinction=np.inf):
    """Pre-selection at 45 deg, analyzer at -45 deg + eps (physics.md worked case:
    A_w = cot(eps), leak sin^2(eps) for A = HV)."""
    return PLUS, analyzer_effect(-np.pi / 4 + np.asarray(eps, float), extinction, 1.0)


def random_psd(rng):
    m = rng.normal(size=(2, 2)) + 1j * rng.normal(size=(2, 2))
    x = m @ m.conj().T + 0.05 * np.eye(2)
    return x / np.max(np.linalg.eigvalsh(x))


def grid_information(rho, effect, a, g, sigma, readout):
    """Brute force, this test: the post-selected pointer density on a grid (FFT coupling; the
    momentum density from the FFT of the fields), Fisher information by a central difference in
    g and the trapezoid rule."""
    x = np.linspace(-40 * sigma, 40 * sigma, 2**14, endpoint=False)

    def density(s):
        w, f = post_selected_fields(rho, effect, a, s, sigma, "shift", x)
        if readout == "momentum":
            f = (
                np.fft.fftshift(np.fft.fft(f, axis=-1), axes=-1)
                * (x[1] - x[0])
                / np.sqrt(2 * np.pi)
            )
        return intensity(w, f)

    axis = x if readout == "position" else np.fft.fftshift(wavenumbers(x))
    return fisher(density, g, axis)


@pytest.mark.parametrize("readout", ["position", "momentum"])
@pytest.mark.parametrize("seed", range(3))
def test_information_matches_numerical_derivative_of_the_exact_distribution(readout, seed):
    # Brute force, this test (grid integration of the exact post-selected pointer distribution).
    rng = np.random.default_rng(seed)
    rho, effect = random_psd(rng), random_psd(rng)
    m = rng.normal(size=(2, 2)) + 1j * rng.normal(size=(2, 2))
    a = (m + m.conj().T) / 2
    g, sigma = rng.uniform(0.1, 1.5), rng.uniform(0.5, 1.5)
    info = post_selected_information(rho, effect, a, g, sigma, readout)
    assert info.total == pytest.approx(
        grid_information(rho, effect, a, g, sigma, readout), rel=1e-6
    )


def test_information_near_a_perfect_null_and_far_into_saturation():
    # Brute force, this test: a perfect null (a zero of the post-selected amplitude) and
    # branches ten widths apart.
    for eps, g in ((0.0, 0.3), (1e-3, 0.05), (0.02, 10.0)):
        rho, effect = worked_case(eps)
        info = post_selected_information(rho, effect, SIGMA_Z, g, 1.0).total
        assert info == pytest.approx(
            grid_information(rho, effect, SIGMA_Z, g, 1.0, "position"), rel=1e-6
        )


def test_linear_regime_ratio_is_cos_squared():
    # Ferrie & Combes, PRL 112, 040406 (2014); physics.md: P |A_w|^2 = |<f|A|i>|^2, so the
    # post-selected events hold cos^2(eps) of the standard information in the linear regime.
    eps = np.array([0.01, 0.1, 0.4, 1.0])
    rho, effect = worked_case(eps)
    info = post_selected_information(rho, effect, SIGMA_Z, 1e-5, 0.7)
    ratio = info.total / standard_information(SIGMA_Z, 0.7)
    assert ratio == pytest.approx(np.cos(eps) ** 2, rel=1e-6)
    # ... and it sits in the readings: the count carries only a second-order share.
    assert np.all(info.count < 1e-6 * info.total)


def test_both_ports_keep_all_the_information():
    # Combes, Ferrie, Jiang, Caves, PRA 89, 052117 (2014): post-selected and rejected events
    # together keep the full information. For pure states with real amplitudes the classical
    # information equals the quantum Fisher information <A^2>/sigma^2 (Braunstein & Caves,
    # PRL 72, 3439 (1994)) at every strength, linear regime or not.
    eps = np.array([0.0, 1e-3, 0.05, 0.5])
    rho, effect = worked_case(eps)
    for g in (1e-3, 0.3, 2.0):
        both = both_ports_information(rho, effect, SIGMA_Z, g, 0.8)
        assert both == pytest.approx(standard_information(SIGMA_Z, 0.8), rel=1e-7)
    # Mixed states and complex weak values lose some, never gain (data processing).
    rng = np.random.default_rng(3)
    for _ in range(4):
        rho = random_psd(rng) / 2
        rho = rho / np.trace(rho).real
        both = both_ports_information(rho, random_psd(rng), SIGMA_Z, 0.4, 0.8, "momentum")
        assert both <= standard_information(SIGMA_Z, 0.8) * (1 + 1e-9)


def test_information_at_the_null_is_in_the_count():
    # Brute force, this test: at a perfect null the post-selected pointer is ~ phi'(q) whatever
    # g (linear order), so its shape carries nothing and the count carries 1/sigma^2 (derived:
    # P = g^2/(4 sigma^2) for the worked case, (dP/dg)^2/P = 1/sigma^2).
    rho, effect = worked_case(0.0)
    info = post_selected_information(rho, effect, SIGMA_Z, 1e-3, 1.0)
    assert info.count == pytest.approx(1.0, rel=1e-5)
    assert info.readings < 1e-5


def test_cramer_rao_of_a_gaussian_mean():
    # Gaussian location family: F = 1/sigma^2, so n photons give sigma/sqrt(n) (Cramer,
    # Mathematical Methods of Statistics (1946); Kay, Fundamentals of Statistical Signal
    # Processing (1993), from memory).
    f = standard_information(SIGMA_Z, 2.0)
    assert cramer_rao(f, 1e4) == pytest.approx(2.0 / 100)
    assert cramer_rao(f, 0.0) == np.inf


def test_centroid_snr_uses_the_post_selected_spread_and_respects_cramer_rao():
    eps = np.geomspace(1e-4, 1.0, 60)
    rho, effect = worked_case(eps, extinction=1e5)
    g, sigma, rate = 0.05, 1.0, 1e6
    pointer = readout_branches(rho, effect, SIGMA_Z, g, sigma)
    m = moments(pointer)
    # The exact spread differs from the prepared one near the peak (physics.md: max <q> ~ sigma
    # at 2 sigma/g; brute force in test_physics_branches.py for the moments themselves).
    assert np.max(np.abs(m.variance / sigma**2 - 1)) > 0.1
    snr = centroid_snr(m, g, rate)
    bound = g * np.sqrt(rate * post_selected_information(rho, effect, SIGMA_Z, g, sigma).total)
    # Cramer-Rao: no unbiased estimator beats the information (Cramer 1946).
    assert np.all(snr <= bound * (1 + 1e-9))
    # Linear regime, ideal analyzer: centroid SNR / standard SNR -> cos(eps) (physics.md;
    # Ferrie & Combes 2014). Standard: g sqrt(rate)/sigma.
    rho, effect = worked_case(np.array([0.3, 0.8]))
    lin = centroid_snr(moments(readout_branches(rho, effect, SIGMA_Z, 1e-6, sigma)), 1e-6, rate)
    assert lin / (1e-6 * np.sqrt(rate) / sigma) == pytest.approx(np.cos([0.3, 0.8]), rel=1e-6)


def test_best_setting_matches_a_direct_search():
    # Brute force, this test: scipy's bounded scalar search on the same merit function.
    g, sigma, rate, jitter = 0.05, 1.0, 1e6, 2e-3

    def merit(eps):
        rho, effect = worked_case(eps, extinction=1e5)
        m = moments(readout_branches(rho, effect, SIGMA_Z, g, sigma))
        return centroid_snr(m, g, rate, jitter**2)

    scan = np.geomspace(1e-3, 0.5, 200)
    best = best_setting(scan, merit(scan))
    direct = minimize_scalar(
        lambda e: -float(merit(e)), bounds=(scan[best.index - 1], scan[best.index + 1]),
        method="bounded", options={"xatol": 1e-9},
    )  # fmt: skip
    assert best.interior
    assert best.setting == pytest.approx(direct.x, rel=1e-3)
    assert best.merit == pytest.approx(-direct.fun, rel=1e-5)  # parabola through 3 samples
    edge = best_setting(scan, scan)
    assert not edge.interior and edge.index == scan.size - 1
    with pytest.raises(ValueError, match="1-D"):
        best_setting(scan, scan[:-1])
