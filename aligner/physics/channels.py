"""Optical elements as channels on polarization states, computed in Stokes space.

Every element acts on a state as a quantum channel and on a measurement as its dual:

* a retarder or rotator is unitary, ``rho -> J rho J^dagger`` and ``E -> J^dagger E J``; in
  Stokes space it is a rotation of (S1, S2, S3);
* a polarizer with pass axis ``p``, transmission ``T`` and extinction ratio ``ER`` passes ``T``
  along ``p`` and ``T/ER`` along ``p_perp`` *incoherently*:
  ``rho -> T (P rho P + Q rho Q / ER)``, ``P = |p><p|``, ``Q = |p_perp><p_perp|``. The map is its
  own dual, so the analyzer's POVM element is ``E = T (P + Q / ER)``.

States and effects are carried as Stokes 4-vectors (``x0 = Tr X``, ``x_k = Tr(X sigma_k)`` with
sigma = HV, DA, RL; see :mod:`aligner.physics.jones`), which keeps large stacks of settings
cheap: ``Tr(E rho) = (e . s) / 2``. The density-matrix functions :func:`push_forward_state` and
:func:`pull_back_effect` wrap the Stokes ones. Every parameter broadcasts over leading axes.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .jones import density_from_stokes, stokes_from_density

__all__ = [
    "Channel",
    "Polarizer",
    "Retarder",
    "Rotator",
    "analyzer_effect",
    "analyzer_stokes",
    "pull_back_effect",
    "pull_back_stokes",
    "push_forward_state",
    "push_forward_stokes",
    "source_state",
    "source_stokes",
]

Real = NDArray[np.float64]
Complex = NDArray[np.complex128]


def _axis(angle: ArrayLike) -> tuple[Real, Real]:
    """Stokes direction (cos 2a, sin 2a, 0) of linear polarization at ``angle`` (rad)."""
    twice = 2 * np.asarray(angle, float)
    return np.cos(twice), np.sin(twice)


def _rotate(s: Real, c: Real, t: Real, cos_phi: Real, sin_phi: Real) -> Real:
    """Rotate the (S1, S2, S3) part of ``s`` by ``phi`` about the in-plane axis (c, t, 0).

    Rodrigues' formula, written out for an axis in the S1-S2 plane.
    """
    s0, s1, s2, s3 = s[..., 0], s[..., 1], s[..., 2], s[..., 3]
    along = (c * s1 + t * s2) * (1 - cos_phi)
    out = np.empty(np.broadcast_shapes(s.shape, (*np.shape(c), 4), (*np.shape(cos_phi), 4)))
    out[..., 0] = s0
    out[..., 1] = s1 * cos_phi + t * s3 * sin_phi + c * along
    out[..., 2] = s2 * cos_phi - c * s3 * sin_phi + t * along
    out[..., 3] = s3 * cos_phi + (c * s2 - t * s1) * sin_phi
    return out


@dataclass(frozen=True)
class Retarder:
    """Linear retarder, fast axis ``theta`` (rad), retardance ``delta`` (rad); Jones matrix
    :func:`aligner.physics.jones.retarder`. In Stokes space: a rotation by ``delta`` about the
    fast axis (as ``_rotate`` orients it)."""

    theta: ArrayLike
    delta: ArrayLike

    def forward(self, s: Real) -> Real:
        c, t = _axis(self.theta)
        d = np.asarray(self.delta, float)
        return _rotate(s, c, t, np.cos(d), np.sin(d))

    def backward(self, e: Real) -> Real:
        c, t = _axis(self.theta)
        d = np.asarray(self.delta, float)
        return _rotate(e, c, t, np.cos(d), -np.sin(d))


@dataclass(frozen=True)
class Rotator:
    """Polarization rotator turning light by ``rotation`` (rad) from H towards V; Stokes
    rotation by ``2 rotation`` about S3."""

    rotation: ArrayLike

    def _turn(self, s: Real, sign: float) -> Real:
        c, t = _axis(self.rotation)
        t = sign * t
        out = np.empty(np.broadcast_shapes(s.shape, (*np.shape(c), 4)))
        out[..., 0] = s[..., 0]
        out[..., 1] = c * s[..., 1] - t * s[..., 2]
        out[..., 2] = t * s[..., 1] + c * s[..., 2]
        out[..., 3] = s[..., 3]
        return out

    def forward(self, s: Real) -> Real:
        return self._turn(s, 1.0)

    def backward(self, e: Real) -> Real:
        return self._turn(e, -1.0)


@dataclass(frozen=True)
class Polarizer:
    """Polarizer with pass axis ``angle`` (rad), ``extinction_ratio`` and ``transmission``;
    the incoherent map ``T (P x P + Q x Q / ER)``, its own dual."""

    angle: ArrayLike
    extinction_ratio: ArrayLike = np.inf
    transmission: ArrayLike = 1.0

    def forward(self, s: Real) -> Real:
        c, t = _axis(self.angle)
        leak = 1.0 / np.asarray(self.extinction_ratio, float)
        trans = np.asarray(self.transmission, float)
        along = c * s[..., 1] + t * s[..., 2]
        passed = 0.5 * (s[..., 0] + along)
        blocked = 0.5 * (s[..., 0] - along) * leak
        out = np.empty(
            np.broadcast_shapes(
                s.shape, (*np.shape(c), 4), (*np.shape(leak), 4), (*np.shape(trans), 4)
            )
        )
        out[..., 0] = trans * (passed + blocked)
        polarized = trans * (passed - blocked)
        out[..., 1] = polarized * c
        out[..., 2] = polarized * t
        out[..., 3] = 0.0
        return out

    backward = forward


Channel = Retarder | Rotator | Polarizer


def push_forward_stokes(s: Real, chain: Sequence[Channel]) -> Real:
    """Stokes vector after the elements of ``chain`` in beam order (S0 = transmitted fraction)."""
    for element in chain:
        s = element.forward(s)
    return s


def pull_back_stokes(e: Real, chain: Sequence[Channel]) -> Real:
    """Stokes form of a POVM element measured after ``chain``, expressed before it."""
    for element in reversed(chain):
        e = element.backward(e)
    return e


def push_forward_state(rho: ArrayLike, chain: Sequence[Channel]) -> Complex:
    """Density matrix after ``chain`` (trace = transmitted fraction)."""
    return density_from_stokes(push_forward_stokes(stokes_from_density(rho), chain))


def pull_back_effect(effect: ArrayLike, chain: Sequence[Channel]) -> Complex:
    """A POVM element measured after ``chain``, expressed before it (Heisenberg picture)."""
    return density_from_stokes(pull_back_stokes(stokes_from_density(effect), chain))


def analyzer_stokes(
    angle: ArrayLike, extinction_ratio: ArrayLike = np.inf, transmission: ArrayLike = 1.0
) -> Real:
    """Stokes form of the analyzer POVM element ``T (|p><p| + |p_perp><p_perp| / ER)``."""
    c, t = _axis(angle)
    leak = 1.0 / np.asarray(extinction_ratio, float)
    trans = np.asarray(transmission, float)
    out = np.empty((*np.broadcast_shapes(np.shape(c), np.shape(leak), np.shape(trans)), 4))
    out[..., 0] = trans * (1 + leak)
    out[..., 1] = trans * (1 - leak) * c
    out[..., 2] = trans * (1 - leak) * t
    out[..., 3] = 0.0
    return out


def analyzer_effect(
    angle: ArrayLike, extinction_ratio: ArrayLike = np.inf, transmission: ArrayLike = 1.0
) -> Complex:
    """POVM element ``T (|p><p| + |p_perp><p_perp| / ER)`` of an analyzer and detector."""
    return density_from_stokes(analyzer_stokes(angle, extinction_ratio, transmission))


def source_stokes(angle: ArrayLike, extinction_ratio: ArrayLike = np.inf) -> Real:
    """Stokes vector of the normalised state a source polarizer prepares (S0 = 1)."""
    e = analyzer_stokes(angle, extinction_ratio)
    return e / e[..., :1]


def source_state(angle: ArrayLike, extinction_ratio: ArrayLike = np.inf) -> Complex:
    """``rho = (|s><s| + |s_perp><s_perp| / ER) / (1 + 1/ER)``; ``ER = inf`` gives the pure
    state."""
    return density_from_stokes(source_stokes(angle, extinction_ratio))
