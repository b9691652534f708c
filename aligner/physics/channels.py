"""Optical elements as quantum channels on 2x2 polarization density matrices.

A retarder or rotator is unitary, ``rho -> J rho J^dagger``. A polarizer with pass axis ``p``,
transmission ``T`` and extinction ratio ``ER`` passes ``T`` along ``p`` and ``T/ER`` along
``p_perp`` *incoherently*: ``rho -> T (P rho P + Q rho Q / ER)`` with ``P = |p><p|``,
``Q = |p_perp><p_perp|``. Its effect on a measurement (the Heisenberg dual) has the same form,
so the analyzer's POVM element is ``E = T (P + Q / ER)``.

Post-selection is carried back to the coupling plane with :func:`pull_back_effect`
(``E_c = J^dagger E J`` for a unitary element), pre-selection forward with
:func:`push_forward_state`. Every parameter broadcasts over leading axes.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .jones import adjoint, linear_projector, matmul2

__all__ = [
    "Channel",
    "PolarizerChannel",
    "UnitaryChannel",
    "analyzer_effect",
    "pull_back_effect",
    "push_forward_state",
    "source_state",
]

Complex = NDArray[np.complex128]


@dataclass(frozen=True)
class UnitaryChannel:
    """A lossless element with Jones matrix ``matrix`` (..., 2, 2)."""

    matrix: Complex

    def forward(self, rho: Complex) -> Complex:
        return matmul2(matmul2(self.matrix, rho), adjoint(self.matrix))

    def backward(self, effect: Complex) -> Complex:
        return matmul2(matmul2(adjoint(self.matrix), effect), self.matrix)


@dataclass(frozen=True)
class PolarizerChannel:
    """A polarizer with pass axis ``angle`` (rad), ``transmission`` and ``extinction_ratio``."""

    angle: NDArray[np.float64]
    extinction_ratio: NDArray[np.float64]
    transmission: NDArray[np.float64]

    def _apply(self, x: Complex) -> Complex:
        p = linear_projector(self.angle)
        q = np.eye(2) - p
        leak = (1.0 / np.asarray(self.extinction_ratio, float))[..., None, None]
        t = np.asarray(self.transmission, float)[..., None, None]
        return t * (matmul2(matmul2(p, x), p) + leak * matmul2(matmul2(q, x), q))

    forward = _apply
    backward = _apply


Channel = UnitaryChannel | PolarizerChannel


def push_forward_state(rho: Complex, chain: Sequence[Channel]) -> Complex:
    """State after the elements of ``chain`` in beam order (trace = transmitted fraction)."""
    for element in chain:
        rho = element.forward(rho)
    return rho


def pull_back_effect(effect: Complex, chain: Sequence[Channel]) -> Complex:
    """A POVM element measured after ``chain``, expressed before it (Heisenberg picture)."""
    for element in reversed(chain):
        effect = element.backward(effect)
    return effect


def analyzer_effect(
    angle: ArrayLike, extinction_ratio: ArrayLike, transmission: ArrayLike = 1.0
) -> Complex:
    """POVM element ``T (|p><p| + |p_perp><p_perp| / ER)`` of an analyzer followed by a detector."""
    leak = (1.0 / np.asarray(extinction_ratio, float))[..., None, None]
    t = np.asarray(transmission, float)[..., None, None]
    return t * ((1.0 - leak) * linear_projector(angle) + leak * np.eye(2))


def source_state(angle: ArrayLike, extinction_ratio: ArrayLike) -> Complex:
    """Normalised state prepared by a source polarizer at ``angle`` (rad) with finite extinction:
    ``rho = (|s><s| + |s_perp><s_perp| / ER) / (1 + 1/ER)``; ``ER = inf`` gives the pure state."""
    leak = 1.0 / np.asarray(extinction_ratio, float)
    return analyzer_effect(angle, extinction_ratio) / (1.0 + leak)[..., None, None]
