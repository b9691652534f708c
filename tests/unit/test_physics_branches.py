"""Gaussian-branch engine against the exact pointer response and a brute-force field on a grid
(FFT couplings, exact angular-spectrum propagation, thin-lens phase)."""

from __future__ import annotations

import numpy as np
import pytest
from physics_reference import (
    intensity,
    lens,
    post_selected_fields,
    propagate,
    tail_from,
    trapezoid,
)

from aligner.physics import branches as br
from aligner.physics.weak import pointer_response


def random_psd(rng):
    m = rng.normal(size=(2, 2)) + 1j * rng.normal(size=(2, 2))
    x = m @ m.conj().T + 0.05 * np.eye(2)
    return x / np.max(np.linalg.eigvalsh(x))


def random_hermitian(rng):
    m = rng.normal(size=(2, 2)) + 1j * rng.normal(size=(2, 2))
    return (m + m.conj().T) / 2


@pytest.mark.parametrize("seed", range(4))
def test_waist_moments_match_the_exact_response(seed):
    # Exact Gaussian-pointer response (physics.md; weak.py, itself checked against a grid in
    # test_weak.py). A kick exp(+i k A x) is the same problem with q -> p, p -> -x and the
    # momentum width 1/(2 sigma) (canonical pair, derived).
    rng = np.random.default_rng(seed)
    rho, effect, a = random_psd(rng), random_psd(rng), random_hermitian(rng)
    g, sigma = rng.uniform(0.05, 2.0), rng.uniform(0.3, 2.0)
    exact = pointer_response(rho, effect, a, g, sigma)
    pointer = br.shift(br.prepare(rho, effect, a, sigma), g)
    m, mp = br.moments(pointer), br.moments(br.to_momentum(pointer))
    assert m.probability == pytest.approx(exact.probability, rel=1e-12)
    assert m.mean == pytest.approx(exact.position, rel=1e-10, abs=1e-13)
    assert mp.mean == pytest.approx(exact.momentum, rel=1e-10, abs=1e-13)
    dual = pointer_response(rho, effect, a, g, 1 / (2 * sigma))
    kicked = br.kick(br.prepare(rho, effect, a, sigma), g)
    assert br.moments(kicked).probability == pytest.approx(dual.probability, rel=1e-12)
    assert br.moments(br.to_momentum(kicked)).mean == pytest.approx(dual.position, rel=1e-10)
    assert br.moments(kicked).mean == pytest.approx(-dual.momentum, rel=1e-10, abs=1e-13)


def _grid_case(kind, distance, focal, paraxial=True):
    """Branches and brute-force fields for a beam (lengths in mm, 633 nm) coupled at its waist,
    then a lens and/or free space."""
    rng = np.random.default_rng(7)
    rho, effect, a = random_psd(rng), random_psd(rng), random_hermitian(rng)
    k0 = 2 * np.pi / 633e-6
    sigma = 0.5
    strength = 0.3 if kind == "shift" else 0.3 / sigma**2  # comparable, non-linear regime
    x = np.linspace(-14.0, 14.0, 2**14, endpoint=False)

    def fields(s):
        w, f = post_selected_fields(rho, effect, a, s, sigma, kind, x)
        if focal is not None:
            f = lens(f, x, focal, k0)
        return w, propagate(f, x, distance, k0, paraxial)

    def branches(s):
        b = br.prepare(rho, effect, a, sigma)
        b = br.shift(b, s) if kind == "shift" else br.kick(b, s)
        if focal is not None:
            b = br.thin_lens(b, focal, k0)
        return br.free_space(b, distance, k0)

    return x, strength, fields, branches


@pytest.mark.parametrize(
    ("kind", "distance", "focal"),
    [("shift", 0.0, None), ("shift", 3000.0, None), ("kick", 2000.0, None),
     ("kick", 250.0, 250.0), ("shift", 400.0, 150.0)],
)  # fmt: skip
@pytest.mark.parametrize("paraxial", [True, False])
def test_propagated_beam_matches_angular_spectrum(kind, distance, focal, paraxial):
    # Brute force, this test: angular-spectrum propagation of the post-selected field on a grid.
    # With the paraxial kernel it must agree to rounding; the exact kernel differs by the
    # paraxial error, ~ d (p/k0)^4 k0 / 8 ~ 1e-4 rad of phase for the focused cases here.
    x, s, fields, branches = _grid_case(kind, distance, focal, paraxial)
    tol = 1e-12 if paraxial else 1e-4
    f_grid = intensity(*fields(s))
    b = branches(s)
    f, _ = br.density(b, x)
    assert np.max(np.abs(f - f_grid)) < tol * np.max(f_grid)
    m = br.moments(b)
    p_grid = trapezoid(f_grid, x)
    mean_grid = trapezoid(x * f_grid, x) / p_grid
    var_grid = trapezoid(x**2 * f_grid, x) / p_grid - mean_grid**2
    assert m.probability == pytest.approx(p_grid, rel=1e-9)
    assert m.mean == pytest.approx(mean_grid, rel=tol, abs=tol * np.sqrt(var_grid))
    assert m.variance == pytest.approx(var_grid, rel=max(tol, 1e-9))
    i = int(np.searchsorted(x, mean_grid + 0.1 * np.sqrt(var_grid)))
    assert br.tail(b, x[i])[0] == pytest.approx(tail_from(f_grid, x, i), rel=max(tol, 1e-7))


def test_strength_derivatives_match_finite_differences():
    # Brute force, this test: central differences of the grid-propagated beam.
    x, s, fields, branches = _grid_case("kick", 600.0, 300.0)
    h = 1e-4
    b = branches(s)
    m = br.moments(b)

    def grid_moments(t):
        f = intensity(*fields(t))
        p = trapezoid(f, x)
        return p, trapezoid(x * f, x) / p

    (p_up, q_up), (p_dn, q_dn) = grid_moments(s * (1 + h)), grid_moments(s * (1 - h))
    assert m.dprobability == pytest.approx((p_up - p_dn) / (2 * s * h), rel=1e-5)
    assert m.slope == pytest.approx((q_up - q_dn) / (2 * s * h), rel=1e-5)
    _, df = br.density(b, x)
    df_grid = (intensity(*fields(s * (1 + h))) - intensity(*fields(s * (1 - h)))) / (2 * s * h)
    assert np.max(np.abs(df - df_grid)) < 1e-5 * np.max(np.abs(df_grid))
    edge = m.mean
    up, dn = br.tail(branches(s * (1 + h)), edge)[0], br.tail(branches(s * (1 - h)), edge)[0]
    assert br.tail(b, edge)[1] == pytest.approx((up - dn) / (2 * s * h), rel=1e-6)


def test_tail_stays_finite_for_far_apart_and_fringed_branches():
    # Branches 80 widths apart, read in momentum (fast fringes): the tail must neither overflow
    # nor lose the cross term. Brute force, this test: a fine grid of the closed-form density.
    rho = np.full((2, 2), 0.5)
    effect = np.array([[0.5, -0.499], [-0.499, 0.5]])
    a = np.diag([1.0, -1.0])
    b = br.to_momentum(br.shift(br.prepare(rho, effect, a, 1.0), 40.0))
    p = np.linspace(-12, 12, 400_001)
    f, _ = br.density(b, p)
    for edge in (-3.0, 0.0, 0.7, 4.0):
        i = int(np.searchsorted(p, edge))
        tail, _ = br.tail(b, p[i])
        assert np.isfinite(tail)
        assert tail == pytest.approx(tail_from(f, p, i), abs=1e-9)
