"""Exact phase readout of a coherent probe against a brute-force QuTiP computation (coherent
state, cross-Kerr coupling exp(-i g A n), post-selection, Pegg-Barnett phase distribution)."""

from __future__ import annotations

import functools

import numpy as np
import pytest
import qutip

from aligner.physics.channels import analyzer_effect
from aligner.physics.jones import PAULI, density_from_vector, linear_vector
from aligner.physics.phase import (
    MAX_PHOTONS,
    back_action,
    phase_density,
    phase_information,
    phase_moments,
)
from aligner.physics.weak import pointer_response, weak_value

SIGMA_Z = PAULI["HV"]
PLUS = density_from_vector(linear_vector(np.pi / 4))


def random_case(seed):
    rng = np.random.default_rng(seed)

    def psd():
        m = rng.normal(size=(2, 2)) + 1j * rng.normal(size=(2, 2))
        x = m @ m.conj().T + 0.05 * np.eye(2)
        return x / np.max(np.linalg.eigvalsh(x))

    m = rng.normal(size=(2, 2)) + 1j * rng.normal(size=(2, 2))
    return psd(), psd(), (m + m.conj().T) / 2


@functools.cache
def pegg_barnett(points):
    """The phases (from -pi + pi/points) and QuTiP's Pegg-Barnett states as matrix columns."""
    phi0 = -np.pi + np.pi / points
    phases = phi0 + 2 * np.pi * np.arange(points) / points
    return phases, np.hstack([qutip.phase_basis(points, m, phi0).full() for m in range(points)])


def qutip_phase_distribution(rho, effect, a, g, photons, dim, points=None):
    """Brute force, this test: qubit x Fock(dim), U = exp(-i g A (x) n), post-selection by
    sqrt(E), partial trace, then the Pegg-Barnett distribution of the probe's phase over
    ``points`` phase states (the probe padded with empty Fock states up to that dimension);
    returns the phase *delays* (minus the phase) and their probabilities."""
    points = points or dim
    probe = qutip.coherent_dm(dim, np.sqrt(photons), method="analytic")
    state = qutip.tensor(qutip.Qobj(rho), probe)
    u = (-1j * g * qutip.tensor(qutip.Qobj(a), qutip.num(dim))).expm()
    root = qutip.tensor(qutip.Qobj(effect).sqrtm(), qutip.qeye(dim))
    post = np.pad((root * u * state * u.dag() * root).ptrace(1).full(), (0, points - dim))
    phases, basis = pegg_barnett(points)
    return -phases, np.real(np.sum(np.conj(basis) * (post @ basis), axis=0))


@pytest.mark.parametrize(("seed", "photons", "g"), [(0, 2.0, 0.4), (1, 6.5, 0.15), (2, 20.0, 0.05)])
def test_moments_and_density_match_qutip(seed, photons, g):
    # The Pegg-Barnett sum over `points` phases differs from the continuous moments by
    # ~ P(pi) (2 pi/points)^2, so many phase points: 1e-6 here even for N = 2.
    rho, effect, a = random_case(seed)
    dim, points = 96, 512
    delays, probs = qutip_phase_distribution(rho, effect, a, g, photons, dim, points)
    m = phase_moments(rho, effect, a, g, photons)
    assert m.probability == pytest.approx(probs.sum(), rel=1e-9)
    mean = np.sum(delays * probs) / probs.sum()
    assert m.mean == pytest.approx(mean, abs=1e-7)
    var = np.sum(delays**2 * probs) / probs.sum() - mean**2
    assert m.variance == pytest.approx(var, rel=2e-6)
    # Pegg-Barnett probabilities are the canonical density at the phase points times 2 pi/dim
    theta, f, _ = phase_density(rho, effect, a, g, photons, points=points)
    assert f * 2 * np.pi / points == pytest.approx(probs[::-1], abs=1e-11)
    assert theta == pytest.approx(delays[::-1])


def test_derivatives_and_information_match_finite_differences():
    # Brute force, this test: central differences of the QuTiP distribution in g.
    rho, effect, a = random_case(4)
    photons, g, h, dim = 5.0, 0.2, 1e-4, 128
    m = phase_moments(rho, effect, a, g, photons)
    up = qutip_phase_distribution(rho, effect, a, g * (1 + h), photons, dim)[1]
    dn = qutip_phase_distribution(rho, effect, a, g * (1 - h), photons, dim)[1]
    delays, mid = qutip_phase_distribution(rho, effect, a, g, photons, dim)
    dp = (up - dn) / (2 * g * h)
    assert m.dprobability == pytest.approx(dp.sum(), rel=1e-6)
    mean = [np.sum(delays * p) / p.sum() for p in (up, dn)]
    assert m.slope == pytest.approx((mean[0] - mean[1]) / (2 * g * h), rel=1e-5)
    info = phase_information(rho, effect, a, g, photons)
    assert info.total == pytest.approx(np.sum(dp**2 / mid), rel=1e-5)


def test_mean_cross_phase_turns_the_weak_value():
    # Derived (module doc; Jozsa-type first order in g sqrt N): the delay is g Re A_w' with the
    # pre-selection turned by exp(-i g N A). g N = 0.5 rad in both cases; the remainder falls
    # as (g sqrt N)^2, while the plain weak value stays 84 % off.
    effect = analyzer_effect(-np.pi / 4 + 0.2)
    plain = weak_value(PLUS, effect, SIGMA_Z)
    errors = []
    for photons in (100.0, 400.0):
        g = 0.5 / photons
        m = phase_moments(PLUS, effect, SIGMA_Z, g, photons)
        turned = weak_value(back_action(PLUS, SIGMA_Z, g, photons), effect, SIGMA_Z)
        assert abs(plain.imag) < 1e-12 < abs(turned.imag)  # off its axis
        assert abs(m.mean - g * plain.real) > 0.8 * abs(g * plain.real)
        errors.append(m.mean / (g * turned.real) - 1)
    assert abs(errors[1]) < 2e-3
    assert errors[0] / errors[1] == pytest.approx(4.0, rel=0.05)


@pytest.mark.parametrize(
    ("photons", "strength", "error_above", "error_below"),
    [(4.0, 1.0, 1e-3, 5e-3), (9.0, 1.0, 5e-4, 3e-3), (25.0, 1.0, 0.0, 7e-4),
     (100.0, 1.0, 0.0, 3e-4), (9.0, 0.05, 0.0, 1e-5), (400.0, 0.05, 0.0, 1e-8)],
)  # fmt: skip
def test_gaussian_approximation_error(photons, strength, error_above, error_below):
    # The Gaussian approximation (weak.py, sigma = 1/(2 sqrt N)) of the turned pre-selection
    # against the exact readout (itself checked against QuTiP above), at two imbalances.
    sigma = 1 / (2 * np.sqrt(photons))
    g = strength * sigma
    errors = []
    for eps in (0.3, 0.05):
        effect = analyzer_effect(-np.pi / 4 + eps)
        exact = phase_moments(PLUS, effect, SIGMA_Z, g, photons).mean
        turned = back_action(PLUS, SIGMA_Z, g, photons)
        approx = pointer_response(turned, effect, SIGMA_Z, g, sigma).position
        errors.append(abs(exact / approx - 1))
    assert error_above <= max(errors) < error_below


def test_gaussian_approximation_without_the_cross_phase_fails():
    # With no back-action (or only its first order exp(-i g N A)) the approximation misses.
    effect = analyzer_effect(-np.pi / 4 + 0.3)
    photons = 25.0
    sigma = 1 / (2 * np.sqrt(photons))
    g = sigma  # g N = 2.5 rad
    exact = phase_moments(PLUS, effect, SIGMA_Z, g, photons).mean
    plain = pointer_response(PLUS, effect, SIGMA_Z, g, sigma).position
    assert abs(exact / plain - 1) > 0.3
    u = np.diag(np.exp(-1j * g * photons * np.diag(SIGMA_Z)))
    first_order = pointer_response(u @ PLUS @ u.conj().T, effect, SIGMA_Z, g, sigma).position
    assert abs(exact / first_order - 1) > 0.01


def test_photon_number_range_is_enforced():
    with pytest.raises(ValueError, match="Gaussian approximation"):
        phase_moments(PLUS, PLUS, SIGMA_Z, 0.1, 2 * MAX_PHOTONS)
    with pytest.raises(ValueError, match="probe photon number"):
        phase_moments(PLUS, PLUS, SIGMA_Z, 0.1, 0.0)
