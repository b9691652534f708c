"""Jones matrices, vectors and Stokes conversions against sympy.physics.optics and QuTiP."""

from __future__ import annotations

import numpy as np
import pytest
import sympy as sp
from sympy.physics.optics import polarization as spol

from aligner.physics import jones as J

RNG = np.random.default_rng(20260)
TH, DE, PSI, CHI = sp.symbols("theta delta psi chi", real=True)

# Reference: sympy.physics.optics.polarization (SymPy 1.14), lambdified to numpy scalars.
SYMPY_RETARDER = sp.lambdify((TH, DE), spol.phase_retarder(TH, DE), "numpy")
SYMPY_HWP = sp.lambdify(TH, spol.half_wave_retarder(TH), "numpy")
SYMPY_QWP = sp.lambdify(TH, spol.quarter_wave_retarder(TH), "numpy")
SYMPY_POLARIZER = sp.lambdify(TH, spol.linear_polarizer(TH), "numpy")
SYMPY_JONES_VECTOR = sp.lambdify((PSI, CHI), spol.jones_vector(PSI, CHI), "numpy")


def _elementwise(reference, *arrays: np.ndarray) -> np.ndarray:
    """Evaluate a scalar sympy-lambdified matrix at every point of broadcast arrays."""
    arrays = np.broadcast_arrays(*arrays)
    flat = [
        np.asarray(reference(*(float(a.flat[i]) for a in arrays)), complex)
        for i in range(arrays[0].size)
    ]
    return np.array(flat).reshape(arrays[0].shape + flat[0].shape)


@pytest.mark.parametrize("shape", [(), (7,), (3, 4)])
def test_retarder_equals_sympy_phase_retarder(shape):
    # Source: sympy.physics.optics.polarization.phase_retarder (global phase included).
    theta = RNG.uniform(-2 * np.pi, 2 * np.pi, shape)
    delta = RNG.uniform(-2 * np.pi, 2 * np.pi, shape)
    ours = J.retarder(theta, delta)
    assert ours.shape == (*shape, 2, 2)
    np.testing.assert_allclose(ours, _elementwise(SYMPY_RETARDER, theta, delta), rtol=0, atol=1e-12)


def test_retarder_broadcasts_angle_against_retardance():
    # Source: sympy.physics.optics.polarization.phase_retarder.
    theta = RNG.uniform(-np.pi, np.pi, (3, 1))
    delta = RNG.uniform(0, 2 * np.pi, (4,))
    ours = J.retarder(theta, delta)
    assert ours.shape == (3, 4, 2, 2)
    np.testing.assert_allclose(ours, _elementwise(SYMPY_RETARDER, theta, delta), rtol=0, atol=1e-12)


@pytest.mark.parametrize(("reference", "delta"), [(SYMPY_HWP, np.pi), (SYMPY_QWP, np.pi / 2)])
@pytest.mark.parametrize("shape", [(), (3, 4)])
def test_waveplates_equal_sympy(reference, delta, shape):
    # Source: sympy.physics.optics.polarization.half_wave_retarder / quarter_wave_retarder.
    theta = RNG.uniform(-np.pi, np.pi, shape)
    np.testing.assert_allclose(
        J.retarder(theta, delta), _elementwise(reference, theta), rtol=0, atol=1e-12
    )


@pytest.mark.parametrize("shape", [(), (3, 4)])
def test_linear_projector_equals_sympy_linear_polarizer(shape):
    # Source: sympy.physics.optics.polarization.linear_polarizer.
    theta = RNG.uniform(-np.pi, np.pi, shape)
    np.testing.assert_allclose(
        J.linear_projector(theta), _elementwise(SYMPY_POLARIZER, theta), rtol=0, atol=1e-12
    )
    np.testing.assert_allclose(
        J.projector(J.linear_vector(theta)), J.linear_projector(theta), rtol=0, atol=1e-12
    )


@pytest.mark.parametrize("shape", [(), (3, 4)])
def test_azimuth_ellipticity_vector_equals_sympy_jones_vector(shape):
    # Source: sympy.physics.optics.polarization.jones_vector(psi, chi).
    psi = RNG.uniform(-np.pi, np.pi, shape)
    chi = RNG.uniform(-np.pi / 4, np.pi / 4, shape)
    ref = _elementwise(SYMPY_JONES_VECTOR, psi, chi)[..., 0]
    np.testing.assert_allclose(J.vector_from_azimuth_ellipticity(psi, chi), ref, rtol=0, atol=1e-12)


@pytest.mark.parametrize(
    ("name", "psi", "chi"),
    [
        ("H", 0, 0),
        ("V", sp.pi / 2, 0),
        ("D", sp.pi / 4, 0),
        ("A", -sp.pi / 4, 0),
        ("R", 0, sp.pi / 4),
        ("L", 0, -sp.pi / 4),
    ],
)
def test_named_vectors_have_sympy_handedness(name, psi, chi):
    # Source: sympy.physics.optics.polarization.jones_vector; R = jones_vector(0, pi/4).
    ref = np.array(spol.jones_vector(psi, chi).evalf(), dtype=complex)[:, 0]
    np.testing.assert_allclose(J.named_vector(name), ref, rtol=0, atol=1e-15)


def test_pauli_observables_are_differences_of_named_projectors():
    # Definition in the foundation issue: HV = |H><H| - |V><V|, etc. (named states from sympy).
    for key, (a, b) in {"HV": "HV", "DA": "DA", "RL": "RL"}.items():
        expected = J.projector(J.named_vector(a)) - J.projector(J.named_vector(b))
        np.testing.assert_allclose(J.PAULI[key], expected, rtol=0, atol=1e-15)


def test_stokes_from_jones_equals_sympy_jones_2_stokes():
    # Source: sympy.physics.optics.polarization.jones_2_stokes.
    vectors = RNG.normal(size=(6, 2)) + 1j * RNG.normal(size=(6, 2))
    ours = J.stokes_from_jones(vectors)
    for v, s in zip(vectors, ours, strict=True):
        e = sp.Matrix([sp.sympify(complex(v[0])), sp.sympify(complex(v[1]))])
        ref = np.array([complex(x) for x in spol.jones_2_stokes(e)]).real
        np.testing.assert_allclose(s, ref, rtol=0, atol=1e-12)


def test_stokes_of_sympy_stokes_vector_round_trips():
    # Source: sympy.physics.optics.polarization.stokes_vector(psi, chi, p, I).
    psi, chi = RNG.uniform(-1.5, 1.5, 5), RNG.uniform(-0.78, 0.78, 5)
    p, intensity = RNG.uniform(0.05, 1.0, 5), RNG.uniform(0.1, 3.0, 5)
    ref = np.array(
        [
            [float(x) for x in spol.stokes_vector(*args)]
            for args in zip(psi, chi, p, intensity, strict=True)
        ]
    )
    az, ell = J.azimuth_ellipticity_from_stokes(ref)
    np.testing.assert_allclose(az, psi, atol=1e-12)
    np.testing.assert_allclose(ell, chi, atol=1e-12)
    np.testing.assert_allclose(J.degree_of_polarization(ref), p, atol=1e-12)
    rho = J.density_from_stokes(ref)
    np.testing.assert_allclose(np.trace(rho, axis1=-2, axis2=-1).real, intensity, atol=1e-12)
    np.testing.assert_allclose(J.stokes_from_density(rho), ref, atol=1e-12)


def test_stokes_jones_azimuth_round_trips():
    # Derived from the definitions: Jones -> Stokes -> Jones is the identity up to a global phase.
    vectors = RNG.normal(size=(50, 2)) + 1j * RNG.normal(size=(50, 2))
    back = J.jones_from_stokes(J.stokes_from_jones(vectors))
    np.testing.assert_allclose(
        np.abs(J.overlap(back, vectors)), np.sum(np.abs(vectors) ** 2, axis=-1), rtol=1e-12
    )
    np.testing.assert_allclose(J.stokes_from_jones(back), J.stokes_from_jones(vectors), atol=1e-12)
    psi = RNG.uniform(-np.pi / 2 + 1e-6, np.pi / 2, 50)
    chi = RNG.uniform(-np.pi / 4 + 1e-6, np.pi / 4 - 1e-6, 50)
    az, ell = J.azimuth_ellipticity_from_stokes(
        J.stokes_from_jones(J.vector_from_azimuth_ellipticity(psi, chi))
    )
    np.testing.assert_allclose(az, psi, atol=1e-10)
    np.testing.assert_allclose(ell, chi, atol=1e-10)


def test_partially_polarized_stokes_keeps_polarized_part():
    # Definition (Born & Wolf, Principles of Optics, sec. 10.8; from memory): a Stokes vector splits
    # into an unpolarized part and a fully polarized part of intensity sqrt(S1^2+S2^2+S3^2).
    s = np.array([2.0, 0.3, -0.4, 1.2])
    v = J.jones_from_stokes(s)
    ip = np.linalg.norm(s[1:])
    np.testing.assert_allclose(J.stokes_from_jones(v), [ip, *s[1:]], atol=1e-12)
    assert J.degree_of_polarization(s) == pytest.approx(ip / 2.0, abs=1e-15)


def test_jones_from_stokes_phase_convention_as_documented():
    v = J.jones_from_stokes(np.array([1.0, 0.2, 0.5, 0.6]))
    assert abs(v[0].imag) < 1e-12


def test_fidelity_equals_qutip():
    # Source: QuTiP 5 qutip.fidelity (returns Tr sqrt(sqrt(rho) sigma sqrt(rho)), unsquared);
    # Uhlmann fidelity as in Nielsen & Chuang (2000), sec. 9.2.2 (squared convention here).
    qutip = pytest.importorskip("qutip")
    for _ in range(20):
        a, b = (RNG.normal(size=(2, 2)) + 1j * RNG.normal(size=(2, 2)) for _ in range(2))
        rho, sigma = a @ a.conj().T, b @ b.conj().T
        rho, sigma = rho / np.trace(rho), sigma / np.trace(sigma)
        ref = qutip.fidelity(qutip.Qobj(rho), qutip.Qobj(sigma)) ** 2
        assert J.fidelity(rho, sigma) == pytest.approx(ref, abs=1e-9)


def test_fidelity_of_pure_states_is_squared_overlap():
    # Derived: F(|a><a|, |b><b|) = |<a|b>|^2 (Nielsen & Chuang 2000, sec. 9.2.2).
    a = J.vector_from_azimuth_ellipticity(RNG.uniform(-1, 1, 10), RNG.uniform(-0.7, 0.7, 10))
    b = J.vector_from_azimuth_ellipticity(RNG.uniform(-1, 1, 10), RNG.uniform(-0.7, 0.7, 10))
    f = J.fidelity(J.density_from_vector(a), J.density_from_vector(b))
    np.testing.assert_allclose(f, np.abs(J.overlap(a, b)) ** 2, atol=1e-12)
    np.testing.assert_allclose(
        J.overlap(a, b), [np.vdot(x, y) for x, y in zip(a, b, strict=True)], atol=1e-15
    )


def test_hwp_turns_linear_polarization_by_twice_its_angle():
    # Source: Hecht, Optics (4th ed.), sec. 8.7 on retarders (from memory): a half-wave plate with
    # its axis at theta reflects linear polarization at alpha to 2 theta - alpha.
    theta = RNG.uniform(-np.pi, np.pi, (4, 5))
    alpha = RNG.uniform(-np.pi, np.pi, (4, 5))
    out = np.einsum("...ij,...j->...i", J.retarder(theta, np.pi), J.linear_vector(alpha))
    az, ell = J.azimuth_ellipticity_from_stokes(J.stokes_from_jones(out))
    turned = np.angle(np.exp(2j * (az - (2 * theta - alpha))))  # compare modulo pi
    np.testing.assert_allclose(turned, 0, atol=1e-10)
    np.testing.assert_allclose(ell, 0, atol=1e-10)


def test_qwp_at_45_makes_circular_with_sympy_handedness():
    # Source: sympy conventions (phase_retarder, jones_vector): QWP at +45 deg turns H into
    # (H - iV)/sqrt2 = L and V into R, up to a global phase.
    h, v = J.named_vector("H"), J.named_vector("V")
    q = J.retarder(np.pi / 4, np.pi / 2)
    assert abs(J.overlap(J.named_vector("L"), q @ h)) == pytest.approx(1, abs=1e-14)
    assert abs(J.overlap(J.named_vector("R"), q @ v)) == pytest.approx(1, abs=1e-14)
    ref = np.array(spol.quarter_wave_retarder(sp.pi / 4) * spol.jones_vector(0, 0), dtype=complex)
    assert abs(J.overlap(J.named_vector("L"), ref[:, 0])) == pytest.approx(1, abs=1e-14)


def test_rotator_is_two_half_wave_plates():
    # Source: Jones calculus identity (Hecht, Optics, sec. 8.12; from memory): half-wave plates at
    # theta1 then theta2 rotate any polarization by 2 (theta2 - theta1), here with phase -1.
    t1, t2 = RNG.uniform(-np.pi, np.pi, (2, 6))
    pair = J.matmul2(J.retarder(t2, np.pi), J.retarder(t1, np.pi))
    np.testing.assert_allclose(J.rotator(2 * (t2 - t1)), -pair, atol=1e-12)
    alpha = RNG.uniform(-np.pi, np.pi, 6)
    out = np.einsum("...ij,...j->...i", J.rotator(t1), J.linear_vector(alpha))
    np.testing.assert_allclose(out, J.linear_vector(alpha + t1), atol=1e-12)


def test_matmul2_and_adjoint_equal_numpy():
    # Reference: numpy.matmul / conjugate transpose.
    a = RNG.normal(size=(3, 1, 2, 2)) + 1j * RNG.normal(size=(3, 1, 2, 2))
    b = RNG.normal(size=(4, 2, 2)) + 1j * RNG.normal(size=(4, 2, 2))
    np.testing.assert_allclose(J.matmul2(a, b), a @ b, atol=1e-13)
    np.testing.assert_allclose(J.adjoint(a), np.conj(np.swapaxes(a, -1, -2)), atol=0)
