"""Forward model: a bench and its mount readings -> states at the coupling plane.

``rho`` is the pre-selected density matrix at the coupling plane, normalised so that its trace is
the fraction of the source's photons that reach the coupling (polarizers in the pre-selection arm
take their share). ``effect`` is the POVM element of the whole post-selection (post elements,
analyzer transmission and extinction) carried back to the coupling plane, ``J^dagger E J``.
``probability = Tr(effect rho)`` is the plain post-selection probability per source photon,
without the pointer-overlap factor (see :mod:`aligner.physics.weak` for that).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .bench import Bench, Element
from .errors import InputError
from .physics.channels import (
    Channel,
    PolarizerChannel,
    UnitaryChannel,
    analyzer_effect,
    pull_back_effect,
    push_forward_state,
    source_state,
)
from .physics.jones import matmul2, retarder, rotator
from .physics.weak import observable_from_axis, observable_matrix

__all__ = ["Forward", "coupling_observable", "element_angles_deg", "forward", "full_readings"]

Complex = NDArray[np.complex128]


@dataclass(frozen=True)
class Forward:
    """States at the coupling plane for one or many settings (arrays of the broadcast shape)."""

    rho: Complex
    effect: Complex
    probability: NDArray[np.float64]
    angles_deg: Mapping[str, NDArray[np.float64]]


def full_readings(bench: Bench, readings: Mapping[str, ArrayLike] | None = None,
                  ) -> dict[str, NDArray[np.float64]]:
    """Readings for every mount: those given, the bench file's for the rest.

    Unknown mount names raise :class:`InputError` naming the mount and the known ones.
    """
    out = {name: np.asarray(m.reading_deg, float) for name, m in bench.mounts.items()}
    for name, value in (readings or {}).items():
        if name not in bench.mounts:
            raise InputError(f"unknown mount {name!r}; the bench has: {', '.join(bench.mounts)}")
        out[name] = np.asarray(value, float)
    return out


def element_angles_deg(bench: Bench, readings: Mapping[str, ArrayLike] | None = None,
                       ) -> dict[str, NDArray[np.float64]]:
    """Element angle (deg) of every mount at the given readings (``sense*(reading-offset)``)."""
    r = full_readings(bench, readings)
    return {name: np.asarray(m.element_angle_deg(r[name])) for name, m in bench.mounts.items()}


def _angle_rad(angle_deg: float, mount: str | None, angles: Mapping[str, np.ndarray]) -> np.ndarray:
    return np.deg2rad(angles[mount] if mount is not None else np.asarray(angle_deg, float))


def _channel(element: Element, angles: Mapping[str, np.ndarray]) -> Channel:
    theta = _angle_rad(element.angle_deg, element.mount, angles)
    if element.type == "polarizer":
        return PolarizerChannel(theta, np.asarray(element.extinction_ratio),
                                np.asarray(element.transmission))
    if element.type == "rotator":
        return UnitaryChannel(rotator(theta))
    return UnitaryChannel(retarder(theta, 2 * np.pi * element.retardance_waves))


def _compose(chain: list[Channel]) -> list[Channel]:
    """Merge neighbouring unitaries into one matrix: fewer products on large stacks."""
    out: list[Channel] = []
    for element in chain:
        if out and isinstance(element, UnitaryChannel) and isinstance(out[-1], UnitaryChannel):
            out[-1] = UnitaryChannel(matmul2(element.matrix, out[-1].matrix))
        else:
            out.append(element)
    return out


def forward(bench: Bench, readings: Mapping[str, ArrayLike] | None = None) -> Forward:
    """Evaluate the bench at mount ``readings`` (deg; floats or arrays broadcast together)."""
    angles = element_angles_deg(bench, readings)
    src = bench.source
    rho = source_state(_angle_rad(src.angle_deg, src.mount, angles), src.extinction_ratio)
    rho = push_forward_state(rho, _compose([_channel(e, angles) for e in bench.pre]))
    an = bench.analyzer
    effect = analyzer_effect(_angle_rad(an.angle_deg, an.mount, angles), an.extinction_ratio,
                             an.transmission)
    effect = pull_back_effect(effect, _compose([_channel(e, angles) for e in bench.post]))
    rho, effect = np.broadcast_arrays(rho, effect)
    probability = np.real(np.einsum("...ij,...ji->...", effect, rho))
    return Forward(rho, effect, probability, angles)


def coupling_observable(bench: Bench) -> Complex:
    """The coupled observable ``A`` as a Hermitian 2x2 matrix."""
    c = bench.coupling
    if c.observable == "axis":
        return observable_from_axis(c.axis, c.eigenvalues)
    return observable_matrix(c.observable)
