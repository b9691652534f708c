"""Weak values and the exact Gaussian-pointer response against published results, QuTiP and a
brute-force grid integration of the pointer wave function."""

from __future__ import annotations

import numpy as np
import pytest
import qutip
from hypothesis import given, settings
from hypothesis import strategies as st

from aligner.physics.channels import analyzer_effect
from aligner.physics.jones import PAULI, density_from_vector, linear_vector, named_vector
from aligner.physics.weak import (
    observable_from_axis,
    observable_matrix,
    pointer_response,
    weak_value,
)

SIGMA_Z = PAULI["HV"]


def coupling_unitary(a, gp):
    """exp(-i gp A) for a Hermitian 2x2 A = a0 I + n.sigma at each value of ``gp`` (shape (n,)):
    exp(-i gp a0) (cos(gp |n|) I - i sin(gp |n|) n.sigma/|n|) (SU(2) identity; checked against
    scipy.linalg.expm in test_coupling_unitary_matches_expm)."""
    a0 = np.trace(a).real / 2
    traceless = a - a0 * np.eye(2)
    norm = np.sqrt(-np.real(np.linalg.det(traceless)))  # det(n.sigma) = -|n|^2
    phase = np.exp(-1j * gp * a0)[:, None, None]
    cos, sin = np.cos(gp * norm)[:, None, None], np.sin(gp * norm)[:, None, None]
    return phase * (cos * np.eye(2) - 1j * sin * traceless / norm)


def grid_response(rho, effect, observable, g, sigma, n=2048):
    """Independent method: put the pointer wave function on a grid, apply exp(-i g A p) in
    momentum space (FFT), post-select with the POVM element and integrate the pointer's
    position and momentum densities. Returns (P, <q>, <p>)."""
    a = np.asarray(observable, complex)
    half = 12 * sigma + 2 * abs(g) * np.max(np.abs(np.linalg.eigvalsh(a)))
    q = np.linspace(-half, half, n, endpoint=False)
    dq = q[1] - q[0]
    p = 2 * np.pi * np.fft.fftfreq(n, dq)
    phi_p = np.fft.fft((2 * np.pi * sigma**2) ** -0.25 * np.exp(-(q**2) / (4 * sigma**2)))
    u = coupling_unitary(a, g * p)  # (n, 2, 2)
    lam, vec = np.linalg.eigh(rho)
    mu, evec = np.linalg.eigh(effect)
    prob = mean_q = mean_p = 0.0
    for i in range(2):
        psi_p = (u @ vec[:, i]) * phi_p[:, None]  # (n, 2) two-component pointer
        for j in range(2):
            chi_p = psi_p @ np.conj(evec[:, j])
            chi_q = np.fft.ifft(chi_p)
            dens_q = np.abs(chi_q) ** 2
            dens_p = np.abs(chi_p) ** 2
            w = lam[i] * mu[j]
            norm = np.sum(dens_q) * dq
            prob += w * norm
            mean_q += w * np.sum(q * dens_q) * dq
            mean_p += w * norm * np.sum(p * dens_p) / np.sum(dens_p)
    return prob, mean_q / prob, mean_p / prob


def random_psd(rng, scale=1.0):
    m = rng.normal(size=(2, 2)) + 1j * rng.normal(size=(2, 2))
    x = m @ m.conj().T + 0.05 * np.eye(2)
    return scale * x / np.max(np.linalg.eigvalsh(x))


def random_hermitian(rng):
    m = rng.normal(size=(2, 2)) + 1j * rng.normal(size=(2, 2))
    return (m + m.conj().T) / 2


def final_state_for(aw):
    """A post-selected state |f> with <f|sigma_z|+>/<f|+> = aw for |+> = D."""
    # <f| = (a, b): (a - b)/(a + b) = aw  ->  a = b (1 + aw)/(1 - aw)
    bra = np.array([(1 + aw) / (1 - aw), 1.0], complex)
    ket = np.conj(bra)
    return ket / np.linalg.norm(ket)


D_STATE = density_from_vector(named_vector("D"))


@pytest.mark.parametrize(
    ("aw", "q", "p"), [(10, 0.470882, None), (40, 1.000625, None), (3 + 2j, 0.148884, 0.049566)]
)
def test_pointer_check_values(aw, q, p):
    # physics.md check values (g = 0.05, sigma = 1) of the all-orders pure-state response
    # (Kofman, Ashhab, Nori, Phys. Rep. 520, 43 (2012); Duck, Stevenson, Sudarshan, PRD 40, 2112).
    effect = density_from_vector(final_state_for(aw))
    assert weak_value(D_STATE, effect, SIGMA_Z) == pytest.approx(aw)
    r = pointer_response(D_STATE, effect, SIGMA_Z, 0.05, 1.0)
    assert r.position == pytest.approx(q, abs=1e-6)
    if p is not None:
        assert r.momentum == pytest.approx(p, abs=1e-6)


@given(st.floats(-60, 60), st.floats(-60, 60), st.floats(0.01, 3.0), st.floats(0.2, 5.0))
def test_all_orders_formula_pure_states(re, im, g, sigma):
    # Pure states and A^2 = 1: <q> = g Re A_w / D, <p> = g/(2 s^2) Im A_w exp(-g^2/2s^2) / D,
    # D = (1+|A_w|^2)/2 + (1-|A_w|^2)/2 exp(-g^2/2s^2) (physics.md; Kofman et al. 2012).
    aw = complex(re, im)
    if abs(aw - 1) < 1e-3:
        return
    r = pointer_response(D_STATE, density_from_vector(final_state_for(aw)), SIGMA_Z, g, sigma)
    x = np.exp(-(g**2) / (2 * sigma**2))
    d = (1 + abs(aw) ** 2) / 2 + (1 - abs(aw) ** 2) / 2 * x
    assert r.position == pytest.approx(g * aw.real / d, rel=1e-7, abs=1e-12)
    assert r.momentum == pytest.approx(g / (2 * sigma**2) * aw.imag * x / d, rel=1e-7, abs=1e-12)


def test_pointer_peak_for_real_weak_values():
    # <q>max = g / sqrt(1 - exp(-g^2/s^2)) at A_w* = sqrt(coth(g^2/(4 s^2))) (physics.md,
    # Kofman et al. 2012): about one pointer width, sigma/g in amplification.
    g, sigma = 0.05, 1.0
    aws = np.linspace(2, 200, 20001)
    effects = density_from_vector(np.stack([final_state_for(a) for a in aws]))
    q = pointer_response(D_STATE, effects, SIGMA_Z, g, sigma).position
    k = int(np.argmax(q))
    assert q[k] == pytest.approx(g / np.sqrt(1 - np.exp(-(g**2) / sigma**2)), rel=1e-7)
    assert aws[k] == pytest.approx(np.sqrt(1 / np.tanh(g**2 / (4 * sigma**2))), abs=0.02)
    assert q[k] / g == pytest.approx(sigma / g, rel=1e-3)


@settings(max_examples=25, deadline=None)
@given(st.integers(0, 2**32 - 1))
def test_exact_response_matches_grid_integration(seed):
    # Closed form in the eigenbasis of A versus brute-force integration of the pointer wave
    # function (independent method, see grid_response): random mixed rho, POVM element E,
    # Hermitian A with random eigenvalues, random g and sigma.
    rng = np.random.default_rng(seed)
    rho = random_psd(rng, rng.uniform(0.2, 1.0))
    rho /= np.trace(rho).real / rng.uniform(0.3, 1.0)
    effect = random_psd(rng, rng.uniform(0.3, 1.0))
    a = random_hermitian(rng)
    sigma = rng.uniform(0.5, 2.0)
    g = sigma * rng.uniform(0.01, 2.0)
    prob, q, p = grid_response(rho, effect, a, g, sigma)
    r = pointer_response(rho, effect, a, g, sigma)
    assert r.probability == pytest.approx(prob, rel=1e-9)
    assert r.position == pytest.approx(q, rel=1e-7, abs=1e-9 * sigma)
    assert r.momentum == pytest.approx(p, rel=1e-7, abs=1e-9 / sigma)


def test_coupling_unitary_matches_expm():
    from scipy.linalg import expm

    rng = np.random.default_rng(3)
    a = random_hermitian(rng)
    gp = np.array([-3.0, -0.2, 0.0, 0.7, 5.0])
    np.testing.assert_allclose(
        coupling_unitary(a, gp), expm(-1j * gp[:, None, None] * a), atol=1e-12
    )


def test_grid_integration_detects_a_wrong_response():
    # The independent method is sensitive: a 1 % error in g is visible.
    rng = np.random.default_rng(5)
    rho, effect, a = random_psd(rng), random_psd(rng), random_hermitian(rng)
    _, q, _ = grid_response(rho, effect, a, 0.8, 1.0)
    assert abs(pointer_response(rho, effect, a, 0.808, 1.0).position - q) > 1e-4 * abs(q)


def test_linear_response_limit():
    # Small g: <q> = g Re A_w, <p> = 2 g Var(p) Im A_w with Var(p) = 1/(4 sigma^2)
    # (Jozsa, Phys. Rev. A 76, 044103 (2007)); for mixed states with the generalized weak value
    # (Wiseman, Phys. Rev. A 65, 032111 (2002)).
    rng = np.random.default_rng(11)
    for _ in range(10):
        rho, effect, a = random_psd(rng), random_psd(rng), random_hermitian(rng)
        sigma, g = rng.uniform(0.5, 2.0), 1e-6
        aw = weak_value(rho, effect, a)
        r = pointer_response(rho, effect, a, g, sigma)
        assert r.position == pytest.approx(g * aw.real, rel=1e-5, abs=1e-14)
        assert r.momentum == pytest.approx(2 * g / (4 * sigma**2) * aw.imag, rel=1e-5, abs=1e-14)


def test_weak_value_against_qutip():
    # Generalized weak value Tr(E A rho)/Tr(E rho) (Dressel & Jordan, PRA 85, 012107 (2012))
    # and its pure-state form <f|A|i>/<f|i> (Aharonov, Albert, Vaidman, PRL 60, 1351 (1988)),
    # both evaluated with QuTiP operators.
    for seed in range(20):
        rho, effect = qutip.rand_dm(2, seed=seed), qutip.rand_dm(2, seed=100 + seed)
        a = qutip.rand_herm(2, seed=200 + seed)
        expected = (effect * a * rho).tr() / (effect * rho).tr()
        assert weak_value(rho.full(), effect.full(), a.full()) == pytest.approx(expected)
        i, f = qutip.rand_ket(2, seed=300 + seed), qutip.rand_ket(2, seed=400 + seed)
        pure = f.overlap(a * i) / f.overlap(i)
        got = weak_value((i * i.dag()).full(), (f * f.dag()).full(), a.full())
        assert got == pytest.approx(pure)


def test_weak_value_broadcasts():
    rng = np.random.default_rng(2)
    rho = np.stack([random_psd(rng) for _ in range(6)]).reshape(2, 3, 2, 2)
    effect = random_psd(rng)
    out = weak_value(rho, effect, SIGMA_Z)
    assert out.shape == (2, 3)
    assert out[1, 2] == pytest.approx(weak_value(rho[1, 2], effect, SIGMA_Z))


def test_textbook_case_cot_eps():
    # Pre-selection at 45 deg, post-selection at -45 deg + eps, A = HV: A_w = cot(eps),
    # post-selection probability sin^2(eps) (physics.md worked case; Dressel et al., Rev. Mod.
    # Phys. 86, 307 (2014)).
    eps = np.array([1e-4, 1e-3, 0.01, 0.1, 0.5])
    rho = density_from_vector(linear_vector(np.pi / 4))
    effect = density_from_vector(linear_vector(-np.pi / 4 + eps))
    np.testing.assert_allclose(
        weak_value(rho, effect, observable_matrix("HV")), 1 / np.tan(eps), rtol=1e-9
    )
    np.testing.assert_allclose(
        pointer_response(rho, effect, SIGMA_Z, 1e-9, 1.0).probability, np.sin(eps) ** 2, rtol=1e-7
    )


@pytest.mark.parametrize("delta", [1e-1, 1e-2, 1e-3, 1e-4])
def test_two_path_interferometer_photon_number(delta):
    # Two paths (basis states 1, 2), equal input |i> = (|1> + |2>)/sqrt2, output port with
    # amplitudes r = (1 + delta)/2 and t = (1 - delta)/2: the weak value of the photon number in
    # arm 1 is r/(r - t) ~ 1/(2 delta) (fact of the trade, no source).
    r, t = (1 + delta) / 2, (1 - delta) / 2
    f = np.array([r, -t]) / np.hypot(r, t)
    n1 = weak_value(D_STATE, density_from_vector(f), observable_matrix("H"))
    assert n1 == pytest.approx(r / delta, rel=1e-7)
    assert n1.real == pytest.approx(1 / (2 * delta), rel=2 * delta)


def test_extinction_cap_check_value():
    # Analyzer leakage d = 1/ER: |A_w| = (1 - d) tan(eps)/(tan^2 eps + d), largest
    # (ER - 1)/(2 sqrt ER) at tan(eps) = sqrt(d); ER = 1e5 -> 158.1123 at 3.1623 mrad
    # (physics.md, derived; related: Knee, Briggs, Benjamin, Gauger, PRA 87, 012115 (2013)).
    from scipy.optimize import minimize_scalar

    er = 1e5
    rho = density_from_vector(linear_vector(np.pi / 4))

    def aw(eps):
        return weak_value(rho, analyzer_effect(-np.pi / 4 + eps, er), SIGMA_Z)

    eps = np.logspace(-5, -1, 50)
    d = 1 / er
    np.testing.assert_allclose(
        np.abs(aw(eps)), (1 - d) * np.tan(eps) / (np.tan(eps) ** 2 + d), rtol=1e-9
    )
    best = minimize_scalar(
        lambda e: -abs(aw(e)), bounds=(1e-4, 1e-2), method="bounded", options={"xatol": 1e-12}
    )
    assert -best.fun == pytest.approx(158.1123, abs=1e-4)
    assert best.x == pytest.approx(3.1623e-3, abs=1e-7)
    assert -best.fun == pytest.approx(np.sqrt(er) / 2, rel=1e-4)


def test_observable_from_axis_matches_named_observables():
    np.testing.assert_allclose(observable_from_axis((0, 0, 2)), PAULI["RL"])
    np.testing.assert_allclose(observable_from_axis((1, 0, 0), (1.0, 0.0)), observable_matrix("H"))
    with pytest.raises(ValueError, match="allowed"):
        observable_matrix("XY")
