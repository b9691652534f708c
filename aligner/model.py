"""Forward model: a bench and its mount readings -> states at the coupling plane.

``rho`` is the pre-selected density matrix at the coupling plane, normalised so that its trace is
the fraction of the source's photons that reach the coupling (polarizers in the pre-selection arm
take their share). ``effect`` is the POVM element of the whole post-selection (post elements,
analyzer transmission and extinction) carried back to the coupling plane, ``J^dagger E J``.
``probability = Tr(effect rho)`` is the plain post-selection probability per source photon,
without the pointer-overlap factor (see :mod:`aligner.physics.weak` for that).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace
from functools import cached_property

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .bench import Bench, Element
from .errors import InputError
from .physics.channels import (
    Channel,
    Parts,
    Polarizer,
    Retarder,
    Rotator,
    analyzer_parts,
    is_zero,
    join,
    source_parts,
    sum_of_products,
    turn_rate,
)
from .physics.jones import density_from_stokes
from .physics.weak import observable_from_axis, observable_matrix

__all__ = [
    "BLOCK",
    "Arm",
    "Forward",
    "coupling_observable",
    "coupling_scale",
    "element_angles_deg",
    "forward",
    "forward_stokes",
    "full_readings",
    "ideal_optics",
    "imbalance_and_slope",
    "imbalance_deg",
    "pure_overlap",
    "pure_overlap_of",
    "signed_imbalance",
    "wavelength_in_units",
]

Complex = NDArray[np.complex128]
Real = NDArray[np.float64]

#: Settings evaluated together when there are many (a prediction, a Monte Carlo budget): a
#: block's arrays are 256 kB and stay in the processor's cache, which about halves the time.
BLOCK = 32_768


@dataclass(frozen=True)
class Arm:
    """One arm of the bench as evaluated, for one or many settings.

    ``start``: the Stokes components where the arm starts (the source's state, or the
    analyzer's effect), turned by ``start_mount``; ``steps``: for each element in the order it
    acts (beam order for the pre-selection, reverse order for the post-selection), its mount,
    channel and the Stokes components after it. ``backward``: an effect carried back (the
    channels' duals).
    """

    start: Parts
    start_mount: str | None
    steps: tuple[tuple[str | None, Channel, Parts], ...]
    backward: bool

    @property
    def end(self) -> Parts:
        """The Stokes components at the coupling plane."""
        return self.steps[-1][2] if self.steps else self.start

    def derivative(self, mount: str, rate: float) -> Parts | None:
        """``d end / d reading`` of ``mount`` (``rate`` = d(angle, rad)/d(reading)); None when
        the mount turns nothing in this arm."""
        d = turn_rate(self.start, rate) if self.start_mount == mount else None
        x = self.start
        for element_mount, channel, out in self.steps:
            if d is not None:
                d = channel.backward_parts(d) if self.backward else channel.forward_parts(d)
            if element_mount == mount:
                turned = (
                    channel.turned_backward(x, out)
                    if self.backward
                    else channel.turned_forward(x, out)
                )
                d = _plus(d, _scaled(turned, rate))
            x = out
        return d


@dataclass(frozen=True)
class Forward:
    """States at the coupling plane for one or many settings (arrays of the broadcast shape).

    ``state_parts`` and ``effect_parts``: the four Stokes components of ``rho`` and ``E``
    (the fast path's form, :data:`aligner.physics.channels.Parts`), the ends of the two
    :class:`Arm` s; ``state_stokes`` and ``effect_stokes`` the same as 4-vectors (..., 4),
    ``rho`` and ``effect`` as 2x2 matrices, ``probability`` = ``Tr(E rho)``, each built on
    first use.
    """

    pre: Arm
    post: Arm
    angles_deg: Mapping[str, NDArray[np.float64]]

    @property
    def state_parts(self) -> Parts:
        """Stokes components of the pre-selected state at the coupling plane."""
        return self.pre.end

    @property
    def effect_parts(self) -> Parts:
        """Stokes components of the post-selection effect at the coupling plane."""
        return self.post.end

    @cached_property
    def probability(self) -> NDArray[np.float64]:
        """Plain post-selection probability ``Tr(E rho) = (s . e)/2`` per source photon."""
        s, e = self.state_parts, self.effect_parts
        return np.asarray(0.5 * (s[0] * e[0] + s[1] * e[1] + s[2] * e[2] + s[3] * e[3]))

    @cached_property
    def _stokes(self) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        s, e = np.broadcast_arrays(join(self.state_parts), join(self.effect_parts))
        return s, e

    @property
    def state_stokes(self) -> NDArray[np.float64]:
        """Stokes 4-vectors (..., 4) of the pre-selected state."""
        return self._stokes[0]

    @property
    def effect_stokes(self) -> NDArray[np.float64]:
        """Stokes 4-vectors (..., 4) of the post-selection effect."""
        return self._stokes[1]

    @cached_property
    def rho(self) -> Complex:
        """Pre-selected density matrix at the coupling plane (trace = fraction arriving)."""
        return density_from_stokes(self.state_stokes)

    @cached_property
    def effect(self) -> Complex:
        """POVM element of the whole post-selection, carried back to the coupling plane."""
        return density_from_stokes(self.effect_stokes)


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


def _scaled(x: Parts, k: float) -> Parts:
    return x[0] * k, x[1] * k, x[2] * k, x[3] * k


def _plus(a: Parts | None, b: Parts) -> Parts:
    return b if a is None else (a[0] + b[0], a[1] + b[1], a[2] + b[2], a[3] + b[3])


def _arm(
    start: Parts,
    start_mount: str | None,
    elements: Sequence[Element],
    angles: Mapping,
    backward: bool,
) -> Arm:
    """Carry ``start`` through ``elements`` in the order given (forward, or dual when
    ``backward``), keeping every step for :meth:`Arm.derivative`."""
    steps = []
    x = start
    for element in elements:
        channel = _channel(element, angles)
        x = channel.backward_parts(x) if backward else channel.forward_parts(x)
        steps.append((element.mount, channel, x))
    return Arm(start, start_mount, tuple(steps), backward)


def forward(bench: Bench, readings: Mapping[str, ArrayLike] | None = None) -> Forward:
    """Evaluate the bench at mount ``readings`` (deg; floats or arrays broadcast together)."""
    angles = element_angles_deg(bench, readings)
    src, an = bench.source, bench.analyzer
    s = source_parts(_angle_rad(src.angle_deg, src.mount, angles), src.extinction_ratio)
    e = analyzer_parts(
        _angle_rad(an.angle_deg, an.mount, angles), an.extinction_ratio, an.transmission
    )
    if an.unexplained_leak:  # + leak x identity: Tr grows by twice the leak
        e = (e[0] + 2 * an.unexplained_leak, e[1], e[2], e[3])
    pre = _arm(s, src.mount, bench.pre, angles, backward=False)
    post = _arm(e, an.mount, bench.post[::-1], angles, backward=True)
    return Forward(pre, post, angles)


def forward_stokes(
    bench: Bench,
    readings: Mapping[str, ArrayLike] | None = None,
) -> tuple[NDArray[np.float64], NDArray[np.float64], dict[str, np.ndarray]]:
    """Stokes vectors (..., 4) of the state and of the effect at the coupling plane, and the
    element angles (deg)."""
    fwd = forward(bench, readings)
    return fwd.state_stokes, fwd.effect_stokes, dict(fwd.angles_deg)


def coupling_observable(bench: Bench) -> Complex:
    """The coupled observable ``A`` as a Hermitian 2x2 matrix."""
    c = bench.coupling
    if c.observable == "axis" and c.axis is not None:  # the loader requires an axis there
        return observable_from_axis(c.axis, c.eigenvalues)
    return observable_matrix(c.observable)


def wavelength_in_units(bench: Bench) -> float:
    """The working wavelength in the pointer's length ``units``."""
    return bench.wavelength_nm * 1e-9 / bench.coupling.unit_size


def coupling_scale(bench: Bench) -> tuple[float, float]:
    """``(g, sigma)``: the coupling as a shift ``exp(-i g A p)`` of one pointer variable, and the
    rms width of that variable's distribution at the coupling plane.

    A shift (and a phase readout) moves the pointer itself: ``(strength, pointer_sigma)`` in
    ``units``. A kick ``exp(+i k A x)`` shifts the transverse momentum: ``g = k = 2 pi tilt /
    lambda`` and ``sigma = 1 / (2 sigma_x)`` in 1/``units``, with ``sigma_x`` the beam's width
    at the coupling plane (:func:`aligner.physics.propagation.beam_variance`), which makes the
    post-selection probability exact; the responses of this picture (the amplification along
    ``re``/``im``) are those of an unchirped pointer."""
    c = bench.coupling
    if c.kind == "shift":
        return c.strength, c.pointer_sigma
    from .physics.propagation import beam_variance

    wavelength = wavelength_in_units(bench)
    var_x = beam_variance(c.pointer_sigma, wavelength, c.from_mm(c.waist_to_coupling_mm))
    return 2 * np.pi * c.strength * 1e-6 / wavelength, float(0.5 / np.sqrt(var_x))


def _directions(state: Parts, effect: Parts) -> tuple[Real, Real, list[Real], list[Real]]:
    """``|s|``, ``|e|`` (polarized parts) and the unit directions ``n_i``, ``n_f``."""
    norms = [
        np.sqrt(sum_of_products([(1.0, x[k], x[k]) for k in (1, 2, 3)])) for x in (state, effect)
    ]
    # a zero component stays a scalar zero, unless the whole polarized part is zero (NaN)
    units = [
        [x[k] if is_zero(x[k]) and np.ndim(norm) else x[k] * (1.0 / norm) for k in (1, 2, 3)]
        for x, norm in zip((state, effect), norms, strict=True)
    ]
    return norms[0], norms[1], units[0], units[1]


def _norm_of_sum(n_i: list[Real], n_f: list[Real]) -> tuple[list[Real], Real]:
    """``m = n_i + n_f`` and ``m . m``."""
    m = [b if is_zero(a) else a if is_zero(b) else a + b for a, b in zip(n_i, n_f, strict=True)]
    return m, sum_of_products([(1.0, x, x) for x in m])


def pure_overlap_of(state: Parts, effect: Parts) -> Real:
    """``|<f|i>|`` of the pure parts of a state and an effect (Stokes components):
    ``|n_f + n_i| / 2`` with unit Stokes directions ``n`` (free of the cancellation in
    ``1 + n_f . n_i`` near the null). NaN where either has no polarized part. This overlap is
    the project's one measure of distance from the null (:mod:`aligner.nulls`)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        _, _, n_i, n_f = _directions(state, effect)
        return np.asarray(np.sqrt(_norm_of_sum(n_i, n_f)[1]) * 0.5)


def pure_overlap(
    bench: Bench,
    readings: Mapping[str, ArrayLike] | None = None,
) -> Real:
    """``|<f|i>|`` of the pure parts of rho and E at ``readings`` (:func:`pure_overlap_of`)."""
    fwd = forward(bench, readings)
    return pure_overlap_of(fwd.state_parts, fwd.effect_parts)


def _gap_and_slope(bench: Bench, fwd: Forward, mount: str | None) -> tuple[Real, Real]:
    """``|<f|i>| = |m|/2`` with ``m = n_i + n_f``, and ``d(m.m)/2`` per degree of ``mount``'s
    reading (:func:`imbalance_and_slope`)."""
    name = bench.imbalance_mount if mount is None else mount
    with np.errstate(invalid="ignore", divide="ignore"):
        norm_i, norm_f, n_i, n_f = _directions(fwd.state_parts, fwd.effect_parts)
        m, mm = _norm_of_sum(n_i, n_f)
        gap = np.sqrt(mm) * 0.5
        if not np.all(np.isfinite(gap)):
            raise InputError(
                "the pre- or post-selection is unpolarized at these readings, so the "
                "imbalance is undefined; check the source and analyzer settings"
            )
        half = 0.5 * mm
        rate = bench.mounts[name].sense * np.pi / 180.0  # d(angle, rad)/d(reading, deg)
        slope: Real | float = 0.0
        for arm, n, norm in ((fwd.pre, n_i, norm_i), (fwd.post, n_f, norm_f)):
            d = arm.derivative(name, rate)
            if d is not None:
                dm = sum_of_products([(1.0, m[k], d[k + 1]) for k in range(3)])
                dn = sum_of_products([(1.0, n[k], d[k + 1]) for k in range(3)])
                slope = slope + (dm - half * dn) / norm
    return np.minimum(gap, 1.0), np.asarray(slope)


def signed_imbalance(bench: Bench, fwd: Forward, mount: str | None = None) -> Real:
    """:func:`imbalance_deg` of an evaluated :class:`Forward` (its ``angles_deg`` are the
    element angles of every mount); the sign is that of the slope of
    :func:`imbalance_and_slope`."""
    gap, slope = _gap_and_slope(bench, fwd, mount)
    degrees = np.rad2deg(np.arcsin(gap))
    return np.asarray(np.where(slope >= 0, degrees, -degrees))


def imbalance_and_slope(bench: Bench, fwd: Forward, mount: str | None = None) -> tuple[Real, Real]:
    """The signed imbalance (deg) of an evaluated :class:`Forward` and its derivative with
    respect to ``mount``'s reading (deg/deg).

    With ``m = n_i + n_f`` (so ``|<f|i>| = |m|/2``) and the derivatives ``ds``, ``de`` of the
    state and effect (:meth:`Retarder.turned_forward
    <aligner.physics.channels.Retarder.turned_forward>` and kin, only on the side of the chain
    the mount turns), ``d(m.m)/2 = (m.de - (m.m/2) n_f.de)/|e| + (m.ds - (m.m/2) n_i.ds)/|s|``,
    written without the cancellation of ``n_i - (n_i.n_f) n_f`` near the null. Its sign is the
    sign of the imbalance.
    """
    gap, slope = _gap_and_slope(bench, fwd, mount)
    degrees = np.rad2deg(np.arcsin(gap))
    with np.errstate(invalid="ignore", divide="ignore"):
        # d|m|/2 = slope / (2 |m|); d arcsin(gap) = d gap / sqrt(1 - gap^2)
        rise = np.rad2deg(np.abs(slope) / (4 * gap * np.sqrt(1 - gap * gap)))
    return np.asarray(np.where(slope >= 0, degrees, -degrees)), np.asarray(rise)


def imbalance_deg(
    bench: Bench,
    readings: Mapping[str, ArrayLike] | None = None,
    *,
    mount: str | None = None,
) -> Real:
    """Signed imbalance (deg): the angle between the post-selected state and the state orthogonal
    to the pre-selected one.

    Magnitude ``arcsin |<f|i>|`` with ``|i>``, ``|f>`` the pure parts (dominant eigenvectors) of
    ``rho`` and ``E`` at the coupling plane; for linear states it is the physical rotation away
    from crossed. Sign: positive when turning ``mount`` (default the bench's
    ``imbalance_mount``) to a higher reading increases the overlap, i.e. on the high-reading
    side of the null ("the same sense as the mount"); at an overlap maximum (90 deg) it is
    positive. A mixed state's pure part is the direction of its Stokes vector. Raises
    :class:`InputError` for a state with no polarized part.
    """
    r = full_readings(bench, readings)
    shape = np.broadcast_shapes(*(v.shape for v in r.values()))
    return np.broadcast_to(signed_imbalance(bench, forward(bench, r), mount), shape)


def ideal_optics(bench: Bench) -> Bench:
    """The bench with perfect extinction everywhere (source, analyzer, polarizer elements) and
    no unexplained leak."""
    inf = float("inf")

    def clean(elements: tuple[Element, ...]) -> tuple[Element, ...]:
        return tuple(
            replace(e, extinction_ratio=inf) if e.type == "polarizer" else e for e in elements
        )

    return replace(
        bench,
        source=replace(bench.source, extinction_ratio=inf),
        analyzer=replace(bench.analyzer, extinction_ratio=inf, unexplained_leak=0.0),
        pre=clean(bench.pre),
        post=clean(bench.post),
    )
