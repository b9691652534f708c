"""Readouts after propagation or a lens against a numerical angular-spectrum propagation of the
post-selected beam, Jozsa's linear response and the deflection-measurement amplification."""

from __future__ import annotations

import numpy as np
import pytest
from physics_reference import intensity, lens, propagate, trapezoid

from aligner.physics.branches import moments
from aligner.physics.jones import PAULI, density_from_vector
from aligner.physics.propagation import (
    Lens,
    Space,
    beam_variance,
    detector_branches,
    focal_plane,
    linear_shift,
    practical_amplification,
    ray_matrix,
    rayleigh_range,
    standard_shift,
)
from aligner.physics.weak import pointer_response, weak_value

SIGMA_Z = PAULI["HV"]
WAVELENGTH = 633e-6  # mm
K0 = 2 * np.pi / WAVELENGTH


def states(aw):
    """|i> = D and a post-selected |f> with <f|sigma_z|i>/<f|i> = aw (any complex aw != 1)."""
    bra = np.array([(1 + aw) / (1 - aw), 1.0], complex)
    ket = np.conj(bra) / np.linalg.norm(bra)
    return density_from_vector(np.array([1, 1]) / np.sqrt(2)), density_from_vector(ket)


def grid_mean(rho, effect, strength, sigma0, coupling, waist_to_coupling, train, paraxial):
    """Brute force, this test: the beam on a grid, propagated from its waist to the coupling
    plane and through the train by the angular spectrum (paraxial or exact kernel)."""
    x = np.linspace(-30.0, 30.0, 2**14, endpoint=False)
    # Uncoupled fields at the waist, back to the coupling plane, then couple on the grid.
    phi = (2 * np.pi * sigma0**2) ** -0.25 * np.exp(-(x**2) / (4 * sigma0**2))
    phi = propagate(phi, x, waist_to_coupling, K0, paraxial)
    lam, vec = np.linalg.eigh(rho)
    mu, evec = np.linalg.eigh(effect)
    p = 2 * np.pi * np.fft.fftfreq(x.size, x[1] - x[0])
    weights, fields = [], []
    for i in range(2):
        for j in range(2):
            # sigma_z is diagonal: branch amplitudes <e_j|a><a|v_i> with a = +1 (H), -1 (V).
            amp = np.conj(evec[:, j]) * vec[:, i]
            if coupling == "shift":
                spec = np.fft.fft(phi)
                field = sum(
                    amp[n] * np.fft.ifft(spec * np.exp(-1j * strength * s * p))
                    for n, s in enumerate((1, -1))
                )
            else:
                field = sum(
                    amp[n] * np.exp(1j * strength * s * x) * phi for n, s in enumerate((1, -1))
                )
            weights.append(lam[i] * mu[j])
            fields.append(field)
    fields = np.array(fields)
    for element in train:
        if isinstance(element, Space):
            fields = propagate(fields, x, element.distance, K0, paraxial)
        else:
            fields = lens(fields, x, element.focal_length, K0)
    dens = intensity(np.array(weights), fields)
    return trapezoid(x * dens, x) / trapezoid(dens, x)


def test_gaussian_beam_width_against_angular_spectrum():
    # physics.md (derived; check): Var_x(z) = sigma0^2 (1 + (z/z_R)^2), z_R = 4 pi sigma0^2/lambda.
    sigma0 = 0.3
    x = np.linspace(-20, 20, 2**13, endpoint=False)
    phi = np.exp(-(x**2) / (4 * sigma0**2))
    for z in (0.0, 200.0, 900.0, -1500.0):
        f = np.abs(propagate(phi, x, z, K0)) ** 2
        var = trapezoid(x**2 * f, x) / trapezoid(f, x)
        assert var == pytest.approx(beam_variance(sigma0, WAVELENGTH, z), rel=1e-6)
    assert rayleigh_range(sigma0, WAVELENGTH) == pytest.approx(2 * K0 * sigma0**2)


@pytest.mark.parametrize(
    ("coupling", "aw", "u", "train"),
    [
        ("shift", 3 + 2j, 0.0, (Space(500.0),)),
        ("shift", -1 + 4j, 250.0, (Space(300.0),)),
        ("kick", 2 - 3j, 0.0, (Space(800.0),)),
        ("kick", 5 + 1j, -300.0, (Space(150.0), Lens(200.0), Space(120.0))),
        ("kick", 1 + 6j, 100.0, focal_plane(250.0)),
    ],
)
def test_linear_response_matches_exact_beam_and_angular_spectrum(coupling, aw, u, train):
    # Jozsa, PRA 76, 044103 (2007): the linear response with free evolution; physics.md: it
    # agrees with a numerical angular-spectrum propagation to 1e-6 in the linear regime. With
    # the exact kernel a thin lens adds its (non-paraxial) aberration: a focal plane then sees
    # ~1e-5 of the much larger displacement at the lens, here up to ~1e-3 of the signal.
    rho, effect = states(aw)
    sigma0 = 0.5
    s = 1e-6 if coupling == "shift" else 1e-6 / sigma0**2
    expected = linear_shift(
        weak_value(rho, effect, SIGMA_Z), s, sigma0, WAVELENGTH, coupling, u, train
    )
    beam = detector_branches(rho, effect, SIGMA_Z, s, sigma0, WAVELENGTH, coupling, u, train)
    assert moments(beam).mean == pytest.approx(expected, rel=1e-5)
    mean = grid_mean(rho, effect, s, sigma0, coupling, u, train, paraxial=True)
    assert mean == pytest.approx(expected, rel=1e-8)
    mean = grid_mean(rho, effect, s, sigma0, coupling, u, train, paraxial=False)
    focused = any(isinstance(e, Lens) for e in train)
    assert mean == pytest.approx(expected, rel=2e-3 if focused else 1e-6)


def test_kick_at_the_waist_read_after_free_space():
    # physics.md (derived): exp(i k A x) at the waist, then z of free space:
    # d<x>(z) = -2 k Var_x(0) Im A_w + (z / k0) k Re A_w.
    aw = 4 - 7j
    rho, effect = states(aw)
    sigma0, k, z = 0.4, 1e-5, 1234.0
    expected = -2 * k * sigma0**2 * aw.imag + z / K0 * k * aw.real
    assert linear_shift(aw, k, sigma0, WAVELENGTH, "kick", 0.0, (Space(z),)) == pytest.approx(
        expected
    )
    beam = detector_branches(rho, effect, SIGMA_Z, k, sigma0, WAVELENGTH, "kick", 0.0, (Space(z),))
    assert moments(beam).mean == pytest.approx(expected, rel=1e-5)


def test_focal_plane_reads_momentum_exactly():
    # physics.md: in the focal plane of a lens of focal length f, x = f p / k0 (all orders: the
    # exact <p> of the Gaussian-pointer response, physics.md / weak.py).
    rho, effect = states(6 + 3j)
    sigma0, g, f = 0.5, 0.4, 300.0
    beam = detector_branches(
        rho, effect, SIGMA_Z, g, sigma0, WAVELENGTH, "shift", 700.0, focal_plane(f)
    )
    exact = pointer_response(rho, effect, SIGMA_Z, g, sigma0)
    assert moments(beam).mean == pytest.approx(f * exact.momentum / K0, rel=1e-10)
    assert moments(beam).probability == pytest.approx(exact.probability, rel=1e-12)


def test_dixon_amplification_factor():
    # Dixon et al., PRL 102, 173601 (2009) (from memory): kick at the waist,
    # A_w = -i cot(phi/2); a detector l_md away sees <x> = 2 k sigma^2 cot(phi/2) against the
    # deflection k l_md / k0 of the beam without post-selection: A = 2 k0 sigma^2 cot(phi/2)/l_md.
    phi = np.array([0.02, 0.05, 0.1])
    fvec = np.stack([np.ones_like(phi), -np.exp(1j * phi)], axis=-1) / np.sqrt(2)
    rho = density_from_vector(np.array([1, 1]) / np.sqrt(2))
    effect = density_from_vector(fvec)
    assert weak_value(rho, effect, SIGMA_Z) == pytest.approx(-1j / np.tan(phi / 2))
    sigma0, k, l_md = 0.6, 1e-7, 1500.0
    train = (Space(l_md),)
    beam = detector_branches(rho, effect, SIGMA_Z, k, sigma0, WAVELENGTH, "kick", 0.0, train)
    amp = practical_amplification(moments(beam).mean, k, WAVELENGTH, "kick", train)
    assert amp == pytest.approx(2 * K0 * sigma0**2 / np.tan(phi / 2) / l_md, rel=1e-6)
    # A lens in front of the detector changes both displacements as rays do (ray optics).
    train = (Space(400.0), Lens(250.0), Space(180.0))
    m = ray_matrix(train)
    assert standard_shift(k, WAVELENGTH, "kick", train) == pytest.approx(m[0, 1] * k / K0)
    beam = detector_branches(rho, effect, SIGMA_Z, k, sigma0, WAVELENGTH, "kick", 0.0, train)
    amp = practical_amplification(moments(beam).mean, k, WAVELENGTH, "kick", train)
    expected = 2 * K0 * sigma0**2 / np.tan(phi / 2) * m[0, 0] / m[0, 1]
    assert amp == pytest.approx(expected, rel=1e-6)


def test_unknown_coupling_is_refused():
    with pytest.raises(ValueError, match="allowed: shift, kick"):
        linear_shift(1.0, 1.0, 1.0, 1.0, "twist")
