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
from dataclasses import dataclass, replace
from functools import cached_property

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .bench import Bench, Element
from .errors import InputError
from .physics.channels import (
    Channel,
    Polarizer,
    Retarder,
    Rotator,
    analyzer_stokes,
    pull_back_stokes,
    push_forward_stokes,
    source_stokes,
)
from .physics.jones import density_from_stokes
from .physics.weak import observable_from_axis, observable_matrix

__all__ = [
    "Forward",
    "coupling_observable",
    "element_angles_deg",
    "forward",
    "forward_stokes",
    "full_readings",
    "ideal_optics",
    "imbalance_deg",
    "overlap_of_pure_parts",
    "pure_overlap",
]

Complex = NDArray[np.complex128]


@dataclass(frozen=True)
class Forward:
    """States at the coupling plane for one or many settings (arrays of the broadcast shape).

    ``state_stokes`` and ``effect_stokes`` are the Stokes 4-vectors (..., 4); ``rho`` and
    ``effect`` the same as 2x2 matrices, built on first use.
    """

    state_stokes: NDArray[np.float64]
    effect_stokes: NDArray[np.float64]
    probability: NDArray[np.float64]
    angles_deg: Mapping[str, NDArray[np.float64]]

    @cached_property
    def rho(self) -> Complex:
        """Pre-selected density matrix at the coupling plane (trace = fraction arriving)."""
        s, _ = np.broadcast_arrays(self.state_stokes, self.effect_stokes)
        return density_from_stokes(s)

    @cached_property
    def effect(self) -> Complex:
        """POVM element of the whole post-selection, carried back to the coupling plane."""
        e, _ = np.broadcast_arrays(self.effect_stokes, self.state_stokes)
        return density_from_stokes(e)


def full_readings(
    bench: Bench,
    readings: Mapping[str, ArrayLike] | None = None,
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


def element_angles_deg(
    bench: Bench,
    readings: Mapping[str, ArrayLike] | None = None,
) -> dict[str, NDArray[np.float64]]:
    """Element angle (deg) of every mount at the given readings (``sense*(reading-offset)``)."""
    r = full_readings(bench, readings)
    return {name: np.asarray(m.element_angle_deg(r[name])) for name, m in bench.mounts.items()}


def _angle_rad(angle_deg: float, mount: str | None, angles: Mapping[str, np.ndarray]) -> np.ndarray:
    return np.deg2rad(angles[mount] if mount is not None else np.asarray(angle_deg, float))


def _channel(element: Element, angles: Mapping[str, np.ndarray]) -> Channel:
    theta = _angle_rad(element.angle_deg, element.mount, angles)
    if element.type == "polarizer":
        return Polarizer(theta, element.extinction_ratio, element.transmission)
    if element.type == "rotator":
        return Rotator(theta)
    return Retarder(theta, 2 * np.pi * element.retardance_waves)


def forward_stokes(
    bench: Bench,
    readings: Mapping[str, ArrayLike] | None = None,
) -> tuple[NDArray[np.float64], NDArray[np.float64], dict[str, np.ndarray]]:
    """Stokes vectors of the state and of the effect at the coupling plane, and the element
    angles (deg); the fast path under :func:`forward`."""
    angles = element_angles_deg(bench, readings)
    src = bench.source
    s = source_stokes(_angle_rad(src.angle_deg, src.mount, angles), src.extinction_ratio)
    s = push_forward_stokes(s, [_channel(e, angles) for e in bench.pre])
    an = bench.analyzer
    e = analyzer_stokes(
        _angle_rad(an.angle_deg, an.mount, angles), an.extinction_ratio, an.transmission
    )
    e = pull_back_stokes(e, [_channel(el, angles) for el in bench.post])
    return s, e, angles


def forward(bench: Bench, readings: Mapping[str, ArrayLike] | None = None) -> Forward:
    """Evaluate the bench at mount ``readings`` (deg; floats or arrays broadcast together)."""
    s, e, angles = forward_stokes(bench, readings)
    probability = 0.5 * np.einsum("...i,...i->...", s, e)
    return Forward(s, e, probability, angles)


def coupling_observable(bench: Bench) -> Complex:
    """The coupled observable ``A`` as a Hermitian 2x2 matrix."""
    c = bench.coupling
    if c.observable == "axis":
        return observable_from_axis(c.axis, c.eigenvalues)
    return observable_matrix(c.observable)


def overlap_of_pure_parts(
    state_stokes: NDArray[np.float64],
    effect_stokes: NDArray[np.float64],
) -> NDArray[np.float64]:
    """``|<f|i>|`` of the pure parts of a state and an effect given as Stokes vectors:
    ``|n_f + n_i| / 2`` with unit Stokes directions ``n`` (free of the cancellation in
    ``1 + n_f . n_i`` near the null). NaN where either has no polarized part."""
    s_i, s_f = state_stokes[..., 1:], effect_stokes[..., 1:]
    with np.errstate(invalid="ignore", divide="ignore"):
        n_i = s_i / np.linalg.norm(s_i, axis=-1, keepdims=True)
        n_f = s_f / np.linalg.norm(s_f, axis=-1, keepdims=True)
    return np.linalg.norm(n_i + n_f, axis=-1) / 2


def pure_overlap(
    bench: Bench,
    readings: Mapping[str, ArrayLike] | None = None,
) -> NDArray[np.float64]:
    """``|<f|i>|`` of the pure parts of rho and E at ``readings``
    (:func:`overlap_of_pure_parts`)."""
    s, e, _ = forward_stokes(bench, readings)
    return overlap_of_pure_parts(s, e)


def imbalance_deg(
    bench: Bench,
    readings: Mapping[str, ArrayLike] | None = None,
    step_deg: float = 1e-3,
    *,
    mount: str | None = None,
) -> NDArray[np.float64]:
    """Signed imbalance (deg): the angle between the post-selected state and the state orthogonal
    to the pre-selected one.

    Magnitude ``arcsin |<f|i>|`` with ``|i>``, ``|f>`` the pure parts (dominant eigenvectors) of
    ``rho`` and ``E`` at the coupling plane; for linear states it is the physical rotation away
    from crossed. Sign: positive when turning ``mount`` (default the bench's
    ``imbalance_mount``) to a higher reading increases the overlap, i.e. on the high-reading
    side of the null ("the same sense as the mount"). A mixed state's pure part is the direction
    of its Stokes vector. Raises :class:`InputError` for a state with no polarized part.
    """
    r = full_readings(bench, readings)
    name = bench.imbalance_mount if mount is None else mount
    # the reading and the two side steps in one stacked forward evaluation
    stacked = {k: np.asarray(v) for k, v in r.items()}
    shape = np.broadcast_shapes(*(v.shape for v in stacked.values()))
    stacked = {k: np.broadcast_to(v, shape) for k, v in stacked.items()}
    stacked[name] = np.stack([stacked[name], stacked[name] + step_deg, stacked[name] - step_deg])
    s, e, _ = forward_stokes(bench, stacked)
    gap, up, down = overlap_of_pure_parts(s, e)
    if not np.all(np.isfinite(gap)):
        raise InputError(
            "the pre- or post-selection is unpolarized at these readings, so the "
            "imbalance is undefined; check the source and analyzer settings"
        )
    sign = np.where(up >= down, 1.0, -1.0)
    return np.rad2deg(np.arcsin(np.clip(gap, 0.0, 1.0))) * sign


def ideal_optics(bench: Bench) -> Bench:
    """The bench with perfect extinction everywhere (source, analyzer, polarizer elements)."""
    inf = float("inf")

    def clean(elements: tuple[Element, ...]) -> tuple[Element, ...]:
        return tuple(
            replace(e, extinction_ratio=inf) if e.type == "polarizer" else e for e in elements
        )

    return replace(
        bench,
        source=replace(bench.source, extinction_ratio=inf),
        analyzer=replace(bench.analyzer, extinction_ratio=inf),
        pre=clean(bench.pre),
        post=clean(bench.post),
    )
