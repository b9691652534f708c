"""Weak values and the exact (all-orders) response of a Gaussian pointer.

Conventions: hbar = 1; the pointer's intensity ``|phi(q)|^2`` is Gaussian with rms width
``sigma``; the coupling is ``U = exp(-i g A p)``, so an eigenstate of ``A`` with eigenvalue
``a`` shifts the pointer by ``g a`` (``g`` in the pointer's length units per unit eigenvalue).

``rho`` is the pre-selected state at the coupling plane and ``effect`` the POVM element of the
whole post-selection carried back to the coupling plane; neither needs unit trace. All
functions broadcast over leading axes of ``rho`` and ``effect`` (..., 2, 2); ``observable`` is
one Hermitian 2x2 matrix (or a broadcastable stack).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .jones import PAULI, matmul2, named_vector, projector

__all__ = [
    "OBSERVABLE_NAMES",
    "PointerResponse",
    "observable_from_axis",
    "observable_matrix",
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
    return sum(
        np.conj(vectors[..., a, j]) * vectors[..., b, k] * x[..., a, b]
        for a in (0, 1)
        for b in (0, 1)
    )


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
