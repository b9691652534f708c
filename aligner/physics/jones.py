"""Jones matrices, Jones vectors, Stokes vectors and density matrices of polarization.

Conventions (fixed here, once, for the whole project):

* Jones vectors in the (H, V) basis. Angles in radians in this package (degrees only in files
  and on screen). An element angle is measured from H towards V, looking into the beam
  (facing the source).
* A linear retarder with fast axis ``theta`` and retardance ``delta`` has exactly the matrix of
  ``sympy.physics.optics.polarization.phase_retarder(theta, delta)``, global phase
  ``exp(-i delta/2)`` included. Half-wave plate: ``delta = pi``; quarter-wave plate: ``pi/2``.
* Handedness as sympy's ``jones_vector``: R = (H + iV)/sqrt2, L = (H - iV)/sqrt2,
  D = (H + V)/sqrt2, A = (H - V)/sqrt2. Fields are ``Re[E exp(i(kz - wt))]``, so a positive
  phase is a delay and the retarder above delays its slow axis; the field of R then turns from
  H towards V, counterclockwise as seen looking into the beam (the sense of element angles):
  right-handed, positive helicity, in the IEEE convention; left-circular in the convention of
  Born & Wolf and Hecht, whose "right" turns clockwise for an observer facing the source (from
  memory). S3 > 0 for R.
* A rotator of ``rotation`` > 0 turns linear polarization from H towards V (counterclockwise
  looking into the beam). A dextrorotatory sample turns it clockwise for an observer looking
  towards the source, so its rotation is negative here.
* Stokes vector (S0, S1, S2, S3) of a density matrix ``rho``: S1 = Tr(rho HV), S2 = Tr(rho DA),
  S3 = Tr(rho RL), with HV = |H><H| - |V><V|, DA = |D><D| - |A><A| (Pauli x),
  RL = |R><R| - |L><L| (Pauli y). So ``rho = (S0 I + S1 HV + S2 DA + S3 RL) / 2``.

Every function broadcasts over leading axes: angles of shape ``(...)`` give matrices of shape
``(..., 2, 2)`` and vectors of shape ``(..., 2)``.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = [
    "PAULI",
    "adjoint",
    "azimuth_ellipticity_from_stokes",
    "degree_of_polarization",
    "density_from_stokes",
    "density_from_vector",
    "fidelity",
    "jones_from_stokes",
    "linear_projector",
    "linear_vector",
    "matmul2",
    "named_vector",
    "overlap",
    "projector",
    "retarder",
    "rotator",
    "stokes_from_density",
    "stokes_from_jones",
    "vector_from_azimuth_ellipticity",
]

Complex = NDArray[np.complex128]
Real = NDArray[np.float64]

#: Pauli observables in the (H, V) basis, keyed by their trade names.
PAULI: dict[str, Complex] = {
    "HV": np.array([[1, 0], [0, -1]], dtype=complex),
    "DA": np.array([[0, 1], [1, 0]], dtype=complex),
    "RL": np.array([[0, -1j], [1j, 0]], dtype=complex),
}


def matmul2(a: Complex, b: Complex) -> Complex:
    """Product of two stacks of 2x2 matrices, broadcast over leading axes.

    Written out element by element: for tiny matrices this is several times faster than
    ``np.matmul`` on large stacks.
    """
    a00, a01, a10, a11 = a[..., 0, 0], a[..., 0, 1], a[..., 1, 0], a[..., 1, 1]
    b00, b01, b10, b11 = b[..., 0, 0], b[..., 0, 1], b[..., 1, 0], b[..., 1, 1]
    out = np.empty(np.broadcast_shapes(a.shape, b.shape), dtype=np.result_type(a, b))
    out[..., 0, 0] = a00 * b00 + a01 * b10
    out[..., 0, 1] = a00 * b01 + a01 * b11
    out[..., 1, 0] = a10 * b00 + a11 * b10
    out[..., 1, 1] = a10 * b01 + a11 * b11
    return out


def adjoint(a: Complex) -> Complex:
    """Conjugate transpose of a stack of matrices."""
    return np.conj(np.swapaxes(a, -1, -2))


def retarder(theta: ArrayLike, delta: ArrayLike) -> Complex:
    """Jones matrix of a linear retarder, fast axis ``theta`` (rad), retardance ``delta`` (rad).

    Equal to sympy's ``phase_retarder(theta, delta)``, global phase included.
    """
    theta, delta = np.asarray(theta, float), np.asarray(delta, float)
    half = np.exp(-0.5j * delta)  # global phase, as sympy's phase_retarder
    fast, slow = half, np.conj(half)  # exp(-i delta/2), exp(+i delta/2)
    c2, s2 = np.cos(2 * theta), np.sin(2 * theta)
    mean, diff = 0.5 * (fast + slow), 0.5 * (fast - slow)
    out = np.empty((*np.broadcast_shapes(theta.shape, delta.shape), 2, 2), dtype=complex)
    out[..., 0, 0] = mean + diff * c2
    out[..., 1, 1] = mean - diff * c2
    out[..., 0, 1] = diff * s2
    out[..., 1, 0] = diff * s2
    return out


def rotator(rotation: ArrayLike) -> Complex:
    """Jones matrix of a polarization rotator (optical activity) turning light by ``rotation``
    (rad) from H towards V."""
    rotation = np.asarray(rotation, float)
    c, s = np.cos(rotation), np.sin(rotation)
    out = np.empty((*rotation.shape, 2, 2), dtype=complex)
    out[..., 0, 0] = c
    out[..., 0, 1] = -s
    out[..., 1, 0] = s
    out[..., 1, 1] = c
    return out


def linear_vector(angle: ArrayLike) -> Complex:
    """Jones vector of linear polarization at ``angle`` (rad) from H."""
    angle = np.asarray(angle, float)
    return np.stack([np.cos(angle), np.sin(angle)], axis=-1).astype(complex)


def vector_from_azimuth_ellipticity(azimuth: ArrayLike, ellipticity: ArrayLike) -> Complex:
    """Jones vector with polarization-ellipse ``azimuth`` and ``ellipticity`` angle (rad).

    Same as sympy's ``jones_vector(psi, chi)``: ellipticity +pi/4 is R = (H + iV)/sqrt2.
    """
    psi, chi = np.broadcast_arrays(np.asarray(azimuth, float), np.asarray(ellipticity, float))
    cp, sp, cc, sc = np.cos(psi), np.sin(psi), np.cos(chi), np.sin(chi)
    return np.stack([cp * cc - 1j * sp * sc, sp * cc + 1j * cp * sc], axis=-1)


_NAMED = {
    "H": (0.0, 0.0),
    "V": (np.pi / 2, 0.0),
    "D": (np.pi / 4, 0.0),
    "A": (-np.pi / 4, 0.0),
    "R": (0.0, np.pi / 4),
    "L": (0.0, -np.pi / 4),
}


def named_vector(name: str) -> Complex:
    """Jones vector of one of the six named states H, V, D, A, R, L."""
    return vector_from_azimuth_ellipticity(*_NAMED[name])


def linear_projector(angle: ArrayLike) -> Complex:
    """``|p><p|`` for linear polarization at ``angle`` (rad); fast path of :func:`projector`."""
    angle = np.asarray(angle, float)
    c2, s2 = np.cos(2 * angle), np.sin(2 * angle)
    out = np.empty((*angle.shape, 2, 2), dtype=complex)
    out[..., 0, 0] = 0.5 * (1 + c2)
    out[..., 1, 1] = 0.5 * (1 - c2)
    out[..., 0, 1] = 0.5 * s2
    out[..., 1, 0] = 0.5 * s2
    return out


def projector(vector: ArrayLike) -> Complex:
    """``|v><v| / <v|v>`` for a stack of Jones vectors."""
    v = np.asarray(vector, complex)
    out = v[..., :, None] * np.conj(v[..., None, :])
    return out / np.real(np.trace(out, axis1=-2, axis2=-1))[..., None, None]


def density_from_vector(vector: ArrayLike) -> Complex:
    """Density matrix ``|v><v|`` of a Jones vector (not renormalised: trace = intensity)."""
    v = np.asarray(vector, complex)
    return v[..., :, None] * np.conj(v[..., None, :])


def stokes_from_density(rho: ArrayLike) -> Real:
    """Stokes vector (..., 4) of a density matrix (or coherency matrix) ``rho``."""
    r = np.asarray(rho, complex)
    s0 = np.real(r[..., 0, 0] + r[..., 1, 1])
    s1 = np.real(r[..., 0, 0] - r[..., 1, 1])
    s2 = 2 * np.real(r[..., 0, 1])
    s3 = -2 * np.imag(r[..., 0, 1])
    return np.stack([s0, s1, s2, s3], axis=-1)


def density_from_stokes(stokes: ArrayLike) -> Complex:
    """Coherency (density) matrix of a Stokes vector ``(..., 4)``; trace = S0."""
    s = np.asarray(stokes, float)
    out = np.empty((*s.shape[:-1], 2, 2), dtype=complex)
    parts = out.view(float).reshape((*s.shape[:-1], 8))  # re, im of 00, 01, 10, 11
    parts[..., 0] = 0.5 * (s[..., 0] + s[..., 1])
    parts[..., 1] = 0.0
    parts[..., 2] = 0.5 * s[..., 2]
    parts[..., 3] = -0.5 * s[..., 3]
    parts[..., 4] = parts[..., 2]
    parts[..., 5] = 0.5 * s[..., 3]
    parts[..., 6] = 0.5 * (s[..., 0] - s[..., 1])
    parts[..., 7] = 0.0
    return out


def stokes_from_jones(vector: ArrayLike) -> Real:
    """Stokes vector of a Jones vector (fully polarized, S0 = intensity)."""
    return stokes_from_density(density_from_vector(vector))


def jones_from_stokes(stokes: ArrayLike) -> Complex:
    """Jones vector of the polarized part of a Stokes vector, global phase: H component real.

    The intensity of the returned vector is the polarized intensity ``sqrt(S1^2+S2^2+S3^2)``.
    """
    s = np.asarray(stokes, float)
    ip = np.sqrt(np.sum(s[..., 1:] ** 2, axis=-1))
    az, ell = azimuth_ellipticity_from_stokes(s)
    v = vector_from_azimuth_ellipticity(az, ell)
    phase = np.exp(-1j * np.angle(v[..., :1]))  # make the H component real and >= 0
    return v * phase * np.sqrt(ip)[..., None]


def azimuth_ellipticity_from_stokes(stokes: ArrayLike) -> tuple[Real, Real]:
    """Azimuth in (-pi/2, pi/2] and ellipticity angle in [-pi/4, pi/4] (rad) of a Stokes vector."""
    s = np.asarray(stokes, float)
    azimuth = 0.5 * np.arctan2(s[..., 2], s[..., 1])
    ellipticity = 0.5 * np.arctan2(s[..., 3], np.hypot(s[..., 1], s[..., 2]))
    return azimuth, ellipticity


def degree_of_polarization(stokes: ArrayLike) -> Real:
    """``sqrt(S1^2 + S2^2 + S3^2) / S0``."""
    s = np.asarray(stokes, float)
    return np.sqrt(np.sum(s[..., 1:] ** 2, axis=-1)) / s[..., 0]


def overlap(a: ArrayLike, b: ArrayLike) -> Complex:
    """Inner product ``<a|b>`` of two stacks of Jones vectors."""
    return np.sum(np.conj(np.asarray(a, complex)) * np.asarray(b, complex), axis=-1)


def fidelity(rho: ArrayLike, sigma: ArrayLike) -> Real:
    """Uhlmann fidelity ``(Tr sqrt(sqrt(rho) sigma sqrt(rho)))^2`` of two normalised 2x2 states.

    For qubits this equals ``Tr(rho sigma) + 2 sqrt(det rho det sigma)``.
    """
    r, s = np.asarray(rho, complex), np.asarray(sigma, complex)
    tr = np.real(np.einsum("...ij,...ji->...", r, s))
    det = np.real(np.linalg.det(r)) * np.real(np.linalg.det(s))
    return tr + 2 * np.sqrt(np.clip(det, 0.0, None))
