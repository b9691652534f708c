"""The post-selected pointer as a sum over pairs of Gaussian branches, exact to all orders.

Conventions (as in :mod:`aligner.physics.weak`): hbar = 1; ``sigma`` is the rms width of the
pointer intensity at its waist; a shift coupling is ``U = exp(-i g A p)`` (eigenstate ``a``
moves the pointer by ``g a``), a kick coupling is ``U = exp(+i k A x)`` (eigenstate ``a`` adds
``k a`` to the transverse momentum). Lengths in any one unit (``x`` and ``sigma`` alike),
momenta in the inverse unit; for a paraxial beam ``p = k0 theta`` with ``k0 = 2 pi / lambda``
and the propagation distance plays the role of time with mass ``k0``.

With ``A = sum_j a_j |j><j|`` the post-selected pointer state (not normalised; trace = the
post-selection probability) is ``sum_jk M_jk |psi_j><psi_k|`` with ``M_jk = rho_jk E_kj`` in the
eigenbasis of ``A``. Every branch amplitude stays a Gaussian ``psi_j(x) = exp(-a x^2 + b_j x +
c_j)`` with one complex ``a`` (``Re a > 0``) shared by both branches through couplings, free
propagation, thin lenses and the change to the momentum representation, so every intensity
quantity (probability, moments, density, the power beyond an edge) has a closed form. The
derivatives ``db_j``, ``dc_j`` with respect to the strength of the (one) coupling are carried
along for sensitivities and Fisher information.

Free propagation over ``d`` multiplies the momentum amplitude by ``exp(-i p^2 d / (2 k0))``; a
thin lens of focal length ``f`` multiplies the field by ``exp(-i k0 x^2 / (2 f))`` (converging
for ``f > 0``). Only intensities are used after a lens, so the phase conventions of the
momentum representation (``psi~(p) = (2 pi)^-1/2 int psi(x) exp(-i p x) dx``) do not matter.

All functions broadcast over leading axes: ``rho``, ``effect`` and ``observable`` are
``(..., 2, 2)``; strengths, widths and distances ``(...)``; the branch arrays carry a last axis
of length 2 (``weights``: two).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = [
    "Branches",
    "Moments",
    "density",
    "eigen_weights",
    "free_space",
    "kick",
    "moments",
    "prepare",
    "shift",
    "tail",
    "thin_lens",
    "to_momentum",
]

Complex = NDArray[np.complex128]
Real = NDArray[np.float64]


@dataclass(frozen=True)
class Branches:
    """Post-selected pointer ``sum_jk weights_jk |psi_j><psi_k|`` with Gaussian branches
    ``psi_j(x) = exp(-a x^2 + b_j x + c_j)``.

    ``values``: eigenvalues ``a_j`` of ``A`` (..., 2). ``weights``: ``M_jk = rho_jk E_kj`` in
    the eigenbasis (..., 2, 2). ``a`` (...), ``b``, ``c`` (..., 2): the Gaussian parameters.
    ``db``, ``dc``: their derivatives with respect to the coupling strength.
    """

    values: Real
    weights: Complex
    a: Complex
    b: Complex
    c: Complex
    db: Complex
    dc: Complex


@dataclass(frozen=True)
class Moments:
    """Intensity moments of the post-selected pointer (arrays of the broadcast shape).

    ``probability``: post-selection probability (trace of the post-selected pointer state).
    ``mean``, ``variance``: mean and variance of the pointer reading over the post-selected
    events (the exact post-selected spread, not the prepared one). ``dprobability``, ``slope``:
    derivatives of ``probability`` and ``mean`` with respect to the coupling strength.
    """

    probability: Real
    mean: Real
    variance: Real
    dprobability: Real
    slope: Real


def eigen_weights(rho: ArrayLike, effect: ArrayLike, observable: ArrayLike) -> tuple[Real, Complex]:
    """Eigenvalues ``a_j`` of ``A`` (..., 2) and ``M_jk = rho_jk E_kj`` in its eigenbasis
    (..., 2, 2): the post-selected pointer is ``sum_jk M_jk |psi_j><psi_k|``."""
    values, vectors = np.linalg.eigh(np.asarray(observable, complex))
    v_h = np.conj(np.swapaxes(vectors, -1, -2))
    r = v_h @ np.asarray(rho, complex) @ vectors
    e = v_h @ np.asarray(effect, complex) @ vectors
    return values, r * np.swapaxes(e, -1, -2)


def prepare(rho: ArrayLike, effect: ArrayLike, observable: ArrayLike, sigma: ArrayLike) -> Branches:
    """Uncoupled Gaussian pointer at its waist (intensity rms ``sigma``) with the weights of
    pre-selection ``rho`` and post-selection ``effect`` (both at the coupling plane)."""
    values, weights = eigen_weights(rho, effect, observable)
    sigma = np.asarray(sigma, float)
    shape = np.broadcast_shapes(weights.shape[:-2], sigma.shape)
    a = np.broadcast_to(1.0 / (4.0 * sigma**2) + 0j, shape)
    c = np.broadcast_to((-0.25 * np.log(2 * np.pi * sigma**2) + 0j)[..., None], (*shape, 2))
    zero = np.zeros((*shape, 2), complex)
    return Branches(
        np.broadcast_to(values, (*shape, 2)),
        np.broadcast_to(weights, (*shape, 2, 2)),
        a,
        zero,
        c,
        zero,
        zero,
    )


def shift(branches: Branches, g: ArrayLike) -> Branches:
    """Apply ``U = exp(-i g A p)``: branch ``j`` moves by ``s_j = g a_j``.

    ``exp(-a (x-s)^2 + b (x-s) + c)`` has ``b' = b + 2 a s``, ``c' = c - a s^2 - b s``.
    """
    br = branches
    s = np.asarray(g, float)[..., None] * br.values
    a = br.a[..., None]
    b = br.b + 2 * a * s
    c = br.c - a * s**2 - br.b * s
    db = br.db + 2 * a * br.values
    dc = br.dc - (2 * a * s + br.b) * br.values - s * br.db
    return replace(br, b=b, c=c, db=db, dc=dc)


def kick(branches: Branches, k: ArrayLike) -> Branches:
    """Apply ``U = exp(+i k A x)``: branch ``j`` gains transverse momentum ``k a_j``."""
    br = branches
    values = br.values + 0j
    return replace(
        br, b=br.b + 1j * np.asarray(k, float)[..., None] * values, db=br.db + 1j * values
    )


def _fourier(a: Complex, b: Complex, c: Complex, db: Complex, dc: Complex, sign: int):
    """Fourier transform of ``exp(-a x^2 + b x + c)``, ``(2 pi)^-1/2 int (...) exp(-sign i p x) dx``
    (``sign = +1`` direct, ``-1`` inverse): ``exp(-p^2/(4a) + s b p/(2a) + b^2/(4a) + c -
    ln(2a)/2)`` with ``s = -sign i``. The branch of ``ln`` only flips a sign common to both
    branches, which no intensity sees."""
    a2 = a[..., None]
    s = -1j * sign
    return (
        1.0 / (4.0 * a),
        s * b / (2 * a2),
        c + b**2 / (4 * a2) - 0.5 * np.log(2 * a2),
        s * db / (2 * a2),
        dc + b * db / (2 * a2),
    )


def to_momentum(branches: Branches) -> Branches:
    """The same state with branch amplitudes in the momentum representation."""
    br = branches
    a, b, c, db, dc = _fourier(br.a, br.b, br.c, br.db, br.dc, sign=1)
    return replace(br, a=a, b=b, c=c, db=db, dc=dc)


def free_space(branches: Branches, distance: ArrayLike, wavenumber: ArrayLike) -> Branches:
    """Free (paraxial) propagation over ``distance`` at wavenumber ``k0`` (1/length)."""
    br = branches
    a, b, c, db, dc = _fourier(br.a, br.b, br.c, br.db, br.dc, sign=1)
    a = a + 1j * np.asarray(distance, float) / (2 * np.asarray(wavenumber, float))
    a, b, c, db, dc = _fourier(a, b, c, db, dc, sign=-1)
    return replace(br, a=a, b=b, c=c, db=db, dc=dc)


def thin_lens(branches: Branches, focal_length: ArrayLike, wavenumber: ArrayLike) -> Branches:
    """Thin lens of ``focal_length`` (same length unit; ``inf`` for none) at wavenumber ``k0``."""
    power = np.asarray(wavenumber, float) / (2 * np.asarray(focal_length, float))
    return replace(branches, a=branches.a + 1j * power)


def _pairs(br: Branches):
    """Real width ``alpha`` (...), complex linear and constant terms of ``psi_k^* psi_j`` and their
    derivatives (..., 2, 2), indexed ``[j, k]``."""
    alpha = 2 * np.real(br.a)[..., None, None]
    beta = br.b[..., :, None] + np.conj(br.b)[..., None, :]
    gamma = br.c[..., :, None] + np.conj(br.c)[..., None, :]
    dbeta = br.db[..., :, None] + np.conj(br.db)[..., None, :]
    dgamma = br.dc[..., :, None] + np.conj(br.dc)[..., None, :]
    return alpha, beta, gamma, dbeta, dgamma


def moments(branches: Branches) -> Moments:
    """Probability, mean, variance and their strength derivatives in closed form.

    For ``exp(-alpha x^2 + beta x + gamma)`` with ``mu = beta / (2 alpha)``,
    ``v = 1 / (2 alpha)``: ``I0 = sqrt(pi/alpha) exp(alpha mu^2 + gamma)``, ``I1 = mu I0``,
    ``I2 = (mu^2 + v) I0``, ``I3 = (mu^3 + 3 mu v) I0``; ``d I_n = dbeta I_(n+1) + dgamma I_n``.
    """
    br = branches
    alpha, beta, gamma, dbeta, dgamma = _pairs(br)
    mu = beta / (2 * alpha)
    v = 1 / (2 * alpha)
    i0 = np.sqrt(np.pi / alpha) * np.exp(alpha * mu**2 + gamma)
    ints = [i0, mu * i0, (mu**2 + v) * i0, (mu**3 + 3 * mu * v) * i0]

    def total(x: Complex) -> Real:
        return np.real(np.sum(br.weights * x, axis=(-2, -1)))

    s0, s1, s2 = (total(x) for x in ints[:3])
    d0, d1 = (total(dbeta * ints[n + 1] + dgamma * ints[n]) for n in (0, 1))
    mean = s1 / s0
    return Moments(s0, mean, s2 / s0 - mean**2, d0, (d1 - mean * d0) / s0)


def density(branches: Branches, x: ArrayLike) -> tuple[Real, Real]:
    """Post-selected intensity ``f(x)`` (per input photon; integrates to the probability) and
    ``df/dg`` at points ``x`` (shape ``(..., n)``, leading axes broadcast with the branches)."""
    br = branches
    x = np.asarray(x, float)
    alpha, beta, gamma, dbeta, dgamma = _pairs(br)
    f = np.zeros(np.broadcast_shapes(x.shape, (*br.a.shape, 1)))
    df = np.zeros_like(f)
    for j in (0, 1):
        for k in (0, 1):
            w = br.weights[..., j, k, None]
            term = w * np.exp(
                -alpha[..., 0, :] * x**2 + beta[..., j, k, None] * x + gamma[..., j, k, None]
            )
            f = f + np.real(term)
            df = df + np.real(term * (dbeta[..., j, k, None] * x + dgamma[..., j, k, None]))
    return f, df


def tail(branches: Branches, edge: ArrayLike) -> tuple[Real, Real]:
    """Power beyond ``edge``, ``int_edge^inf f(x) dx``, and its strength derivative.

    ``int_x0^inf exp(-alpha x^2 + beta x + gamma) = sqrt(pi/alpha)/2 exp(G(x0)) w(i z)`` with
    ``z = sqrt(alpha) (x0 - mu)``, ``G`` the exponent and ``w`` the Faddeeva function (for
    ``Re z < 0`` through ``erfc(z) = 2 - erfc(-z)``), which stays finite for widely separated or
    strongly oscillating branches; ``int_x0^inf x (...) = mu T0 + exp(G(x0)) / (2 alpha)``.
    """
    from scipy.special import wofz

    br = branches
    x0 = np.asarray(edge, float)[..., None, None]
    alpha, beta, gamma, dbeta, dgamma = _pairs(br)
    mu = beta / (2 * alpha)
    z = np.sqrt(alpha) * (x0 - mu)
    at_edge = np.exp(-alpha * x0**2 + beta * x0 + gamma)
    half = 0.5 * np.sqrt(np.pi / alpha) * at_edge
    whole = np.sqrt(np.pi / alpha) * np.exp(alpha * mu**2 + gamma)
    with np.errstate(over="ignore", invalid="ignore"):  # the branch not taken may overflow
        t0 = np.where(np.real(z) >= 0, half * wofz(1j * z), whole - half * wofz(-1j * z))
    t1 = mu * t0 + at_edge / (2 * alpha)
    power = np.real(np.sum(br.weights * t0, axis=(-2, -1)))
    dpower = np.real(np.sum(br.weights * (dbeta * t1 + dgamma * t0), axis=(-2, -1)))
    return power, dpower
