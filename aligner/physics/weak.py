"""Weak values and the exact (all-orders) response of a Gaussian pointer.

Conventions: hbar = 1; the pointer's intensity ``|phi(q)|^2`` is Gaussian with rms width
``sigma``; the coupling is ``U = exp(-i g A p)``, so an eigenstate of ``A`` with eigenvalue
``a`` shifts the pointer by ``g a`` (``g`` in the pointer's length units per unit eigenvalue).

``rho`` is the pre-selected state at the coupling plane and ``effect`` the POVM element of the
whole post-selection carried back to the coupling plane; neither needs unit trace. All
functions broadcast over leading axes of ``rho`` and ``effect`` (..., 2, 2); ``observable`` is
one Hermitian 2x2 matrix (or a broadcastable stack).

Two forms of the same physics:

* :func:`weak_value` and :func:`pointer_response` work on density matrices in the eigenbasis
  of ``A``: the readable definition, kept as the reference the fast path is tested against;
* :class:`StokesResponse` is the closed form in Stokes space, the fast path. With
  ``rho = (s0 + s.sigma)/2``, ``E = (e0 + e.sigma)/2`` and ``A = alpha + v.sigma``
  (``beta = |v|``, ``n = v/beta``), every trace is a dot product of 4-vectors:
  ``T = Tr(E rho) = (s0 e0 + s.e)/2``, ``Tr(E A rho) = alpha T + (X + i Y)/2`` with
  ``X = s0 (v.e) + e0 (v.s)`` and ``Y = v.(s x e)``; in the eigenbasis of ``A`` the
  coherence between the two eigenvalues carries ``W/4 = (s.e - (n.s)(n.e))/4`` (real part)
  and ``Y/(4 beta)`` (imaginary part). With the pointer overlap
  ``kappa = exp(-g^2 beta^2 / (2 sigma^2))`` the sums of :func:`pointer_response` become
  ``P = T - (1 - kappa) W/2``, ``<q> = g alpha + g X/(2P)`` and
  ``<p> = kappa g Y / (4 sigma^2 P)`` (derived here; the two forms agree to rounding).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .channels import sum_of_products
from .jones import PAULI, matmul2, named_vector, projector, stokes_from_density

__all__ = [
    "OBSERVABLE_NAMES",
    "PointerResponse",
    "StokesResponse",
    "observable_from_axis",
    "observable_matrix",
    "observable_stokes",
    "pointer_response",
    "weak_value",
]

Complex = NDArray[np.complex128]
Real = NDArray[np.float64]

#: Names accepted by :func:`observable_matrix`: Pauli observables (eigenvalues +1, -1) and
#: projectors onto the six named states (eigenvalues 1, 0).
OBSERVABLE_NAMES = ("HV", "DA", "RL", "H", "V", "D", "A", "R", "L")


def observable_matrix(name: str) -> Complex:
    """Hermitian 2x2 matrix of a named observable (see :data:`OBSERVABLE_NAMES`)."""
    if name in PAULI:
        return PAULI[name].copy()
    if name in OBSERVABLE_NAMES:
        return projector(named_vector(name))
    raise ValueError(f"unknown observable {name!r}; allowed: {', '.join(OBSERVABLE_NAMES)}")


def observable_from_axis(
    axis: ArrayLike, eigenvalues: tuple[float, float] = (1.0, -1.0)
) -> Complex:
    """Observable with eigenvalue ``eigenvalues[0]`` on the state whose Stokes direction is
    ``axis`` (S1, S2, S3; any length) and ``eigenvalues[1]`` on the orthogonal state."""
    n = np.asarray(axis, float)
    n = n / np.linalg.norm(n)
    a, b = eigenvalues
    sigma_n = n[0] * PAULI["HV"] + n[1] * PAULI["DA"] + n[2] * PAULI["RL"]
    return 0.5 * (a + b) * np.eye(2) + 0.5 * (a - b) * sigma_n


def _trace(a: Complex) -> Complex:
    return a[..., 0, 0] + a[..., 1, 1]


def weak_value(rho: ArrayLike, effect: ArrayLike, observable: ArrayLike) -> Complex:
    """Generalized weak value ``Tr(E A rho) / Tr(E rho)``.

    For pure states (``rho = |i><i|``, ``E = |f><f|``) this is ``<f|A|i> / <f|i>``.
    """
    rho = np.asarray(rho, complex)
    effect = np.asarray(effect, complex)
    a = np.broadcast_to(np.asarray(observable, complex), np.broadcast_shapes(rho.shape, (2, 2)))
    numerator = _trace(matmul2(effect, matmul2(a, rho)))
    return numerator / _trace(matmul2(effect, rho))


@dataclass(frozen=True)
class PointerResponse:
    """Exact post-selected pointer response (arrays of the broadcast shape).

    ``probability``: post-selection probability including the pointer-overlap factor (same
    normalisation as ``Tr(E rho)``). ``position``: mean position shift ``<q>`` (length units of
    ``g``). ``momentum``: mean momentum shift ``<p>`` (1/length).
    """

    probability: Real
    position: Real
    momentum: Real


def _in_basis(x: Complex, vectors: Complex, j: int, k: int) -> Complex:
    """Element ``(j, k)`` of ``V^dagger x V`` (only the elements needed, for large stacks)."""
    terms = [
        np.conj(vectors[..., a, j]) * vectors[..., b, k] * x[..., a, b]
        for a in (0, 1)
        for b in (0, 1)
    ]
    return np.asarray(terms[0] + terms[1] + terms[2] + terms[3])


def pointer_response(
    rho: ArrayLike, effect: ArrayLike, observable: ArrayLike, g: ArrayLike, sigma: ArrayLike
) -> PointerResponse:
    """Exact response of a Gaussian pointer to ``U = exp(-i g A p)`` and post-selection.

    In the eigenbasis of ``A`` (eigenvalues ``a_j``), with ``c_j = g a_j``,
    ``M_jk = rho_jk E_kj`` and the pointer overlaps ``O_jk = exp(-(c_j - c_k)^2 / (8 sigma^2))``:
    ``P = sum M O``, ``<q> P = sum M O (c_j + c_k)/2``,
    ``<p> P = sum M O i (c_k - c_j)/(4 sigma^2)``.
    """
    values, vectors = np.linalg.eigh(np.asarray(observable, complex))
    rho = np.asarray(rho, complex)
    effect = np.asarray(effect, complex)
    g = np.asarray(g, float)
    sigma = np.asarray(sigma, float)
    c = g[..., None] * values  # (..., 2): pointer shift of each eigenstate
    c0, c1 = c[..., 0], c[..., 1]
    overlap = np.exp(-((c0 - c1) ** 2) / (8 * sigma**2))
    # Diagonal terms (j = k) have unit overlap and no momentum kick; the two off-diagonal terms
    # are complex conjugates, so their sum is twice the real part of one.
    m00 = np.real(_in_basis(rho, vectors, 0, 0) * _in_basis(effect, vectors, 0, 0))
    m11 = np.real(_in_basis(rho, vectors, 1, 1) * _in_basis(effect, vectors, 1, 1))
    m01 = _in_basis(rho, vectors, 0, 1) * _in_basis(effect, vectors, 1, 0)
    probability = m00 + m11 + 2 * overlap * np.real(m01)
    q_sum = m00 * c0 + m11 * c1 + overlap * np.real(m01) * (c0 + c1)
    p_sum = -2 * overlap * np.imag(m01) * (c1 - c0) / (4 * sigma**2)
    return PointerResponse(probability, q_sum / probability, p_sum / probability)


def observable_stokes(observable: ArrayLike) -> tuple[float, tuple[float, float, float]]:
    """``(alpha, v)`` with ``A = alpha I + v . sigma`` (sigma = HV, DA, RL) for one Hermitian
    2x2 matrix ``A``."""
    x = stokes_from_density(np.asarray(observable, complex))
    return 0.5 * float(x[0]), (0.5 * float(x[1]), 0.5 * float(x[2]), 0.5 * float(x[3]))


class StokesResponse:
    """Weak value and exact Gaussian-pointer response from Stokes vectors (see the module
    docstring for the closed forms); each result is computed on first use.

    ``state`` and ``effect``: the four Stokes components of ``rho`` and ``E`` at the coupling
    plane (arrays broadcast together); ``observable``: a Hermitian 2x2 matrix; ``g``, ``sigma``
    as :func:`pointer_response` (floats). The results equal :func:`weak_value` and
    :func:`pointer_response` on the same states to rounding.
    """

    def __init__(
        self,
        state: tuple[ArrayLike, ArrayLike, ArrayLike, ArrayLike],
        effect: tuple[ArrayLike, ArrayLike, ArrayLike, ArrayLike],
        observable: ArrayLike,
        g: float,
        sigma: float,
    ) -> None:
        s = tuple(np.asarray(x, float) for x in state)
        e = tuple(np.asarray(x, float) for x in effect)
        alpha, v = observable_stokes(observable)
        self.alpha, self.g, self.sigma = alpha, float(g), float(sigma)
        beta2 = v[0] ** 2 + v[1] ** 2 + v[2] ** 2
        vs = sum_of_products([(v[k], s[k + 1], 1.0) for k in range(3)])
        ve = sum_of_products([(v[k], e[k + 1], 1.0) for k in range(3)])
        s_e = sum_of_products([(1.0, s[k], e[k]) for k in (1, 2, 3)])  # s.e of the vectors
        s0e0 = s[0] * e[0]
        self.plain = 0.5 * (s0e0 + s_e)  # T = Tr(E rho)
        self.x = sum_of_products([(1.0, s[0], ve), (1.0, e[0], vs)])
        # Y = v . (s x e), term by term so that zero components cost nothing
        self.y = sum_of_products(
            [
                (v[0], s[2], e[3]),
                (-v[0], s[3], e[2]),
                (v[1], s[3], e[1]),
                (-v[1], s[1], e[3]),
                (v[2], s[1], e[2]),
                (-v[2], s[2], e[1]),
            ]
        )
        #: u = g^2 beta^2 / sigma^2; kappa = exp(-u/2), 1 - kappa without cancellation
        self.u = (self.g / self.sigma) ** 2 * beta2
        self.kappa = float(np.exp(-0.5 * self.u))
        self._dephased = -float(np.expm1(-0.5 * self.u))
        # W = s.e - (n.s)(n.e), the coherence between the eigenstates of A
        self.w = s_e - vs * ve / beta2 if beta2 > 0 else s_e

    @cached_property
    def weak_value(self) -> Complex:
        """``Tr(E A rho) / Tr(E rho)``."""
        with np.errstate(divide="ignore", invalid="ignore"):
            half = 0.5 / self.plain
        out = np.empty(np.shape(half), complex)
        out.real = self.alpha + self.x * half
        out.imag = self.y * half
        return out

    @cached_property
    def probability(self) -> Real:
        """Post-selection probability with the pointer overlap (:class:`PointerResponse`)."""
        return np.asarray(self.plain - self._dephased * 0.5 * self.w)

    @cached_property
    def _half_over_p(self) -> Real:
        with np.errstate(divide="ignore", invalid="ignore"):
            return 0.5 / self.probability

    @cached_property
    def position(self) -> Real:
        """Mean position shift ``<q>`` (length units of ``g``)."""
        return self.g * (self.alpha + self.x * self._half_over_p)

    @cached_property
    def momentum(self) -> Real:
        """Mean momentum shift ``<p>`` (1/length)."""
        return (self.kappa * self.g / (2 * self.sigma**2)) * self.y * self._half_over_p

    def shift(self, axis: str) -> Real:
        """Mean readout shift in position-equivalent units: ``<q>`` (``"re"``) or
        ``2 sigma^2 <p>`` (``"im"``)."""
        if axis == "re":
            return self.position
        return (self.kappa * self.g) * self.y * self._half_over_p

    def sensitivity(self, axis: str) -> Real:
        """``g d(shift)/dg`` at fixed states, in closed form: with ``u = g^2 beta^2/sigma^2``
        and ``w = kappa W/(2P)``, ``<q> + (<q> - g alpha) u w`` for ``"re"`` and
        ``r (1 - u + u w)`` for ``"im"`` (``r`` = :meth:`shift`)."""
        w = (self.kappa * self.w) * self._half_over_p
        if axis == "re":
            q = self.position
            return q + (q - self.g * self.alpha) * (self.u * w)
        return self.shift("im") * (1 - self.u + self.u * w)
