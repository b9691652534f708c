"""Polarization channels against py-pol (Jones and Mueller), Malus's law, and property tests.

Two findings are pinned down here (see the comments at each test):

* py-pol's linear retarder turns polarization the other way round from sympy's
  ``phase_retarder`` (which this project follows): with the same named states (both call
  (H + iV)/sqrt2 "right", S3 = +1), py-pol's ``retarder_linear(R=delta, azimuth=theta)`` acts
  like our ``retarder(theta, -delta)``, i.e. like ours with its fast axis at ``theta + 90 deg``.
  The comparisons below map every retarder that way.
* Our finite-extinction polarizer ``T (P rho P + Q rho Q / ER)`` is *incoherent*. In Mueller
  terms it is ``T/2 [[1+d, 1-d, 0, 0], [1-d, 1+d, 0, 0], 0, 0]`` (d = 1/ER, element frame):
  the sum of two ideal polarizers weighted T and T/ER, i.e. a diattenuator followed by complete
  dephasing of the (H, V) coherence in its own frame. py-pol's ``diattenuator_linear`` (from
  amplitude transmissions p1 = sqrt T, p2 = sqrt(T/ER)) is the *coherent* diattenuator: same
  first two rows, but ``M22 = M33 = T sqrt(d)`` instead of 0. Both give the same POVM element
  ``E = T (P + Q/ER)`` as a final analyzer; they differ when a finite-extinction polarizer sits
  inside a chain that is followed by more optics.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from py_pol.jones_matrix import Jones_matrix
from py_pol.jones_vector import Jones_vector
from py_pol.mueller import Mueller
from py_pol.stokes import Stokes

from aligner.physics import channels as C
from aligner.physics import jones as J

RNG = np.random.default_rng(4242)
PAULI4 = np.array([np.eye(2), J.PAULI["HV"], J.PAULI["DA"], J.PAULI["RL"]])


def mueller_of(channel) -> np.ndarray:
    """Mueller matrix of a channel, from its action on density matrices:
    M_ij = Tr(sigma_i Phi(sigma_j)) / 2."""
    return np.array(
        [
            [np.real(np.trace(si @ C.push_forward_state(sj, [channel]))) / 2 for sj in PAULI4]
            for si in PAULI4
        ]
    )


# ------------------------------------------------------------------------------------------
# py-pol Jones: retarders and ideal polarizers


def _pypol_retarder_jones(theta: float, delta: float) -> Jones_matrix:
    # py-pol 1.3 Jones_matrix.retarder_linear; azimuth + 90 deg maps its sign convention to sympy's.
    m = Jones_matrix("ret")
    m.retarder_linear(R=delta, azimuth=theta + np.pi / 2)
    return m


def _random_chain(n: int, finite: bool):
    """(kind, angle, retardance or ER, transmission) tuples in beam order."""
    chain = []
    for _ in range(n):
        theta = RNG.uniform(0, np.pi)
        if RNG.random() < 0.6:
            chain.append(("retarder", theta, RNG.uniform(0, 2 * np.pi), 1.0))
        else:
            er = 10 ** RNG.uniform(0.2, 5) if finite else np.inf
            chain.append(("polarizer", theta, er, RNG.uniform(0.5, 1.0) if finite else 1.0))
    return chain


def _our_channels(chain):
    out = []
    for kind, theta, x, t in chain:
        if kind == "retarder":
            out.append(C.Retarder(theta, x))
        else:
            out.append(C.Polarizer(theta, x, t))
    return out


@pytest.mark.parametrize("trial", range(12))
def test_stokes_through_ideal_chain_equals_pypol_jones(trial):
    # Source: py-pol 1.3 (Jones_vector, Jones_matrix.retarder_linear / diattenuator_perfect,
    # Stokes.from_Jones).
    chain = _random_chain(int(RNG.integers(1, 7)), finite=False)
    azimuth, ellipticity = RNG.uniform(0, np.pi), RNG.uniform(-np.pi / 4, np.pi / 4)
    light = Jones_vector("in")
    light.general_azimuth_ellipticity(azimuth=azimuth, ellipticity=ellipticity)
    for kind, theta, x, _ in chain:
        if kind == "retarder":
            element = _pypol_retarder_jones(theta, x)
        else:
            element = Jones_matrix("pol")
            element.diattenuator_perfect(azimuth=theta)
        light = element * light
    ref = Stokes("ref")
    ref.from_Jones(light)
    rho = J.density_from_vector(J.vector_from_azimuth_ellipticity(azimuth, ellipticity))
    ours = J.stokes_from_density(C.push_forward_state(rho, _our_channels(chain)))
    np.testing.assert_allclose(ours, ref.M.ravel(), atol=1e-10)


def test_pypol_retarder_turns_the_other_way():
    # Source: py-pol 1.3 and sympy 1.14. Same input H, same QWP at +45 deg: py-pol gives
    # S3 = +1 (its "right"), sympy's phase_retarder and ours give S3 = -1. Pins the mapping above.
    q = Jones_matrix("q")
    q.retarder_linear(R=np.pi / 2, azimuth=np.pi / 4)
    h = Jones_vector("h")
    h.linear_light(azimuth=0)
    s = Stokes("s")
    s.from_Jones(q * h)
    assert s.M.ravel()[3] == pytest.approx(1.0, abs=1e-12)
    ours = J.stokes_from_jones(J.retarder(np.pi / 4, np.pi / 2) @ J.named_vector("H"))
    assert ours[3] == pytest.approx(-1.0, abs=1e-12)


# ------------------------------------------------------------------------------------------
# py-pol Mueller: retarders and finite-extinction polarizers


def _pypol_incoherent_polarizer(theta: float, er: float, t: float) -> Mueller:
    # py-pol 1.3 Mueller.diattenuator_perfect: T * pass(theta) + (T/ER) * pass(theta + 90 deg).
    p, q = Mueller("p"), Mueller("q")
    p.diattenuator_perfect(azimuth=theta)
    q.diattenuator_perfect(azimuth=theta + np.pi / 2)
    return p * t + q * (t / er)


@pytest.mark.parametrize("trial", range(12))
def test_stokes_through_finite_extinction_chain_equals_pypol_mueller(trial):
    # Source: py-pol 1.3 (Stokes.from_components, Mueller.retarder_linear, diattenuator_perfect).
    chain = _random_chain(int(RNG.integers(1, 7)), finite=True)
    s_in = np.array([1.0, *RNG.uniform(-0.5, 0.5, 3)])  # partially polarized input
    light = Stokes("in")
    light.from_components(list(s_in))
    for kind, theta, x, t in chain:
        if kind == "retarder":
            element = Mueller("ret")
            element.retarder_linear(R=x, azimuth=theta + np.pi / 2)
        else:
            element = _pypol_incoherent_polarizer(theta, x, t)
        light = element * light
    ours = J.stokes_from_density(
        C.push_forward_state(J.density_from_stokes(s_in), _our_channels(chain))
    )
    np.testing.assert_allclose(ours, light.M.ravel(), atol=1e-10)


@pytest.mark.parametrize(("theta", "er", "t"), [(0.0, 1e3, 0.9), (0.7, 50.0, 0.8), (2.0, 1e5, 1.0)])
def test_incoherent_polarizer_mueller_versus_pypol_coherent_diattenuator(theta, er, t):
    # Derived (see module docstring) and compared with py-pol 1.3 Mueller.diattenuator_linear.
    d = 1.0 / er
    ours = mueller_of(C.Polarizer(0.0, er, t))
    expected = t / 2 * np.array([[1 + d, 1 - d, 0, 0], [1 - d, 1 + d, 0, 0], [0] * 4, [0] * 4])
    np.testing.assert_allclose(ours, expected, atol=1e-14)

    coherent = Mueller("dia")
    coherent.diattenuator_linear(p1=np.sqrt(t), p2=np.sqrt(t * d), azimuth=theta)
    ours_theta = mueller_of(C.Polarizer(theta, er, t))
    ref = coherent.M[..., 0]
    # Same transmitted intensity for every input (first row) ...
    np.testing.assert_allclose(ours_theta[0], ref[0], atol=1e-12)
    # ... but py-pol's coherent diattenuator keeps T sqrt(d) of the coherence that ours removes.
    diff = ref - ours_theta
    residual = np.zeros((4, 4))
    residual[2, 2] = residual[3, 3] = t * np.sqrt(d)
    rot = np.eye(4)
    c2, s2 = np.cos(2 * theta), np.sin(2 * theta)
    rot[1:3, 1:3] = [[c2, -s2], [s2, c2]]
    np.testing.assert_allclose(diff, rot @ residual @ rot.T, atol=1e-12)


def test_analyzer_effect_equals_pypol_diattenuator_povm():
    # Source: py-pol 1.3 Jones_matrix.diattenuator_linear; the POVM element of a detector behind
    # it is J^dagger J (Nielsen & Chuang 2000, sec. 2.2.6), which also equals our incoherent
    # polarizer's Heisenberg dual of the identity.
    theta = RNG.uniform(0, np.pi, 5)
    er = 10 ** RNG.uniform(0.5, 6, 5)
    t = RNG.uniform(0.3, 1.0, 5)
    for th, e, tt in zip(theta, er, t, strict=True):
        m = Jones_matrix("a")
        m.diattenuator_linear(p1=np.sqrt(tt), p2=np.sqrt(tt / e), azimuth=th)
        jm = m.M[..., 0]
        ours = C.analyzer_effect(th, e, tt)
        np.testing.assert_allclose(ours, jm.conj().T @ jm, atol=1e-12)
        dual = C.pull_back_effect(np.eye(2), [C.Polarizer(th, e, tt)])
        np.testing.assert_allclose(ours, dual, atol=1e-14)


# ------------------------------------------------------------------------------------------
# Stokes-space channels against their Jones / density-matrix definitions


def test_stokes_channels_equal_jones_conjugation():
    # Definition: a unitary element maps rho -> J rho^dagger J with J the Jones matrix checked
    # against sympy in test_jones.py; its dual maps E -> J^dagger E J. Shapes (3, 4) broadcast.
    theta = RNG.uniform(-np.pi, np.pi, (3, 4))
    delta = RNG.uniform(0, 2 * np.pi, (3, 4))
    rho = J.density_from_stokes(np.array([1.0, 0.3, -0.5, 0.6]))
    for channel, matrix in (
        (C.Retarder(theta, delta), J.retarder(theta, delta)),
        (C.Rotator(theta), J.rotator(theta)),
    ):
        adj = J.adjoint(matrix)
        np.testing.assert_allclose(
            C.push_forward_state(rho, [channel]), matrix @ rho @ adj, atol=1e-14
        )
        np.testing.assert_allclose(
            C.pull_back_effect(rho, [channel]), adj @ rho @ matrix, atol=1e-14
        )


def test_polarizer_channel_equals_its_definition():
    # Definition (foundation issue): rho -> T (P rho P + Q rho Q / ER), P = |p><p|, Q = I - P.
    theta = RNG.uniform(-np.pi, np.pi, (3, 4))
    er, t = 10 ** RNG.uniform(0, 6, (3, 4)), RNG.uniform(0.1, 1.0, (3, 4))
    rho = J.density_from_stokes(np.array([0.8, 0.1, 0.5, -0.4]))
    p = J.linear_projector(theta)
    q = np.eye(2) - p
    expected = t[..., None, None] * (p @ rho @ p + q @ rho @ q / er[..., None, None])
    np.testing.assert_allclose(
        C.push_forward_state(rho, [C.Polarizer(theta, er, t)]), expected, atol=1e-14
    )


# ------------------------------------------------------------------------------------------
# Malus's law, sources, duality


def test_malus_law_with_finite_extinction():
    # Source: Malus's law, I = I0 cos^2(alpha) (Hecht, Optics, sec. 8.2; from memory), with the
    # leakage of the POVM E = T(P + Q/ER) of physics.md: T (cos^2 + sin^2 / ER).
    alpha = RNG.uniform(-np.pi, np.pi, (3, 4))
    p = RNG.uniform(-np.pi, np.pi, (3, 4))
    er, t = 2.0e3, 0.85
    rho = J.density_from_vector(J.linear_vector(alpha))
    prob = np.real(np.einsum("...ij,...ji->...", C.analyzer_effect(p, er, t), rho))
    expected = t * (np.cos(alpha - p) ** 2 + np.sin(alpha - p) ** 2 / er)
    np.testing.assert_allclose(prob, expected, rtol=1e-12)
    # crossed: the leak is T/ER; unpolarized light: T (1 + 1/ER) / 2
    assert np.trace(C.analyzer_effect(0.0, er, t) @ J.projector(J.named_vector("V"))).real == (
        pytest.approx(t / er, rel=1e-12)
    )
    assert np.trace(C.analyzer_effect(0.3, er, t) @ np.eye(2) / 2).real == pytest.approx(
        t * (1 + 1 / er) / 2, rel=1e-12
    )


def test_source_state_degree_of_polarization():
    # Derived from rho ∝ |s><s| + |s_perp><s_perp|/ER (physics.md): DOP = (1 - d) / (1 + d).
    for er in (1.0, 10.0, 2e5, np.inf):
        rho = C.source_state(0.4, er)
        s = J.stokes_from_density(rho)
        d = 1 / er
        assert s[0] == pytest.approx(1.0, abs=1e-15)
        assert J.degree_of_polarization(s) == pytest.approx((1 - d) / (1 + d), abs=1e-14)
        az, ell = J.azimuth_ellipticity_from_stokes(s)
        if er > 1:
            assert (az, ell) == (pytest.approx(0.4, abs=1e-12), pytest.approx(0.0, abs=1e-12))


def test_push_forward_and_pull_back_are_dual():
    # Derived: Tr(E Phi(rho)) = Tr(Phi^dagger(E) rho) for every chain (Heisenberg picture).
    for _ in range(10):
        chain = _our_channels(_random_chain(5, finite=True))
        rho = J.density_from_stokes(np.array([1.0, *RNG.uniform(-0.5, 0.5, 3)]))
        effect = C.analyzer_effect(RNG.uniform(0, np.pi), 1e3, 0.9)
        lhs = np.trace(effect @ C.push_forward_state(rho, chain)).real
        rhs = np.trace(C.pull_back_effect(effect, chain) @ rho).real
        assert lhs == pytest.approx(rhs, rel=1e-12, abs=1e-15)


def test_channels_broadcast_over_settings():
    # Vectorization contract (foundation issue): parameter arrays (3, 4) give stacks (3, 4, 2, 2)
    # equal to the scalar results.
    theta = RNG.uniform(0, np.pi, (3, 4))
    er = 10 ** RNG.uniform(1, 5, (3, 4))
    delta = RNG.uniform(0, 2 * np.pi, (4,))
    chain = [C.Polarizer(theta, er, 0.9), C.Retarder(theta[:, :1], delta), C.Rotator(theta)]
    rho = C.source_state(0.2, 1e4)
    out = C.push_forward_state(rho, chain)
    assert out.shape == (3, 4, 2, 2)
    single = [
        C.Polarizer(theta[1, 2], er[1, 2], 0.9),
        C.Retarder(theta[1, 0], delta[2]),
        C.Rotator(theta[1, 2]),
    ]
    np.testing.assert_allclose(out[1, 2], C.push_forward_state(rho, single), atol=1e-15)


# ------------------------------------------------------------------------------------------
# Property tests: physical states and effects stay physical through any chain

angles = st.floats(-2 * np.pi, 2 * np.pi, allow_nan=False)
element = st.one_of(
    st.tuples(st.just("retarder"), angles, st.floats(0, 2 * np.pi)),
    st.tuples(st.just("rotator"), angles, st.just(0.0)),
    st.tuples(
        st.just("polarizer"),
        angles,
        st.one_of(st.floats(1.0, 1e9), st.just(np.inf)),
        st.floats(1e-3, 1.0),
    ),
)
chains = st.lists(element, min_size=0, max_size=8)
stokes_in = st.tuples(st.floats(0.0, 1.0), st.floats(-1, 1), st.floats(-1, 1), st.floats(-1, 1))


def _hypothesis_channels(chain):
    out = []
    for item in chain:
        if item[0] == "retarder":
            out.append(C.Retarder(item[1], item[2]))
        elif item[0] == "rotator":
            out.append(C.Rotator(item[1]))
        else:
            out.append(C.Polarizer(*item[1:]))
    return out


def _physical_stokes(s):
    s0, *rest = s
    norm = np.linalg.norm(rest)
    scale = s0 / norm if norm > s0 else 1.0  # inside the Poincare ball, trace s0 <= 1
    return np.array([s0, *(np.array(rest) * scale)])


@settings(max_examples=300, deadline=None)
@given(chains, stokes_in)
def test_density_matrix_stays_physical(chain, s):
    # Requirement (foundation issue): Hermitian, positive semidefinite, trace <= 1 (and never
    # more than it was: every element is passive).
    rho = J.density_from_stokes(_physical_stokes(s))
    trace_in = np.trace(rho).real
    rho = C.push_forward_state(rho, _hypothesis_channels(chain))
    np.testing.assert_allclose(rho, rho.conj().T, atol=1e-14)
    eig = np.linalg.eigvalsh(rho)
    assert eig.min() >= -1e-12
    assert np.trace(rho).real <= trace_in + 1e-12 <= 1 + 2e-12


@settings(max_examples=300, deadline=None)
@given(chains, angles, st.floats(1.0, 1e9), st.floats(1e-3, 1.0))
def test_povm_effect_stays_between_zero_and_identity(chain, angle, er, t):
    # Requirement (foundation issue; Nielsen & Chuang 2000, sec. 2.2.6): 0 <= E <= I.
    effect = C.pull_back_effect(C.analyzer_effect(angle, er, t), _hypothesis_channels(chain))
    np.testing.assert_allclose(effect, effect.conj().T, atol=1e-14)
    eig = np.linalg.eigvalsh(effect)
    assert eig.min() >= -1e-12
    assert eig.max() <= 1 + 1e-12


def test_polarizer_broadcasts_transmission():
    t = np.array([0.5, 0.9])
    out = C.Polarizer(0.0, 1e3, t).forward(np.array([1.0, 0.0, 0.0, 0.0]))
    np.testing.assert_allclose(out[:, 0], t * (1 + 1e-3) / 2, rtol=1e-12)
