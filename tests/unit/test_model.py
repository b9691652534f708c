"""The forward model on the demo bench: leak near crossed, the Jones/density-matrix route, signs."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

from aligner.bench import Element, load_bench
from aligner.errors import InputError
from aligner.model import coupling_observable, forward, full_readings, imbalance_deg
from aligner.physics import jones as J

RNG = np.random.default_rng(77)


@pytest.fixture(scope="module")
def demo():
    return load_bench("demo")


def _crossed_reading(bench) -> float:
    """Demo bench: source H, HWP at 22.5 -> D, so the analyzer is crossed at element angle 135."""
    mount = bench.mounts[bench.imbalance_mount]
    return float(mount.reading_for_angle_deg(135.0))


def test_demo_leak_near_crossed_is_malus_with_extinction(demo):
    # Derived from Malus's law (Hecht, Optics, sec. 8.2; from memory) and the POVM / source
    # definitions of physics.md: with rho = (|D><D| + d_s |A><A|)/(1 + d_s) and
    # E = T((1 - d_a) P + d_a I) at eps from A,
    # P = T [(1 - d_a)(sin^2 eps + d_s cos^2 eps)/(1 + d_s) + d_a] ~ T sin^2 eps + T (d_a + d_s).
    eps_deg = np.array([-3.0, -1.0, -0.2, 0.0, 0.05, 0.5, 1.0, 2.0])
    crossed = _crossed_reading(demo)
    p = forward(demo, {demo.imbalance_mount: crossed + eps_deg}).probability
    t = demo.analyzer.transmission
    d_a, d_s = 1 / demo.analyzer.extinction_ratio, 1 / demo.source.extinction_ratio
    eps = np.deg2rad(eps_deg)
    # the demo's plates are exact at the bench wavelength (design = working wavelength)
    exact = t * ((1 - d_a) * (np.sin(eps) ** 2 + d_s * np.cos(eps) ** 2) / (1 + d_s) + d_a)
    np.testing.assert_allclose(p, exact, rtol=1e-9)
    np.testing.assert_allclose(p, t * np.sin(eps) ** 2 + t * (d_a + d_s), rtol=2e-4)
    assert p.argmin() == 3  # the null is at crossed


def _jones_route(bench, readings):
    """Density-matrix route, element by element with the sympy-checked Jones matrices."""
    angles = {
        name: np.deg2rad(mount.element_angle_deg(readings[name]))
        for name, mount in bench.mounts.items()
    }

    def angle(item):
        return angles[item.mount] if item.mount else np.deg2rad(item.angle_deg)

    def matrix(e: Element):
        if e.type == "rotator":
            return J.rotator(angle(e))
        return J.retarder(angle(e), 2 * np.pi * e.retardance_waves)

    src, an = bench.source, bench.analyzer
    d_s, d_a = 1 / src.extinction_ratio, 1 / an.extinction_ratio
    p_s = J.linear_projector(angle(src))
    rho = (p_s + d_s * (np.eye(2) - p_s)) / (1 + d_s)
    for e in bench.pre:
        m = matrix(e)
        rho = m @ rho @ J.adjoint(m)
    p_a = J.linear_projector(angle(an))
    effect = an.transmission * (p_a + d_a * (np.eye(2) - p_a))
    for e in reversed(bench.post):
        m = matrix(e)
        effect = J.adjoint(m) @ effect @ m
    return rho, effect


def test_forward_equals_density_matrix_route(demo):
    # Definition (physics.md): rho_c = J_pre rho J_pre^dagger, E_c = J_post^dagger E J_post, with
    # the Jones matrices of test_jones.py (sympy.physics.optics.polarization).
    bench = replace(demo, post=(replace(demo.post[0], angle_deg=7.0),))
    for _ in range(5):
        readings = {name: RNG.uniform(-170, 170) for name in bench.mounts}
        readings[bench.imbalance_mount] = RNG.uniform(0, 340)
        fwd = forward(bench, readings)
        rho, effect = _jones_route(bench, readings)
        np.testing.assert_allclose(fwd.rho, rho, atol=1e-13)
        np.testing.assert_allclose(fwd.effect, effect, atol=1e-13)
        assert fwd.probability == pytest.approx(np.trace(effect @ rho).real, rel=1e-12)


def test_forward_broadcasts_mount_arrays(demo):
    a = np.linspace(130, 140, 4)
    q = np.linspace(40, 50, 3)[:, None]
    fwd = forward(demo, {demo.imbalance_mount: a, demo.phase_mount: q})
    assert fwd.probability.shape == (3, 4)
    assert fwd.rho.shape == fwd.effect.shape == (3, 4, 2, 2)
    single = forward(demo, {demo.imbalance_mount: a[2], demo.phase_mount: q[1, 0]})
    assert fwd.probability[1, 2] == pytest.approx(float(single.probability), rel=1e-13)
    assert np.all((fwd.probability >= 0) & (fwd.probability <= 1))


def test_pre_polarizer_takes_its_share_of_the_trace(demo):
    # Malus's law (Hecht, from memory) with finite extinction: a polarizer at 30 deg after an H
    # source passes T (cos^2 30 + sin^2 30 / ER) of the (nearly pure) source state.
    pol = Element("polarizer", "pre[9]", None, 30.0, extinction_ratio=1e3, transmission=0.8)
    bench = replace(demo, pre=(pol,))
    rho = forward(bench).rho
    d_s = 1 / demo.source.extinction_ratio
    c2, s2 = np.cos(np.deg2rad(30)) ** 2, np.sin(np.deg2rad(30)) ** 2
    expected = 0.8 * ((c2 + s2 / 1e3) + d_s * (s2 + c2 / 1e3)) / (1 + d_s)
    assert np.trace(rho).real == pytest.approx(expected, rel=1e-12)


def test_optical_rotation_moves_the_null(demo):
    # Hecht, Optics, sec. 8.10 (optical activity; from memory): a rotator turns the plane of
    # polarization, so the crossed analyzer reading moves by the same angle.
    bench = replace(demo, post=(replace(demo.post[0], angle_deg=5.0),))
    crossed = _crossed_reading(bench)
    readings = crossed + np.linspace(-1, 11, 1201)
    p = forward(bench, {bench.imbalance_mount: readings}).probability
    assert readings[p.argmin()] == pytest.approx(crossed + 5.0, abs=0.011)


def test_imbalance_sign_follows_the_mount(demo):
    # Convention (model.imbalance_deg): positive on the high-reading side of the null. For linear
    # states the magnitude is the rotation away from crossed.
    crossed = _crossed_reading(demo)
    eps = np.array([-2.0, -1.0, -0.1, 0.1, 1.0, 2.0])
    got = imbalance_deg(demo, {demo.imbalance_mount: crossed + eps})
    np.testing.assert_allclose(got, eps, atol=1e-9)
    # a mount turning the other way: same statement in terms of its readings
    mount = replace(
        demo.mounts[demo.imbalance_mount], sense=-1, offset_deg=0.0, travel_deg=(-360.0, 360.0)
    )
    flipped = demo.with_mounts(**{demo.imbalance_mount: mount})
    null = float(mount.reading_for_angle_deg(135.0))
    got = imbalance_deg(flipped, {demo.imbalance_mount: null + eps})
    np.testing.assert_allclose(got, eps, atol=1e-9)


def test_imbalance_magnitude_for_elliptical_states(demo):
    # Definition: arcsin |<f|i>| with |i>, |f> the dominant eigenvectors of rho and E.
    for _ in range(5):
        readings = {
            demo.phase_mount: RNG.uniform(0, 90),
            demo.imbalance_mount: _crossed_reading(demo) + RNG.uniform(-3, 3),
        }
        fwd = forward(demo, readings)
        i = np.linalg.eigh(fwd.rho)[1][:, -1]
        f = np.linalg.eigh(fwd.effect)[1][:, -1]
        expected = np.rad2deg(np.arcsin(abs(np.vdot(f, i))))
        assert abs(float(imbalance_deg(demo, readings))) == pytest.approx(expected, abs=1e-8)


def test_imbalance_undefined_for_unpolarized_source(demo):
    bench = replace(demo, source=replace(demo.source, extinction_ratio=1.0))
    with pytest.raises(InputError, match="unpolarized"):
        imbalance_deg(bench)


def test_unknown_mount_reading_is_an_input_error(demo):
    with pytest.raises(InputError, match=r"'nosuch'.*analyzer"):
        full_readings(demo, {"nosuch": 1.0})


def test_coupling_observable_of_demo(demo):
    np.testing.assert_array_equal(coupling_observable(demo), J.PAULI[demo.coupling.observable])
