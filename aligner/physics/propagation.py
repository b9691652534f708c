"""Readouts after free propagation or a lens: Gaussian beams, ray transfer, the linear (Jozsa)
response with free evolution, the exact post-selected beam at a detector and the practical
amplification factor of deflection measurements.

Units: one length unit throughout (waist, wavelength, distances, focal lengths; transverse
positions); momenta and kick strengths in 1/length (``p = k0 theta``, ``k0 = 2 pi / lambda``).
The beam is Gaussian with intensity rms width ``sigma0`` at its waist; its Rayleigh range is
``z_R = 4 pi sigma0^2 / lambda = 2 k0 sigma0^2`` and its intensity variance
``sigma0^2 (1 + (z/z_R)^2)`` at ``z`` from the waist.

Couplings (as in :mod:`aligner.physics.branches`): ``"shift"``, ``U = exp(-i g A p)`` (a
displacement ``g a`` per eigenvalue ``a``, ``g`` a length) and ``"kick"``, ``U = exp(+i k A x)``
(a tilt of ``k a / k0`` rad, ``k`` in 1/length). The coupling plane sits ``waist_to_coupling``
after the waist (negative: before it); then comes an optical train of :class:`Space` and
:class:`Lens` elements and the detector.

Linear response with free evolution (Jozsa, PRA 76, 044103 (2007); general pointer observable
``M`` and generator ``G``): ``d<M> = g Re A_w (-i<[M, G]>) + g Im A_w (<{M, G}> - 2 <M><G>)``. At
the coupling plane, with ``C = Cov_sym(x, p) = u Var(p) / k0`` (``u`` from the waist,
``Var(p) = 1/(4 sigma0^2)``):

* shift: ``dx = g (Re A_w + 2 C Im A_w)``, ``dp = 2 g Var(p) Im A_w``;
* kick: ``dx = -2 k Var(x) Im A_w``, ``dp = k (Re A_w - 2 C Im A_w)``;

and first moments travel as rays: ``dx_det = M00 dx + M01 dp / k0`` with the ray matrix ``M`` of
the train (exact in paraxial optics). In the focal plane of a lens, ``x = f p / k0``.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .branches import Branches, free_space, kick, prepare, shift, thin_lens

__all__ = [
    "COUPLINGS",
    "Lens",
    "Space",
    "beam_variance",
    "detector_branches",
    "focal_plane",
    "linear_shift",
    "practical_amplification",
    "ray_matrix",
    "rayleigh_range",
    "standard_shift",
]

Real = NDArray[np.float64]

#: Coupling kinds: a transverse displacement or a transverse momentum kick.
COUPLINGS = ("shift", "kick")


@dataclass(frozen=True)
class Space:
    """Free propagation over ``distance`` (length unit)."""

    distance: float


@dataclass(frozen=True)
class Lens:
    """Thin lens of ``focal_length`` (length unit; positive converging)."""

    focal_length: float


Train = Sequence[Space | Lens]


def focal_plane(focal_length: float) -> tuple[Lens, Space]:
    """A lens and the distance to its back focal plane."""
    return Lens(focal_length), Space(focal_length)


def rayleigh_range(sigma0: ArrayLike, wavelength: ArrayLike) -> Real:
    """``z_R = 4 pi sigma0^2 / lambda`` for intensity rms waist ``sigma0``."""
    return 4 * np.pi * np.asarray(sigma0, float) ** 2 / np.asarray(wavelength, float)


def beam_variance(sigma0: ArrayLike, wavelength: ArrayLike, z: ArrayLike) -> Real:
    """Intensity variance ``sigma0^2 (1 + (z/z_R)^2)`` at ``z`` from the waist."""
    ratio = np.asarray(z, float) / rayleigh_range(sigma0, wavelength)
    return np.asarray(sigma0, float) ** 2 * (1 + ratio**2)


def ray_matrix(train: Train) -> Real:
    """Ray-transfer matrix on ``(x, theta)`` of the train, first element first."""
    m = np.eye(2)
    for element in train:
        if isinstance(element, Space):
            step = np.array([[1.0, element.distance], [0.0, 1.0]])
        else:
            step = np.array([[1.0, 0.0], [-1.0 / element.focal_length, 1.0]])
        m = step @ m
    return m


def _check(coupling: str) -> None:
    if coupling not in COUPLINGS:
        raise ValueError(f"unknown coupling {coupling!r}; allowed: {', '.join(COUPLINGS)}")


def linear_shift(
    weak_value: ArrayLike,
    strength: ArrayLike,
    sigma0: ArrayLike,
    wavelength: float,
    coupling: str = "shift",
    waist_to_coupling: ArrayLike = 0.0,
    train: Train = (),
) -> Real:
    """Mean beam displacement at the detector to first order in the strength (see module)."""
    _check(coupling)
    aw = np.asarray(weak_value, complex)
    s = np.asarray(strength, float)
    sigma0 = np.asarray(sigma0, float)
    k0 = 2 * np.pi / wavelength
    var_p = 1.0 / (4 * sigma0**2)
    cov = np.asarray(waist_to_coupling, float) * var_p / k0
    if coupling == "shift":
        dx = s * (aw.real + 2 * cov * aw.imag)
        dp = 2 * s * var_p * aw.imag
    else:
        var_x = beam_variance(sigma0, wavelength, waist_to_coupling)
        dx = -2 * s * var_x * aw.imag
        dp = s * (aw.real - 2 * cov * aw.imag)
    m = ray_matrix(train)
    return m[0, 0] * dx + m[0, 1] * dp / k0


def detector_branches(
    rho: ArrayLike,
    effect: ArrayLike,
    observable: ArrayLike,
    strength: ArrayLike,
    sigma0: ArrayLike,
    wavelength: float,
    coupling: str = "shift",
    waist_to_coupling: float = 0.0,
    train: Train = (),
) -> Branches:
    """Exact post-selected beam at the detector (for :func:`~aligner.physics.branches.moments`,
    ``density``, ``tail`` and :func:`~aligner.physics.information.fisher_information`)."""
    _check(coupling)
    k0 = 2 * np.pi / wavelength
    beam = free_space(prepare(rho, effect, observable, sigma0), waist_to_coupling, k0)
    beam = shift(beam, strength) if coupling == "shift" else kick(beam, strength)
    for element in train:
        if isinstance(element, Space):
            beam = free_space(beam, element.distance, k0)
        else:
            beam = thin_lens(beam, element.focal_length, k0)
    return beam


def standard_shift(
    strength: ArrayLike,
    wavelength: float,
    coupling: str = "shift",
    train: Train = (),
    eigenvalue: float = 1.0,
) -> Real:
    """Displacement at the detector of the whole beam in the eigenstate ``eigenvalue`` of ``A``
    (no post-selection): ``M00 g a`` for a shift, ``M01 k a / k0`` for a kick (exact)."""
    _check(coupling)
    m = ray_matrix(train)
    s = np.asarray(strength, float) * eigenvalue
    return m[0, 0] * s if coupling == "shift" else m[0, 1] * s * wavelength / (2 * np.pi)


def practical_amplification(
    shift_at_detector: ArrayLike,
    strength: ArrayLike,
    wavelength: float,
    coupling: str = "shift",
    train: Train = (),
    eigenvalue: float = 1.0,
) -> Real:
    """Post-selected displacement at the detector over the standard one through the same
    train (the amplification a deflection experiment reports; Dixon et al.,
    PRL 102, 173601 (2009)). Infinite when the standard displacement vanishes (a kick read at
    the coupling plane, a shift read in a focal plane)."""
    standard = standard_shift(strength, wavelength, coupling, train, eigenvalue)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.asarray(shift_at_detector, float) / standard
